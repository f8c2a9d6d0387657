"""The fields of each message, declared once for both encodings.

A message's table lists its fields after ``type`` and ``id``, in the order of its
value's attributes: the attribute (also the msgpack key), the serial key, the kind of
value, and whether the field may be left out (``optional``) or be nil (``nullable``; a
serial line leaves a nil field out). Both codecs read, check and write these messages
from the tables, so the two encodings carry the same fields of the same kinds.

Two messages are not flat and each codec spells them out itself: a trial's event
(msgpack: the ``TrialEvent`` map; a line: its own keys, see ``lines.py``) and a state
summary (a nested map; a line: ``s.<path>`` keys).
"""

from __future__ import annotations

from dataclasses import dataclass

KINDS = ("text", "whole", "number", "flag", "texts")  # string, int, int or float, bool, list of strings


@dataclass(frozen=True, slots=True)
class Field:
    """One field of a message: ``name`` (attribute and msgpack key), ``key`` (serial key),
    ``kind`` (one of ``KINDS``), ``optional`` (may be left out), ``nullable`` (may be nil)."""

    name: str
    key: str
    kind: str
    optional: bool = False
    nullable: bool = False


def _maybe(name: str, key: str, kind: str) -> Field:
    """A field that may be left out or nil, both meaning None."""
    return Field(name, key, kind, optional=True, nullable=True)


_SUBJECT = Field("subject", "subj", "text")
_RIG = Field("rig", "rig", "text")
_SESSION = Field("session", "sess", "text")

# message type -> its fields (the flat messages; trial and state are not, see above)
FIELDS: dict[str, tuple[Field, ...]] = {
    "open": (_SUBJECT, _RIG, _SESSION, Field("rules", "rules", "text"), _maybe("seed", "seed", "whole"),
             _maybe("profile", "profile", "text"), _maybe("wall_time", "wall", "number")),
    "close": (_SUBJECT, _RIG, _SESSION),
    "query": (_SUBJECT,),
    "ping": (),
    "ack": (Field("of", "of", "text"),),
    "pong": (),
    "error": (Field("code", "code", "text"), Field("message", "msg", "text"), _maybe("field", "field", "text")),
}

# a decision reply's Decision, in the order of its attributes
DECISION: tuple[Field, ...] = (
    _SUBJECT,
    _SESSION,
    Field("trial", "n", "whole"),
    Field("cue", "cue", "text", nullable=True),
    Field("reward_prob", "p", "number"),
    Field("reward_ul", "ul", "number"),
    Field("reward_armed", "armed", "flag"),
    Field("block", "block", "text"),
    Field("stage", "stage", "text"),
    Field("end_session", "end", "flag", optional=True),
    _maybe("difficulty", "diff", "number"),
    _maybe("valve_ms", "valve", "number"),
    Field("reasons", "why", "texts", optional=True),
    Field("overrides", "over", "texts", optional=True),
    Field("warnings", "warn", "texts", optional=True),
)
# the decision reply's own field, beside its decision
DUPLICATE = _maybe("duplicate", "dup", "flag")
