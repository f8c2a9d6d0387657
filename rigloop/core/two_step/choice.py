"""From values to choice probabilities: the hybrid's net values and softmax with perseveration.

Daw et al. 2011 (Neuron 69:1204): at the first stage Q_net = w·Q_MB + (1 − w)·Q_MF and

    P(a) = exp(β1 [Q_net(a) + p·rep(a)]) / Σ_a' exp(β1 [Q_net(a') + p·rep(a')])

where rep(a) is 1 for the previous trial's first-stage action (none on the first trial);
at the second stage P(a' | s) is a softmax of β2 Q2(s, a').
"""

from __future__ import annotations

import numpy as np


def softmax(v: np.ndarray, beta: float) -> np.ndarray:
    """exp(β v) normalised over the last axis (shifted by the maximum, so it never overflows)."""
    z = beta * np.asarray(v, dtype=np.float64)
    z = z - z.max(axis=-1, keepdims=True)
    e = np.exp(z)
    return e / e.sum(axis=-1, keepdims=True)


def net_values(q_mb: np.ndarray, q_mf: np.ndarray, w: float) -> np.ndarray:
    """Q_net = w·Q_MB + (1 − w)·Q_MF."""
    return w * np.asarray(q_mb) + (1.0 - w) * np.asarray(q_mf)


def repeat_bonus(previous_a1: int, n_actions: int = 2) -> np.ndarray:
    """rep(a): 1 for the previous first-stage action, 0 otherwise (all 0 if there was none, -1)."""
    rep = np.zeros(n_actions)
    if previous_a1 >= 0:
        rep[previous_a1] = 1.0
    return rep


def first_stage_probabilities(q_first: np.ndarray, beta1: float, p: float,
                              previous_a1: int) -> np.ndarray:
    """P(a1) from the first-stage values in use, β1 and perseveration p."""
    return softmax(np.asarray(q_first) + p * repeat_bonus(previous_a1, len(q_first)), beta1)


def second_stage_probabilities(q2_row: np.ndarray, beta2: float) -> np.ndarray:
    """P(a2 | s2) from that state's values Q2(s2, ·) and β2."""
    return softmax(q2_row, beta2)
