"""The learners vectorised over S subjects that share a feature count n.

One ``Batch*`` object holds S animals' learners as stacked arrays, so replaying or
simulating many subjects costs a few numpy calls per time step for all of them rather
than a few per subject. Each subject may have its own parameters (a number for all, or
an (S,) array). The numbers equal the single-subject learners' step for step up to
floating-point rounding (summation order differs; the tests pin 1e-12):

  BatchKalmanTD        KalmanTD        learn_steps(X, X_next, r, active) / learn_trials
  BatchKalmanFilter    KalmanFilter    learn_steps(X, r, active) / learn_trials
  BatchTD              TD              learn_steps(X, X_next, r, active) / learn_trials
  BatchRescorlaWagner  RescorlaWagner  learn_steps(X, r, active) / learn_trials
  BatchBehaviour       CueEstimate     update(cue_index, y): one forward-filter step per
                                       subject (rigloop.behaviour; S × C estimates)

``learn_trials(Xs, rs, lengths)`` takes padded trials: Xs (S, T, n), rs (S, T), subject
s using its first ``lengths[s]`` rows (the row after them is terminal, all zero); a
subject with length 0 is left unchanged. ``from_learners`` / ``to_learners`` move
between the batch and a list of single learners exactly; ``BatchBehaviour.from_estimates``
/ ``to_estimates`` between it and the subjects' ``behaviour`` maps cue -> (x, var, n).

How the Kalman batch stays cheap (methods.md §2, §4: Σ⁻ = Σ + τ²I, then the correction
Σ ← Σ⁻ − u uᵀ with u = Σ⁻h/√s). Within a block of B time steps the covariance is kept
as Σ₀ + d I − Σⱼ uⱼuⱼᵀ — the block's starting Σ₀, the diffusion d added since, and the
rank-1 corrections so far — which is the same matrix as the step-by-step one. Each
step then needs Σ₀h (all of the block's Σ₀xₜ come from one batched matrix product at
block start) and k inner products with the stored uⱼ, O(nk) instead of O(n²); at the
block's end the corrections are applied in one batched product Σ ← Σ₀ + dI − UᵀU.
Per-step work runs on subject-last (n, S) arrays, so every numpy loop is S long.

The compiled path. When numba imports (``pip install rigloop[fast]``) the Kalman
batches run ``rigloop.batch_kernels`` instead: plain loops, subject by subject, the
single learner's step exactly (one subject's Σ stays in L1 cache for all its steps);
about 5× the numpy path at n = 32 (tools/bench/replay_batch.py). Its first call in a
process compiles or loads it from numba's disk cache. Without numba, or with
RIGLOOP_NO_NUMBA=1 in the environment, the numpy path runs; ``backend()`` says which.
BatchBehaviour takes the same switch: its kernel is the scalar filter's arithmetic, bit
for bit; its numpy path runs the Newton iteration for all subjects still moving at once,
and numpy's ``exp`` may differ from the C library's in the last bit (a few units in the
last place after hundreds of trials).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..core.behaviour import DEFAULT_PRIOR_VAR, DEFAULT_SIGMA2, CueEstimate
from ..core.learners import TD, KalmanFilter, KalmanTD, RescorlaWagner
from ..core.learners import _shared as sh
from ..core.performance import _NEWTON_MAX, _NEWTON_TOL, _open_unit, _z_two_sided
from ..errors import BadArgument

_BLOCK = 16  # steps between applying the stored corrections (a speed knob)
_CHUNK = 192  # subjects per pass: a chunk's working set stays in a core's cache


# --------------------------------------------------------------------------- results


@dataclass(frozen=True, slots=True, eq=False)
class BatchResult:
    """What a batched learn call saw, per subject (and per time step for trials).

    values:    (S,) or (S, T) xᵀw just before each update (the value V(x) for value learners).
    errors:    (S,) or (S, T) prediction errors δ (reward or TD error).
    variances: (S,) or (S, T) xᵀΣx before the step's diffusion; None for point learners.
    Entries of subjects that had no step there (inactive, or past their length) are nan.
    The arrays are read-only.
    """

    values: np.ndarray
    errors: np.ndarray
    variances: np.ndarray | None = None

    def __post_init__(self) -> None:
        for arr in (self.values, self.errors, self.variances):
            if arr is not None:
                arr.setflags(write=False)


# --------------------------------------------------------------------------- checks


def _per_subject(name: str, value: Any, S: int, check) -> np.ndarray:
    """A parameter for every subject: one number, or a sequence of S numbers; (S,) float."""
    if isinstance(value, (list, tuple, np.ndarray)) and np.ndim(value) > 0:
        arr = np.asarray(value, dtype=object).reshape(-1)
        if np.ndim(value) != 1 or arr.size != S:
            raise BadArgument(name, f"a number or a sequence of {S} numbers",
                              sh._Shown(f"shape {np.shape(value)}"))
        out = np.array([check(f"{name}[{i}]", v) for i, v in enumerate(arr)], dtype=np.float64)
    else:
        out = np.full(S, check(name, value), dtype=np.float64)
    out.setflags(write=False)
    return out


def _rates(name: str, value: Any, S: int, n: int) -> tuple[np.ndarray, np.ndarray]:
    """Learning rates: a number, (S,) per subject or (S, n) per subject and feature.

    Returns (alpha (S, n), scalar (S,) bool: the subject's rate was one number)."""
    arr = np.asarray(value, dtype=np.float64) if np.ndim(value) > 0 else None
    if arr is None:
        a = sh.nonnegative(name, value)
        return np.full((S, n), a), np.ones(S, dtype=bool)
    if arr.shape == (S,):
        return np.repeat(_per_subject(name, arr, S, sh.nonnegative)[:, None], n, 1), np.ones(S, bool)
    if arr.shape == (S, n):
        if not np.all(np.isfinite(arr)) or np.any(arr < 0.0):
            raise BadArgument(name, "finite numbers >= 0", value)
        return arr.copy(), np.zeros(S, dtype=bool)
    raise BadArgument(name, f"a number >= 0, or an array of shape ({S},) or ({S}, {n})",
                      sh._Shown(f"shape {arr.shape}"))


def _float_array(name: str, value: Any, shape: tuple[int, ...]) -> np.ndarray:
    """A finite float64 array of exactly ``shape`` (no copy when it already is one)."""
    try:
        arr = np.asarray(value, dtype=np.float64)
    except (TypeError, ValueError):
        raise BadArgument(name, f"a float array of shape {shape}", value) from None
    if arr.shape != shape:
        raise BadArgument(name, f"a float array of shape {shape}", sh._Shown(f"shape {arr.shape}"))
    if not np.all(np.isfinite(arr)):
        raise BadArgument(name, f"a float array of shape {shape} with finite entries",
                          sh._first_bad(arr))
    return arr


def _mask(name: str, value: Any, S: int) -> np.ndarray:
    """An (S,) bool mask; None means every subject."""
    if value is None:
        return np.ones(S, dtype=bool)
    arr = np.asarray(value)
    if arr.shape != (S,) or arr.dtype != np.bool_:
        raise BadArgument(name, f"a bool array of shape ({S},) or None",
                          sh._Shown(f"{arr.dtype} array of shape {arr.shape}"))
    return arr


def _lengths(value: Any, S: int, T: int) -> np.ndarray:
    """(S,) whole numbers in [0, T]."""
    arr = np.asarray(value)
    if arr.shape != (S,) or arr.dtype.kind not in "iu":
        raise BadArgument("lengths", f"an integer array of shape ({S},)",
                          sh._Shown(f"{arr.dtype} array of shape {arr.shape}"))
    if S and (arr.min() < 0 or arr.max() > T):
        bad = int(arr[(arr < 0) | (arr > T)][0])
        raise BadArgument("lengths", f"whole numbers in [0, {T}] (T of Xs)", bad)
    return arr.astype(np.intp)


def _checked_trials(Xs: Any, rs: Any, lengths: Any, S: int, n: int):
    """Checked padded trials as given: X (S, T, n), r (S, T) float64, L (S,) lengths."""
    X = np.asarray(Xs, dtype=np.float64) if not isinstance(Xs, np.ndarray) else Xs
    if X.ndim != 3 or X.shape[0] != S or X.shape[2] != n:
        raise BadArgument("Xs", f"a float array of shape ({S}, T, {n})", sh._Shown(f"shape {np.shape(Xs)}"))
    T = X.shape[1]
    L = _lengths(lengths, S, T)
    r = _float_array("rs", rs, (S, T))
    X = _float_array("Xs", X, (S, T, n))
    return X, r, L


def _trials(Xs: Any, rs: Any, lengths: Any, S: int, n: int):
    """Checked padded trials: X (S, T, n) with rows past each length zeroed, r (S, T)
    likewise, valid (S, T) bool = t < length."""
    X, r, L = _checked_trials(Xs, rs, lengths, S, n)
    valid = np.arange(X.shape[1])[None, :] < L[:, None]
    if not valid.all():
        # padding is ignored whatever it holds: the row after a subject's last is terminal
        X = np.where(valid[:, :, None], X, 0.0)
        r = np.where(valid, r, 0.0)
    return X, r, valid


def _same(learners: Sequence[Any], cls: type) -> int:
    """The shared n of a non-empty list of ``cls`` learners."""
    if not isinstance(learners, Sequence) or not learners:
        raise BadArgument("learners", f"a non-empty list of {cls.__name__}", learners)
    for i, learner in enumerate(learners):
        if type(learner) is not cls:
            raise BadArgument(f"learners[{i}]", f"a {cls.__name__}", type(learner).__name__)
    ns = {learner.n_features for learner in learners}
    if len(ns) != 1:
        raise BadArgument("learners", "learners with the same n_features", sorted(ns))
    return ns.pop()


def _nan_outside(arr: np.ndarray, keep: np.ndarray) -> np.ndarray:
    arr[~keep] = np.nan
    return arr


# --------------------------------------------------------------------------- the kernel switch

_KERNELS: list = []  # [the batch_kernels module, or None without numba], filled on first use


def _kernels():
    """The compiled kernels (``rigloop.batch_kernels``) if numba imports and
    RIGLOOP_NO_NUMBA is not set, else None (the numpy path)."""
    if not _KERNELS:
        try:
            from . import batch_kernels
        except ImportError:
            batch_kernels = None
        _KERNELS.append(batch_kernels)
    kernels = _KERNELS[0]
    return kernels if kernels is not None and kernels.enabled() else None


def backend() -> str:
    """Which path the Kalman batches take now: 'numba' (compiled kernels) or 'numpy'."""
    return "numpy" if _kernels() is None else "numba"


# --------------------------------------------------------------------------- Gaussian core


class _BatchGaussian:
    """S Gaussian beliefs: ``_A`` (S, n + 1, n) holds Σ in rows :n and ŵ in row n, per
    subject, as in the single learner; parameters are (S,) arrays."""

    _single: type
    _value_learner: bool

    def __init__(self, n_subjects: int, n_features: int, diffusion: Any, noise: Any,
                 prior_var: Any, gamma: Any = 0.0, *, block: int = _BLOCK,
                 chunk: int = _CHUNK, parallel: bool = False):
        S = self._S = sh.count("n_subjects", n_subjects)
        n = self._n = sh.count("n_features", n_features)
        self._block = sh.count("block", block)
        self._chunk = sh.count("chunk", chunk)
        if not isinstance(parallel, (bool, np.bool_)):
            raise BadArgument("parallel", "True or False", parallel)
        self._parallel = bool(parallel)
        self._tau2 = _per_subject("diffusion", diffusion, S, sh.nonnegative)
        self._noise = _per_subject("noise", noise, S, sh.positive)
        self._c = _per_subject("prior_var", prior_var, S, sh.nonnegative)
        self._gamma = _per_subject("gamma", gamma, S, sh.unit)
        self._A = np.zeros((S, n + 1, n))
        self._diag_view()[...] = self._c[:, None]

    def _diag_view(self) -> np.ndarray:
        """(S, n) strided view of every Σ's diagonal."""
        n = self._n
        return self._A.reshape(self._S, -1)[:, : n * n : n + 1]

    # -- the state -------------------------------------------------------------

    @property
    def n_subjects(self) -> int:
        return self._S

    @property
    def n_features(self) -> int:
        return self._n

    @property
    def w(self) -> np.ndarray:
        """(S, n) mean weights, one row per subject (a view: write it in place)."""
        return self._A[:, self._n]

    @property
    def cov(self) -> np.ndarray:
        """(S, n, n) covariances Σ (a view: write it in place, keep each symmetric)."""
        return self._A[:, : self._n]

    @property
    def diffusion(self) -> np.ndarray:
        return self._tau2

    @property
    def noise(self) -> np.ndarray:
        return self._noise

    @property
    def prior_var(self) -> np.ndarray:
        return self._c

    def _params(self, s: int) -> dict[str, float]:
        return {"diffusion": float(self._tau2[s]), "noise": float(self._noise[s]),
                "prior_var": float(self._c[s])}

    def learner(self, s: int):
        """Subject s as a single-subject learner (a copy)."""
        state = {"w": self.w[s].copy(), "cov": self.cov[s].copy(), **self._params(s)}
        return self._single.from_state(state)

    def to_learners(self) -> list:
        """Every subject as a single-subject learner, in order (copies)."""
        return [self.learner(s) for s in range(self._S)]

    @classmethod
    def _from(cls, learners: Sequence[Any], keys: tuple[str, ...], **kw: Any):
        n = _same(learners, cls._single)
        params = {k: np.array([getattr(lr, k) for lr in learners]) for k in keys}
        batch = cls(len(learners), n, **params, **kw)
        for s, learner in enumerate(learners):
            batch._A[s, :n] = learner.cov
            batch._A[s, n] = learner.w
        return batch

    # -- the step ---------------------------------------------------------------

    def _run(self, X: np.ndarray, r: np.ndarray, learn: np.ndarray, report: np.ndarray,
             gamma: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Run T steps for every subject, a chunk of subjects at a time.

        X: (S, T + 1, n) rows, step t going from X[:, t] to X[:, t + 1] (so the last is
        the terminal or next row); r: (S, T) rewards; learn: (S, T) bool, the steps
        that diffuse and correct; report: (S, T) bool, the steps that are reported.
        gamma: (S,) discount (0 for the reward learner: h = x).
        Returns (values, errors, variances), each (S, T), nan where not reported.
        """
        S, T1, _ = X.shape
        out = np.empty((3, T1 - 1, S))
        for c0 in range(0, S, self._chunk):
            c = slice(c0, min(c0 + self._chunk, S))
            _gaussian_steps(self._A[c], X[c], r[c], learn[c], gamma[c], self._tau2[c],
                            self._noise[c], self._block, out[:, :, c])
        values, errors, variances = (_nan_outside(o.T.copy(), report) for o in out)
        return values, errors, variances

    def _run_kernel(self, kernels, X: np.ndarray, x_after: np.ndarray, r: np.ndarray,
                    lengths: np.ndarray, skip_empty: bool):
        """The same steps through the compiled kernel, subject by subject.

        X: (S, T, n) rows, step t of subject s going from X[s, t] to X[s, t + 1] and from
        its last row X[s, lengths[s] − 1] to x_after[s] (n,); r: (S, T); lengths: (S,)
        steps per subject (0: untouched); skip_empty: featureless rows learn nothing.
        Returns (values, errors, variances), each (S, T), nan past each length.
        """
        S, T, _ = X.shape
        out = np.full((3, S, T), np.nan)
        kernels.gaussian_steps(self._A, np.ascontiguousarray(X), np.ascontiguousarray(x_after),
                               np.ascontiguousarray(r), lengths.astype(np.intp), self._gamma,
                               self._tau2, self._noise, skip_empty, out[0], out[1], out[2],
                               parallel=self._parallel)
        return out[0], out[1], out[2]


def _gaussian_steps(A: np.ndarray, X: np.ndarray, r: np.ndarray, learn: np.ndarray,
                    g: np.ndarray, tau2: np.ndarray, noise: np.ndarray, B: int,
                    out: np.ndarray) -> None:
    """The Kalman steps of S subjects (a chunk small enough to stay in cache), in place.

    A: (S, n + 1, n) [Σ; ŵ] per subject, updated; X: (S, T + 1, n) rows; r, learn: (S, T);
    g, tau2, noise: (S,) γ, τ², σ_r²; B: steps per block; out: (3, T, S) receives the
    values, errors and variances (subject-last).

    Within a block from Σ₀, ŵ₀, step k (h zero on steps that do not learn, Dₖ the
    diffusion added up to and including step k, uⱼ and cⱼ the earlier steps' corrections):
        Σₖ⁻h = bₖ − Σⱼ uⱼ (uⱼ·h),  bₖ = Σ₀h + Dₖh        (Σₖ⁻ = Σ₀ + DₖI − Σⱼ uⱼuⱼᵀ)
        δₖ = r − ŵ₀·h̃ − Σⱼ cⱼ (uⱼ·h̃),  h̃ = x − γx'      (ŵ = ŵ₀ + Σⱼ cⱼuⱼ)
    so only the inner products uⱼ·x are sequential; bₖ, ŵ₀·h̃ and the reported values and
    variances are computed for the whole block at once.
    """
    S, T1, n = X.shape
    T = T1 - 1
    P, W = A[:, :n], A[:, n]
    At = A.transpose(0, 2, 1)
    # subject-last copies: every per-step array is (…, S), so numpy loops run S long
    XT = np.ascontiguousarray(X.transpose(1, 2, 0))            # (T + 1, n, S)
    rT = np.ascontiguousarray(r.T)                               # (T, S)
    lT = learn.T.astype(np.float64)                              # (T, S) 1.0 = learn
    values, errors, variances = out
    U = np.empty((B, n, S))      # the corrections uⱼ = Σⱼ⁻hⱼ/√sⱼ (zero on steps that skip)
    C = np.empty((B, S))         # their weight steps cⱼ = δⱼ/√sⱼ
    UX = np.empty((B + 1, B, S))  # UX[k, j] = uⱼ·xₖ for j < k, else 0
    M = np.empty((S, n, n))
    for t0 in range(0, T, B):
        m = min(B, T - t0)
        # rows xₜᵀ[Σ₀; ŵ₀]ᵀ for the block's rows t0 … t0 + m, in one batched product
        GT = np.ascontiguousarray(np.matmul(X[:, t0 : t0 + m + 1], At).transpose(1, 2, 0))
        xb, lb, tl = XT[t0 : t0 + m + 1], lT[t0 : t0 + m], tau2 * lT[t0 : t0 + m]
        D = np.cumsum(tl, axis=0)                                 # (m, S) Dₖ
        # h = (x − γx') on learning steps;  bₖ = Σ₀h + Dₖh
        H = (xb[:m] - g * xb[1:]) * lb[:, None, :]
        Bk = (GT[:m, :n] - g * GT[1:, :n]) * lb[:, None, :] + D[:, None, :] * H
        # r − ŵ₀·h̃, the error before this block's corrections
        rhs = rT[t0 : t0 + m] - (GT[:m, n] - g * GT[1 : m + 1, n])
        UX[: m + 1] = 0.0
        for k in range(m):
            ux, uxn, Uk = UX[k, :k], UX[k + 1, :k], U[:k]
            x_next = xb[k + 1]
            # uⱼ·x' (uⱼ·x is the previous step's uⱼ·x')
            np.einsum("kns,ns->ks", Uk, x_next, out=uxn)
            e = ux - g * uxn                                       # uⱼ·h̃
            # δ = r − ŵ₀·h̃ − Σⱼ cⱼ uⱼ·h̃
            delta = errors[t0 + k]
            np.subtract(rhs[k], np.einsum("ks,ks->s", C[:k], e), out=delta)
            # Σ⁻h = bₖ − Σⱼ uⱼ (uⱼ·h);  s = hᵀΣ⁻h + σ_r²
            a = Bk[k] - np.einsum("ks,kns->ns", e * lb[k], Uk)
            rs = 1.0 / np.sqrt(np.einsum("ns,ns->s", H[k], a) + noise)
            # u = Σ⁻h/√s, c = δ/√s:  Σ ← Σ⁻ − uuᵀ, ŵ ← ŵ + cu  (gain k = u/√s)
            np.multiply(a, rs, out=U[k])
            np.multiply(delta, rs * lb[k], out=C[k])
            np.einsum("ns,ns->s", U[k], x_next, out=UX[k + 1, k])
        # reported per step, before its update: V(x) = ŵ₀·x + Σⱼ cⱼ uⱼ·x and
        # xᵀΣx = xᵀΣ₀x + (Dₖ − τ²lₖ) xᵀx − Σⱼ (uⱼ·x)²
        uxb = UX[:m, :m]
        values[t0 : t0 + m] = GT[:m, n] + np.einsum("kjs,js->ks", uxb, C[:m])
        variances[t0 : t0 + m] = (np.einsum("kns,kns->ks", xb[:m], GT[:m, :n])
                                  + (D - tl) * np.einsum("kns,kns->ks", xb[:m], xb[:m])
                                  - np.einsum("kjs,kjs->ks", uxb, uxb))
        # apply the block: Σ ← Σ₀ + DI − UᵀU,  ŵ ← ŵ₀ + Σⱼ cⱼ uⱼ
        Us = np.ascontiguousarray(U[:m].transpose(2, 0, 1))          # (S, m, n)
        np.matmul(np.ascontiguousarray(U[:m].transpose(2, 1, 0)), Us, out=M)
        # (UᵀU is exactly symmetric: each entry sums the same products in the same order)
        np.subtract(P, M, out=P)
        W += np.matmul(np.ascontiguousarray(C[:m].T)[:, None, :], Us)[:, 0]
        diag = A.reshape(S, -1)[:, : n * n : n + 1]
        diag += D[-1][:, None]


class BatchKalmanTD(_BatchGaussian):
    """S Kalman TD learners (methods.md §4) with n features each.

    gamma, diffusion (τ²), noise (σ_r²), prior_var (c): a number for every subject or
    a sequence of S numbers. ``w`` (S, n), ``cov`` (S, n, n). ``block``: time steps
    between applying the stored covariance corrections (a speed knob; same numbers).
    ``chunk``: subjects per pass of the numpy path. ``parallel``: the compiled kernel
    spreads large calls over numba's threads (same numbers, bit for bit; off by default:
    on a shared 2-core machine it measured no faster, and slower under load).
    """

    _single = KalmanTD

    def __init__(self, n_subjects: int, n_features: int, gamma: Any = 0.95,
                 diffusion: Any = 0.01, noise: Any = 1.0, prior_var: Any = 1.0, *,
                 block: int = _BLOCK, chunk: int = _CHUNK, parallel: bool = False):
        super().__init__(n_subjects, n_features, diffusion, noise, prior_var, gamma,
                         block=block, chunk=chunk, parallel=parallel)

    @property
    def gamma(self) -> np.ndarray:
        return self._gamma

    def _params(self, s: int) -> dict[str, float]:
        return {"gamma": float(self._gamma[s]), **super()._params(s)}

    @classmethod
    def from_learners(cls, learners: Sequence[KalmanTD], **speed: int) -> BatchKalmanTD:
        """A batch holding copies of these learners (same n), subject s = learners[s];
        ``speed``: ``block`` / ``chunk`` / ``parallel`` as in the constructor."""
        return cls._from(learners, ("gamma", "diffusion", "noise", "prior_var"), **speed)

    def learn_steps(self, X: Any, X_next: Any, r: Any, active: Any = None, *,
                    skip_empty: bool = True) -> BatchResult:
        """One time step for every subject: X, X_next (S, n) rows now and next (zero if
        terminal), r (S,) rewards on the transition; ``active`` (S,) bool, False for a
        subject with no step now (it is left unchanged, its results nan).

        skip_empty: a subject whose row x is all zero reports its TD error but learns
        nothing, as ``KalmanTD.learn_trial`` does; False applies every step, as
        ``KalmanTD.update`` does. Returns (S,) values, errors, variances.
        """
        S, n = self._S, self._n
        X, X_next = _float_array("X", X, (S, n)), _float_array("X_next", X_next, (S, n))
        r = _float_array("r", r, (S,))
        active = _mask("active", active, S)
        kernels = _kernels()
        if kernels is not None:
            out = self._run_kernel(kernels, X[:, None], X_next, r[:, None], active,
                                   bool(skip_empty))
            return BatchResult(*(o[:, 0] for o in out))
        rows = np.stack([X, X_next], 1)
        learn = active & X.any(1) if skip_empty else active
        out = self._run(rows, r[:, None], learn[:, None], active[:, None], self._gamma)
        return BatchResult(*(o[:, 0] for o in out))

    def learn_trials(self, Xs: Any, rs: Any, lengths: Any) -> BatchResult:
        """One trial per subject, as ``KalmanTD.learn_trial``: Xs (S, T, n) padded rows,
        rs (S, T) with rs[s, t] received on the step from row t to row t + 1, lengths
        (S,) rows used per subject (the row after them terminal). Returns (S, T) results."""
        kernels = _kernels()
        if kernels is not None:
            X, r, L = _checked_trials(Xs, rs, lengths, self._S, self._n)
            zero = np.zeros((self._S, self._n))
            return BatchResult(*self._run_kernel(kernels, X, zero, r, L, True))
        X, r, valid = _trials(Xs, rs, lengths, self._S, self._n)
        S, T, n = X.shape
        rows = np.zeros((S, T + 1, n))
        rows[:, :T] = X
        learn = valid & X.any(2)
        return BatchResult(*self._run(rows, r, learn, valid, self._gamma))


class BatchKalmanFilter(_BatchGaussian):
    """S Kalman filters of conditioning (methods.md §2) with n features each.

    diffusion (τ²), noise (σ_r²), prior_var (c): a number or S numbers.
    """

    _single = KalmanFilter

    def __init__(self, n_subjects: int, n_features: int, diffusion: Any = 0.01,
                 noise: Any = 1.0, prior_var: Any = 1.0, *, block: int = _BLOCK,
                 chunk: int = _CHUNK, parallel: bool = False):
        super().__init__(n_subjects, n_features, diffusion, noise, prior_var, 0.0,
                         block=block, chunk=chunk, parallel=parallel)

    @classmethod
    def from_learners(cls, learners: Sequence[KalmanFilter], **speed: int) -> BatchKalmanFilter:
        """A batch holding copies of these learners (same n), subject s = learners[s]."""
        return cls._from(learners, ("diffusion", "noise", "prior_var"), **speed)

    def learn_steps(self, X: Any, r: Any, active: Any = None) -> BatchResult:
        """One observation per active subject: X (S, n) rows, r (S,) rewards, as
        ``KalmanFilter.update`` (every row observed, an all-zero one too)."""
        S, n = self._S, self._n
        X = _float_array("X", X, (S, n))
        r = _float_array("r", r, (S,))
        active = _mask("active", active, S)
        kernels = _kernels()
        if kernels is not None:
            zero = np.zeros((S, n))
            out = self._run_kernel(kernels, X[:, None], zero, r[:, None], active, False)
            return BatchResult(*(o[:, 0] for o in out))
        rows = np.zeros((S, 2, n))
        rows[:, 0] = X
        out = self._run(rows, r[:, None], active[:, None], active[:, None], self._gamma)
        return BatchResult(*(o[:, 0] for o in out))

    def learn_trials(self, Xs: Any, rs: Any, lengths: Any) -> BatchResult:
        """``KalmanFilter.learn_trial`` for every subject: Xs (S, T, n), rs (S, T), the
        first lengths[s] rows observed in order. Returns (S, T) results."""
        kernels = _kernels()
        if kernels is not None:
            X, r, L = _checked_trials(Xs, rs, lengths, self._S, self._n)
            zero = np.zeros((self._S, self._n))
            return BatchResult(*self._run_kernel(kernels, X, zero, r, L, False))
        X, r, valid = _trials(Xs, rs, lengths, self._S, self._n)
        S, T, n = X.shape
        rows = np.zeros((S, T + 1, n))
        rows[:, :T] = X
        return BatchResult(*self._run(rows, r, valid, valid, self._gamma))


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


# --------------------------------------------------------------------------- behaviour estimates


def _logistic_of(a: np.ndarray) -> np.ndarray:
    """logistic(a) elementwise, as ``performance._logistic`` computes it: 1 / (1 + e^-a)
    for a >= 0, e^a / (1 + e^a) below (e^-|a| is the exponent of either branch)."""
    e = np.exp(-np.abs(a))
    return np.where(a >= 0.0, 1.0 / (1.0 + e), e / (1.0 + e))


def _filter_steps(x: np.ndarray, var: np.ndarray, y: np.ndarray,
                  sigma2: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``performance._filter_step(x, var, y, 0.0, sigma2)`` for every entry at once:
    (x_post, var_post). x, var, sigma2 (k,) floats; y (k,) 1.0 or 0.0.

    Each entry runs the scalar filter's safeguarded Newton iteration (same bracket, step,
    bisection fallback and tolerance, in the same operation order); an entry leaves the
    iteration when it meets the tolerance, so later rounds work on the ones still moving.
    (mu = 0: the scalar's mu + z is z.)
    """
    var_pred = var + sigma2
    up = y == 1.0
    z = x.copy()  # the result; the iteration below runs on the entries still moving
    idx = np.arange(x.size)
    zm, xm, vm, ym = z, x, var_pred, y
    # the root of f(z) = z - x - v (y - p(z)) lies in [x, x + v] (y = 1) or [x - v, x] (y = 0)
    lo, hi = np.where(up, x, x - var_pred), np.where(up, x + var_pred, x)
    for _ in range(_NEWTON_MAX):
        p = _logistic_of(zm)
        f = zm - xm - vm * (ym - p)
        right = f > 0.0
        hi = np.where(right, zm, hi)
        lo = np.where(right, lo, zm)
        step = f / (1.0 + vm * p * (1.0 - p))
        z_new = zm - step
        inside = (lo <= z_new) & (z_new <= hi)
        z_new = np.where(inside, z_new, 0.5 * (lo + hi))
        done = np.abs(z_new - zm) <= _NEWTON_TOL * (1.0 + np.abs(zm))
        zm = z_new
        if done.any():
            z[idx[done]] = zm[done]
            moving = ~done
            if not moving.any():
                break
            idx, zm, xm, vm, ym = idx[moving], zm[moving], xm[moving], vm[moving], ym[moving]
            lo, hi = lo[moving], hi[moving]
    else:
        z[idx] = zm  # the cap reached: the scalar filter keeps its last iterate too
    p = _logistic_of(z)
    return z, 1.0 / (1.0 / var_pred + p * (1.0 - p))


def _cue_names(cues: Any) -> tuple[str, ...]:
    """A non-empty sequence of distinct cue names, as a tuple."""
    if isinstance(cues, str) or not isinstance(cues, Sequence) or not cues:
        raise BadArgument("cues", "a non-empty sequence of cue names", cues)
    names = tuple(cues)
    for i, cue in enumerate(names):
        if not isinstance(cue, str):
            raise BadArgument(f"cues[{i}]", "a cue name (str)", cue)
    if len(set(names)) != len(names):
        raise BadArgument("cues", "distinct cue names", sorted({c for c in names if names.count(c) > 1}))
    return names


def _responses(value: Any, S: int) -> np.ndarray:
    """(S,) float responses: 1.0 (responded), 0.0 (did not) or nan (not observed)."""
    try:
        y = np.asarray(value, dtype=np.float64)
    except (TypeError, ValueError):
        raise BadArgument("y", f"a float array of shape ({S},)", value) from None
    if y.shape != (S,):
        raise BadArgument("y", f"a float array of shape ({S},)", sh._Shown(f"shape {y.shape}"))
    bad = ~((y == 0.0) | (y == 1.0) | np.isnan(y))
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise BadArgument("y", "entries 1.0, 0.0 or nan (not observed)",
                          sh._Shown(f"{float(y[i])!r} at index {i}"))
    return y


def _cue_indices(value: Any, S: int, C: int, on: np.ndarray) -> np.ndarray:
    """(S,) cue indices, those of observed subjects (``on``) in [0, C)."""
    arr = np.asarray(value)
    if arr.shape != (S,) or arr.dtype.kind not in "iu":
        raise BadArgument("cue_index", f"an integer array of shape ({S},)",
                          sh._Shown(f"{arr.dtype} array of shape {arr.shape}"))
    bad = on & ((arr < 0) | (arr >= C))
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise BadArgument("cue_index", f"cue indices in [0, {C}) where y is observed",
                          sh._Shown(f"{int(arr[i])} at index {i}"))
    return arr.astype(np.intp)


def _estimate(name: str, data: Any) -> tuple[float, float, int]:
    """A stored estimate (x, var, n) as ``CueEstimate.from_tuple`` accepts it."""
    try:
        return CueEstimate.from_tuple(data).as_tuple()
    except BadArgument:
        raise BadArgument(name, "a triple (x, var, n): finite x, var > 0, whole n >= 0", data) from None


class BatchBehaviour:
    """S subjects' behaviour estimates over the same C cues (rigloop.behaviour): the logit
    state's posterior mode ``x``, variance ``var`` and observed trials ``n``, each (S, C).

    sigma2 (the random walk's variance per cue trial) and prior_var (a cue's variance
    before its first trial): a number for every subject or a sequence of S numbers. A
    cue a subject has not been seen on holds the prior (0, prior_var, 0) and is left out
    of :meth:`to_estimates`, as a SubjectState leaves it out of its ``behaviour`` map.
    """

    def __init__(self, n_subjects: int, cues: Sequence[str], sigma2: Any = DEFAULT_SIGMA2,
                 prior_var: Any = DEFAULT_PRIOR_VAR):
        S = self._S = sh.count("n_subjects", n_subjects)
        self._cues = _cue_names(cues)
        C = len(self._cues)
        self._sigma2 = _per_subject("sigma2", sigma2, S, sh.positive)
        self._prior = _per_subject("prior_var", prior_var, S, sh.positive)
        self._x = np.zeros((S, C))
        self._var = np.repeat(self._prior[:, None], C, 1)
        self._n = np.zeros((S, C), dtype=np.int64)
        self._held = np.zeros((S, C), dtype=bool)  # an estimate exists (not the bare prior)

    n_subjects = property(lambda self: self._S)
    cues = property(lambda self: self._cues, doc="the cue names, in column order")
    sigma2 = property(lambda self: self._sigma2, doc="(S,) random-walk variance per cue trial")
    prior_var = property(lambda self: self._prior, doc="(S,) variance before a cue's first trial")

    @staticmethod
    def _read_only(arr: np.ndarray) -> np.ndarray:
        view = arr.view()
        view.setflags(write=False)
        return view

    @property
    def x(self) -> np.ndarray:
        """(S, C) posterior modes of the logit state (read-only view)."""
        return self._read_only(self._x)

    @property
    def var(self) -> np.ndarray:
        """(S, C) posterior variances (read-only view)."""
        return self._read_only(self._var)

    @property
    def n(self) -> np.ndarray:
        """(S, C) observed trials per cue (read-only view)."""
        return self._read_only(self._n)

    def update(self, cue_index: Any, y: Any) -> None:
        """One trial for every subject: subject s saw cue ``cue_index[s]`` and responded
        (``y[s]`` = 1.0), did not (0.0), or was not observed (nan: left unchanged).

        Each observed estimate takes one step of the forward filter, as
        ``CueEstimate.updated`` does (``performance._filter_step``, mu = 0): the compiled
        kernel runs it subject by subject, bit for bit; the numpy path runs it for all at
        once (its ``exp`` may differ from the C library's in the last bit, so its
        numbers agree to a few units in the last place).
        """
        yv = _responses(y, self._S)
        on = ~np.isnan(yv)
        cue = _cue_indices(cue_index, self._S, len(self._cues), on)
        kernels = _kernels()
        if kernels is not None:
            kernels.behaviour_steps(self._x, self._var, self._n, self._held, cue,
                                    np.ascontiguousarray(yv), self._sigma2, _NEWTON_MAX, _NEWTON_TOL)
            return
        rows = np.flatnonzero(on)
        if rows.size == 0:
            return
        cols = cue[rows]
        x, var = _filter_steps(self._x[rows, cols], self._var[rows, cols], yv[rows], self._sigma2[rows])
        self._x[rows, cols] = x
        self._var[rows, cols] = var
        self._n[rows, cols] += 1
        self._held[rows, cols] = True

    def predictive(self) -> tuple[np.ndarray, np.ndarray]:
        """(mean, variance), each (S, C), of every cue's logit state on its next trial:
        N(x, var + sigma2), as ``CueEstimate.predictive``."""
        return self._x.copy(), self._var + self._sigma2[:, None]

    def p(self) -> np.ndarray:
        """(S, C) estimated P(respond | cue) (or P(right | cue)): logistic(x)."""
        return _logistic_of(self._x)

    def band(self, level: float = 0.95) -> tuple[np.ndarray, np.ndarray]:
        """(lower, upper), each (S, C): the ``level`` credible band of p on the cue's next
        trial, logistic(x -/+ z sqrt(var + sigma2)), as ``behaviour.band`` of the predictive."""
        half = _z_two_sided(_open_unit("level", level)) * np.sqrt(self._var + self._sigma2[:, None])
        return _logistic_of(self._x - half), _logistic_of(self._x + half)

    @classmethod
    def from_estimates(cls, estimates: Sequence[Mapping[str, Any]], cues: Sequence[str],
                       sigma2: Any = DEFAULT_SIGMA2, prior_var: Any = DEFAULT_PRIOR_VAR) -> BatchBehaviour:
        """A batch from S subjects' estimate maps ``cue -> (x, var, n)`` (a SubjectState's
        ``behaviour``), subject s = estimates[s]; cues missing from a map hold the prior."""
        if isinstance(estimates, Mapping) or not isinstance(estimates, Sequence) or not estimates:
            raise BadArgument("estimates", "a non-empty list of maps cue -> (x, var, n)", estimates)
        batch = cls(len(estimates), cues, sigma2, prior_var)
        column = {cue: j for j, cue in enumerate(batch._cues)}
        for s, est in enumerate(estimates):
            if not isinstance(est, Mapping):
                raise BadArgument(f"estimates[{s}]", "a map cue -> (x, var, n)", est)
            for cue, data in est.items():
                j = column.get(cue)
                if j is None:
                    raise BadArgument(f"estimates[{s}]", f"cues among {', '.join(batch._cues)}", cue)
                x, var, n = _estimate(f"estimates[{s}][{cue}]", data)
                batch._x[s, j], batch._var[s, j], batch._n[s, j] = x, var, n
                batch._held[s, j] = True
        return batch

    def to_estimates(self) -> list[dict[str, tuple[float, float, int]]]:
        """Every subject's estimate map ``cue -> (x, var, n)`` (cues it has estimates of),
        in order; :meth:`from_estimates` of it gives this batch back exactly."""
        xs, vs, ns, held = self._x.tolist(), self._var.tolist(), self._n.tolist(), self._held.tolist()
        return [{cue: (xs[s][j], vs[s][j], ns[s][j]) for j, cue in enumerate(self._cues) if held[s][j]}
                for s in range(self._S)]


__all__ = ["BatchBehaviour", "BatchKalmanFilter", "BatchKalmanTD", "BatchRescorlaWagner", "BatchResult",
           "BatchTD", "backend"]
