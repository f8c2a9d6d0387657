"""Values derived from a loaded rule file's parts, made once per part object.

A loaded rule file is a fixed value (its text's sha256 names it), and so are its specs,
stages and blocks, so what the engine and policies derive from them never goes stale.
The table is keyed by (id(obj), what) and holds obj, which keeps its id from being
reused; it is cleared when large. Derived values are immutable (tuples, read-only
arrays and mappings, strings).
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

_DERIVED: dict[tuple[int, str], tuple[Any, Any]] = {}
_DERIVED_MAX = 1024


def derived(obj: Any, what: str, make: Callable[[Any], Any]) -> Any:
    """``make(obj)``, made on the first call for this object and ``what``."""
    key = (id(obj), what)
    hit = _DERIVED.get(key)
    if hit is not None and hit[0] is obj:
        return hit[1]
    value = make(obj)
    if len(_DERIVED) >= _DERIVED_MAX:
        _DERIVED.clear()
    _DERIVED[key] = (obj, value)
    return value
