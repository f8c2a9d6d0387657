"""Rescorla–Wagner: a point estimate of the immediate reward predicted by a cue row.

Rescorla & Wagner (1972): every present cue moves by its rate times the shared error,
w ← w + α δ ∘ x with δ = r − xᵀw. ``alpha`` is the product αᵢβ of the original paper
(cue salience times reinforcer rate), one number or one per feature.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from . import _shared as sh
from ._shared import Learner, TrialResult


class RescorlaWagner(Learner):
    """Delta rule on feature rows.

    n_features: length n of each row x (0/1 cue indicators, or any real features).
    alpha:      learning rate(s) ≥ 0: a number, or an (n,) array of per-feature rates.
    """

    name = "rescorla_wagner"
    kind = "reward"
    bayesian = False
    _param_names = ("alpha",)

    __slots__ = ("_alpha", "_scalar")

    def __init__(self, n_features: int, alpha: Any = 0.1):
        super().__init__(n_features)
        self._alpha = sh.rate("alpha", alpha, self._n)
        self._scalar = not isinstance(self._alpha, np.ndarray)

    def _copy_params(self, new) -> None:
        new._alpha, new._scalar = sh.rate_copy(self._alpha), self._scalar

    @property
    def alpha(self) -> float | np.ndarray:
        return self._alpha

    def params(self) -> dict[str, Any]:
        return {"alpha": sh.plain(self._alpha)}

    def update(self, x: Any, r: Any) -> float:
        """Learn from one observation; returns δ = r − xᵀw (before the update).

        x: (n,) feature row; r: the reward observed with it.
        """
        x = self._row("x", x)
        r = sh.scalar_reward(r)
        w = self._w
        # δ = r − xᵀw   (non-finite iff x or r is; checked before w changes)
        delta = r - float(x @ w)
        if not math.isfinite(delta):
            raise sh.nonfinite([("x", x), ("r", r)])
        self._step(x, delta)
        return delta

    def _step(self, x: np.ndarray, delta: float) -> None:
        # w ← w + α δ x
        sh.add_scaled(self._w, self._alpha, self._scalar, x, delta, self._tmp)

    def learn_trial(self, X: Any, r: Any) -> TrialResult:
        """One update per row: X (k, n) rows (usually k = 1, the trial's compound), r (k,)."""
        X = sh.rows("X", X, self._n)
        return self._learn(X, sh.vector("r", r, X.shape[0]))

    def _learn(self, X: np.ndarray, r: np.ndarray) -> TrialResult:
        """:meth:`learn_trial` of rows already checked (finite float64, C-contiguous)."""
        values = np.empty(X.shape[0])
        errors = np.empty(X.shape[0])
        for t in range(X.shape[0]):
            x = X[t]
            values[t] = v = float(x @ self._w)
            # δ = r − xᵀw
            errors[t] = delta = float(r[t]) - v
            if not math.isfinite(delta):
                raise sh.nonfinite([("X", X), ("r", r)])
            self._step(x, delta)
        return TrialResult(values, errors, None)

    def state(self) -> dict[str, np.ndarray | float]:
        """Plain arrays and floats, parameters included; ``from_state`` rebuilds it exactly."""
        alpha = self._alpha.copy() if isinstance(self._alpha, np.ndarray) else self._alpha
        return {"w": self._w.copy(), "alpha": alpha}

    @classmethod
    def from_state(cls, state: dict[str, Any]) -> RescorlaWagner:
        cls._check_state(state, ("w", "alpha"))
        w = sh.state_weights(state)
        learner = cls(w.size, alpha=sh.param(state, "alpha"))
        learner.w = w
        return learner
