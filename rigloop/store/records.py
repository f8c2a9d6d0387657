"""What the store keeps and hands back, as values: ``SessionInfo``, ``CommitResult``,
``Snapshot``, the canonical JSON text of stored data, and one trial's commit checked and
encoded (``prepare``) before any transaction starts.

Pure: no SQLite here, so the checks and encodings run outside the store's lock.
"""

from __future__ import annotations

import hashlib
import json
import math
import numbers
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

from ..core.trial import Decision, TrialEvent
from ..errors import BadArgument, RigloopError
from .texts import decision_text, event_text, quantities_text

_RESERVED_QUANTITY_NAMES = frozenset({"subject", "session", "trial", "seq"})
_CANONICAL = json.JSONEncoder(sort_keys=True, separators=(",", ":"), allow_nan=False)


def canonical_json(data: Any) -> str:
    """The one text form of stored JSON: sorted keys, no spaces, exact floats, no NaN.

    (One shared encoder: ``json.dumps`` with these options builds a new one per call.)"""
    return _CANONICAL.encode(data)


def rules_digest(text: str) -> str:
    """sha256 hex digest of a rule file's UTF-8 text, as stored in ``SessionInfo``."""
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def seconds(name: str, value: Any) -> float:
    """``value`` as a time in seconds since the epoch; BadArgument naming ``name`` otherwise."""
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise BadArgument(name, "a finite number of seconds since the epoch", value)
    return float(value)


@dataclass(frozen=True, slots=True)
class SessionInfo:
    """One session as the store keeps it: who, where, which rule file (text and digest),
    the seed behind its per-trial randomness, and when it opened and closed (s, epoch).

    ``SessionInfo.new(...)`` computes ``rules_sha256`` from ``rules_text``.
    """

    subject: str
    session: str
    rig: str
    rules_name: str
    rules_text: str
    rules_sha256: str
    seed: int
    opened_at: float
    profile: str | None = None
    meta: Mapping[str, Any] = field(default_factory=dict)
    closed_at: float | None = None

    def __post_init__(self) -> None:
        for name in ("subject", "session", "rig", "rules_name"):
            value = getattr(self, name)
            if not isinstance(value, str) or not value or value != value.strip() or not value.isprintable():
                raise BadArgument(name, "a non-empty printable string without surrounding spaces", value)
        if not isinstance(self.rules_text, str):
            raise BadArgument("rules_text", "the rule file's text (a string)", self.rules_text)
        if self.rules_sha256 != rules_digest(self.rules_text):
            raise BadArgument("rules_sha256", "the sha256 hex digest of rules_text", self.rules_sha256)
        if isinstance(self.seed, bool) or not isinstance(self.seed, int) or not 0 <= self.seed < 2**63:
            raise BadArgument("seed", "a whole number in [0, 2**63)", self.seed)
        object.__setattr__(self, "opened_at", seconds("opened_at", self.opened_at))
        if self.closed_at is not None:
            object.__setattr__(self, "closed_at", seconds("closed_at", self.closed_at))
        if self.profile is not None and (not isinstance(self.profile, str) or not self.profile):
            raise BadArgument("profile", "a non-empty string or None", self.profile)
        if not isinstance(self.meta, Mapping):
            raise BadArgument("meta", "a map of JSON values", self.meta)
        try:
            meta = json.loads(canonical_json(dict(self.meta)))
        except (TypeError, ValueError) as err:
            raise BadArgument("meta", f"a map of JSON values ({err})", self.meta) from None
        object.__setattr__(self, "meta", meta)

    @classmethod
    def new(
        cls,
        subject: str,
        session: str,
        rig: str,
        rules_name: str,
        rules_text: str,
        seed: int,
        opened_at: float,
        profile: str | None = None,
        meta: Mapping[str, Any] | None = None,
    ) -> SessionInfo:
        return cls(subject, session, rig, rules_name, rules_text, rules_digest(rules_text), seed, opened_at,
                   profile, dict(meta or {}))


@dataclass(frozen=True, slots=True)
class CommitResult:
    """What a commit did. ``decision`` is the stored decision (the new one, or on a
    duplicate the one stored first, which the rig must get again). In a batch, an item
    that could not be stored has ``decision=None`` and the reason in ``error``."""

    decision: Decision | None
    duplicate: bool
    error: RigloopError | None = None

    @property
    def ok(self) -> bool:
        return self.error is None


@dataclass(frozen=True, slots=True)
class Snapshot:
    """A stored subject-state blob: the state after ``trial`` of ``session``.
    ``ok`` is False when the blob no longer matches its stored sha256 (damage)."""

    subject: str
    session: str
    trial: int
    blob: bytes
    sha256: str
    ok: bool
    created: float = 0.0


BatchItem = tuple[TrialEvent, Decision, Mapping[str, "float | None"], "bytes | None"]


@dataclass(frozen=True, slots=True)
class Prepared:
    """One trial's commit, checked and encoded: the values and their stored texts."""

    event: TrialEvent
    decision: Decision
    event_text: str
    decision_text: str
    quantities_text: str
    snapshot: bytes | None


def prepare(event: TrialEvent, decision: Decision, quantities: Mapping[str, float | None],
            snapshot: bytes | None = None) -> Prepared:
    """Check one commit's arguments and encode them (outside the transaction)."""
    if not isinstance(event, TrialEvent):
        raise BadArgument("event", "a TrialEvent", event)
    if not isinstance(decision, Decision):
        raise BadArgument("decision", "a Decision", decision)
    if (decision.subject, decision.session) != (event.subject, event.session):
        raise BadArgument("decision", f"for subject {event.subject!r}, session {event.session!r} like its event",
                          f"subject {decision.subject!r}, session {decision.session!r}")
    # the texts are canonical_json(x.to_dict()), written directly (texts.py; tests/test_store_texts.py)
    return Prepared(
        event,
        decision,
        event_text(event),
        decision_text(decision),
        quantities_text(_quantities(quantities)),
        None if snapshot is None else blob_bytes(snapshot),
    )


def _quantities(quantities: Mapping[str, float | None]) -> dict[str, float | None]:
    """The quantities as plain floats or None; BadArgument for a name or value the store cannot keep."""
    if not isinstance(quantities, Mapping):
        raise BadArgument("quantities", "a map of names to numbers or None", quantities)
    out: dict[str, float | None] = {}
    for name, value in quantities.items():
        if not isinstance(name, str) or not name or not name.isprintable() or name in _RESERVED_QUANTITY_NAMES:
            raise BadArgument("quantities", "names that are non-empty printable strings other than "
                              "subject, session, trial, seq", name)
        if type(value) is float and math.isfinite(value):  # the common case, without the ABC check below
            out[name] = value
        elif value is None:
            out[name] = None
        elif isinstance(value, bool) or not isinstance(value, numbers.Real) or not math.isfinite(value):
            # numbers.Real admits numpy scalars (float32, int64) as well as int and float
            raise BadArgument(f"quantities[{name!r}]", "a finite number or None (None for undefined)", value)
        else:
            out[name] = float(value)
    return out


def blob_bytes(blob: Any) -> bytes:
    """A snapshot blob as bytes; BadArgument for anything that is not bytes-like."""
    if not isinstance(blob, (bytes, bytearray, memoryview)):
        raise BadArgument("snapshot", "bytes", type(blob).__name__)
    return bytes(blob)
