"""Model-free values: SARSA(λ) over (state, action) pairs, one episode (trial) at a time.

Each step k of an episode sets its pair's eligibility to its own learning rate α_k and
decays the older traces by γλ; every prediction error then moves each pair by its trace:

    δ_k = r_k + γ Q(s_{k+1}, a_{k+1}) − Q(s_k, a_k)      (0 after the last step)
    e ← γλ e;  e(s_k, a_k) = α_k;  Q ← Q + δ_k e

On the two-step task (γ = 1, α_1 at the first stage, α_2 at the second) this is the
model-free learner of Daw et al. 2011 (Neuron 69:1204, Experimental Procedures):
Q1(a1) += α1 δ1 + α1 λ δ2 and Q2(s2, a2) += α2 δ2, with δ1 = Q2(s2, a2) − Q1(a1) and
δ2 = r − Q2(s2, a2). With λ = 1 the first stage learns straight from the reward; with
λ = 0 only from the second-stage value.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from ...errors import BadArgument


def sarsa_lambda_episode(q: np.ndarray, states: Sequence[int], actions: Sequence[int],
                         rewards: Sequence[float], alphas: Sequence[float], lam: float,
                         gamma: float = 1.0) -> tuple[np.ndarray, np.ndarray]:
    """Q after one episode, and the episode's prediction errors.

    q: (n_states, n_actions) values before the episode (not changed);
    states, actions: the pairs visited, in order; rewards[k]: the reward received after
    step k; alphas[k]: the learning rate of step k. Returns (q', deltas (n_steps,)).
    """
    n = len(states)
    if not (len(actions) == len(rewards) == len(alphas) == n and n >= 1):
        raise BadArgument("episode", "states, actions, rewards and alphas of one length >= 1",
                          (len(states), len(actions), len(rewards), len(alphas)))
    q = np.array(q, dtype=np.float64)
    e = np.zeros_like(q)
    deltas = np.empty(n)
    for k in range(n):
        s, a = states[k], actions[k]
        following = gamma * q[states[k + 1], actions[k + 1]] if k + 1 < n else 0.0
        # δ_k = r_k + γ Q(s_{k+1}, a_{k+1}) − Q(s_k, a_k)
        delta = rewards[k] + following - q[s, a]
        # e ← γλ e;  e(s_k, a_k) = α_k  (a replacing trace carrying its step's rate)
        e *= gamma * lam
        e[s, a] = alphas[k]
        # Q ← Q + δ_k e
        q += delta * e
        deltas[k] = delta
    return q, deltas


def two_step_update(q1: np.ndarray, q2: np.ndarray, a1: int, s2: int, a2: int, reward: float,
                    alpha1: float, alpha2: float, lam: float) -> tuple[np.ndarray, np.ndarray]:
    """(Q1', Q2') after one two-step trial: Q1 (2,) first-stage values, Q2 (2, 2) second stage.

    Written out (Daw et al. 2011) rather than through ``sarsa_lambda_episode``; the tests
    hold the two equal.
    """
    q1 = np.array(q1, dtype=np.float64)
    q2 = np.array(q2, dtype=np.float64)
    # δ1 = Q2(s2, a2) − Q1(a1);  δ2 = r − Q2(s2, a2)
    d1 = q2[s2, a2] - q1[a1]
    d2 = reward - q2[s2, a2]
    # Q1(a1) += α1 δ1 + α1 λ δ2;  Q2(s2, a2) += α2 δ2
    q1[a1] += alpha1 * d1 + alpha1 * lam * d2
    q2[s2, a2] += alpha2 * d2
    return q1, q2
