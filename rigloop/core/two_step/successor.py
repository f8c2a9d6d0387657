"""The successor representation: expected discounted future occupancy of each state.

M(s, s') = E[Σ_t γ^t 1(s_t = s') | s_0 = s] under the policy the animal follows; state
values are V = M·R with R the reward expected in each state (Dayan 1993, Neural Comput.
5:613). M is learned by temporal differences on occupancies, R by a delta rule on the
rewards seen in each state (the SR-TD learner of Russek et al. 2017, PLoS Comput. Biol.
13:e1005768):

    M(s, ·) ← M(s, ·) + α_M [1_s + γ M(s', ·) − M(s, ·)]      (γ M(s', ·) = 0 at the end)
    R(s)    ← R(s) + α_R [r − R(s)]

For a fixed policy with state-to-state transition matrix T the expected update has the
fixed point M = Σ_t γ^t T^t = (I − γT)⁻¹ (``closed_form``). Because values are read off
R through a cached M, a change of reward is revalued at once for every state that leads
there, but a change of transitions only for states whose M rows are re-experienced
(Momennejad et al. 2017, Nat. Hum. Behav. 1:680).

On the two-step task the episode ends after the second stage, so the first-stage rows
of M reduce to delta-rule estimates of where each action leads, M(a, s) ← M(a, s) +
α1 [1(s = s2) − M(a, s)], and Q_SR(a) = Σ_s M(a, s) R(s) (``two_step_sr_update``).
Unlike the model-based learner, R(s) is what state s paid under the animal's own
second-stage choices (the policy's value, not the best action's).
"""

from __future__ import annotations

import numpy as np

from ...errors import BadArgument


def closed_form(T: np.ndarray, gamma: float) -> np.ndarray:
    """(I − γT)⁻¹: the successor matrix of a fixed policy with transitions T (n, n)."""
    T = np.asarray(T, dtype=np.float64)
    if T.ndim != 2 or T.shape[0] != T.shape[1]:
        raise BadArgument("T", "a square transition matrix", T.shape)
    if not 0.0 <= gamma < 1.0 and not (gamma == 1.0 and np.all(T.sum(axis=1) < 1.0)):
        raise BadArgument("gamma", "a discount in [0, 1) (1 only when every row can end)", gamma)
    return np.linalg.inv(np.eye(T.shape[0]) - gamma * T)


class SuccessorLearner:
    """SR-TD over n states: M (n, n) starts at the identity, R (n,) at zero.

    ``observe(s, r, s_next)``: in state s the animal got reward r and moved to s_next
    (None: the episode ended). ``values()`` = M @ R.
    """

    __slots__ = ("M", "R", "gamma", "alpha_m", "alpha_r")

    def __init__(self, n_states: int, gamma: float, alpha_m: float, alpha_r: float):
        for name, value in (("alpha_m", alpha_m), ("alpha_r", alpha_r)):
            if not 0.0 <= value <= 1.0:
                raise BadArgument(name, "a learning rate in [0, 1]", value)
        if not 0.0 <= gamma <= 1.0:
            raise BadArgument("gamma", "a discount in [0, 1]", gamma)
        self.M = np.eye(int(n_states))
        self.R = np.zeros(int(n_states))
        self.gamma, self.alpha_m, self.alpha_r = float(gamma), float(alpha_m), float(alpha_r)

    def observe(self, s: int, r: float, s_next: int | None) -> None:
        onehot = np.zeros(len(self.R))
        onehot[s] = 1.0
        following = self.gamma * self.M[s_next] if s_next is not None else 0.0
        # M(s, ·) ← M(s, ·) + α_M [1_s + γ M(s', ·) − M(s, ·)]
        self.M[s] += self.alpha_m * (onehot + following - self.M[s])
        # R(s) ← R(s) + α_R [r − R(s)]
        self.R[s] += self.alpha_r * (r - self.R[s])

    def values(self) -> np.ndarray:
        """V = M·R."""
        return self.M @ self.R


def expected_update(M: np.ndarray, T: np.ndarray, gamma: float, alpha: float) -> np.ndarray:
    """One expected SR-TD sweep over every state: M + α (I + γ T M − M)."""
    return M + alpha * (np.eye(M.shape[0]) + gamma * (T @ M) - M)


def two_step_sr_update(m: np.ndarray, r_state: np.ndarray, a1: int, s2: int, reward: float,
                       alpha1: float, alpha2: float) -> tuple[np.ndarray, np.ndarray]:
    """(M', R') after one two-step trial: M (2 actions, 2 states), R (2 states)."""
    m = np.array(m, dtype=np.float64)
    r_state = np.array(r_state, dtype=np.float64)
    onehot = np.zeros(m.shape[1])
    onehot[s2] = 1.0
    # M(a1, ·) ← M(a1, ·) + α1 [1_{s2} − M(a1, ·)]  (the episode ends after the second stage)
    m[a1] += alpha1 * (onehot - m[a1])
    # R(s2) ← R(s2) + α2 [r − R(s2)]
    r_state[s2] += alpha2 * (reward - r_state[s2])
    return m, r_state


def two_step_sr_values(m: np.ndarray, r_state: np.ndarray) -> np.ndarray:
    """Q_SR(a) = Σ_s M(a, s) R(s)."""
    return np.asarray(m) @ np.asarray(r_state)
