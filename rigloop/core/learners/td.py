"""TD(λ) with linear features: a point estimate of discounted future reward.

Sutton & Barto (2018), Ch. 9 and 12: δ_t = r_{t+1} + γ wᵀx_{t+1} − wᵀx_t, accumulating
trace z ← γλz + x_t, w ← w + α δ_t z. The trace starts at zero with each trial; λ = 0
is TD(0) exactly (z is then x_t itself).
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from . import _shared as sh
from ._shared import Learner, TrialResult


class TD(Learner):
    """Linear TD(λ) with an accumulating eligibility trace.

    n_features: length n of each time-step row x.
    alpha:      learning rate(s) ≥ 0: a number or an (n,) array.
    gamma:      discount per time step, in [0, 1].
    lam:        trace decay λ, in [0, 1].
    """

    name = "td"
    kind = "value"
    bayesian = False
    _param_names = ("alpha", "gamma", "lam")

    __slots__ = ("_alpha", "_scalar", "_gamma", "_lam", "_gl", "_z", "_zero")

    def __init__(self, n_features: int, alpha: Any = 0.1, gamma: Any = 0.95, lam: Any = 0.0):
        super().__init__(n_features)
        self._alpha = sh.rate("alpha", alpha, self._n)
        self._scalar = not isinstance(self._alpha, np.ndarray)
        self._gamma = sh.unit("gamma", gamma)
        self._lam = sh.unit("lam", lam)
        self._gl = self._gamma * self._lam

    def _allocate(self, source: TD | None) -> None:
        super()._allocate(source)
        self._z = np.zeros(self._n) if source is None else source._z.copy()
        self._zero = sh.constant(np.zeros(self._n)) if source is None else source._zero

    def _copy_params(self, new) -> None:
        new._alpha, new._scalar = sh.rate_copy(self._alpha), self._scalar
        new._gamma, new._lam, new._gl = self._gamma, self._lam, self._gl

    @property
    def alpha(self) -> float | np.ndarray:
        return self._alpha

    @property
    def gamma(self) -> float:
        return self._gamma

    @property
    def lam(self) -> float:
        return self._lam

    @property
    def z(self) -> np.ndarray:
        """(n,) eligibility trace (read it; reset it with ``reset_trace``)."""
        return self._z

    def reset_trace(self) -> None:
        """Start a new trial: z = 0."""
        self._z.fill(0.0)

    def params(self) -> dict[str, Any]:
        return {"alpha": sh.plain(self._alpha), "gamma": self._gamma, "lam": self._lam}

    def update(self, x: Any, x_next: Any, r: Any) -> float:
        """One time step: x (n,) now, x_next (n,) next (all zero if terminal), r received
        on the transition. Returns δ = r + γ wᵀx_next − wᵀx. Does not reset the trace."""
        x = self._row("x", x)
        x_next = self._row("x_next", x_next)
        r = sh.scalar_reward(r)
        w = self._w
        # δ = r + γ wᵀx' − wᵀx   (non-finite iff an input is; checked before w changes)
        delta = r + self._gamma * float(w @ x_next) - float(w @ x)
        if not math.isfinite(delta):
            raise sh.nonfinite([("x", x), ("x_next", x_next), ("r", r)])
        self._step(x, delta)
        return delta

    def _step(self, x: np.ndarray, delta: float) -> None:
        z = self._z
        # z ← γλz + x   (λ = 0: z = x exactly, which makes this TD(0))
        if self._gl:
            np.multiply(z, self._gl, out=z)
            np.add(z, x, out=z)
        else:
            np.copyto(z, x)
        # w ← w + α δ z
        sh.add_scaled(self._w, self._alpha, self._scalar, z, delta, self._tmp)

    def learn_trial(self, X: Any, r: Any) -> TrialResult:
        """One trial: X (T, n) successive time-step rows, r (T,) with r[t] received on the
        step from row t to row t+1; the row after the last is terminal (all zero).
        The trace resets first."""
        X = sh.rows("X", X, self._n)
        return self._learn(X, sh.vector("r", r, X.shape[0]))

    def _learn(self, X: np.ndarray, r: np.ndarray) -> TrialResult:
        """:meth:`learn_trial` of rows already checked (finite float64, C-contiguous)."""
        self.reset_trace()
        T = X.shape[0]
        values, errors = np.empty(T), np.empty(T)
        w = self._w
        for t in range(T):
            x = X[t]
            x_next = X[t + 1] if t + 1 < T else self._zero
            values[t] = v = float(w @ x)
            # δ = r + γ wᵀx' − wᵀx
            errors[t] = delta = float(r[t]) + self._gamma * float(w @ x_next) - v
            if not math.isfinite(delta):
                raise sh.nonfinite([("X", X), ("r", r)])
            self._step(x, delta)
        return TrialResult(values, errors, None)

    def state(self) -> dict[str, np.ndarray | float]:
        """Plain arrays and floats, parameters and trace included; exact round trip."""
        alpha = self._alpha.copy() if isinstance(self._alpha, np.ndarray) else self._alpha
        return {"w": self._w.copy(), "z": self._z.copy(), "alpha": alpha,
                "gamma": self._gamma, "lam": self._lam}

    @classmethod
    def from_state(cls, state: dict[str, Any]) -> TD:
        cls._check_state(state, ("w", "z", "alpha", "gamma", "lam"))
        w = sh.state_weights(state)
        learner = cls(w.size, **{k: sh.param(state, k) for k in cls._param_names})
        learner.w = w
        learner._z[...] = sh.row("z", state["z"], learner._n)
        return learner
