"""Read a rule file's [cues]: ids, roles and labels; and the expression context the cues give.

A cue id is a plain identifier that is not a word of the expression language, so a
criterion can name it bare (``value(tone_hi)``). Cues with role ``left`` or ``right``
are two-choice cues; the behaviour functions read them as choices, the rest as
respond-or-withhold.
"""

from __future__ import annotations

import keyword

from . import expr as X
from .model import CUE_ROLES, CueSpec
from .reader import Reader, show

MAX_CUES = 32
RESERVED = set(X.NAMES) | set(X.FUNCTIONS) | {"all", "cue"}  # words a cue id may not be


def choice_cues(cues: dict[str, CueSpec]) -> frozenset[str]:
    """The two-choice cues (roles left and right)."""
    return frozenset(c for c, k in cues.items() if k.role in ("left", "right"))


def cue_context(cues: dict[str, CueSpec], **options) -> X.Context:
    """What an expression may name over these cues; ``options`` are Context's ``cue_var`` and
    ``unavailable``."""
    return X.Context(tuple(cues), choice_cues=choice_cues(cues), **options)


def read_cues(r: Reader, data: dict) -> dict[str, CueSpec]:
    t = r.table(data, "cues", "cues", required=True) or {}
    if len(t) > MAX_CUES:
        r.add("cues", f"at most {MAX_CUES} cues (got {len(t)})")
    out: dict[str, CueSpec] = {}
    for name, v in t.items():
        path = f"cues.{name}"
        if not name.isidentifier() or keyword.iskeyword(name) or not name.isascii() or len(name) > 64:
            r.add(path, "a cue id must be a plain identifier (letters, digits, _; not starting with a digit)")
            r.drop(f"cue:{name}", path)
            continue
        if name in RESERVED:
            r.add(path, f"'{name}' is a name of the expression language; choose another cue id")
            r.drop(f"cue:{name}", path)
            continue
        if isinstance(v, str):
            v = {"role": v}
        if not isinstance(v, dict):
            r.add(path, f"must be a role string or a table {{ role, label }} (got {show(v)})")
            r.drop(f"cue:{name}", path)
            continue
        r.keys(v, ["role", "label"], path)
        role = r.text(v, "role", f"{path}.role", "plain", choices=CUE_ROLES) or "plain"
        label = r.text(v, "label", f"{path}.label", "") or ""
        out[name] = CueSpec(name, role, label)
    if not t:
        r.add("cues", "declare at least one cue")
    return out
