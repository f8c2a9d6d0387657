"""Compiled Kalman steps (and behaviour-estimate steps) for ``rigloop.batch``: plain
loops, one subject at a time.

The only module that imports numba (the optional extra ``rigloop[fast]``). Importing it
without numba raises ImportError, and ``rigloop.batch`` then runs its numpy path;
``RIGLOOP_NO_NUMBA=1`` in the environment makes ``enabled()`` False, which forces that
path too (read on every call, so tests can switch between the two).

Each subject runs its steps exactly as ``KalmanTD.learn_trial`` / ``KalmanFilter.update``
do (methods.md §2, §4), with the same in-place symmetric rank-1 correction:

    h = x − γx';  δ = r − hᵀŵ;  Σ⁻ = Σ + τ²I;  u = Σ⁻h/√s,  s = hᵀΣ⁻h + σ_r²;
    Σ ← Σ⁻ − u uᵀ;  ŵ ← ŵ + (δ/√s) u

Working subject by subject keeps one subject's [Σ; ŵ] (8.4 kB at n = 32) in L1 cache for
all of its steps. Products with x and h visit only their non-zero entries (cue rows are
mostly zero); skipping an exact zero term leaves every sum unchanged. The sums run in a
different order from BLAS, so numbers agree with the single learners to rounding (the
tests pin 1e-12). The first call compiles (a few seconds); ``cache=True`` keeps the
machine code on disk beside this file for later processes.

Subjects are independent. By default a call runs them one after another on the calling
thread (``nogil``: callers may run batches in threads of their own). With
``parallel=True`` a large call spreads them over numba's threads (a ``prange``,
``NUMBA_NUM_THREADS``); small calls, calls in a process forked after import (numba's
OpenMP layer is not fork-safe) and calls while another thread holds the threaded kernel
run serially instead, so no thread waits and nothing hangs. The threaded kernel is not
the default: on a shared 2-core machine it measured no faster than the serial one, and
about 2× slower while other processes kept the cores busy (its threads wait on each other).

``behaviour_steps`` is ``BatchBehaviour.update``'s compiled path: each subject's filter
step exactly as ``performance._filter_step`` runs it, bit for bit.
"""

from __future__ import annotations

import math
import os
import threading

import numba
import numpy as np
from numba import njit, prange

ENV_OFF = "RIGLOOP_NO_NUMBA"
# below this many subject-steps, waking the worker threads costs more than it saves
# (measured on 2 cores: a 6-subject learn_steps call)
PARALLEL_MIN_STEPS = 2048

_parallel_lock = threading.Lock()
_forked = [False]
os.register_at_fork(after_in_child=lambda: _forked.__setitem__(0, True))


def enabled() -> bool:
    """True unless the environment sets RIGLOOP_NO_NUMBA to something other than '' / '0'."""
    return os.environ.get(ENV_OFF, "") in ("", "0")


@njit(cache=True, nogil=True)
def _subject(A, X, x_after, r, L, g, tau2, noise, skip_empty, values, errors, variances,
             h, u, nz):
    """L steps of one subject, in place.

    A: (n + 1, n) [Σ; ŵ]; X: (T, n) rows, step t going from X[t] to X[t + 1], and from
    X[L − 1] to x_after (n,); r: (T,); g, tau2, noise: γ, τ², σ_r²; skip_empty: a step
    from an all-zero row reports its error and learns nothing. values, errors, variances
    (T,) receive xᵀŵ, δ and xᵀΣx (before the step's diffusion) for t < L.
    h, u: (n,) and nz: (n,) int scratch.

    Σ is exactly symmetric (the correction keeps it so), so its column j is read as its
    row j, which is contiguous.
    """
    n = A.shape[1]
    for t in range(L):
        x = X[t]
        x_next = X[t + 1] if t + 1 < L else x_after
        # the non-zero entries of x: V(x) = ŵ·x and xᵀΣx over them only
        k = 0
        for i in range(n):
            if x[i] != 0.0:
                nz[k] = i
                k += 1
        v = 0.0
        var = 0.0
        for a in range(k):
            i = nz[a]
            v += x[i] * A[n, i]
            px = 0.0
            for b in range(k):
                j = nz[b]
                px += A[i, j] * x[j]
            var += x[i] * px
        values[t] = v
        variances[t] = var
        if skip_empty and k == 0:
            # featureless state: the error r + γV(x'), nothing learned (kalman_td docstring)
            vn = 0.0
            for i in range(n):
                vn += x_next[i] * A[n, i]
            errors[t] = r[t] + g * vn
            continue
        # h = x − γx' (and its non-zero entries)
        m = 0
        for i in range(n):
            h[i] = x[i] - x_next[i] * g
            if h[i] != 0.0:
                nz[m] = i
                m += 1
        # δ = r − hᵀŵ
        hw = 0.0
        for a in range(m):
            hw += h[nz[a]] * A[n, nz[a]]
        delta = r[t] - hw
        # u ← Σ⁻h = Σh + τ²h  (Σ⁻ = Σ + τ²I; the columns of Σ at h's non-zero entries,
        # read as rows; Σ⁻ itself is formed row by row in the correction below)
        for i in range(n):
            u[i] = tau2 * h[i]
        for a in range(m):
            j = nz[a]
            hj = h[j]
            for i in range(n):
                u[i] += A[j, i] * hj
        # s = hᵀΣ⁻h + σ_r²
        hu = 0.0
        for a in range(m):
            hu += h[nz[a]] * u[nz[a]]
        rs = 1.0 / math.sqrt(hu + noise)
        # u = Σ⁻h/√s,  c = δ/√s  (gain k = u/√s)
        for i in range(n):
            u[i] *= rs
        c = delta * rs
        # Σ ← Σ⁻ − u uᵀ (each entry one exact product: Σ stays exactly symmetric);
        # ŵ ← ŵ + c u.  (Full rows: a loop over the upper triangle alone does half the
        # arithmetic but runs no faster at n = 32, its short rows vectorise poorly.)
        for i in range(n):
            A[i, i] += tau2
            ui = u[i]
            if ui != 0.0:
                for j in range(n):
                    A[i, j] -= ui * u[j]
        for j in range(n):
            A[n, j] += c * u[j]
        errors[t] = delta


def gaussian_steps(A, X, x_after, r, lengths, g, tau2, noise, skip_empty,
                   values, errors, variances, *, parallel: bool = False) -> None:
    """The Kalman steps of S subjects, in place.

    A: (S, n + 1, n) [Σ; ŵ] per subject, updated; X: (S, T, n) rows; x_after: (S, n) the
    row after each subject's last (zero: terminal); r: (S, T); lengths: (S,) intp steps
    per subject (0: untouched); g, tau2, noise: (S,) γ (0 for the reward learner), τ²,
    σ_r²; skip_empty: bool. values, errors, variances: (S, T), written for t < lengths[s].
    Every array float64 and C-contiguous (lengths intp). parallel: use the threaded
    kernel where it is safe and the call is large enough (same numbers, bit for bit).
    """
    args = (A, X, x_after, r, lengths, g, tau2, noise, skip_empty, values, errors, variances)
    big = X.shape[0] > 1 and X.shape[0] * X.shape[1] >= PARALLEL_MIN_STEPS
    if (parallel and big and not _forked[0] and numba.get_num_threads() > 1
            and _parallel_lock.acquire(blocking=False)):
        try:
            _steps_parallel(*args)
        finally:
            _parallel_lock.release()
    else:
        _steps_serial(*args)


@njit(cache=True, nogil=True)
def _steps_serial(A, X, x_after, r, lengths, g, tau2, noise, skip_empty,
                  values, errors, variances):
    S, _, n = X.shape
    h, u, nz = np.empty(n), np.empty(n), np.empty(n, dtype=np.intp)
    for s in range(S):
        _subject(A[s], X[s], x_after[s], r[s], lengths[s], g[s], tau2[s], noise[s],
                 skip_empty, values[s], errors[s], variances[s], h, u, nz)


@njit(cache=True, nogil=True, parallel=True)
def _steps_parallel(A, X, x_after, r, lengths, g, tau2, noise, skip_empty,
                    values, errors, variances):
    S, _, n = X.shape
    for s in prange(S):
        h, u, nz = np.empty(n), np.empty(n), np.empty(n, dtype=np.intp)
        _subject(A[s], X[s], x_after[s], r[s], lengths[s], g[s], tau2[s], noise[s],
                 skip_empty, values[s], errors[s], variances[s], h, u, nz)



@njit(cache=True, nogil=True)
def behaviour_steps(x, var, n, held, cue, y, sigma2, newton_max, tol) -> None:
    """One forward-filter step of each observed subject's estimate of its cue, in place.

    x, var: (S, C) float64 logit modes and variances; n: (S, C) int64 counts; held:
    (S, C) bool, set where an estimate now exists; cue: (S,) intp; y: (S,) float64, 1.0,
    0.0 or nan (not observed: skipped); sigma2: (S,). Subject s runs
    ``performance._filter_step(x, var, y, 0.0, sigma2)`` operation for operation (the
    same bracket, Newton step, bisection fallback and tolerance; ``math.exp`` is the C
    library's, as Python's is), so the numbers are the scalar filter's bit for bit.
    """
    for s in range(y.shape[0]):
        ys = y[s]
        if ys != ys:
            continue
        j = cue[s]
        xs = x[s, j]
        var_pred = var[s, j] + sigma2[s]
        if ys == 1.0:
            lo, hi = xs, xs + var_pred
        else:
            lo, hi = xs - var_pred, xs
        z = xs
        for _ in range(newton_max):
            # p = logistic(z)  (mu = 0)
            if z >= 0.0:
                p = 1.0 / (1.0 + math.exp(-z))
            else:
                e = math.exp(z)
                p = e / (1.0 + e)
            f = z - xs - var_pred * (ys - p)
            if f > 0.0:
                hi = z
            else:
                lo = z
            step = f / (1.0 + var_pred * p * (1.0 - p))
            z_new = z - step
            if not (lo <= z_new and z_new <= hi):
                z_new = 0.5 * (lo + hi)
            if abs(z_new - z) <= tol * (1.0 + abs(z)):
                z = z_new
                break
            z = z_new
        if z >= 0.0:
            p = 1.0 / (1.0 + math.exp(-z))
        else:
            e = math.exp(z)
            p = e / (1.0 + e)
        x[s, j] = z
        var[s, j] = 1.0 / (1.0 / var_pred + p * (1.0 - p))
        n[s, j] += 1
        held[s, j] = True


# --------------------------------------------------------------------------- fit trajectories
#
# The value trajectory a fit needs: before each of a subject's trials, the value (and
# variance) of a few probe rows (the trial's onset row; or the rows of its cue with each
# side), for P parameter sets at once (optimiser points, starts). ``rigloop.batch.onsets``
# packs the rows and calls these. Each parameter set runs the single learner's steps in
# order (methods.md §2, §4 for the Kalman learners; Sutton & Barto 2018 Ch. 12 for TD(λ);
# Rescorla & Wagner 1972), the sums over non-zero entries only, so the numbers agree
# with the learners to rounding (their BLAS dots sum in another order).
#
# Status per parameter set: 0 fine; 1 a prediction error was not finite; 2 the
# innovation variance hᵀΣ⁻h + σ_r² was not a finite number > 0 (the cases in which the
# learners raise BadArgument). A failed set stops at that step; its outputs are partial.


@njit(cache=True, nogil=True)
def _kalman_probes(A, X, r, bounds, probes, has, hptr, hidx, learns, g, tau2, noise, skip_empty,
                   V, var, h, u, nzu):
    """One parameter set's Kalman (TD) trials, in place; returns the status.

    A: (n + 1, n) [Σ; ŵ], the starting state, left at the end state. X: (R, n) every
    trial's rows stacked; r: (R,); bounds: (N + 1,) trial k owns rows bounds[k] to
    bounds[k + 1] (the row after its last is terminal, all zero); probes: (N, Q, n) rows
    read before trial k where has[k]. hptr (R + 1,), hidx: the entries of row t where x
    or the next row x' is non-zero, hidx[hptr[t]:hptr[t + 1]] in index order (where
    h = x − γx' can be non-zero); learns (R,): x has a non-zero entry. g, tau2, noise:
    γ (0 for the reward learner), τ², σ_r². skip_empty: a featureless row learns nothing
    (Kalman TD) or is observed (the filter). V, var: (N, Q) receive xᵀŵ and xᵀΣx of each
    probe (nan where not has[k]). h, u: (n,) and nzu: (n,) intp scratch.

    Sums run over h's possible non-zero entries; where h is zero after all (γ = 0, or
    x = γx') the term is an exact zero and leaves the sum as it was.
    """
    n = A.shape[1]
    N, Q = has.shape[0], probes.shape[1]
    for k in range(N):
        for q in range(Q):
            if has[k]:
                x = probes[k, q]
                v = 0.0
                vv = 0.0
                for i in range(n):
                    xi = x[i]
                    if xi != 0.0:
                        v += xi * A[n, i]
                        px = 0.0
                        for j in range(n):
                            if x[j] != 0.0:
                                px += A[i, j] * x[j]
                        vv += xi * px
                V[k, q] = v
                var[k, q] = vv
            else:
                V[k, q] = math.nan
                var[k, q] = math.nan
        last = bounds[k + 1]
        for t in range(bounds[k], last):
            if skip_empty and not learns[t]:
                continue
            a0, a1 = hptr[t], hptr[t + 1]
            # h = x − γx' (x' the next row of the trial, zero after its last); δ = r − hᵀŵ
            hw = 0.0
            for a in range(a0, a1):
                i = hidx[a]
                xn = X[t + 1, i] if t + 1 < last else 0.0
                hi = X[t, i] - xn * g
                h[i] = hi
                hw += hi * A[n, i]
            delta = r[t] - hw
            if not math.isfinite(delta):
                return 1
            # Σ⁻ = Σ + τ²I, then u ← Σ⁻h (the learner's order: diffuse, then multiply;
            # Σ⁻'s column j read as its row j, Σ⁻ being exactly symmetric)
            if tau2 != 0.0:
                for i in range(n):
                    A[i, i] += tau2
            for i in range(n):
                u[i] = 0.0
            for a in range(a0, a1):
                j = hidx[a]
                hj = h[j]
                for i in range(n):
                    u[i] += A[j, i] * hj
            # s = hᵀΣ⁻h + σ_r²
            hu = 0.0
            for a in range(a0, a1):
                i = hidx[a]
                hu += h[i] * u[i]
            s = hu + noise
            if not (0.0 < s and s < math.inf):
                return 2
            rs = 1.0 / math.sqrt(s)
            # u = Σ⁻h/√s, and its non-zero entries (Σ couples only features that have
            # shared an observation, so u is often short)
            q = 0
            for i in range(n):
                u[i] *= rs
                if u[i] != 0.0:
                    nzu[q] = i
                    q += 1
            c = delta * rs
            # Σ ← Σ⁻ − u uᵀ (each entry one exact product: Σ stays exactly symmetric;
            # a zero product changes nothing); ŵ ← ŵ + (δ/√s) u
            for a in range(q):
                i = nzu[a]
                ui = u[i]
                for b in range(q):
                    j = nzu[b]
                    A[i, j] -= ui * u[j]
                A[n, i] += c * ui
    return 0


# Sets side by side: ``_kalman_lanes`` runs LANES parameter sets through the same rows at
# once, every number of ``_kalman_probes`` becoming LANES numbers (the set innermost).
# The sets' steps are independent chains, so the processor overlaps them: four sets
# cost about twice one (tools/bench/fit.py; a numerical gradient needs 1 + the learner's
# free parameters, and a step of one set waits on its square root and division). Each
# set's numbers are ``_kalman_probes``'s bit for bit (the same operations in the same
# order; the union of the sets' non-zero entries of u adds exact zeros to a set where
# its own entry is zero). tests/test_fit_fast.py pins that. The hot loops are written
# out for the four lanes (x0 .. x3), so that the SLP vectoriser (below) finds them.

LANES = 4  # _kalman_lanes writes its hot loops out for exactly four


@njit(cache=True, nogil=True)
def _kalman_lanes(A, X, r, bounds, probes, has, hptr, hidx, learns, g, tau2, noise, skip_empty,
                  V, var, status, h, u, nzu, hw, hu, rs):
    """LANES parameter sets' Kalman (TD) trials side by side, in place.

    A: (n + 1, n, LANES) [Σ; ŵ] with the set innermost; g, tau2, noise: (LANES,); V, var:
    (LANES, N, Q); status: (LANES,) int64, 0 on entry, set at a set's first failure
    (that set's later numbers are then meaningless, as ``_kalman_probes``'s partial
    outputs are). h, u: (n, LANES); nzu: (n,) intp; hw, hu, rs: (LANES,) scratch.
    """
    n = A.shape[1]
    N, Q = has.shape[0], probes.shape[1]
    for k in range(N):
        for q in range(Q):
            if has[k]:
                x = probes[k, q]
                for p in range(LANES):
                    hw[p] = 0.0
                    hu[p] = 0.0
                for i in range(n):
                    xi = x[i]
                    if xi != 0.0:
                        for p in range(LANES):
                            hw[p] += xi * A[n, i, p]
                            rs[p] = 0.0
                        for j in range(n):
                            xj = x[j]
                            if xj != 0.0:
                                for p in range(LANES):
                                    rs[p] += A[i, j, p] * xj
                        for p in range(LANES):
                            hu[p] += xi * rs[p]
                for p in range(LANES):
                    V[p, k, q] = hw[p]
                    var[p, k, q] = hu[p]
            else:
                for p in range(LANES):
                    V[p, k, q] = math.nan
                    var[p, k, q] = math.nan
        last = bounds[k + 1]
        for t in range(bounds[k], last):
            if skip_empty and not learns[t]:
                continue
            a0, a1 = hptr[t], hptr[t + 1]
            # h = x − γx'; δ = r − hᵀŵ (held in hw)
            for p in range(LANES):
                hw[p] = 0.0
            for a in range(a0, a1):
                i = hidx[a]
                xi = X[t, i]
                xn = X[t + 1, i] if t + 1 < last else 0.0
                for p in range(LANES):
                    hi = xi - xn * g[p]
                    h[i, p] = hi
                    hw[p] += hi * A[n, i, p]
            rt = r[t]
            for p in range(LANES):
                hw[p] = rt - hw[p]
                if status[p] == 0 and not math.isfinite(hw[p]):
                    status[p] = 1
            # Σ⁻ = Σ + τ²I (τ² = 0 adds an exact zero to a positive variance), u ← Σ⁻h
            t0, t1, t2, t3 = tau2[0], tau2[1], tau2[2], tau2[3]
            for i in range(n):
                A[i, i, 0] += t0
                A[i, i, 1] += t1
                A[i, i, 2] += t2
                A[i, i, 3] += t3
                u[i, 0] = 0.0
                u[i, 1] = 0.0
                u[i, 2] = 0.0
                u[i, 3] = 0.0
            for a in range(a0, a1):
                j = hidx[a]
                h0, h1, h2, h3 = h[j, 0], h[j, 1], h[j, 2], h[j, 3]
                for i in range(n):
                    u[i, 0] += A[j, i, 0] * h0
                    u[i, 1] += A[j, i, 1] * h1
                    u[i, 2] += A[j, i, 2] * h2
                    u[i, 3] += A[j, i, 3] * h3
            # s = hᵀΣ⁻h + σ_r²
            for p in range(LANES):
                hu[p] = 0.0
            for a in range(a0, a1):
                i = hidx[a]
                for p in range(LANES):
                    hu[p] += h[i, p] * u[i, p]
            for p in range(LANES):
                s = hu[p] + noise[p]
                if status[p] == 0 and not (0.0 < s and s < math.inf):
                    status[p] = 2
                rs[p] = 1.0 / math.sqrt(s) if s > 0.0 else 0.0
            # u = Σ⁻h/√s and the union of the sets' non-zero entries
            m = 0
            r0, r1, r2, r3 = rs[0], rs[1], rs[2], rs[3]
            for i in range(n):
                v0 = u[i, 0] * r0
                v1 = u[i, 1] * r1
                v2 = u[i, 2] * r2
                v3 = u[i, 3] * r3
                u[i, 0] = v0
                u[i, 1] = v1
                u[i, 2] = v2
                u[i, 3] = v3
                if v0 != 0.0 or v1 != 0.0 or v2 != 0.0 or v3 != 0.0:
                    nzu[m] = i
                    m += 1
            for p in range(LANES):
                hw[p] *= rs[p]
            # Σ ← Σ⁻ − u uᵀ;  ŵ ← ŵ + (δ/√s) u
            c0, c1, c2, c3 = hw[0], hw[1], hw[2], hw[3]
            for a in range(m):
                i = nzu[a]
                u0, u1, u2, u3 = u[i, 0], u[i, 1], u[i, 2], u[i, 3]
                for b in range(m):
                    j = nzu[b]
                    w0, w1, w2, w3 = u[j, 0], u[j, 1], u[j, 2], u[j, 3]
                    A[i, j, 0] -= u0 * w0
                    A[i, j, 1] -= u1 * w1
                    A[i, j, 2] -= u2 * w2
                    A[i, j, 3] -= u3 * w3
                A[n, i, 0] += c0 * u0
                A[n, i, 1] += c1 * u1
                A[n, i, 2] += c2 * u2
                A[n, i, 3] += c3 * u3


# LLVM's SLP vectoriser packs independent scalar operations side by side into vector
# instructions: the four parameter sets of ``_kalman_lanes``, written out lane by lane,
# become one vector operation each (about a fifth off a fit's kernel time, measured in
# tools/bench/fit.py). numba leaves that pass off by default; it only groups operations,
# never reorders a sum or fuses a multiply-add, so every number stays the same bit for
# bit (tests/test_fit_fast.py). It is on only while ``kalman_probes`` compiles (numba
# reads the setting then): the one-subject kernels above measured a few per cent slower
# with it (tools/bench/replay_batch.py). NUMBA_SLP_VECTORIZE in the environment decides
# when it is set.
_SLP_FOR_LANES = "NUMBA_SLP_VECTORIZE" not in os.environ


def kalman_probes(A, X, r, bounds, probes, has, hptr, hidx, learns, g, tau2, noise, skip_empty,
                  V, var, status, lanes):
    """``_kalman_probes_sets``, compiled (on its first call, or loaded from the disk cache)
    with the SLP vectoriser on."""
    if not _SLP_FOR_LANES:
        return _kalman_probes_sets(A, X, r, bounds, probes, has, hptr, hidx, learns, g, tau2,
                                   noise, skip_empty, V, var, status, lanes)
    before = numba.config.SLP_VECTORIZE
    numba.config.SLP_VECTORIZE = 1
    try:
        return _kalman_probes_sets(A, X, r, bounds, probes, has, hptr, hidx, learns, g, tau2,
                                   noise, skip_empty, V, var, status, lanes)
    finally:
        numba.config.SLP_VECTORIZE = before


@njit(cache=True, nogil=True)
def _kalman_probes_sets(A, X, r, bounds, probes, has, hptr, hidx, learns, g, tau2, noise,
                        skip_empty, V, var, status, lanes):
    """``_kalman_probes`` for P parameter sets: A (P, n + 1, n); g, tau2, noise (P,);
    V, var (P, N, Q); status (P,) int64 receives each set's status. lanes: run them
    LANES at a time side by side (``_kalman_lanes``; a last group of one runs alone,
    a short last group fills its spare lanes with copies of its first set); the same
    numbers either way."""
    P = A.shape[0]
    n1, n = A.shape[1], A.shape[2]
    N, Q = has.shape[0], probes.shape[1]
    h, u = np.empty(n), np.empty(n)
    nzu = np.empty(n, dtype=np.intp)
    start = 0
    if lanes and P > 1:
        At = np.empty((n1, n, LANES))
        gl, tl, nl = np.empty(LANES), np.empty(LANES), np.empty(LANES)
        Vl, vl = np.empty((LANES, N, Q)), np.empty((LANES, N, Q))
        sl = np.zeros(LANES, dtype=np.int64)
        hl, ul = np.empty((n, LANES)), np.empty((n, LANES))
        hw, hu, rs = np.empty(LANES), np.empty(LANES), np.empty(LANES)
        while P - start >= 2:
            for p in range(LANES):
                src = start + p if start + p < P else start
                gl[p], tl[p], nl[p] = g[src], tau2[src], noise[src]
                sl[p] = 0
                for i in range(n1):
                    for j in range(n):
                        At[i, j, p] = A[src, i, j]
            _kalman_lanes(At, X, r, bounds, probes, has, hptr, hidx, learns, gl, tl, nl,
                          skip_empty, Vl, vl, sl, hl, ul, nzu, hw, hu, rs)
            for p in range(min(LANES, P - start)):
                status[start + p] = sl[p]
                for i in range(n1):
                    for j in range(n):
                        A[start + p, i, j] = At[i, j, p]
                V[start + p] = Vl[p]
                var[start + p] = vl[p]
            start += LANES
    for p in range(start, P):
        status[p] = _kalman_probes(A[p], X, r, bounds, probes, has, hptr, hidx, learns, g[p],
                                   tau2[p], noise[p], skip_empty, V[p], var[p], h, u, nzu)


@njit(cache=True, nogil=True)
def _delta_probes(w, z, X, r, bounds, probes, has, alpha, g, gl, V, nz):
    """One parameter set's delta-rule trials (TD(λ); Rescorla–Wagner is γ = λ = 0), in
    place; returns the status.

    w, z: (n,) weights (the start, left at the end) and trace (reset at each trial's
    start, as ``TD.learn_trial`` does); alpha: (n,) rates; g: γ; gl: γλ (0: z = x).
    Per step δ = r + γ wᵀx' − wᵀx, z ← γλz + x, w ← w + (α δ) z. V: (N, Q) probe values.
    """
    n = w.shape[0]
    N, Q = has.shape[0], probes.shape[1]
    for k in range(N):
        for q in range(Q):
            if has[k]:
                x = probes[k, q]
                v = 0.0
                for i in range(n):
                    if x[i] != 0.0:
                        v += x[i] * w[i]
                V[k, q] = v
            else:
                V[k, q] = math.nan
        for i in range(n):
            z[i] = 0.0
        last = bounds[k + 1]
        for t in range(bounds[k], last):
            x = X[t]
            v = 0.0
            for i in range(n):
                if x[i] != 0.0:
                    v += x[i] * w[i]
            vn = 0.0
            if g != 0.0 and t + 1 < last:
                for i in range(n):
                    if X[t + 1, i] != 0.0:
                        vn += X[t + 1, i] * w[i]
            delta = r[t] + g * vn - v
            if not math.isfinite(delta):
                return 1
            # z ← γλz + x  (γλ = 0: z = x)
            m = 0
            for i in range(n):
                z[i] = z[i] * gl + x[i] if gl != 0.0 else x[i]
                if z[i] != 0.0:
                    nz[m] = i
                    m += 1
            # w ← w + (α δ) z
            for a in range(m):
                i = nz[a]
                w[i] += alpha[i] * delta * z[i]
    return 0


@njit(cache=True, nogil=True)
def delta_probes(w, z, X, r, bounds, probes, has, alpha, g, gl, V, status):
    """``_delta_probes`` for P parameter sets: w, z (P, n); alpha (P, n); g, gl (P,);
    V (P, N, Q); status (P,) int64."""
    nz = np.empty(X.shape[1], dtype=np.intp)
    for p in range(w.shape[0]):
        status[p] = _delta_probes(w[p], z[p], X, r, bounds, probes, has, alpha[p], g[p],
                                  gl[p], V[p], nz)


# --------------------------------------------------------------------------- go/no-go terms

_LOGE2 = 0.693147180559945309417232121458176568  # log 2, as numpy's NPY_LOGE2
# Beyond this gap the smaller term cannot move the larger one (when that is >= 0.1 in
# size): log1p(e^(−41)) <= e^(−41) ≈ 1.6e-18, below half the spacing of doubles next to
# any |x| >= 0.1 (0.1 · 2^−54 ≈ 5.5e-18), so x + log1p(e^(−gap)) rounds to x exactly
_NEGLIGIBLE_GAP = 41.0
_NEGLIGIBLE_FROM = 0.1


@njit(cache=True, nogil=True)
def _logaddexp(x, y):
    """log(eˣ + eʸ) by numpy's own steps (npy_logaddexp: the C library's exp and log1p),
    so the same bits as ``np.logaddexp``; where the gap makes the correction round away
    (``_NEGLIGIBLE_GAP``) the larger term is returned without calling exp and log1p,
    which is the number those steps give."""
    if x == y:
        return x + _LOGE2
    tmp = x - y
    if tmp > 0.0:
        if tmp > _NEGLIGIBLE_GAP and abs(x) >= _NEGLIGIBLE_FROM:
            return x
        return x + math.log1p(math.exp(-tmp))
    elif tmp <= 0.0:
        if tmp < -_NEGLIGIBLE_GAP and abs(y) >= _NEGLIGIBLE_FROM:
            return y
        return y + math.log1p(math.exp(tmp))
    return tmp


@njit(cache=True, nogil=True)
def logaddexp_many(x, y, out):
    """``_logaddexp`` elementwise into out (tests hold it to ``np.logaddexp``'s bits)."""
    for k in range(x.shape[0]):
        out[k] = _logaddexp(x[k], y[k])


@njit(cache=True, nogil=True)
def respond_terms(V, idx, neg_sign, beta, theta, log_half_lapse, log_engaged, out):
    """log P(y_k) of the go/no-go link for the trials ``idx`` of V, into out (len(idx),):
    z = β(V − θ); log p = logaddexp(log(lapse/2), log(1 − lapse) − logaddexp(0, −sign·z)),
    the operations of ``core.responses.log_lik_respond`` in its order, bit for bit."""
    for k in range(idx.shape[0]):
        z = beta * (V[idx[k]] - theta)
        z = neg_sign[k] * z
        out[k] = _logaddexp(log_half_lapse, log_engaged - _logaddexp(0.0, z))


@njit(cache=True, nogil=True)
def respond_points(Vs, which, beta, theta, log_half_lapse, log_engaged, idx, neg_sign, inner, out):
    """``respond_terms`` for M points at once: point m reads the values Vs[which[m]] (Vs
    (K, N)) with its own β, θ and lapse terms (M,), its log P(y_k) into out[m] (M,
    len(idx)); inner (M, len(idx)) scratch holds logaddexp(0, −sign·z). A point with
    the same values, β and θ as an earlier one (a step in the lapse alone) reuses that
    point's inner terms: the same numbers, half the exp/log1p calls."""
    M, K = which.shape[0], idx.shape[0]
    for m in range(M):
        same = -1
        for e in range(m):
            if which[e] == which[m] and beta[e] == beta[m] and theta[e] == theta[m]:
                same = e
                break
        if same >= 0:
            for k in range(K):
                inner[m, k] = inner[same, k]
        else:
            V = Vs[which[m]]
            b, th = beta[m], theta[m]
            for k in range(K):
                z = b * (V[idx[k]] - th)
                z = neg_sign[k] * z
                inner[m, k] = _logaddexp(0.0, z)
        lh, le = log_half_lapse[m], log_engaged[m]
        for k in range(K):
            out[m, k] = _logaddexp(lh, le - inner[m, k])
