"""The fit's value trajectory on the compiled batch engine, and many parameter sets at once.

``likelihood.onset_values`` (and ``_values``) spend a fit's time: every evaluation of the
likelihood reruns the learner over all of a subject's trials. Here the same trajectory
runs through ``rigloop.batch.onsets`` (compiled loops over the packed trials, the
learner's steps in order), so an evaluation costs well under a millisecond for
thousands of trials instead of tens of milliseconds in the per-trial learner:

  onset_values_fast(data, learner, with_sd)   one learner, as ``likelihood._values``
                                              does it, the learner left at its end state;
                                              None when the engine is off or the learner
                                              is not one it knows (the caller then runs
                                              the readable per-trial path)
  side_values_fast(data, learner)             the same for ``likelihood.side_values``
                                              (two-choice: each side's value of the cue)
  batch_values(data, name, params, probe)     P parameter sets in one call (optimiser
                                              points, starts); None when the engine is off

Agreement: to about 1e-12, not bit for bit. The learners' dot products are BLAS sums
whose order is BLAS's own; the kernels add only non-zero terms in index order, and
form Σ⁻h as Σh + τ²h rather than (Σ + τ²I)h. Each difference is a rounding of one
step (tests/test_fit_fast.py pins the agreement over whole fits).

With the kernels off (numba missing, RIGLOOP_NO_NUMBA=1) both return None and the
callers run the learners themselves, so results never depend on numba being there.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from ..core.learners import LEARNERS, TD, KalmanFilter, KalmanTD, RescorlaWagner, make_learner
from ..core.learners import _shared as sh
from ..errors import BadArgument
from ..offline.batch.onsets import FAILURES, OK, TrialRows, delta_probes, kalman_probes, pack_trials
from .data import FitData

# packed trials per (FitData, probe kind), by identity (FitData is immutable; holding
# it keeps its id)
_PACKED: dict[tuple[int, str], tuple[FitData, TrialRows]] = {}
_PACKED_MAX = 64


def trial_rows(data: FitData, probe: str = "onset") -> TrialRows:
    """``data``'s trials packed for the kernels (made once per FitData and probe):
    probe ``onset`` reads each trial's onset row, ``sides`` its cue's (left, right) rows."""
    key = (id(data), probe)
    hit = _PACKED.get(key)
    if hit is not None and hit[0] is data:
        return hit[1]
    n = data.representation.n_features
    N = data.n_events
    if probe == "onset":
        has = data.onset_index >= 0
        probes = np.zeros((N, 1, n))
        probes[has, 0] = data.X_all[data.onset_index[has]]
    else:
        sides = data.side_rows or (None,) * N
        has = np.array([pair is not None for pair in sides], dtype=bool)
        probes = np.zeros((N, 2, n))
        for k, pair in enumerate(sides):
            if pair is not None:
                probes[k] = pair
    lengths = [X.shape[0] for X, _ in data.rows]
    rows = pack_trials(data.X_all, data.r_all, lengths, probes, has)
    if len(_PACKED) >= _PACKED_MAX:
        _PACKED.clear()
    _PACKED[key] = (data, rows)
    return rows


def _run(data: FitData, learner, probe: str):
    """(V (N, Q), var (N, Q) or None) of one learner through the kernels, the learner left
    at its end state; None when the kernels are off or the learner is not a shipped one."""
    kind = type(learner)
    if kind not in (KalmanTD, KalmanFilter, TD, RescorlaWagner) or data.n_events == 0:
        return None
    rows = trial_rows(data, probe)
    if kind in (KalmanTD, KalmanFilter):
        got = kalman_probes(rows, learner._A[None], learner.gamma if kind is KalmanTD else 0.0,
                            learner.diffusion, learner.noise, skip_empty=kind is KalmanTD)
        if got is None:
            return None
        V, var, A, status = got
        _raise_on(status[0])
        learner._A[...] = A[0]
        return V[0], var[0]
    td = kind is TD
    alpha = learner.alpha
    alpha = alpha[None] if isinstance(alpha, np.ndarray) else alpha
    got = delta_probes(rows, learner.w[None], alpha, learner.gamma if td else 0.0,
                       learner.lam if td else 0.0)
    if got is None:
        return None
    V, w, z, status = got
    _raise_on(status[0])
    learner.w[...] = w[0]
    if td:
        learner.z[...] = z[0]
    return V[0], None


def onset_values_fast(data: FitData, learner, with_sd: bool = False):
    """(V, sd) as ``likelihood._values`` returns them (sd None unless ``with_sd`` and a
    Bayesian learner), through the kernels; ``learner`` ends after the last trial.

    None when the kernels are off or ``learner`` is not exactly one of the four shipped
    learners. Raises BadArgument where the learner would (a non-finite error, a bad
    innovation variance)."""
    got = _run(data, learner, "onset")
    if got is None:
        return None
    V, var = got
    V = V[:, 0].copy()
    if not (with_sd and var is not None):
        return V, None
    sd = np.sqrt(np.maximum(var[:, 0], 0.0))
    sd[np.isnan(V)] = math.nan
    return V, sd


def side_values_fast(data: FitData, learner):
    """(Q_L, Q_R) as ``likelihood.side_values`` returns them, through the kernels (None
    when they are off); ``learner`` ends after the last trial."""
    if data.side_rows is None:
        return None
    got = _run(data, learner, "sides")
    if got is None:
        return None
    V = got[0]
    return V[:, 0].copy(), V[:, 1].copy()


def _raise_on(status: int) -> None:
    if status != OK:
        raise BadArgument("params", "learner parameters whose values stay finite on these trials",
                          sh._Shown(FAILURES[int(status)]))


def batch_values(data: FitData, learner_name: str, params: Sequence[Mapping[str, Any]],
                 probe: str = "onset"):
    """Probe values of ``learner_name`` at each of P parameter sets, each learner fresh.

    params: P mappings of learner parameters (the learner's defaults where missing;
    other keys are ignored). Returns (V (P, N, Q), ok (P,) bool: False where the
    learner overflowed, its rows then nan), or None when the kernels are off (the
    caller then runs ``likelihood.onset_values`` per set).
    """
    names = LEARNERS[learner_name]._param_names
    n = data.representation.n_features
    learners = [make_learner(learner_name, n, **{k: v for k, v in p.items() if k in names})
                for p in params]
    P, N = len(learners), data.n_events
    rows = trial_rows(data, probe)
    out = np.full((P, N, rows.n_probes), math.nan)
    ok = np.ones(P, dtype=bool)
    if P == 0 or N == 0:
        return out, ok
    first = learners[0]
    if isinstance(first, (KalmanTD, KalmanFilter)):
        td = isinstance(first, KalmanTD)
        got = kalman_probes(rows, np.stack([lr._A for lr in learners]),
                            [lr.gamma if td else 0.0 for lr in learners],
                            [lr.diffusion for lr in learners], [lr.noise for lr in learners],
                            skip_empty=td)
    else:
        td = isinstance(first, TD)
        alpha = np.stack([np.broadcast_to(np.asarray(lr.alpha, dtype=np.float64), (n,))
                          for lr in learners])
        got = delta_probes(rows, np.zeros((P, n)), alpha,
                           [lr.gamma if td else 0.0 for lr in learners],
                           [lr.lam if td else 0.0 for lr in learners])
    if got is None:
        return None
    V, status = got[0], got[-1]
    ok = status == OK
    out[ok] = V[ok]
    return out, ok
