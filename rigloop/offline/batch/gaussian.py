"""The Kalman learners over S subjects: BatchKalmanTD and BatchKalmanFilter on one
Gaussian core (covariance kept as a block's start plus diffusion minus rank-1 corrections;
see the package docstring)."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np

from ...core.learners import KalmanFilter, KalmanTD
from ...core.learners import _shared as sh
from ...errors import BadArgument
from .common import (
    _BLOCK,
    _CHUNK,
    BatchResult,
    _checked_trials,
    _float_array,
    _kernels,
    _mask,
    _nan_outside,
    _per_subject,
    _same,
    _trials,
)

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
