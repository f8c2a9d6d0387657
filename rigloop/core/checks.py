"""Argument checks shared by the core's numeric modules: finite numbers, open unit
interval, positive numbers, counts, binary outcomes. Each raises BadArgument naming the
argument, what it must be and what came (``'sigma2' must be a finite number > 0 (got 0)``).

``first_bad`` serves functions on the per-trial path that test their arguments in one
chained comparison and, only when it fails, ask which argument broke which rule.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from ..errors import BadArgument


def _number(name: str, value: Any) -> float:
    if type(value) is not float:  # a float, the common case, needs only the finiteness test
        if isinstance(value, bool) or not isinstance(value, int | float | np.integer | np.floating):
            raise BadArgument(name, "a finite number", value)
        value = float(value)
    if not math.isfinite(value):
        raise BadArgument(name, "a finite number", value)
    return value


def _open_unit(name: str, value: Any) -> float:
    value = _number(name, value)
    if not 0.0 < value < 1.0:
        raise BadArgument(name, "a probability strictly between 0 and 1", value)
    return value


def _positive(name: str, value: Any) -> float:
    value = _number(name, value)
    if value <= 0.0:
        raise BadArgument(name, "a finite number > 0", value)
    return value


def _negative(name: str, value: Any) -> float:
    value = _number(name, value)
    if value >= 0.0:
        raise BadArgument(name, "a finite number < 0", value)
    return value


def _nonnegative(name: str, value: Any) -> float:
    value = _number(name, value)
    if value < 0.0:
        raise BadArgument(name, "a finite number >= 0", value)
    return value


def _margin(name: str, value: Any) -> float:
    value = _number(name, value)
    if not 0.0 <= value < 1.0:
        raise BadArgument(name, "a margin between probabilities in [0, 1)", value)
    return value


def first_bad(*rules: tuple[str, Any, Any]) -> BadArgument:
    """The error for the first (name, value, check) whose check refuses its value; the
    caller already knows one does (a generic one naming every argument if none did)."""
    for name, value, check in rules:
        try:
            check(name, value)
        except BadArgument as err:
            return err
    return BadArgument(", ".join(n for n, _, _ in rules), "numbers within their ranges", tuple(v for _, v, _ in rules))


def _count(name: str, value: Any) -> int:
    if type(value) is int and value >= 0:
        return value
    if isinstance(value, bool) or not isinstance(value, int | np.integer) or value < 0:
        raise BadArgument(name, "a whole number >= 0", value)
    return int(value)


def _binary(name: str, value: Any) -> int:
    if value is True or value is False:
        return int(value)
    if isinstance(value, bool | np.bool_):
        return int(value)
    if isinstance(value, int | np.integer) and value in (0, 1):
        return int(value)
    raise BadArgument(name, "True/False (or 1/0)", value)


