"""Kalman filter of conditioning: a Gaussian belief over the weights of a cue row.

Model (methods.md §2): w_n = w_{n−1} + ζ, ζ ~ N(0, τ²I); r_n = x_nᵀw_n + ε, ε ~ N(0, σ_r²);
w_0 ~ N(0, cI). Every observation, the first included, first diffuses the belief and then
corrects it (predict, then correct):

    Σ⁻ = Σ + τ²I;  δ = r − hᵀŵ;  s = hᵀΣ⁻h + σ_r²;  k = Σ⁻h / s;  ŵ ← ŵ + kδ;  Σ ← Σ⁻ − k hᵀΣ⁻

``kalman_predict`` and ``kalman_correct`` are these two steps as plain functions over arrays
(they allocate, and read like the equations). The classes run the same algebra in place in
preallocated buffers, with the covariance correction in the symmetric rank-1 form
Σ ← Σ⁻ − u uᵀ, u = Σ⁻h/√s, so Σ stays exactly symmetric. ``_Gaussian`` holds that shared
machinery for this learner and for Kalman TD (which observes h = x − γx' instead of x).
"""

from __future__ import annotations

import functools
import math
from typing import Any

import numpy as np

from . import _shared as sh
from ._shared import Learner, TrialResult

_INF = math.inf


def kalman_predict(P: np.ndarray, diffusion: float) -> np.ndarray:
    """Diffusion step. P: (n, n) covariance; returns Σ⁻ = P + τ²I (a new array)."""
    # Σ⁻ = Σ + τ²I
    return P + diffusion * np.eye(P.shape[0])


def kalman_correct(
    w: np.ndarray, P: np.ndarray, h: np.ndarray, r: float, noise: float
) -> tuple[np.ndarray, np.ndarray, float, float]:
    """Observation step for r = hᵀw + ε, ε ~ N(0, noise).

    w: (n,) mean; P: (n, n) prior covariance Σ⁻; h: (n,) observation row.
    Returns (w', P', delta, s): the posterior, the error δ = r − hᵀw and its variance s.
    """
    # δ = r − hᵀw
    delta = float(r - h @ w)
    Ph = P @ h
    # s = hᵀΣ⁻h + σ_r²
    s = float(h @ Ph) + noise
    if not 0.0 < s < math.inf:
        raise sh.innovation("P", s)
    # k = Σ⁻h / s
    k = Ph / s
    # ŵ ← ŵ + kδ;  Σ ← Σ⁻ − k hᵀΣ⁻
    return w + k * delta, P - np.outer(k, Ph), delta, s


class _Gaussian(Learner):
    """Mean ``w``, covariance ``cov``, and the in-place predict-then-correct step.

    Layout: one C-contiguous (n + 1, n) buffer ``_A`` holds Σ in its first n rows and ŵ
    in its last row, so the correction of both is a single rank-1 update
    A ← A − q uᵀ with u = Σ⁻h/√s and q = [u; −δ/√s] (two numpy calls for all of it).
    """

    __slots__ = ("_A", "_P", "_diag", "_flat", "_ones", "_q", "_u", "_q_col", "_u_row", "_tau2",
                 "_noise", "_c", "_tau2_0d", "_packed")

    def __init__(self, n_features: int, diffusion: Any, noise: Any, prior_var: Any):
        super().__init__(n_features)
        self._tau2 = sh.nonnegative("diffusion", diffusion)
        self._noise = sh.positive("noise", noise)
        self._c = sh.nonnegative("prior_var", prior_var)
        # scalars that enter ufuncs as 0-d arrays: a Python float costs more per call
        self._tau2_0d = sh.constant(self._tau2)
        self._diag[...] = self._c

    def _allocate(self, source: _Gaussian | None) -> None:
        n = self._n
        self._shape = (n,)
        self._packed = None
        if source is None:
            self._views(np.zeros((n + 1, n)))
        elif source._packed is not None:  # a copy of a resting learner: built from its compact form
            self._views(source._unpacked())
        else:
            self._views(source._A.copy())

    def _views(self, A: np.ndarray) -> None:
        """Take ``A`` ((n + 1, n): Σ over ŵ) as this learner's state, with its views and scratch."""
        n = self._n
        self._A = A
        self._P = self._A[:n]
        self._w = self._A[n]
        self._flat = self._A.reshape(-1)
        # the diagonal of Σ as a strided view of the flat buffer: Σ + τ²I without building I
        self._diag = self._flat[: n * n : n + 1]
        # ones, for the sum of every entry in one dot (one per size for all learners: no
        # one can write to it)
        self._ones = _ones(n)
        self._q = np.empty(n + 1)
        self._u = self._q[:n]
        self._q_col = self._q.reshape(n + 1, 1)
        self._u_row = self._u.reshape(1, n)
        # Σx of a variance is used before the next correction writes u, so u holds it
        self._tmp = self._u

    def _copy_params(self, new) -> None:
        new._tau2, new._noise, new._c = self._tau2, self._noise, self._c
        new._tau2_0d = self._tau2_0d

    # -- at rest: the upper triangle of Σ and ŵ in one array ------------------------------

    # The working buffers are dropped and only Σ's upper triangle and ŵ are kept, n(n+1)/2 + n
    # floats instead of (n+1) n plus nine array headers: at n = 32, 4.5 kB instead of 9.9 kB,
    # the difference between 188 MB and 138 MB for 10,000 resident subjects (tools/bench/
    # memory.py). Σ is exactly symmetric (every update adds the same products to Σ_ij and
    # Σ_ji), so its lower triangle is the upper one mirrored, bit for bit; a learner whose Σ
    # is not (a covariance assigned by hand) keeps its full buffer.
    _WORKING = ("_A", "_P", "_w", "_tmp", "_diag", "_flat", "_q", "_u", "_q_col", "_u_row")

    def _rest(self) -> None:
        """Keep only the compact form until the learner is next used (then rebuilt exactly)."""
        if self._packed is not None:
            return
        P = self._P
        if not np.array_equal(P, P.T):  # (a NaN anywhere also keeps the full form)
            return
        rows, cols = _upper(self._n)
        self._packed = np.concatenate((P[rows, cols], self._w))
        for name in self._WORKING:
            delattr(self, name)

    def _wake(self) -> None:
        """The working form again, from the compact one: the same bits as before ``_rest``."""
        A = self._unpacked()
        self._packed = None
        self._views(A)

    def _unpacked(self) -> np.ndarray:
        """A new (n + 1, n) buffer [Σ; ŵ] from the compact form."""
        packed, n = self._packed, self._n
        rows, cols = _upper(n)
        m = len(rows)
        A = np.empty((n + 1, n))
        A[rows, cols] = packed[:m]
        A[cols, rows] = packed[:m]
        A[n] = packed[m:]
        return A

    def __getattr__(self, name: str) -> Any:
        # reached only for a slot that is not set: a working buffer of a resting learner
        if name in _Gaussian._WORKING:
            try:
                packed = object.__getattribute__(self, "_packed")
            except AttributeError:
                packed = None
            if packed is not None:
                self._wake()
                return object.__getattribute__(self, name)
        raise AttributeError(f"{type(self).__name__!r} object has no attribute {name!r}")

    @property
    def diffusion(self) -> float:
        return self._tau2

    @property
    def noise(self) -> float:
        return self._noise

    @property
    def prior_var(self) -> float:
        return self._c

    @property
    def cov(self) -> np.ndarray:
        """(n, n) posterior covariance Σ; assigning copies into the learner's buffer."""
        return self._P

    @cov.setter
    def cov(self, value: Any) -> None:
        self._P[...] = sh.square("cov", value, self._n)

    def predict(self, x: Any) -> tuple[float, float]:
        """(xᵀŵ, xᵀΣx) for a row x of shape (n,): the belief about its value now."""
        return self._predict(sh.row("x", x, self._n))

    def _predict(self, x: np.ndarray) -> tuple[float, float]:
        # (xᵀŵ, xᵀΣx)
        return float(x @ self._w), float(x @ (self._P @ x))

    def _finite(self) -> bool:
        # Σ_ij 1·A_ij, finite only if every entry is: 1·inf = inf, 1·NaN = NaN, and a sum
        # with either is not finite (an overflow merely says no)
        return math.isfinite(self._flat.dot(self._ones))

    def _onset_reader(self, finite: bool | None = None):
        """:meth:`Learner._onset_reader`, reading ŵ_i and Σ_ii where they are the answer.

        With ŵ and Σ finite, e_iᵀŵ = ŵ_i and e_iᵀΣe_i = Σ_ii exactly when these are
        nonzero: every other product is ±0, and adding ±0 to a nonzero number leaves it
        as it is, in whatever order the sum runs. A zero (whose sign that order decides)
        takes the products."""
        if finite is True and self._packed is not None:
            return self._resting_reader()
        if not (self._finite() if finite is None else finite):
            return super()._onset_reader()
        w, diag, predict = self._w, self._diag, self._predict

        def read(x: np.ndarray, i: int) -> tuple[float, float]:
            # (xᵀŵ, xᵀΣx) = (ŵ_i, Σ_ii) for x = e_i
            mean, var = w.item(i), diag.item(i)
            if mean != 0.0 and var != 0.0:
                return mean, var
            return predict(x)

        return read

    def _resting_reader(self):
        """:meth:`_onset_reader` of a finite resting learner: ŵ_i and Σ_ii read from the
        compact form (the same numbers), so ``step`` reading the animal's learner before the
        trial does not rebuild its buffers; a zero entry takes the products (and rebuilds)."""
        packed, n = self._packed, self._n
        m = n * (n + 1) // 2
        at = _diagonal_at(n)
        predict = self._predict

        def read(x: np.ndarray, i: int) -> tuple[float, float]:
            mean, var = packed.item(m + i), packed.item(at[i])
            if mean != 0.0 and var != 0.0:
                return mean, var
            return predict(x)

        return read

    def _observe(self, h: np.ndarray, r: float, M: np.ndarray | None = None) -> float:
        """Diffuse, then correct on r = hᵀw + ε, in place; returns δ (nan: nothing changed).

        h: (n,) float64 observation row. M: an (n + 1, n) scratch for the outer product,
        written whole before it is read (a trial's updates share one; a new one if not
        given: a learner keeps none, as it would double its memory). The error is checked
        for finiteness before any state changes, which rejects NaN/inf anywhere in h or r
        at the cost of one test.
        (``a.dot(b, out)`` rather than ``@``: the method call costs half as much, and
        this runs once per time step.)
        """
        u = self._u
        # δ = r − hᵀŵ
        delta = r - float(h.dot(self._w))
        if not math.isfinite(delta):
            return math.nan
        # Σ⁻ = Σ + τ²I   (on the diagonal view)
        if self._tau2:
            np.add(self._diag, self._tau2_0d, self._diag)
        # u ← Σ⁻h
        self._P.dot(h, u)
        # s = hᵀΣ⁻h + σ_r²
        s = float(h.dot(u)) + self._noise
        if not 0.0 < s < _INF:  # Σ not positive semi-definite along h, or overflowed (Σ⁻ is diffused already)
            raise sh.innovation("cov", s)
        # u = Σ⁻h / √s, so that k = u/√s, k δ = u δ/√s and k hᵀΣ⁻ = u uᵀ
        rs = 1.0 / math.sqrt(s)
        np.multiply(u, rs, u)
        self._q[-1] = -delta * rs
        # [Σ; ŵ] ← [Σ⁻; ŵ] − [u; −δ/√s] uᵀ, i.e. Σ ← Σ⁻ − k hᵀΣ⁻ and ŵ ← ŵ + k δ
        # (the outer product through BLAS (n+1, 1)·(1, n) is ~2x cheaper than a broadcast
        # multiply; each entry is one exact product, so Σ stays exactly symmetric)
        if M is None:
            M = np.empty_like(self._A)
        self._q_col.dot(self._u_row, M)
        np.subtract(self._A, M, self._A)
        return delta

    def _variance(self, x: np.ndarray) -> float:
        # xᵀΣx
        np.dot(self._P, x, out=self._tmp)
        return float(x @ self._tmp)

    def _gaussian_state(self) -> dict[str, np.ndarray | float]:
        return {
            "w": self._w.copy(),
            "cov": self._P.copy(),
            "diffusion": self._tau2,
            "noise": self._noise,
            "prior_var": self._c,
        }

    def _restore(self, state: dict[str, Any]) -> None:
        self.w = state["w"]
        self.cov = state["cov"]


_UPPER: dict[int, tuple[np.ndarray, np.ndarray]] = {}


def _upper(n: int) -> tuple[np.ndarray, np.ndarray]:
    """Row and column indices of the upper triangle of an (n, n) matrix, diagonal included."""
    got = _UPPER.get(n)
    if got is None:
        rows, cols = np.triu_indices(n)
        rows.setflags(write=False)
        cols.setflags(write=False)
        got = _UPPER[n] = (rows, cols)
    return got


@functools.lru_cache(maxsize=64)
def _diagonal_at(n: int) -> tuple[int, ...]:
    """Where Σ_ii sits in the upper triangle laid out row by row (:func:`_upper`)."""
    rows, cols = _upper(n)
    return tuple(int(k) for k in np.flatnonzero(rows == cols))


# The read-only ones vector each Gaussian learner sums its state with, one per size for
# all learners (at n = 32 it is 8.4 kB, as large as the learner's state: with thousands
# of subjects resident, the state is what should take the memory).
_ONES: dict[int, np.ndarray] = {}


def _ones(n: int) -> np.ndarray:
    """The read-only ones vector of length (n + 1) n, one for every learner of size n."""
    ones = _ONES.get(n)
    if ones is None:
        ones = _ONES[n] = sh.constant(np.ones((n + 1) * n))
    return ones


class KalmanFilter(_Gaussian):
    """Bayesian learner of immediate reward (Dayan & Kakade 2001; Gershman 2015).

    n_features: length n of each row x.
    diffusion:  τ², process variance added to every weight per observation (≥ 0).
    noise:      σ_r², observation variance of the reward (> 0).
    prior_var:  c of the prior w_0 ~ N(0, cI) (≥ 0).
    """

    name = "kalman_filter"
    kind = "reward"
    bayesian = True
    _param_names = ("diffusion", "noise", "prior_var")

    __slots__ = ()

    def __init__(self, n_features: int, diffusion: Any = 0.01, noise: Any = 1.0,
                 prior_var: Any = 1.0):
        super().__init__(n_features, diffusion, noise, prior_var)

    def params(self) -> dict[str, Any]:
        return {"diffusion": self._tau2, "noise": self._noise, "prior_var": self._c}

    def update(self, x: Any, r: Any) -> float:
        """Diffuse, then observe r with row x (n,); returns δ = r − xᵀŵ (before the update)."""
        x = self._row("x", x)
        r = sh.scalar_reward(r)
        delta = self._observe(x, r)
        if delta != delta:
            raise sh.nonfinite([("x", x), ("r", r)])
        return delta

    def learn_trial(self, X: Any, r: Any) -> TrialResult:
        """One update per row: X (k, n) rows (usually k = 1, the trial's compound), r (k,)."""
        X = sh.rows("X", X, self._n)
        return self._learn(X, sh.vector("r", r, X.shape[0]))

    def _learn(self, X: np.ndarray, r: np.ndarray) -> TrialResult:
        """:meth:`learn_trial` of rows already checked (finite float64, C-contiguous)."""
        k = X.shape[0]
        values, errors, variances = np.empty(k), np.empty(k), np.empty(k)
        M = np.empty_like(self._A)  # the updates' scratch
        for t in range(k):
            x = X[t]
            values[t] = float(x @ self._w)
            variances[t] = self._variance(x)
            errors[t] = delta = self._observe(x, float(r[t]), M)
            if delta != delta:
                raise sh.nonfinite([("X", X), ("r", r)])
        return TrialResult(values, errors, variances)

    def state(self) -> dict[str, np.ndarray | float]:
        """Plain arrays and floats, parameters included; ``from_state`` rebuilds it exactly."""
        return self._gaussian_state()

    @classmethod
    def from_state(cls, state: dict[str, Any]) -> KalmanFilter:
        cls._check_state(state, ("w", "cov", "diffusion", "noise", "prior_var"))
        w = sh.state_weights(state)
        learner = cls(w.size, **{k: sh.param(state, k) for k in cls._param_names})
        learner._restore(state)
        return learner
