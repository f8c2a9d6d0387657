"""Model-based values: a learned model of where each action leads, and one Bellman backup.

The transition model is either counts with a symmetric Dirichlet prior (the posterior
mean P(s | a) = (n(a, s) + c) / (n(a) + c·S)) or a delta rule (P(· | a) moves toward the
state reached at rate η). The first-stage values back up the best second-stage value
of each state (Daw et al. 2011, Neuron 69:1204):

    Q_MB(a) = Σ_s P(s | a) · max_a' Q2(s, a')

The second-stage values Q2 are the same ones the model-free learner keeps (the last
stage has no model to consult).
"""

from __future__ import annotations

import numpy as np

from ...errors import BadArgument

DIRICHLET_PRIOR = 1.0  # pseudo-count per (action, state): a uniform prior (common practice)


def count_transitions(counts: np.ndarray, a1: int, s2: int) -> np.ndarray:
    """Counts (n_actions, n_states) with one more a1 → s2 transition (a new array)."""
    counts = np.array(counts, dtype=np.float64)
    counts[a1, s2] += 1.0
    return counts


def transition_probabilities(counts: np.ndarray, prior: float = DIRICHLET_PRIOR) -> np.ndarray:
    """P[a, s], the posterior mean of each action's transition probabilities under counts."""
    if not prior > 0.0:
        raise BadArgument("prior", "a pseudo-count > 0", prior)
    counts = np.asarray(counts, dtype=np.float64)
    # P(s | a) = (n(a, s) + c) / (n(a) + c·S)
    return (counts + prior) / (counts.sum(axis=1, keepdims=True) + prior * counts.shape[1])


def delta_rule_transitions(P: np.ndarray, a1: int, s2: int, eta: float) -> np.ndarray:
    """P after a delta-rule step of row a1 toward the state reached: P(·|a) += η (e_s − P(·|a))."""
    P = np.array(P, dtype=np.float64)
    target = np.zeros(P.shape[1])
    target[s2] = 1.0
    P[a1] += eta * (target - P[a1])
    return P


def model_based_values(P: np.ndarray, q2: np.ndarray) -> np.ndarray:
    """Q_MB (n_actions,) = P @ max_a' Q2(s, a'): one Bellman backup over the learned model."""
    return np.asarray(P) @ np.asarray(q2).max(axis=1)


def value_iteration(T: np.ndarray, R: np.ndarray, gamma: float, sweeps: int = 200) -> np.ndarray:
    """State values of the best policy in a model, by repeated Bellman backups.

    T: (n_states, n_actions, n_states) transition probabilities (rows may sum below 1 where
    an episode ends); R: (n_states, n_actions) expected reward of each action.
    V(s) = max_a [R(s, a) + γ Σ_s' T(s, a, s') V(s')].
    """
    T = np.asarray(T, dtype=np.float64)
    R = np.asarray(R, dtype=np.float64)
    V = np.zeros(T.shape[0])
    for _ in range(int(sweeps)):
        V = (R + gamma * (T @ V)).max(axis=1)
    return V
