"""The message set shared by both encodings: frozen request and reply values.

Rigs send requests (open a session, report a trial, close, query state, ping); rigloop
answers each with one reply (a decision, an ack, a state summary, a pong or an error).
Every request carries an ``id`` chosen by the rig, echoed in its reply, so a rig that
resends after a timeout can match the answer to the question.

The values validate on construction (``BadArgument`` names the field); the codecs
turn such faults in incoming data into ``MessageError`` with a stable ``code``.
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any, ClassVar

from ..core.trial import Decision, TrialEvent
from ..errors import BadArgument, WireError

# --------------------------------------------------------------------------- limits

MAX_FRAME = 64 * 1024  # bytes in one msgpack frame, either direction
MAX_DEPTH = 6  # container nesting in a frame (top map = 1)
MAX_STR = 4096  # characters in any string of a frame
MAX_LIST = 256  # entries in any list of a frame
MAX_MAP = 128  # entries in any map of a frame
MAX_KEY = 64  # characters in a map key
MAX_LINE = 512  # bytes in one serial line, without its terminator
MAX_MESSAGE = 1024  # characters in an error reply's sentence
ID_MAX = 32  # characters in a string request id
STATE_MAX_ENTRIES = 128  # scalar leaves in a state summary
STATE_MAX_DEPTH = 3  # nested maps in a state summary (top = 1)
STATE_MAX_STR = 256  # characters in a state string value
INT_MIN, INT_MAX = -(2**63), 2**64 - 1  # what msgpack can carry

ERROR_CODES: dict[str, str] = {
    "bad_message": "the bytes are not a message at all (not msgpack, not a map, bad line syntax)",
    "bad_field": "a field is missing, unknown, of the wrong type or out of range",
    "too_large": "a frame, line, string, list or nesting exceeds its limit",
    "unknown_type": "the message type (or serial verb) is not one rigloop knows",
    "unknown_session": "the session named was never opened, or is already closed",
    "conflict": "a retry differs from what was already stored under the same key",
    "out_of_order": "a trial number does not follow the last stored trial",
    "checksum": "a serial line's checksum is wrong, or missing where the port requires one",
    "internal": "rigloop failed; the request was not applied and may be retried",
}

Scalar = bool | int | float | str | None
RequestId = int | str

_ID_RE = re.compile(r"[A-Za-z0-9_.:-]{1,%d}" % ID_MAX)


class MessageError(WireError):
    """A message could not be decoded, or an error to report back to its sender.

    Beyond ``code``, ``field`` and ``raw`` (see ``WireError``): ``request_id`` is the
    request's id when it could be read (so the error reply can echo it), ``line`` the
    1-based line number on a serial port and ``excerpt`` a short printable excerpt of
    the bad input, safe to log. ``raw`` stays None: payloads are not kept.
    """

    def __init__(
        self,
        code: str,
        message: str,
        *,
        field: str | None = None,
        request_id: RequestId | None = None,
        line: int | None = None,
        excerpt: str | None = None,
    ):
        if code not in ERROR_CODES:
            raise BadArgument("code", f"one of {', '.join(ERROR_CODES)}", code)
        super().__init__(code, message, field=field)
        self.request_id = request_id
        self.line = line
        self.excerpt = excerpt

    def __repr__(self) -> str:
        return f"MessageError({self.code!r}, {str(self)!r}, field={self.field!r}, line={self.line!r})"

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, MessageError):
            return NotImplemented
        return self._key() == other._key()

    def __hash__(self) -> int:
        return hash(self._key())

    def _key(self) -> tuple:
        return (self.code, str(self), self.field, self.request_id, self.line, self.excerpt)


# --------------------------------------------------------------------------- checks


def show(value: Any, limit: int = 60) -> str:
    """A short repr for messages: never more than ``limit`` characters."""
    text = repr(value)
    return text if len(text) <= limit else text[: limit - 3] + "..."


def excerpt(data: bytes | str, limit: int = 40) -> str:
    """Printable ASCII excerpt of raw input for logs: other bytes as ``\\xNN``, truncated."""
    if isinstance(data, str):
        data = data.encode("utf-8", "replace")
    out = []
    for b in data[:limit]:
        out.append(chr(b) if 0x20 <= b < 0x7F and b != 0x5C else f"\\x{b:02x}")
    text = "".join(out)
    return text + "..." if len(data) > limit else text


def check_id(value: Any, name: str = "id") -> RequestId:
    if isinstance(value, int) and not isinstance(value, bool):
        if 0 <= value < 2**63:
            return value
    elif isinstance(value, str) and _ID_RE.fullmatch(value):
        return value
    raise BadArgument(name, f"a whole number in [0, 2**63) or 1-{ID_MAX} characters of [A-Za-z0-9_.:-]", value)


def check_ident(name: str, value: Any) -> str:
    if not isinstance(value, str) or not value or len(value) > 64 or not value.isprintable() or value != value.strip():
        raise BadArgument(name, "a printable string of 1-64 characters without surrounding spaces", value)
    return value


def check_text(name: str, value: Any, limit: int) -> str:
    if not isinstance(value, str) or len(value) > limit:
        raise BadArgument(name, f"a string of at most {limit} characters", value)
    return value


def check_bool(name: str, value: Any) -> bool:
    if not isinstance(value, bool):
        raise BadArgument(name, "true or false", value)
    return value


def check_scalar(name: str, value: Any, str_limit: int) -> Scalar:
    if value is None or isinstance(value, bool):
        return value
    if isinstance(value, int):
        if not INT_MIN <= value <= INT_MAX:
            raise BadArgument(name, "a whole number in [-2**63, 2**64)", value)
        return value
    if isinstance(value, float):
        if not math.isfinite(value):
            raise BadArgument(name, "a finite number", value)
        return value
    if isinstance(value, str):
        return check_text(name, value, str_limit)
    raise BadArgument(name, "a number, string, boolean or nil", value)


def check_state(value: Any, path: str = "state", depth: int = 1, count: list[int] | None = None) -> dict[str, Any]:
    """A state summary: a map of names to scalars or non-empty maps of the same."""
    count = [0] if count is None else count
    if not isinstance(value, Mapping):
        raise BadArgument(path, "a map", value)
    if depth > STATE_MAX_DEPTH:
        raise BadArgument(path, f"nested at most {STATE_MAX_DEPTH} maps deep", value)
    out: dict[str, Any] = {}
    for key, item in value.items():
        check_ident(f"{path} key", key)
        here = f"{path}.{key}"
        if isinstance(item, Mapping):
            if not item:
                raise BadArgument(here, "a non-empty map or a scalar", item)
            out[key] = check_state(item, here, depth + 1, count)
        else:
            out[key] = check_scalar(here, item, STATE_MAX_STR)
            count[0] += 1
            if count[0] > STATE_MAX_ENTRIES:
                raise BadArgument(path, f"a map of at most {STATE_MAX_ENTRIES} entries", count[0])
    return out


# --------------------------------------------------------------------------- requests


@dataclass(frozen=True, slots=True)
class OpenSession:
    """The rig starts ``session`` for ``subject`` on ``rig`` under rule file ``rules``.

    ``seed`` fixes the session's random draws (rigloop picks one when None);
    ``profile`` names the rig profile (cues, valve calibration) when the rig has one;
    ``wall_time`` is the session's start on the rig's clock (s since the Unix epoch) —
    send it whenever trials carry ``wall_time``, so session minutes are read off one clock.
    """

    id: RequestId
    subject: str
    rig: str
    session: str
    rules: str
    seed: int | None = None
    profile: str | None = None
    wall_time: float | None = None
    type: ClassVar[str] = "open"

    def __post_init__(self) -> None:
        check_id(self.id)
        for name in ("subject", "rig", "session", "rules"):
            check_ident(name, getattr(self, name))
        if self.seed is not None and (
            isinstance(self.seed, bool) or not isinstance(self.seed, int) or not 0 <= self.seed < 2**63
        ):
            raise BadArgument("seed", "a whole number in [0, 2**63) or nil", self.seed)
        if self.profile is not None:
            check_ident("profile", self.profile)
        if self.wall_time is not None:
            w = self.wall_time
            if isinstance(w, bool) or not isinstance(w, (int, float)) or not math.isfinite(w) or w < 0:
                raise BadArgument("wall_time", "a finite number of seconds since the epoch >= 0, or nil", w)
            object.__setattr__(self, "wall_time", float(w))


@dataclass(frozen=True, slots=True)
class TrialReport:
    """One finished trial (``event``), reported by the rig that ran it."""

    id: RequestId
    event: TrialEvent
    type: ClassVar[str] = "trial"

    def __post_init__(self) -> None:
        check_id(self.id)
        if not isinstance(self.event, TrialEvent):
            raise BadArgument("event", "a TrialEvent", self.event)


@dataclass(frozen=True, slots=True)
class CloseSession:
    """The rig ends ``session``; rigloop answers with an ``Ack``."""

    id: RequestId
    subject: str
    rig: str
    session: str
    type: ClassVar[str] = "close"

    def __post_init__(self) -> None:
        check_id(self.id)
        for name in ("subject", "rig", "session"):
            check_ident(name, getattr(self, name))


@dataclass(frozen=True, slots=True)
class QueryState:
    """Ask for a summary of ``subject``'s state; answered with a ``StateReply``."""

    id: RequestId
    subject: str
    type: ClassVar[str] = "query"

    def __post_init__(self) -> None:
        check_id(self.id)
        check_ident("subject", self.subject)


@dataclass(frozen=True, slots=True)
class Ping:
    """Liveness check; answered with a ``Pong`` carrying the same id."""

    id: RequestId
    type: ClassVar[str] = "ping"

    def __post_init__(self) -> None:
        check_id(self.id)


Request = OpenSession | TrialReport | CloseSession | QueryState | Ping
REQUEST_TYPES: dict[str, type] = {c.type: c for c in (OpenSession, TrialReport, CloseSession, QueryState, Ping)}

# --------------------------------------------------------------------------- replies


@dataclass(frozen=True, slots=True)
class DecisionReply:
    """What the rig should do next. ``duplicate`` is True when this is the stored
    decision resent for a retried trial (nothing was counted twice)."""

    id: RequestId
    decision: Decision
    duplicate: bool = False
    type: ClassVar[str] = "decision"

    def __post_init__(self) -> None:
        check_id(self.id)
        if not isinstance(self.decision, Decision):
            raise BadArgument("decision", "a Decision", self.decision)
        for name in ("block", "stage"):
            check_text(f"decision.{name}", getattr(self.decision, name), MAX_KEY)
        check_bool("duplicate", self.duplicate)


@dataclass(frozen=True, slots=True)
class Ack:
    """The request of type ``of`` (e.g. ``"close"``) was done and is durable."""

    id: RequestId
    of: str
    type: ClassVar[str] = "ack"

    def __post_init__(self) -> None:
        check_id(self.id)
        if self.of not in REQUEST_TYPES:
            raise BadArgument("of", f"a request type ({', '.join(REQUEST_TYPES)})", self.of)


@dataclass(frozen=True, slots=True)
class StateReply:
    """A plain summary of ``subject``'s state: names to scalars or nested maps
    (at most 3 deep, 128 values). Treat ``state`` as read-only."""

    id: RequestId
    subject: str
    state: Mapping[str, Any]
    type: ClassVar[str] = "state"

    def __post_init__(self) -> None:
        check_id(self.id)
        check_ident("subject", self.subject)
        object.__setattr__(self, "state", check_state(self.state))


@dataclass(frozen=True, slots=True)
class Pong:
    """Answer to a ``Ping``."""

    id: RequestId
    type: ClassVar[str] = "pong"

    def __post_init__(self) -> None:
        check_id(self.id)


@dataclass(frozen=True, slots=True)
class ErrorReply:
    """The request failed. ``code`` is one of ``ERROR_CODES``; ``message`` is a sentence
    for people; ``field`` names the offending field when there is one; ``id`` is None
    when the request's id could not be read."""

    id: RequestId | None
    code: str
    message: str
    field: str | None = None
    type: ClassVar[str] = "error"

    def __post_init__(self) -> None:
        if self.id is not None:
            check_id(self.id)
        if self.code not in ERROR_CODES:
            raise BadArgument("code", f"one of {', '.join(ERROR_CODES)}", self.code)
        check_text("message", self.message, MAX_MESSAGE)
        if self.field is not None:
            check_text("field", self.field, 2 * MAX_KEY)

    @classmethod
    def from_error(cls, err: WireError, request_id: RequestId | None = None) -> ErrorReply:
        """The reply for a decode error: echoes its id, code and field; the sentence is
        cut to ``MAX_MESSAGE`` characters."""
        rid = getattr(err, "request_id", None) if request_id is None else request_id
        field = err.field if err.field is None or len(err.field) <= 2 * MAX_KEY else err.field[: 2 * MAX_KEY]
        text = str(err)
        if len(text) > MAX_MESSAGE:
            text = text[: MAX_MESSAGE - 3] + "..."
        return cls(rid, err.code, text, field)


Reply = DecisionReply | Ack | StateReply | Pong | ErrorReply
REPLY_TYPES: dict[str, type] = {c.type: c for c in (DecisionReply, Ack, StateReply, Pong, ErrorReply)}
