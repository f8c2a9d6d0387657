"""Variants of a rule file for tuning a criterion's numbers: ``--vary PATH=V1,V2,...``.

``PATH`` is the dotted path of a key in the rule file's TOML, e.g.
``stages.reversal.blocks.reversed.end.min_trials=20,40,80``. A number inside a
criterion's expression is reached by its position: ``PATH[K]`` is the K-th number
(from 1) of the expression at ``PATH``, e.g. ``stages.acquisition.advance.when[3]=0.9,0.95,0.99``
changes 0.95 in ``trials_in_stage >= 60 and p_discriminates(tone_hi, tone_lo, 0.3) >= 0.95``.
Several ``--vary`` options make a grid (every combination). Each variant is the rule
file's TOML with those values in place, written back as TOML (comments are not kept)
and loaded with every check a rule file gets, so a variant that breaks a rule (a
welfare limit loosened, an impossible criterion) is refused like any file.
"""

from __future__ import annotations

import copy
import itertools
import json
import math
import re
import tomllib
from dataclasses import dataclass

from ..errors import BadArgument

MAX_VARIANTS = 64
_NUMBER = re.compile(r"(?<![\w.])(\d+(?:\.\d*)?(?:[eE][-+]?\d+)?)(?![\w.])")
_SPEC = re.compile(r"^(?P<path>[A-Za-z0-9_.\-]+?)(?:\[(?P<k>\d+)\])?=(?P<values>.+)$")


@dataclass(frozen=True)
class Vary:
    """One ``--vary``: a key path, the number's position in an expression (or None), values."""

    path: tuple[str, ...]
    index: int | None
    values: tuple

    @property
    def label(self) -> str:
        return ".".join(self.path) + (f"[{self.index}]" if self.index else "")

    @property
    def short(self) -> str:
        """The last key (and position): what a variant's name shows."""
        return self.path[-1] + (f"[{self.index}]" if self.index else "")


def parse_vary(text: str) -> Vary:
    """``PATH=V1,V2`` or ``PATH[K]=V1,V2`` -> Vary (values read as TOML numbers, booleans or strings)."""
    m = _SPEC.match(text.strip())
    if not m:
        raise BadArgument("--vary", "PATH=V1,V2,... or PATH[K]=V1,V2,... (PATH: dotted keys of the rule file, "
                          "K: the K-th number of an expression), e.g. stages.acquisition.advance.when[3]=0.9,0.95",
                          text)
    values = tuple(_value(v.strip(), text) for v in m.group("values").split(","))
    k = int(m.group("k")) if m.group("k") else None
    if k is not None and k < 1:
        raise BadArgument("--vary", "a number position K >= 1 in PATH[K]", text)
    return Vary(tuple(m.group("path").split(".")), k, values)


def _value(v: str, text: str):
    if not v:
        raise BadArgument("--vary", "no empty values between the commas", text)
    try:
        return tomllib.loads(f"x = {v}")["x"]
    except tomllib.TOMLDecodeError:
        return v  # a bare word: a string


def _lookup(doc: dict, vary: Vary):
    """The table holding the key and the key, or an error naming the valid keys at the step that failed."""
    node = doc
    for depth, key in enumerate(vary.path):
        if not isinstance(node, dict) or key not in node:
            where = ".".join(vary.path[:depth]) or "the top level"
            keys = ", ".join(sorted(node)) if isinstance(node, dict) else "(none: it is a value)"
            raise BadArgument("--vary", f"a key the rule file has: at {where} the keys are {keys}", vary.label)
        if depth == len(vary.path) - 1:
            return node, key
        node = node[key]
    raise BadArgument("--vary", "a dotted key path", vary.label)  # pragma: no cover (empty path)


def apply(doc: dict, vary: Vary, value) -> None:
    """Put ``value`` at the Vary's place in the parsed TOML ``doc`` (in place)."""
    table, key = _lookup(doc, vary)
    old = table[key]
    if vary.index is None:
        if isinstance(old, dict):
            raise BadArgument("--vary", f"a value, not a table (keys under it: {', '.join(sorted(old))})", vary.label)
        table[key] = value
        return
    if not isinstance(old, str):
        raise BadArgument("--vary", "[K] only after a key that holds an expression (a string)", vary.label)
    numbers = list(_NUMBER.finditer(old))
    if vary.index > len(numbers):
        listed = ", ".join(f"[{i + 1}] {m.group(1)}" for i, m in enumerate(numbers)) or "none"
        raise BadArgument("--vary", f"a number position the expression {old!r} has (its numbers: {listed})",
                          vary.label)
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise BadArgument("--vary", "numbers, to put into an expression", value)
    m = numbers[vary.index - 1]
    table[key] = old[:m.start()] + _number(value) + old[m.end():]


def variants(text: str, varies: list[Vary]) -> list[tuple[str, str]]:
    """(label, TOML text) of every combination of the varied values, checked for the paths."""
    doc = tomllib.loads(text)
    for v in varies:
        apply(copy.deepcopy(doc), v, v.values[0])  # a wrong path fails before any work
    combos = list(itertools.product(*(v.values for v in varies)))
    if len(combos) > MAX_VARIANTS:
        raise BadArgument("--vary", f"at most {MAX_VARIANTS} combinations", len(combos))
    out = []
    for combo in combos:
        d = copy.deepcopy(doc)
        for v, value in zip(varies, combo, strict=True):
            apply(d, v, value)
        label = " ".join(f"{v.short}={_number(x) if isinstance(x, (int, float)) else x}"
                         for v, x in zip(varies, combo, strict=True))
        header = "# variant made by rigloop compare --vary: " + "; ".join(
            f"{v.label} = {x!r}" for v, x in zip(varies, combo, strict=True)) + "\n"
        out.append((label, header + dumps(d)))
    return out


def _number(x) -> str:
    if isinstance(x, bool):
        return "true" if x else "false"
    if isinstance(x, int):
        return str(x)
    return repr(float(x)) if math.isfinite(x) else ("inf" if x > 0 else "-inf" if x < 0 else "nan")


# --------------------------------------------------------------------------- TOML out


def dumps(doc: dict) -> str:
    """A parsed TOML document as TOML text (tables, inline tables in lists, basic strings)."""
    lines: list[str] = []
    _table(doc, (), lines)
    return "\n".join(lines).strip() + "\n"


def _key(k: str) -> str:
    return k if re.fullmatch(r"[A-Za-z0-9_-]+", k) else json.dumps(k, ensure_ascii=False)


def _inline(v) -> str:
    if isinstance(v, str):
        return json.dumps(v, ensure_ascii=False)
    if isinstance(v, (bool, int, float)):
        return _number(v)
    if isinstance(v, list):
        return "[" + ", ".join(_inline(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{ " + ", ".join(f"{_key(k)} = {_inline(x)}" for k, x in v.items()) + " }" if v else "{}"
    raise BadArgument("value", "a TOML value (string, number, boolean, list or table)", v)


def _table(d: dict, path: tuple[str, ...], lines: list[str]) -> None:
    plain = {k: v for k, v in d.items() if not isinstance(v, dict)}
    tables = {k: v for k, v in d.items() if isinstance(v, dict)}
    if path and (plain or not tables):
        lines.append("")
        lines.append("[" + ".".join(_key(k) for k in path) + "]")
    for k, v in plain.items():
        lines.append(f"{_key(k)} = {_inline(v)}")
    for k, v in tables.items():
        _table(v, (*path, k), lines)
