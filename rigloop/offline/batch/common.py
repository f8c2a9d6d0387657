"""What the batched learners share: their result record, argument checks over S subjects,
and the switch between the compiled kernels and the numpy path."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from ...core.learners import _shared as sh
from ...errors import BadArgument

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
            from .. import batch_kernels
        except ImportError:
            batch_kernels = None
        _KERNELS.append(batch_kernels)
    kernels = _KERNELS[0]
    return kernels if kernels is not None and kernels.enabled() else None


def backend() -> str:
    """Which path the Kalman batches take now: 'numba' (compiled kernels) or 'numpy'."""
    return "numpy" if _kernels() is None else "numba"
