"""How a number reads in reasons and messages (``fmt``): one form for the engine's reasons,
the checker's messages and the loader's."""

from __future__ import annotations

import math


def fmt(x) -> str:
    """A number as a reason shows it: integers plain, others to 3 decimals (or 3 significant).

    :func:`_fmt_reference` for a finite float in fewer steps (0.39 -> 0.26 µs; reasons and
    warnings call it ~5-9 times a decision; tests/test_fast_paths.py: the same text)."""
    if type(x) is float and x - x == 0.0:  # finite (inf - inf and nan - nan are nan)
        if x.is_integer() and -1e12 < x < 1e12:
            return str(int(x))
        if x >= 0.001 or x <= -0.001:
            return f"{x:.3f}".rstrip("0").rstrip(".")
        return f"{x:.3g}"
    return _fmt_reference(x)


def _fmt_reference(x) -> str:
    """:func:`fmt` as it reads."""
    if isinstance(x, bool):
        return "true" if x else "false"
    x = float(x)
    if math.isnan(x):
        return "nan"
    if math.isinf(x):
        return "inf" if x > 0 else "-inf"
    if x == int(x) and abs(x) < 1e12:
        return str(int(x))
    if abs(x) >= 0.001:
        return f"{x:.3f}".rstrip("0").rstrip(".")
    return f"{x:.3g}"

