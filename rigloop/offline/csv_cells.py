"""Cell conversion for CSV import: a cell's text (or a mapping's constant) -> a field's value.

Cells are stripped of surrounding spaces; a blank cell means none. Each converter raises
``CellError`` with the reason when the text cannot become its type; ``CONVERTERS`` names
them as a mapping's ``type = ...`` does.
"""

from __future__ import annotations

import math
import re
from datetime import datetime, timezone
from typing import Any
from zoneinfo import ZoneInfo


class CellError(ValueError):
    """A cell (or constant) that cannot become its field's value; the text is the reason."""


_INT_RE = re.compile(r"^[+-]?\d+$")
_TRUE = {"1", "true", "t", "yes", "y"}
_FALSE = {"0", "false", "f", "no", "n", ""}


def _to_str(v: Any) -> str | None:
    if isinstance(v, bool) or not isinstance(v, (str, int, float)):
        raise CellError(f"{v!r} is not text")
    text = str(v).strip()
    return text or None


def _to_float(v: Any) -> float | None:
    if isinstance(v, bool):
        raise CellError(f"{v!r} is not a number")
    if isinstance(v, (int, float)):
        x = float(v)
    else:
        text = str(v).strip()
        if not text:
            return None
        try:
            x = float(text)
        except ValueError:
            raise CellError(f"{text!r} is not a number") from None
    if not math.isfinite(x):
        raise CellError(f"{v!r} is not a finite number")
    return x


def _to_int(v: Any) -> int | None:
    if isinstance(v, int) and not isinstance(v, bool):
        return v
    x = _to_float(v)
    if x is None:
        return None
    if x != int(x):
        raise CellError(f"{v!r} is not a whole number")
    return int(x)


def _to_bool(v: Any) -> bool | None:
    if isinstance(v, bool):
        return v
    if isinstance(v, int) and v in (0, 1):
        return bool(v)
    text = str(v).strip().lower()
    if text in _TRUE:
        return True
    if text in _FALSE:
        return False if text else None
    raise CellError(f"{v!r} is not true/false, 1/0 or yes/no")


def _to_auto(v: Any) -> float | int | str | None:
    """A number when the cell reads as one (whole numbers stay int), else text."""
    if isinstance(v, bool):
        return v
    if isinstance(v, (int, float)):
        return _to_float(v) if isinstance(v, float) else v
    text = str(v).strip()
    if not text:
        return None
    if _INT_RE.match(text):
        return int(text)
    try:
        x = float(text)
    except ValueError:
        return text
    return x if math.isfinite(x) else text


CONVERTERS = {"str": _to_str, "float": _to_float, "int": _to_int, "bool": _to_bool, "auto": _to_auto}


def epoch_or_iso(fmt: str, tz: str | None):
    """The converter of a time field: epoch seconds, or ISO-8601 text (read in ``tz``
    when it carries no UTC offset) -> epoch seconds."""
    zone = ZoneInfo(tz) if tz else None

    def convert(v: Any) -> float | None:
        if fmt == "epoch":
            return _to_float(v)
        text = _to_str(v)
        if text is None:
            return None
        try:
            moment = datetime.fromisoformat(text)
        except ValueError:
            raise CellError(f"{text!r} is not an ISO-8601 time") from None
        if moment.tzinfo is None:
            if zone is None:
                raise CellError(f"{text!r} has no UTC offset; add one or set timezone in the mapping")
            moment = moment.replace(tzinfo=zone)
        return moment.astimezone(timezone.utc).timestamp()

    return convert
