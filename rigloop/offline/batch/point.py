"""The point learners over S subjects: BatchRescorlaWagner and BatchTD."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np

from ...core.learners import TD, RescorlaWagner
from ...core.learners import _shared as sh
from .common import (
    BatchResult,
    _float_array,
    _mask,
    _nan_outside,
    _per_subject,
    _rates,
    _same,
    _trials,
)

# --------------------------------------------------------------------------- point learners


class BatchRescorlaWagner:
    """S Rescorla–Wagner learners (methods.md §1): w ← w + α δ ∘ x, δ = r − xᵀw.

    alpha: a number, S numbers, or an (S, n) array of per-feature rates.
    """

    _single = RescorlaWagner

    def __init__(self, n_subjects: int, n_features: int, alpha: Any = 0.1):
        self._S = sh.count("n_subjects", n_subjects)
        self._n = sh.count("n_features", n_features)
        self._alpha, self._scalar = _rates("alpha", alpha, self._S, self._n)
        self._alpha.setflags(write=False)
        self._w = np.zeros((self._S, self._n))

    n_subjects = property(lambda self: self._S)
    n_features = property(lambda self: self._n)
    alpha = property(lambda self: self._alpha, doc="(S, n) learning rates")

    @property
    def w(self) -> np.ndarray:
        """(S, n) weights (a view: write it in place)."""
        return self._w

    def _alpha_of(self, s: int) -> float | np.ndarray:
        return float(self._alpha[s, 0]) if self._scalar[s] else self._alpha[s].copy()

    def learner(self, s: int) -> RescorlaWagner:
        return RescorlaWagner.from_state({"w": self._w[s].copy(), "alpha": self._alpha_of(s)})

    def to_learners(self) -> list[RescorlaWagner]:
        return [self.learner(s) for s in range(self._S)]

    @classmethod
    def from_learners(cls, learners: Sequence[RescorlaWagner]) -> BatchRescorlaWagner:
        n = _same(learners, cls._single)
        alpha = np.array([np.broadcast_to(lr.alpha, (n,)) for lr in learners])
        batch = cls(len(learners), n, alpha)
        batch._scalar = np.array([not isinstance(lr.alpha, np.ndarray) for lr in learners])
        batch._w[...] = [lr.w for lr in learners]
        return batch

    def _step(self, x: np.ndarray, r: np.ndarray, on: np.ndarray):
        # δ = r − xᵀw
        v = np.einsum("sn,sn->s", x, self._w)
        delta = r - v
        # w ← w + (α δ) x   (the single learner's order, on active subjects)
        step = (self._alpha * delta[:, None]) * x
        self._w[on] += step[on]
        return v, delta

    def learn_steps(self, X: Any, r: Any, active: Any = None) -> BatchResult:
        """One observation per active subject: X (S, n), r (S,). Returns (S,) results."""
        X = _float_array("X", X, (self._S, self._n))
        r = _float_array("r", r, (self._S,))
        active = _mask("active", active, self._S)
        v, delta = self._step(X, r, active)
        return BatchResult(_nan_outside(v, active), _nan_outside(delta, active))

    def learn_trials(self, Xs: Any, rs: Any, lengths: Any) -> BatchResult:
        """``RescorlaWagner.learn_trial`` for every subject over padded Xs (S, T, n)."""
        X, r, valid = _trials(Xs, rs, lengths, self._S, self._n)
        T = X.shape[1]
        values, errors = np.empty((self._S, T)), np.empty((self._S, T))
        for t in range(T):
            values[:, t], errors[:, t] = self._step(X[:, t], r[:, t], valid[:, t])
        return BatchResult(_nan_outside(values, valid), _nan_outside(errors, valid))


class BatchTD:
    """S linear TD(λ) learners (methods.md §3) with accumulating traces z (S, n).

    alpha: a number, S numbers or (S, n); gamma, lam: a number or S numbers.
    ``learn_trials`` resets each trial's trace first, as ``TD.learn_trial`` does.
    """

    _single = TD

    def __init__(self, n_subjects: int, n_features: int, alpha: Any = 0.1,
                 gamma: Any = 0.95, lam: Any = 0.0):
        S = self._S = sh.count("n_subjects", n_subjects)
        self._n = sh.count("n_features", n_features)
        self._alpha, self._scalar = _rates("alpha", alpha, S, self._n)
        self._alpha.setflags(write=False)
        self._gamma = _per_subject("gamma", gamma, S, sh.unit)
        self._lam = _per_subject("lam", lam, S, sh.unit)
        self._gl = self._gamma * self._lam
        self._w = np.zeros((S, self._n))
        self._z = np.zeros((S, self._n))

    n_subjects = property(lambda self: self._S)
    n_features = property(lambda self: self._n)
    alpha = property(lambda self: self._alpha, doc="(S, n) learning rates")
    gamma = property(lambda self: self._gamma)
    lam = property(lambda self: self._lam)

    @property
    def w(self) -> np.ndarray:
        """(S, n) weights (a view)."""
        return self._w

    @property
    def z(self) -> np.ndarray:
        """(S, n) eligibility traces (a view)."""
        return self._z

    def learner(self, s: int) -> TD:
        alpha = float(self._alpha[s, 0]) if self._scalar[s] else self._alpha[s].copy()
        return TD.from_state({"w": self._w[s].copy(), "z": self._z[s].copy(), "alpha": alpha,
                              "gamma": float(self._gamma[s]), "lam": float(self._lam[s])})

    def to_learners(self) -> list[TD]:
        return [self.learner(s) for s in range(self._S)]

    @classmethod
    def from_learners(cls, learners: Sequence[TD]) -> BatchTD:
        n = _same(learners, cls._single)
        alpha = np.array([np.broadcast_to(lr.alpha, (n,)) for lr in learners])
        batch = cls(len(learners), n, alpha, [lr.gamma for lr in learners],
                    [lr.lam for lr in learners])
        batch._scalar = np.array([not isinstance(lr.alpha, np.ndarray) for lr in learners])
        batch._w[...] = [lr.w for lr in learners]
        batch._z[...] = [lr.z for lr in learners]
        return batch

    def _step(self, x: np.ndarray, x_next: np.ndarray, r: np.ndarray, on: np.ndarray):
        w, z = self._w, self._z
        v = np.einsum("sn,sn->s", w, x)
        # δ = r + γ wᵀx' − wᵀx
        delta = r + self._gamma * np.einsum("sn,sn->s", w, x_next) - v
        # z ← γλz + x;  w ← w + (α δ) z   (active subjects only)
        z_new = self._gl[:, None] * z + x
        z[on] = z_new[on]
        step = (self._alpha * delta[:, None]) * z
        w[on] += step[on]
        return v, delta

    def learn_steps(self, X: Any, X_next: Any, r: Any, active: Any = None) -> BatchResult:
        """``TD.update`` for every active subject (the trace carries on)."""
        S, n = self._S, self._n
        X = _float_array("X", X, (S, n))
        X_next = _float_array("X_next", X_next, (S, n))
        r = _float_array("r", r, (S,))
        active = _mask("active", active, S)
        v, delta = self._step(X, X_next, r, active)
        return BatchResult(_nan_outside(v, active), _nan_outside(delta, active))

    def learn_trials(self, Xs: Any, rs: Any, lengths: Any) -> BatchResult:
        """``TD.learn_trial`` for every subject with a non-empty trial (trace reset first)."""
        X, r, valid = _trials(Xs, rs, lengths, self._S, self._n)
        S, T, n = X.shape
        self._z[valid.any(1)] = 0.0
        rows = np.zeros((S, T + 1, n))
        rows[:, :T] = X
        values, errors = np.empty((S, T)), np.empty((S, T))
        for t in range(T):
            values[:, t], errors[:, t] = self._step(rows[:, t], rows[:, t + 1], r[:, t], valid[:, t])
        return BatchResult(_nan_outside(values, valid), _nan_outside(errors, valid))
