"""How a number reads in reasons and messages (``fmt``): one form for the engine's reasons,
the checker's messages and the loader's."""

from __future__ import annotations

import math


def fmt(x) -> str:
    """A number as a reason shows it: integers plain, others to 3 decimals (or 3 significant)."""
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

