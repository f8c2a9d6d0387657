"""Known names and the nearest one to a mistyped name (subjects, sessions, learners, examples).

A name that is not known gets an ``UnknownName`` error that lists what is known and,
when one is close (difflib's ratio, as ``difflib.get_close_matches`` judges it), asks
"did you mean ...?", so a typo costs one look at the message instead of an empty result.
"""

from __future__ import annotations

import difflib
from collections.abc import Iterable

from ..errors import BadArgument

SHOWN = 12  # names listed in a message before "and N more"


def closest(value: str, known: Iterable[str]) -> str | None:
    """The known name nearest to ``value`` (difflib, cutoff 0.6), or None when none is close."""
    found = difflib.get_close_matches(str(value), [str(k) for k in known], n=1, cutoff=0.6)
    return found[0] if found else None


def listed(known: Iterable[str], limit: int = SHOWN) -> str:
    """``a, b, c`` (the first ``limit`` names, then ``and N more``), or ``none``."""
    names = [str(k) for k in known]
    if not names:
        return "none"
    head = ", ".join(names[:limit])
    return head if len(names) <= limit else f"{head} and {len(names) - limit} more"


class UnknownName(BadArgument):
    """``value`` is not one of the ``known`` names of its kind (``what``, e.g. "a stored subject").

    ``known`` keeps every known name; ``suggestion`` the nearest, or None.
    """

    def __init__(self, argument: str, what: str, value: str, known: Iterable[str]):
        self.known = tuple(known)
        self.suggestion = closest(value, self.known)
        super().__init__(argument, what, value)
        hint = f"; did you mean {self.suggestion!r}?" if self.suggestion else "; check the spelling"
        Exception.__init__(self, f"{argument!r}: {value!r} is not {what}{hint} (known: {listed(self.known)})")


def check_name(argument: str, what: str, value: str, known: Iterable[str]) -> str:
    """``value`` when it is one of ``known``; else ``UnknownName``."""
    names = tuple(known)
    if value not in names:
        raise UnknownName(argument, what, value, names)
    return value
