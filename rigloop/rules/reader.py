"""Typed getters over a rule file's TOML tables that record problems instead of raising.

Every section reader works through one :class:`Reader`, so a file's problems are all
collected, each as ``key.path: message``, and reported at once. A problem that only
follows from another (an expression naming a cue whose declaration was refused, a stage
unreachable because a move naming it was refused) is a knock-on: it is reported after
every root cause and says which one it follows from.
"""

from __future__ import annotations

import math
from dataclasses import replace
from typing import Any

from . import expr as X


class Reader:
    """Typed getters over TOML tables that record problems instead of raising."""

    def __init__(self) -> None:
        self.problems: list[str] = []
        self.notes: list[str] = []  # warnings: the file loads, but `rigloop check` says these
        self.knock_ons: list[str] = []  # problems that follow from one in ``problems``
        self.dropped: dict[str, str] = {}  # what a problem left out of the spec -> that problem's key path

    def add(self, path: str, msg: str, follows: str | None = None) -> None:
        """Record one problem at a key path; ``follows`` is the key path of its root cause."""
        if follows is None:
            self.problems.append(f"{path}: {msg}")
        else:
            self.knock_ons.append(f"{path}: {msg} (follows from {follows})")

    def drop(self, thing: str, path: str) -> None:
        """Remember that the problem at ``path`` left ``thing`` (``cue:X``, ``move``, ...) out."""
        self.dropped.setdefault(thing, path)

    def cause(self, thing: str) -> str | None:
        """The key path of the problem that left ``thing`` out, or None."""
        return self.dropped.get(thing)

    def report(self) -> list[str]:
        """Every problem: root causes first (in file order), then the knock-ons."""
        return self.problems + self.knock_ons

    def note(self, path: str, msg: str) -> None:
        """Record one warning at a key path (the file still loads)."""
        self.notes.append(f"{path}: {msg}")

    def keys(self, table: dict, allowed: list[str], path: str) -> None:
        """Record each key of ``table`` that is not allowed there."""
        for key in table:
            if key not in allowed:
                self.add(f"{path}.{key}" if path else key, f"unknown key (allowed: {', '.join(allowed)})")

    def table(self, parent: dict, key: str, path: str, required: bool = False) -> dict | None:
        """A sub-table, or None when it is absent (a problem if required) or not a table."""
        v = parent.get(key)
        if v is None:
            if required:
                self.add(path, "is missing (a table)")
            return None
        if not isinstance(v, dict):
            self.add(path, f"must be a table (got {show(v)})")
            return None
        return v

    def num(self, t: dict, key: str, path: str, default: Any = None, *, lo: float = -math.inf,
            hi: float = math.inf, lo_open: bool = False, hi_open: bool = False, integer: bool = False,
            required: bool = False) -> Any:
        """A finite number within its bounds (a whole one if ``integer``), else ``default``."""
        if key not in t:
            if required:
                self.add(path, "is missing")
            return default
        v = t[key]
        kind = "whole number" if integer else "number"
        ok = isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)
        if ok and integer:
            ok = float(v) == int(v)
        in_range = ok and (v > lo if lo_open else v >= lo) and (v < hi if hi_open else v <= hi)
        if not in_range:
            self.add(path, f"must be a {kind} {_range_text(lo, hi, lo_open, hi_open)} (got {show(v)})")
            return default
        return int(v) if integer else float(v)

    def text(self, t: dict, key: str, path: str, default: str | None = None, *, choices: tuple | None = None,
             required: bool = False) -> str | None:
        """A string (one of ``choices`` when given), else ``default``."""
        if key not in t:
            if required:
                self.add(path, "is missing" + (f" (one of: {', '.join(choices)})" if choices else ""))
            return default
        v = t[key]
        if not isinstance(v, str):
            self.add(path, f"must be a string (got {show(v)})")
            return default
        if choices is not None and v not in choices:
            self.add(path, f"must be one of {', '.join(choices)} (got {v!r})")
            return default
        return v

    def expr(self, t: dict, key: str, path: str, ctx: X.Context, expect: str = X.BOOL,
             required: bool = False) -> X.Expr | None:
        """A checked expression of type ``expect`` (a bare number is taken for a NUM), else None."""
        if key not in t:
            if required:
                self.add(path, "is missing (an expression)")
            return None
        v = t[key]
        if expect == X.NUM and isinstance(v, (int, float)) and not isinstance(v, bool):
            v = repr(float(v))
        try:
            return X.parse(v, ctx, expect)
        except X.ExprError as err:
            roots = [self.cause(f"cue:{p.cue}") if p.cue else None for p in err.problems]
            for p, root in zip(err.problems, roots):
                if root is None:
                    self.problems.append(p.render(path, err.text))
                else:
                    self.knock_ons.append(replace(p, message=f"{p.message} (follows from {root})").render(path, err.text))
            if None not in roots:  # every fault here follows from elsewhere: so does what this expression's loss causes
                self.drop(f"expr:{path}", roots[0])
            return None


def _range_text(lo, hi, lo_open, hi_open) -> str:
    """The bounds of a number in words: ``>= 0``, ``in (0, 1]``, or nothing when it has none."""
    if lo == -math.inf and hi == math.inf:
        return ""
    if hi == math.inf:
        return f"{'>' if lo_open else '>='} {X.fmt(lo)}"
    if lo == -math.inf:
        return f"{'<' if hi_open else '<='} {X.fmt(hi)}"
    return f"in {'(' if lo_open else '['}{X.fmt(lo)}, {X.fmt(hi)}{')' if hi_open else ']'}"


def show(v: Any) -> str:
    """A value as a message quotes it: its repr, cut at 60 characters."""
    s = repr(v)
    return s if len(s) <= 60 else s[:57] + "..."
