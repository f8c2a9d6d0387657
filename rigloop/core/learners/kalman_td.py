"""Kalman TD: a Gaussian belief over the weights of a discounted-value function.

Geist & Pietquin (2010); Gershman (2015); methods.md §4. The reward on the step from x to
x' is observed through the row h = x − γx' (this sign: r = hᵀw + ε says
r = V(x) − γV(x') + ε), with the same diffusion-then-correction as the Kalman filter
of conditioning. The error δ = r − hᵀŵ = r + γV(x') − V(x) is the TD error.

Within a trial, ``learn_trial`` learns only from transitions out of a represented
state (a row with some feature on). A featureless row — the time before the first cue —
stands for a state whose successor the animal cannot predict (which cue comes, and
when, is the experimenter's draw); a Bellman residual on the step from it into the
cue would read as the observation 0 = −γV(cue) and drag every cue's value towards
zero (the bias under stochastic transitions that Geist & Pietquin describe). Such a
step still reports its TD error δ = r + γV(x') — the onset response — but changes
neither the mean nor the covariance. ``update`` itself applies whatever it is given.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from . import _shared as sh
from ._shared import F64, TrialResult
from .kalman_filter import _Gaussian

_INF = math.inf
_add, _multiply, _subtract = np.add, np.multiply, np.subtract


class KalmanTD(_Gaussian):
    """Bayesian linear TD.

    n_features: length n of each time-step row x.
    gamma:      discount per time step, in [0, 1].
    diffusion:  τ², process variance per observation (≥ 0).
    noise:      σ_r², observation variance (> 0).
    prior_var:  c of the prior w_0 ~ N(0, cI) (≥ 0).
    """

    name = "kalman_td"
    kind = "value"
    bayesian = True
    _param_names = ("gamma", "diffusion", "noise", "prior_var")

    __slots__ = ("_gamma", "_gamma_0d", "_h", "_scratch", "_zero")

    def __init__(self, n_features: int, gamma: Any = 0.95, diffusion: Any = 0.01,
                 noise: Any = 1.0, prior_var: Any = 1.0):
        super().__init__(n_features, diffusion, noise, prior_var)
        self._gamma = sh.unit("gamma", gamma)
        self._gamma_0d = sh.constant(self._gamma)  # a 0-d array costs less per ufunc call

    def _allocate(self, source: KalmanTD | None) -> None:
        super()._allocate(source)
        # update's scratch: the row h, and the outer product's buffer with a 0-d array for
        # 1/√s (made on its first use; dropped at rest)
        self._h = self._scratch = None
        self._zero = sh.constant(np.zeros(self._n)) if source is None else source._zero

    def _copy_params(self, new) -> None:
        super()._copy_params(new)
        new._gamma, new._gamma_0d = self._gamma, self._gamma_0d

    def copy(self) -> KalmanTD:
        """:meth:`Learner.copy` of a learner in its working form in one pass: the buffer and
        views ``_allocate`` makes (``_Gaussian._views``), without its chain of calls (~1.5x,
        tools/bench/step.py; tests/test_fast_paths.py: every slot as the general path sets
        it). ``step`` copies the animal's learner once a trial. A resting learner, or a
        subclass, takes the general path."""
        if self._packed is not None or type(self) is not KalmanTD:
            return super().copy()
        new = object.__new__(KalmanTD)
        n = new._n = self._n
        new._tau2, new._noise, new._c, new._tau2_0d = self._tau2, self._noise, self._c, self._tau2_0d
        new._gamma, new._gamma_0d = self._gamma, self._gamma_0d
        new._shape, new._packed = self._shape, None
        A = new._A = self._A.copy()
        new._P, new._w = A[:n], A[n]
        flat = new._flat = A.reshape(-1)
        new._diag = flat[: n * n : n + 1]
        new._ones = self._ones
        q = new._q = np.empty(n + 1)
        u = new._u = new._tmp = q[:n]
        new._q_col, new._u_row = q.reshape(n + 1, 1), u.reshape(1, n)
        new._h, new._scratch, new._zero = None, None, self._zero
        return new

    def _rest(self) -> None:
        self._h = self._scratch = None  # update's scratch is made again when next needed
        super()._rest()

    @property
    def gamma(self) -> float:
        return self._gamma

    def params(self) -> dict[str, Any]:
        return {"gamma": self._gamma, "diffusion": self._tau2, "noise": self._noise,
                "prior_var": self._c}

    def update(self, x: Any, x_next: Any, r: Any) -> float:
        """One time step: x (n,) now, x_next (n,) next (all zero if terminal), r received
        on the transition. Returns δ = r + γ ŵᵀx_next − ŵᵀx (before the update)."""
        # the checks inline: a float64 (n,) array and a float pass in a few type tests
        shape = self._shape
        if type(x) is not np.ndarray or x.dtype is not F64 or x.shape != shape:
            x = sh.row("x", x, self._n)
        if type(x_next) is not np.ndarray or x_next.dtype is not F64 or x_next.shape != shape:
            x_next = sh.row("x_next", x_next, self._n)
        if type(r) is not float:
            r = sh.scalar_reward(r)
        h = self._h
        if h is None:
            h = self._h = np.empty(self._n)
            self._scratch = (np.empty_like(self._A), np.empty(()))
        # h = x − γx'
        _multiply(x_next, self._gamma_0d, h)
        _subtract(x, h, h)
        # _observe(h, r) written out (its reference): the same numpy calls on the same
        # buffers, without its call, lookups and allocation; the scale 1/√s enters through
        # a 0-d array, which a ufunc takes in less time than a float (the same product)
        # (8.4 -> 7.2 µs a step at n = 16, old and new alternating in one run: 3.7x -> 4.3x filterpy
        # in tools/bench/update.py; tests/test_fast_paths.py holds the bits)
        # δ = r − hᵀŵ
        delta = r - float(h.dot(self._w))
        if not -_INF < delta < _INF:
            raise sh.nonfinite([("x", x), ("x_next", x_next), ("r", r)])
        # Σ⁻ = Σ + τ²I
        if self._tau2:
            diag = self._diag
            _add(diag, self._tau2_0d, diag)
        # u ← Σ⁻h;  s = hᵀΣ⁻h + σ_r²
        u = self._u
        self._P.dot(h, u)
        s = float(h.dot(u)) + self._noise
        if not 0.0 < s < _INF:
            raise sh.innovation("cov", s)
        # u = Σ⁻h / √s;  [Σ; ŵ] ← [Σ⁻; ŵ] − [u; −δ/√s] uᵀ
        M, scale = self._scratch
        rs = 1.0 / math.sqrt(s)
        scale[()] = rs
        _multiply(u, scale, u)
        self._q[-1] = -delta * rs
        self._q_col.dot(self._u_row, M)
        A = self._A
        _subtract(A, M, A)
        return delta

    def _update_reference(self, x: Any, x_next: Any, r: Any) -> float:
        """:meth:`update` as it reads: the row h, then :meth:`_Gaussian._observe`."""
        x, x_next, r = sh.row("x", x, self._n), sh.row("x_next", x_next, self._n), sh.scalar_reward(r)
        # h = x − γx'
        h = np.empty(self._n)
        np.multiply(x_next, self._gamma_0d, h)
        np.subtract(x, h, h)
        delta = self._observe(h, r)
        if delta != delta:
            raise sh.nonfinite([("x", x), ("x_next", x_next), ("r", r)])
        return delta

    def learn_trial(self, X: Any, r: Any) -> TrialResult:
        """One trial: X (T, n) successive time-step rows, r (T,) with r[t] received on the
        step from row t to row t+1; the row after the last is terminal (all zero)."""
        X = sh.rows("X", X, self._n)
        return self._learn(X, sh.vector("r", r, X.shape[0]))

    def _learn(self, X: np.ndarray, r: np.ndarray) -> TrialResult:
        """:meth:`learn_trial` of rows already checked (finite float64, C-contiguous).

        While ŵ and Σ are finite, a featureless row x = 0 has xᵀŵ = xᵀΣx = +0.0 exactly
        (every product is ±0 and numpy's dot starts its sum at +0.0), so the trial first
        runs without computing those. An entry of ŵ or Σ that is not finite stays so
        (adding to or subtracting from inf or NaN never gives a finite number), so a
        state finite at the end was finite throughout; if it is not, the trial runs
        again from its start with every product computed.
        """
        start = self._A.copy()
        rows = _rows_of(X, self._gamma)
        result = self._trial(rows, r, finite=True)
        if not self._finite():  # (or its sum overflowed: the full path is right either way)
            self._A[...] = start
            result = self._trial(rows, r, finite=False)
        return result

    def _learned(self, X: np.ndarray, r: np.ndarray) -> tuple[KalmanTD, TrialResult, bool | None]:
        """:meth:`Learner._learned`: the same two passes as ``_learn``, each on a fresh copy.

        This learner stays as it was, so it is the starting state to go back to, and
        ``step`` needs no copy of its own. A state finite after the first pass was finite
        before it too (see ``_learn``), so then both are known to be finite."""
        rows = _rows_of(X, self._gamma)
        new = self.copy()
        result = new._trial(rows, r, finite=True)
        if new._finite():
            return new, result, True
        new = self.copy()
        return new, new._trial(rows, r, finite=False), None

    def _trial(self, rows: _TrialRows, r: np.ndarray, finite: bool) -> TrialResult:
        """The trial's updates; ``finite``: take ŵ and Σ to be finite throughout.

        Each correction is :meth:`_Gaussian._observe` written out in the loop, on the same
        buffers with the same numpy calls (the scale 1/√s through a 0-d array, the same
        product): no call, attribute lookups or checks of a row per step (a tone_reversal
        trial's four corrections 1.1-1.4x faster, tools/bench/step.py; tests/test_fast_paths.py:
        the bits of :meth:`_trial_reference`)."""
        xs, hs, represented = rows.xs, rows.hs, rows.represented
        T = len(xs)
        # a row e_i (one feature on, at 1): xᵀŵ = ŵ_i and xᵀΣx = Σ_ii exactly while the
        # state is finite and these are nonzero (see _Gaussian._onset_reader)
        hot = rows.hot if finite else (None,) * T
        # lists of floats, made one (3, T) array at the end: cheaper than T item writes
        # into an array (the same float64 values)
        values, errors, variances = [0.0] * T, [0.0] * T, [0.0] * T
        rewards = r.tolist()
        w, diag, tmp, P, gamma = self._w, self._diag, self._tmp, self._P, self._gamma
        A, q, u, n = self._A, self._q, self._u, self._n
        tau2, tau2_0d, noise = self._tau2, self._tau2_0d, self._noise
        gemv, outer = P.dot, self._q_col.dot
        u_row = self._u_row
        sqrt = math.sqrt
        ahead = None  # x_tᵀŵ formed on the step before (a featureless one: ŵ did not change)
        M = None  # the updates' scratch, made at the first update
        for t in range(T):
            if finite and not represented[t]:
                # x = 0: xᵀŵ = xᵀΣx = 0 (as values and variances start), and x'ᵀŵ = 0
                # if x' is featureless too
                if represented[t + 1]:
                    i = hot[t + 1]
                    ahead = w.item(i) if i is not None and w.item(i) != 0.0 else xs[t + 1] @ w
                    errors[t] = rewards[t] + gamma * float(ahead)
                else:
                    errors[t] = rewards[t] + gamma * 0.0
                continue
            x, i = xs[t], hot[t]
            if ahead is not None:
                values[t] = ahead
            elif i is not None and w.item(i) != 0.0:
                values[t] = w.item(i)
            else:
                values[t] = x @ w
            ahead = None
            if i is not None and diag.item(i) != 0.0:
                variances[t] = diag.item(i)
            else:
                # xᵀΣx
                P.dot(x, tmp)
                variances[t] = x @ tmp
            if not represented[t]:
                # featureless state: report the error, learn nothing (see module docstring)
                x_next = xs[t + 1] if t + 1 < T else self._zero
                errors[t] = rewards[t] + gamma * float(x_next @ w)
                continue
            if M is None:
                M, scale = np.empty_like(A), np.empty(())
            h = hs[t]
            # δ = r − hᵀŵ
            delta = rewards[t] - float(h.dot(w))
            if not -_INF < delta < _INF:
                raise sh.nonfinite([("X", rows.X), ("r", r)])
            # Σ⁻ = Σ + τ²I
            if tau2:
                _add(diag, tau2_0d, diag)
            # u ← Σ⁻h;  s = hᵀΣ⁻h + σ_r²
            gemv(h, u)
            s = float(h.dot(u)) + noise
            if not 0.0 < s < _INF:
                raise sh.innovation("cov", s)
            # u = Σ⁻h / √s;  [Σ; ŵ] ← [Σ⁻; ŵ] − [u; −δ/√s] uᵀ
            rs = 1.0 / sqrt(s)
            scale[()] = rs
            _multiply(u, scale, u)
            q[n] = -delta * rs
            outer(u_row, M)
            _subtract(A, M, A)
            errors[t] = delta
        out = np.array((values, errors, variances))
        out.setflags(write=False)
        return TrialResult._locked(*out)

    def _trial_reference(self, rows: _TrialRows, r: np.ndarray, finite: bool) -> TrialResult:
        """:meth:`_trial` as it reads, one :meth:`_Gaussian._observe` per represented row."""
        xs, hs, represented = rows.xs, rows.hs, rows.represented
        T = len(xs)
        # a row e_i (one feature on, at 1): xᵀŵ = ŵ_i and xᵀΣx = Σ_ii exactly while the
        # state is finite and these are nonzero (see _Gaussian._onset_reader)
        hot = rows.hot if finite else (None,) * T
        out = np.zeros((3, T))
        values, errors, variances = out
        rewards = r.tolist()
        w, diag, tmp, P, gamma = self._w, self._diag, self._tmp, self._P, self._gamma
        ahead = None  # x_tᵀŵ formed on the step before (a featureless one: ŵ did not change)
        M = None  # the updates' scratch, made at the first update
        for t in range(T):
            if finite and not represented[t]:
                # x = 0: xᵀŵ = xᵀΣx = 0 (as values and variances start), and x'ᵀŵ = 0
                # if x' is featureless too
                if represented[t + 1]:
                    i = hot[t + 1]
                    ahead = w.item(i) if i is not None and w.item(i) != 0.0 else xs[t + 1] @ w
                    errors[t] = rewards[t] + gamma * float(ahead)
                else:
                    errors[t] = rewards[t] + gamma * 0.0
                continue
            x, i = xs[t], hot[t]
            if ahead is not None:
                values[t] = ahead
            elif i is not None and w.item(i) != 0.0:
                values[t] = w.item(i)
            else:
                values[t] = x @ w
            ahead = None
            if i is not None and diag.item(i) != 0.0:
                variances[t] = diag.item(i)
            else:
                # xᵀΣx
                P.dot(x, tmp)
                variances[t] = x @ tmp
            if not represented[t]:
                # featureless state: report the error, learn nothing (see module docstring)
                x_next = xs[t + 1] if t + 1 < T else self._zero
                errors[t] = rewards[t] + gamma * float(x_next @ w)
                continue
            if M is None:
                M = np.empty_like(self._A)
            errors[t] = delta = self._observe(hs[t], rewards[t], M)
            if delta != delta:
                raise sh.nonfinite([("X", rows.X), ("r", r)])
        out.setflags(write=False)
        return TrialResult._locked(*out)

    def state(self) -> dict[str, np.ndarray | float]:
        """Plain arrays and floats, parameters included; ``from_state`` rebuilds it exactly."""
        out = self._gaussian_state()
        out["gamma"] = self._gamma
        return out

    @classmethod
    def from_state(cls, state: dict[str, Any]) -> KalmanTD:
        cls._check_state(state, ("w", "cov", "gamma", "diffusion", "noise", "prior_var"))
        w = sh.state_weights(state)
        learner = cls(w.size, **{k: sh.param(state, k) for k in cls._param_names})
        learner._restore(state)
        return learner


# --------------------------------------------------------------------------- trial rows


class _TrialRows:
    """What the updates of a trial need from its rows X and γ, formed once.

    ``xs``: the rows x_t; ``hs``: the rows h_t = x_t − γx_{t+1} (x_T = 0, the terminal
    row), read-only; ``represented``: whether row t has a feature on, with a False for
    the terminal row after the last; ``hot``: i for a row that is e_i (feature i at 1,
    every other at 0), else None. Tuples, so a kept one is an immutable value.
    """

    __slots__ = ("X", "xs", "hs", "represented", "hot")

    def __init__(self, X: np.ndarray, gamma: float):
        T = X.shape[0]
        # h_t = x_t − γx_{t+1} for all rows in two calls; each entry is the same product
        # and difference as row by row
        H = np.empty_like(X)
        np.multiply(X[1:], gamma, H[:-1])
        H[T - 1 :] = 0.0
        np.subtract(X, H, H)
        H.setflags(write=False)
        self.X = X
        self.xs = tuple(X)
        self.hs = tuple(H)
        self.represented = (*X.any(axis=1).tolist(), False)
        hot = []
        for row in X.tolist():
            on = [j for j, v in enumerate(row) if v != 0.0]
            hot.append(on[0] if len(on) == 1 and row[on[0]] == 1.0 else None)
        self.hot = tuple(hot)


# Rows of read-only X arrays (the feature rows a representation hands out, one per
# binned trial layout), kept by identity: (id(X), γ) -> (X, its _TrialRows). Holding X
# keeps its id from being reused; X cannot change, so an entry never goes stale.
_ROWS: dict[tuple[int, float], tuple[np.ndarray, _TrialRows]] = {}
_ROWS_MAX = 256


def _rows_of(X: np.ndarray, gamma: float) -> _TrialRows:
    """The :class:`_TrialRows` of X: kept for a read-only X, formed anew for any other."""
    if not _immutable(X):
        return _TrialRows(X, gamma)
    key = (id(X), gamma)
    hit = _ROWS.get(key)
    if hit is not None and hit[0] is X:
        return hit[1]
    rows = _TrialRows(X, gamma)
    if len(_ROWS) >= _ROWS_MAX:
        _ROWS.clear()
    _ROWS[key] = (X, rows)
    return rows


def _immutable(X: np.ndarray) -> bool:
    """True when no array in X's chain of bases is writable (so X's values are fixed)."""
    a = X
    while type(a) is np.ndarray:
        if a.flags.writeable:
            return False
        a = a.base
    return a is None
