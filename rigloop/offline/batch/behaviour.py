"""The animal's behaviour estimates over S subjects: BatchBehaviour, one forward-filter
step per trial for all subjects at once (rigloop.core.behaviour, one subject)."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from ...core.behaviour import DEFAULT_PRIOR_VAR, DEFAULT_SIGMA2, CueEstimate
from ...core.checks import _open_unit
from ...core.curve import _NEWTON_MAX, _NEWTON_TOL, _z_two_sided
from ...core.learners import _shared as sh
from ...errors import BadArgument
from .common import _kernels, _per_subject

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
