"""A subject's values over all its trials, for many parameter sets in one call.

What a likelihood evaluation needs from the learner: before each trial, the value (and,
for the Kalman learners, the variance) of a few probe rows — the trial's onset row for
go/no-go, the rows of its cue with each side for two-choice — before the trial's
learning. ``TrialRows`` holds a subject's trials packed once (every trial's rows
stacked, where each trial starts, its probe rows); ``kalman_probes`` and ``delta_probes``
run P parameter sets over them through the compiled kernels (``rigloop.batch_kernels``),
each set the single learner's steps in order:

  kalman_probes   Kalman TD (featureless rows learn nothing) or, with γ = 0 and
                  ``skip_empty=False``, the Kalman filter over stacked rows
  delta_probes    TD(λ) (the trace resets each trial) or, with γ = λ = 0, Rescorla–Wagner

Both return None when the compiled kernels are off (numba missing, or RIGLOOP_NO_NUMBA
set): the caller then runs the learners themselves. The numbers agree with the learners'
to rounding only (about 1e-15 relative per step): the kernels sum over non-zero entries
in index order, the learners' BLAS dots in an order of their own.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ...errors import BadArgument
from .common import _kernels

OK, NONFINITE_ERROR, BAD_INNOVATION = 0, 1, 2
FAILURES = {
    NONFINITE_ERROR: "a prediction error that is not finite (the values overflowed)",
    BAD_INNOVATION: "an innovation variance hᵀΣ⁻h + noise that is not a finite number > 0",
}


@dataclass(frozen=True, slots=True, eq=False)
class TrialRows:
    """A subject's trials packed for the kernels.

    X: (R, n) every trial's rows stacked; r: (R,) rewards; bounds: (N + 1,) trial k owns
    rows bounds[k] up to bounds[k + 1] (the row after its last is terminal, all zero);
    probes: (N, Q, n) the rows read before trial k where has[k] (N,) is True.
    hptr (R + 1,), hidx: the entries where row t or the next row of its trial is
    non-zero, hidx[hptr[t]:hptr[t + 1]] in index order (the only entries where a TD
    step's h = x − γx' can be non-zero); learns (R,): row t has a non-zero entry.
    """

    X: np.ndarray
    r: np.ndarray
    bounds: np.ndarray
    probes: np.ndarray
    has: np.ndarray
    hptr: np.ndarray
    hidx: np.ndarray
    learns: np.ndarray

    @property
    def n_trials(self) -> int:
        return self.has.shape[0]

    @property
    def n_probes(self) -> int:
        return self.probes.shape[1]


def pack_trials(X, r, lengths, probes, has) -> TrialRows:
    """``TrialRows`` of stacked rows X (R, n), rewards r (R,), rows per trial ``lengths``
    (N,) summing to R, probe rows (N, Q, n) and whether each trial has them (N,)."""
    X = np.ascontiguousarray(X, dtype=np.float64)
    r = np.ascontiguousarray(r, dtype=np.float64)
    lengths = np.asarray(lengths, dtype=np.intp)
    probes = np.ascontiguousarray(probes, dtype=np.float64)
    has = np.ascontiguousarray(has, dtype=np.bool_)
    if X.ndim != 2 or r.shape != (X.shape[0],):
        raise BadArgument("X, r", "rows (R, n) and rewards (R,)", (X.shape, r.shape))
    N = lengths.shape[0] if lengths.ndim == 1 else -1
    if N < 0 or np.any(lengths < 0) or has.shape != (N,) or probes.ndim != 3 \
            or probes.shape[0] != N or probes.shape[2] != X.shape[1]:
        raise BadArgument("lengths, probes, has", f"(N,) row counts, (N, Q, {X.shape[1]}) probe "
                          "rows and (N,) flags for the same N trials",
                          (lengths.shape, probes.shape, has.shape))
    bounds = np.zeros(N + 1, dtype=np.intp)
    np.cumsum(lengths, out=bounds[1:])
    if bounds[-1] != X.shape[0]:
        raise BadArgument("lengths", f"rows per trial summing to {X.shape[0]}", int(bounds[-1]))
    on = X != 0.0
    after = np.zeros_like(on)  # the next row of the same trial (none after a trial's last)
    after[:-1] = on[1:]
    after[bounds[1:][lengths > 0] - 1] = False
    either = on | after
    hptr = np.zeros(X.shape[0] + 1, dtype=np.intp)
    np.cumsum(either.sum(axis=1), out=hptr[1:])
    hidx = np.ascontiguousarray(np.nonzero(either)[1], dtype=np.intp)
    learns = np.ascontiguousarray(on.any(axis=1))
    for arr in (X, r, bounds, probes, has, hptr, hidx, learns):
        arr.setflags(write=False)
    return TrialRows(X, r, bounds, probes, has, hptr, hidx, learns)


def _vector(value, P: int) -> np.ndarray:
    return np.ascontiguousarray(np.broadcast_to(np.asarray(value, dtype=np.float64), (P,)))


def kalman_probes(rows: TrialRows, A0: np.ndarray, gamma, diffusion, noise, *,
                  skip_empty: bool, lanes: bool = True):
    """Probe values and variances of P Kalman learners over ``rows``.

    A0: (P, n + 1, n) starting [Σ; ŵ] per set (copied; the single learner's layout);
    gamma, diffusion, noise: a number or (P,). Returns (V (P, N, Q), var (P, N, Q),
    A (P, n + 1, n) the end states, status (P,)), or None when the kernels are off.
    lanes: several sets side by side (``batch_kernels.LANES`` at a time: four cost about
    two); False: one after another. The numbers are the same bit for bit.
    """
    kernels = _kernels()
    if kernels is None:
        return None
    A = np.array(A0, dtype=np.float64, order="C")
    P = A.shape[0]
    shape = (P, rows.n_trials, rows.n_probes)
    V, var = np.empty(shape), np.empty(shape)
    status = np.zeros(P, dtype=np.int64)
    kernels.kalman_probes(A, rows.X, rows.r, rows.bounds, rows.probes, rows.has, rows.hptr,
                          rows.hidx, rows.learns, _vector(gamma, P), _vector(diffusion, P),
                          _vector(noise, P), bool(skip_empty), V, var, status, bool(lanes))
    return V, var, A, status


def delta_probes(rows: TrialRows, w0: np.ndarray, alpha, gamma, lam):
    """Probe values of P delta-rule learners (TD(λ); Rescorla–Wagner with γ = λ = 0).

    w0: (P, n) starting weights (copied); alpha: a number, (P,) or (P, n); gamma, lam:
    a number or (P,). Returns (V (P, N, Q), w (P, n), z (P, n) the end weights and
    traces, status (P,)), or None when the kernels are off.
    """
    kernels = _kernels()
    if kernels is None:
        return None
    w = np.array(w0, dtype=np.float64, order="C")
    P, n = w.shape
    a = np.asarray(alpha, dtype=np.float64)
    a = np.ascontiguousarray(np.broadcast_to(a[:, None] if a.ndim == 1 else a, (P, n)))
    g, lam = _vector(gamma, P), _vector(lam, P)
    # γλ as the learner forms it (one product)
    gl = g * lam
    V = np.empty((P, rows.n_trials, rows.n_probes))
    z = np.zeros((P, n))
    status = np.zeros(P, dtype=np.int64)
    kernels.delta_probes(w, z, rows.X, rows.r, rows.bounds, rows.probes, rows.has, a, g, gl,
                         V, status)
    return V, w, z, status


def respond_terms(V: np.ndarray, idx: np.ndarray, neg_sign: np.ndarray, beta: float, theta: float,
                  log_half_lapse: float, log_engaged: float, out: np.ndarray):
    """The go/no-go link's log P(y) of trials ``idx`` (intp) of V into ``out`` in one
    compiled pass (``batch_kernels.respond_terms``: numpy's steps, the same bits); False
    when the kernels are off (the caller then runs the numpy ufuncs)."""
    kernels = _kernels()
    if kernels is None:
        return False
    kernels.respond_terms(V, idx, neg_sign, float(beta), float(theta), float(log_half_lapse),
                          float(log_engaged), out)
    return True


def respond_points(Vs: np.ndarray, which: np.ndarray, beta: np.ndarray, theta: np.ndarray,
                   log_half_lapse: np.ndarray, log_engaged: np.ndarray, idx: np.ndarray,
                   neg_sign: np.ndarray):
    """``respond_terms`` of M points in one compiled pass: point m's log P(y) over the
    trials ``idx`` of Vs[which[m]] (Vs (K, N)) with its β, θ and lapse terms (each (M,)).
    Returns (M, len(idx)) terms, each row the bits ``respond_terms`` gives; None when
    the kernels are off."""
    kernels = _kernels()
    if kernels is None:
        return None
    M = len(which)
    out = np.empty((M, len(idx)))
    inner = np.empty((M, len(idx)))
    kernels.respond_points(np.ascontiguousarray(Vs, dtype=np.float64),
                           np.ascontiguousarray(which, dtype=np.intp),
                           *(np.ascontiguousarray(a, dtype=np.float64)
                             for a in (beta, theta, log_half_lapse, log_engaged)),
                           idx, neg_sign, inner, out)
    return out
