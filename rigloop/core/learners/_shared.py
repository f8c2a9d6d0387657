"""Shared pieces of the learners: argument checks, the trial result, the common base.

The checks here are the slow, thorough path. The learners' ``update`` methods accept a
float64 row of the right shape without calling them and check finiteness through the
scalar prediction error instead (a NaN or inf anywhere in a row makes it non-finite),
so validation costs almost nothing per time step; only a row that is not already a
float64 array of the right shape, or a non-finite result, takes the slow path here.
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any, ClassVar

import numpy as np

from ...errors import BadArgument

F64 = np.dtype(np.float64)


class _Shown:
    """Text shown verbatim after 'got' in an error message (e.g. ``shape (3,)``)."""

    __slots__ = ("text",)

    def __init__(self, text: str):
        self.text = text

    def __repr__(self) -> str:
        return self.text


# --------------------------------------------------------------------------- scalars


def _real(value: Any) -> float | None:
    """``value`` as a float if it is a real number (not a bool), else None."""
    if isinstance(value, np.ndarray) and value.ndim == 0:
        value = value[()]
    if isinstance(value, (bool, np.bool_)) or not isinstance(value, numbers.Real):
        return None
    return float(value)


def count(name: str, value: Any, minimum: int = 1) -> int:
    """A whole number >= ``minimum``."""
    if isinstance(value, (bool, np.bool_)) or not isinstance(value, numbers.Integral):
        raise BadArgument(name, f"a whole number >= {minimum}", value)
    if value < minimum:
        raise BadArgument(name, f"a whole number >= {minimum}", value)
    return int(value)


def nonnegative(name: str, value: Any) -> float:
    """A finite number >= 0 (learning rates, variances that may vanish)."""
    out = _real(value)
    if out is None or not math.isfinite(out) or out < 0.0:
        raise BadArgument(name, "a finite number >= 0", value)
    return out


def positive(name: str, value: Any) -> float:
    """A finite number > 0 (the observation variance, which divides)."""
    out = _real(value)
    if out is None or not math.isfinite(out) or out <= 0.0:
        raise BadArgument(name, "a finite number > 0", value)
    return out


def unit(name: str, value: Any) -> float:
    """A number in [0, 1] (discount, trace decay)."""
    out = _real(value)
    if out is None or not 0.0 <= out <= 1.0:
        raise BadArgument(name, "a number in [0, 1]", value)
    return out


def reward(name: str, value: Any) -> float:
    """A finite number (a reward on one observation)."""
    out = _real(value)
    if out is None or not math.isfinite(out):
        raise BadArgument(name, "a finite number", value)
    return out


def rate(name: str, value: Any, n: int) -> float | np.ndarray:
    """A learning rate: a finite number >= 0, or a read-only (n,) array of them."""
    if isinstance(value, (list, tuple, np.ndarray)) and np.ndim(value) > 0:
        expected = f"a finite number >= 0 or an array of shape ({n},) of them"
        try:
            arr = np.array(value, dtype=np.float64)
        except (TypeError, ValueError):
            raise BadArgument(name, expected, value) from None
        if arr.shape != (n,):
            raise BadArgument(name, expected, _Shown(f"shape {arr.shape}"))
        if not np.all(np.isfinite(arr)) or np.any(arr < 0.0):
            raise BadArgument(name, "finite numbers >= 0", value)
        arr.setflags(write=False)
        return arr
    return nonnegative(name, value)


def rate_copy(value: float | np.ndarray) -> float | np.ndarray:
    """A checked learning rate for another learner: a float as is, an array copied (read-only)."""
    if isinstance(value, np.ndarray):
        value = value.copy()
        value.setflags(write=False)
    return value


def constant(value: float | np.ndarray) -> np.ndarray:
    """``value`` as an array no one can write to (not even by turning its flag back on),
    so learners and their copies can share it."""
    arr = np.array(value, dtype=np.float64)
    arr.setflags(write=False)
    view = arr.view()
    view.setflags(write=False)
    return view


def plain(value: float | np.ndarray) -> float | list[float]:
    """A parameter as plain Python data (float, or list of floats)."""
    return value.tolist() if isinstance(value, np.ndarray) else float(value)


# --------------------------------------------------------------------------- the delta rule


def add_scaled(w: np.ndarray, alpha: Any, scalar: bool, v: np.ndarray, delta: float, tmp: np.ndarray) -> None:
    """w ← w + α δ v in place (α a scalar, or per feature); ``tmp`` is an (n,) scratch buffer.

    The point learners' one update: Rescorla–Wagner with v = x, TD(λ) with v = its trace z.
    """
    if scalar:
        np.multiply(v, alpha * delta, out=tmp)
    else:
        np.multiply(alpha, delta, out=tmp)
        np.multiply(tmp, v, out=tmp)
    np.add(w, tmp, out=w)


# --------------------------------------------------------------------------- arrays


def _array(name: str, value: Any, shape: tuple[int, ...], what: str) -> np.ndarray:
    try:
        arr = np.asarray(value, dtype=np.float64)
    except (TypeError, ValueError):
        raise BadArgument(name, f"{what} of shape {shape}", value) from None
    if arr.shape != shape:
        raise BadArgument(name, f"{what} of shape {shape}", _Shown(f"shape {arr.shape}"))
    if not np.isfinite(arr).all():
        raise BadArgument(name, f"{what} of shape {shape} with finite entries", _first_bad(arr))
    return arr


def _first_bad(arr: np.ndarray) -> _Shown:
    """'nan at index 2' for the first non-finite entry of ``arr``."""
    index = tuple(int(i) for i in np.argwhere(~np.isfinite(arr))[0])
    where = index[0] if len(index) == 1 else index
    return _Shown(f"{float(arr[index])!r} at index {where}")


def row(name: str, value: Any, n: int) -> np.ndarray:
    """A finite feature row: float64 array of shape (n,)."""
    return _array(name, value, (n,), "a float array")


def rows(name: str, value: Any, n: int) -> np.ndarray:
    """Finite feature rows: float64 array of shape (T, n)."""
    try:
        arr = np.asarray(value, dtype=np.float64)
    except (TypeError, ValueError):
        raise BadArgument(name, f"a float array of shape (T, {n})", value) from None
    if arr.ndim != 2 or arr.shape[1] != n:
        raise BadArgument(name, f"a float array of shape (T, {n})", _Shown(f"shape {arr.shape}"))
    if not np.isfinite(arr).all():
        raise BadArgument(name, f"a float array of shape (T, {n}) with finite entries",
                          _first_bad(arr))
    return np.ascontiguousarray(arr)


def vector(name: str, value: Any, t: int) -> np.ndarray:
    """Finite per-row rewards: float64 array of shape (T,)."""
    return _array(name, value, (t,), "a float array")


def square(name: str, value: Any, n: int) -> np.ndarray:
    """A covariance: finite, symmetric (to rounding), non-negative diagonal, (n, n); a copy."""
    arr = _array(name, value, (n, n), "a float array")
    scale = float(np.max(np.abs(arr))) if arr.size else 0.0
    if not np.allclose(arr, arr.T, rtol=1e-9, atol=1e-12 * scale):
        raise BadArgument(name, "a symmetric matrix", _Shown("an asymmetric matrix"))
    if np.any(np.diagonal(arr) < 0.0):
        raise BadArgument(name, "a covariance with a non-negative diagonal",
                          _Shown("a negative variance"))
    # (P + Pᵀ)/2 leaves an exactly symmetric P unchanged bit for bit
    with np.errstate(over="ignore"):
        out = (arr + arr.T) * 0.5
    if not np.isfinite(out).all():
        raise BadArgument(name, "a covariance of finite size (P + Pᵀ overflows)", _Shown("entries near the float limit"))
    return out


def state_weights(state: dict[str, Any]) -> np.ndarray:
    """A stored state's ``w`` as a float64 array (its shape and values checked by the ``w``
    setter), or BadArgument naming it when it is not numbers at all."""
    try:
        return np.asarray(state["w"], dtype=np.float64)
    except (TypeError, ValueError):
        raise BadArgument("state['w']", "an array of finite numbers (the learner's weights)", state["w"]) from None


def innovation(name: str, s: float) -> BadArgument:
    """The error for a Kalman observation whose variance hᵀΣ⁻h + σ_r² is not a positive
    finite number: the covariance is not positive semi-definite along h, or overflowed."""
    return BadArgument(name, "a positive semi-definite covariance of finite size (hᵀΣh + noise must be a finite "
                             "number > 0 for every observed row h)", _Shown(f"hᵀΣh + noise = {s!r}"))


def nonfinite(pairs: list[tuple[str, Any]]) -> BadArgument:
    """The error for an update whose result came out non-finite: name the culprit input."""
    for name, value in pairs:
        if isinstance(value, np.ndarray):
            if not np.all(np.isfinite(value)):
                expected = f"a float array of shape {value.shape} with finite entries"
                return BadArgument(name, expected, _first_bad(value))
        else:
            out = _real(value)
            if out is None or not math.isfinite(out):
                return BadArgument(name, "a finite number", value)
    return BadArgument(pairs[0][0], "a row whose prediction is finite (entries too large)",
                       _Shown("an overflow"))


def scalar_reward(value: Any) -> float:
    """The hot-path reward check: fast for float/int, thorough otherwise."""
    t = type(value)
    if t is float or t is int:
        return value
    return reward("r", value)


# --------------------------------------------------------------------------- results


@dataclass(frozen=True, slots=True, eq=False)
class TrialResult:
    """What one call of ``learn_trial`` saw, per row (time step) of the trial.

    values:    (T,) xₜᵀw just before row t's update (for value learners, the value V(xₜ)).
    errors:    (T,) the prediction errors δₜ the updates used (reward or TD error).
    variances: (T,) xₜᵀΣxₜ just before row t's update, with Σ the covariance *before*
               that row's diffusion (so values[t], variances[t] equal ``predict(xₜ)``
               called just before the update); None for point learners.
    The arrays are read-only. Equality is identity (arrays do not define ``==``).
    """

    values: np.ndarray
    errors: np.ndarray
    variances: np.ndarray | None = None

    def __post_init__(self) -> None:
        for arr in (self.values, self.errors, self.variances):
            if arr is not None:
                arr.setflags(write=False)

    @classmethod
    def _locked(cls, values: np.ndarray, errors: np.ndarray, variances: np.ndarray | None = None) -> TrialResult:
        """A result of arrays that are read-only already (the learners' fast paths)."""
        new = object.__new__(cls)
        object.__setattr__(new, "values", values)
        object.__setattr__(new, "errors", errors)
        object.__setattr__(new, "variances", variances)
        return new


# --------------------------------------------------------------------------- base


class Learner:
    """What every learner shares: weights ``w``, ``predict``, ``params``, state round trip.

    Subclasses set ``name``, ``kind`` ("reward" or "value"), ``bayesian`` and
    ``_param_names``; they implement ``params``, ``state``, ``from_state``, ``update``
    and ``learn_trial``.
    """

    name: ClassVar[str]
    kind: ClassVar[str]
    bayesian: ClassVar[bool]
    _param_names: ClassVar[tuple[str, ...]]

    __slots__ = ("_n", "_shape", "_w", "_tmp")

    def __init__(self, n_features: int):
        self._n = count("n_features", n_features)
        self._allocate(None)

    def _allocate(self, source: Learner | None) -> None:
        """This learner's own arrays for ``_n`` features: the state zero (``source`` None)
        or a copy of ``source``'s, and fresh scratch buffers; subclasses add theirs."""
        n = self._n
        self._shape = (n,)
        self._w = np.zeros(n) if source is None else source._w.copy()
        self._tmp = np.empty(n)

    @property
    def n_features(self) -> int:
        return self._n

    def copy(self):
        """An independent learner in exactly this state, without re-validating it.

        ``step`` copies the animal's learner once per trial; this is the cheap path
        (``from_state(state())`` gives the same result with full checks). The copy
        takes the already checked parameters and fresh arrays of its own, so nothing
        mutable is shared."""
        new = object.__new__(type(self))
        new._n = self._n
        self._copy_params(new)
        new._allocate(self)
        return new

    def _rest(self) -> None:
        """Shrink to a compact form while resident between trials (a no-op unless a learner
        has one); the next use restores the working form, the same bits."""

    def _learned(self, X: np.ndarray, r: np.ndarray) -> tuple[Learner, TrialResult, bool | None]:
        """A copy of this learner after ``_learn(X, r)`` (rows already checked), the
        trial's result, and whether this state and the new one are finite (None: not
        known); this learner stays as it was. ``step``'s one learning call."""
        new = self.copy()
        return new, new._learn(X, r), None

    def _copy_params(self, new) -> None:  # pragma: no cover - abstract
        """Set ``new``'s parameters to this learner's (checked values, not re-checked)."""
        raise NotImplementedError

    @property
    def w(self) -> np.ndarray:
        """(n,) mean weights; writable in place, or assign a new (n,) array (copied in)."""
        return self._w

    @w.setter
    def w(self, value: Any) -> None:
        self._w[...] = row("w", value, self._n)

    def _row(self, name: str, x: Any) -> np.ndarray:
        """Hot-path row check: a float64 array of shape (n,) passes untouched."""
        if type(x) is np.ndarray and x.dtype is F64 and x.shape == self._shape:
            return x
        return row(name, x, self._n)

    def predict(self, x: Any) -> tuple[float, float]:
        """(mean, variance) of xᵀw for a row x of shape (n,); variance 0.0 for point learners."""
        return self._predict(row("x", x, self._n))

    def _predict(self, x: np.ndarray) -> tuple[float, float]:
        """:meth:`predict` of a row already known to be a finite float64 (n,) array."""
        return float(x @ self._w), 0.0

    def _onset_reader(self, finite: bool | None = None) -> Callable[[np.ndarray, int], tuple[float, float]]:
        """A function (x, i) -> :meth:`_predict` of x, a one-hot row with feature i on,
        for reading several cues' onset values in this state (the rules' view, ``step``).
        ``finite``: whether every entry of the state is finite, if already known."""
        predict = self._predict
        return lambda x, i: predict(x)

    def params(self) -> dict[str, Any]:  # pragma: no cover - abstract
        raise NotImplementedError

    def __repr__(self) -> str:
        args = ", ".join(f"{k}={v!r}" for k, v in self.params().items())
        return f"{type(self).__name__}(n_features={self._n}, {args})"

    @classmethod
    def _check_state(cls, state: Any, keys: tuple[str, ...]) -> None:
        if not hasattr(state, "keys") or not set(keys) <= set(state.keys()):
            shown = sorted(state.keys()) if hasattr(state, "keys") else state
            raise BadArgument("state", f"a {cls.name} state with keys {sorted(keys)}", shown)


def param(state: Any, key: str) -> Any:
    """A parameter from a state dict: a list or array stays an array, a 0-d array a float."""
    value = state[key]
    if isinstance(value, np.ndarray) and value.ndim == 0:
        return value[()]
    return value
