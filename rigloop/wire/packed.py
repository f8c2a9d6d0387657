"""msgpack codec: one map per ZeroMQ frame, with a ``type`` field.

Decoding never raises anything but ``MessageError`` (a ``WireError``), whatever the
bytes: msgpack's own exceptions share no base class, so every exception from
``unpackb`` is caught and named. ``unpackb`` sizes its limits from the frame's length,
so a tiny frame cannot declare a huge array; our own limits (frame size, nesting,
string, list and map lengths) and a schema check follow, naming the field.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from typing import Any

import msgpack

from ..core.trial import Decision, TrialEvent, plain_event
from ..errors import BadArgument, BadEvent
from .fields import DECISION, DUPLICATE, FIELDS, Field
from .messages import (
    MAX_DEPTH,
    MAX_FRAME,
    MAX_KEY,
    MAX_LIST,
    MAX_MAP,
    MAX_MESSAGE,
    MAX_STR,
    REPLY_TYPES,
    REQUEST_TYPES,
    DecisionReply,
    MessageError,
    Reply,
    Request,
    RequestId,
    StateReply,
    TrialReport,
    _ID_RE,
    check_id,
    show,
)

_CUT = "[...]"

# --------------------------------------------------------------------------- public


def decode_request(frame: bytes) -> Request:
    """One frame from a rig -> a request value. Raises ``MessageError`` only."""
    if type(frame) is bytes:
        req = _plain_trial(frame)
        if req is not None:
            return req
    return _guard(frame, REQUEST_TYPES, _REQUEST_READERS)


def decode_request_reference(frame: bytes) -> Request:
    """``decode_request`` without its fast path: the readable reference it is tested against."""
    return _guard(frame, REQUEST_TYPES, _REQUEST_READERS)


def _plain_trial(frame: bytes) -> TrialReport | None:
    """The trial report a rig usually sends, decoded in one pass; None for anything else
    (a bad frame, another type, an unusual value), which takes the reference path and
    gets its result or its error there.

    What the reference checks, this proves another way: the frame must be exactly
    msgpack's own encoding of what it decodes to (so no map repeats a key -- a repeat
    would re-encode shorter -- and every integer and string is in its shortest form),
    the top map holds ``type``, ``id`` and ``event`` only, and ``core.trial.plain_event``
    accepts the event, whose tests bound every string far below ``MAX_STR`` and every
    list below ``MAX_LIST``. About half the reference's time (``tools/bench/latency.py
    --breakdown``: decode + validate); ``tests/test_wire_fast.py`` holds the two equal."""
    if not 0 < len(frame) <= MAX_FRAME:
        return None
    try:
        body = msgpack.unpackb(frame, raw=False, strict_map_key=True)
    except Exception:  # msgpack's errors share no base class; the reference names the fault
        return None
    if type(body) is not dict or len(body) != 3 or body.get("type") != "trial":
        return None
    rid = body.get("id")
    if not ((type(rid) is int and 0 <= rid < _ID_LIMIT) or (type(rid) is str and _ID_RE.fullmatch(rid))):
        return None
    event = plain_event(body.get("event"))
    if event is None or msgpack.packb(body, use_bin_type=True) != frame:
        return None
    return TrialReport(rid, event)


_ID_LIMIT = 2**63


def decode_reply(frame: bytes) -> Reply:
    """One frame from rigloop -> a reply value (the rig's side). Raises ``MessageError`` only."""
    return _guard(frame, REPLY_TYPES, _REPLY_READERS)


def encode_request(req: Request) -> bytes:
    """A request value -> one msgpack frame (for virtual rigs and tests)."""
    if type(req) not in REQUEST_TYPES.values():
        raise BadArgument("req", "a request value (OpenSession, TrialReport, ...)", req)
    body: dict[str, Any] = {"type": req.type, "id": req.id}
    if isinstance(req, TrialReport):
        body["event"] = req.event.to_dict()
    else:
        _put(body, req, FIELDS[req.type])
    return _pack(body)


def encode_reply(reply: Reply) -> bytes:
    """A reply value -> one msgpack frame. Reasons, overrides and warnings are cut to
    the decoder's limits (each string ends in ``[...]`` when cut), so every reply this
    returns decodes on the rig."""
    if type(reply) not in REPLY_TYPES.values():
        raise BadArgument("reply", "a reply value (DecisionReply, Ack, ...)", reply)
    body: dict[str, Any] = {"type": reply.type, "id": reply.id}
    if isinstance(reply, DecisionReply):
        d = reply.decision.to_dict()
        for name in ("reasons", "overrides", "warnings"):
            d[name] = _cut_list(d[name])
        body["decision"] = d
        body["duplicate"] = reply.duplicate
    elif isinstance(reply, StateReply):
        body["subject"] = reply.subject
        body["state"] = reply.state
    else:
        _put(body, reply, FIELDS[reply.type])
    frame = _pack(body)
    if len(frame) > MAX_FRAME:
        raise MessageError("too_large", f"reply is {len(frame)} bytes; the limit is {MAX_FRAME}", request_id=reply.id)
    return frame


# --------------------------------------------------------------------------- decoding


def _guard(frame: Any, types: Mapping[str, type], readers: Mapping[str, Callable]) -> Any:
    try:
        return _decode(frame, types, readers)
    except MessageError as err:
        if err.request_id is None and err.field != "id":
            err.request_id = salvage_id(frame)
        raise
    except Exception as err:  # a bug of ours, never the sender's fault: say so
        raise MessageError("internal", f"rigloop could not decode this message ({type(err).__name__})",
                           request_id=salvage_id(frame)) from None


def salvage_id(frame: Any) -> RequestId | None:
    """The top map's ``id`` of a frame that failed to decode, when it can still be read
    (once, and valid), else None: so an error reply about another field echoes it.

    Read leniently (bytes for strings, any keys, no limits but the frame's own length),
    only on the error path; a frame that is not a msgpack map at all gives None."""
    try:
        unpacker = msgpack.Unpacker(raw=True, strict_map_key=False, object_pairs_hook=list,
                                    max_buffer_size=max(len(frame), 1))
        unpacker.feed(frame)
        body = unpacker.unpack()
    except Exception:  # msgpack's errors share no base class; nothing readable
        return None
    if not isinstance(body, list):
        return None
    ids = [v for pair in body if isinstance(pair, tuple) and pair[0] in (b"id", "id") for v in pair[1:]]
    if len(ids) != 1:
        return None
    value = ids[0]
    if isinstance(value, bytes):
        try:
            value = value.decode("ascii")
        except UnicodeDecodeError:
            return None
    try:
        return check_id(value)
    except BadArgument:
        return None


def _decode(frame: Any, types: Mapping[str, type], readers: Mapping[str, Callable]) -> Any:
    if not isinstance(frame, (bytes, bytearray, memoryview)):
        raise MessageError("bad_message", f"a frame must be bytes (got {type(frame).__name__})")
    frame = bytes(frame)
    if len(frame) > MAX_FRAME:
        raise MessageError("too_large", f"frame is {len(frame)} bytes; the limit is {MAX_FRAME}")
    if not frame:
        raise MessageError("bad_message", "frame is empty")
    body = _unpack(frame)
    if not isinstance(body, dict):
        raise MessageError("bad_message", f"a message must be a msgpack map with a 'type' field (got {_kind(body)})")
    _check_tree(body)
    rid = None
    if body.get("id") is not None:
        try:
            rid = check_id(body["id"])
        except BadArgument as err:
            raise MessageError("bad_field", str(err), field="id") from None
    if "type" not in body:
        raise MessageError("bad_field", "'type' is missing", field="type", request_id=rid)
    kind = body["type"]
    if not isinstance(kind, str):
        raise MessageError("bad_field", f"'type' must be a string (got {_kind(kind)})", field="type", request_id=rid)
    if kind not in types:
        raise MessageError(
            "unknown_type", f"unknown message type {show(kind)} (expected one of: {', '.join(types)})", request_id=rid
        )
    if rid is None and kind != "error":  # an error reply may answer a request whose id was unreadable
        raise MessageError("bad_field", "'id' is missing", field="id")
    try:
        return readers[kind](_Fields(body, kind, rid))
    except MessageError:
        raise
    except BadEvent as err:
        name = f"event.{err.field}" if kind == "trial" else f"decision.{err.field}"
        raise MessageError("bad_field", f"{name!r} {err.rule} (got {show(err.value)})", field=name, request_id=rid) from None
    except BadArgument as err:
        raise MessageError("bad_field", str(err), field=err.argument, request_id=rid) from None


def _unpack(frame: bytes) -> Any:
    try:
        return msgpack.unpackb(frame, raw=False, strict_map_key=True, use_list=True, object_pairs_hook=_pairs)
    except MessageError:
        raise
    except msgpack.ExtraData as err:
        raise MessageError("bad_message", f"frame has {len(err.extra)} bytes after the message") from None
    except msgpack.StackError:
        raise MessageError("too_large", f"frame nests containers deeper than {MAX_DEPTH} levels") from None
    except UnicodeDecodeError:
        raise MessageError("bad_message", "frame holds a string that is not valid UTF-8") from None
    except msgpack.FormatError:
        raise MessageError("bad_message", "frame is not valid msgpack (reserved byte)") from None
    except ValueError as err:
        text = str(err)
        if "incomplete" in text:
            raise MessageError("bad_message", "frame is truncated (incomplete msgpack)") from None
        if "exceeds max" in text:
            raise MessageError("bad_message", "frame declares a string, array or map longer than itself") from None
        if "map key" in text:
            raise MessageError("bad_field", "map keys must be strings") from None
        raise MessageError("bad_message", "frame is not valid msgpack") from None
    except Exception as err:
        raise MessageError("bad_message", f"frame is not valid msgpack ({type(err).__name__})") from None


def _pairs(pairs: list[tuple[Any, Any]]) -> dict[str, Any]:
    if len(pairs) > MAX_MAP:
        raise MessageError("too_large", f"a map holds {len(pairs)} entries; the limit is {MAX_MAP}")
    out: dict[str, Any] = {}
    for key, value in pairs:
        if not isinstance(key, str):
            raise MessageError("bad_field", f"map keys must be strings (got {_kind(key)})")
        if len(key) > MAX_KEY:
            raise MessageError("too_large", f"a map key is {len(key)} characters; the limit is {MAX_KEY}")
        if key in out:
            raise MessageError("bad_field", f"{show(key)} appears twice in one map", field=key)
        out[key] = value
    return out


def _check_tree(body: dict[str, Any]) -> None:
    """Depth, length and type limits over the whole decoded tree (no recursion).

    A node's place is kept as a tuple of keys and indices and spelt out as a path
    (``event.cues[0]``) only for the error message, so a good frame costs one type
    test per value."""
    stack: list[tuple[Any, tuple, int]] = [(body, (), 1)]
    while stack:
        node, where, depth = stack.pop()
        if type(node) is dict:
            items = node.items()
        else:
            if len(node) > MAX_LIST:
                path = _path(where)
                raise MessageError("too_large", f"{path!r} holds {len(node)} entries; the limit is {MAX_LIST}", field=path)
            items = enumerate(node)
        nested = depth >= MAX_DEPTH
        for key, value in items:
            kind = type(value)
            if kind is str:
                if len(value) > MAX_STR:
                    path = _path((*where, key))
                    raise MessageError("too_large", f"{path!r} is {len(value)} characters; the limit is {MAX_STR}",
                                       field=path)
            elif kind is dict or kind is list:
                if nested:
                    raise MessageError("too_large", f"frame nests containers deeper than {MAX_DEPTH} levels",
                                       field=_path(where) or None)
                stack.append((value, (*where, key), depth + 1))
            elif value is None or kind is bool or kind is int or kind is float:
                continue
            elif kind is bytes or kind is bytearray:
                path = _path((*where, key))
                raise MessageError("bad_field", f"{path!r} must not be binary data; send text or numbers", field=path)
            else:
                path = _path((*where, key))
                raise MessageError("bad_field", f"{path!r} must not be a msgpack extension type", field=path)


def _path(where: tuple) -> str:
    """``("event", "cues", 0)`` -> ``"event.cues[0]"``: map keys joined by dots, list
    indices in brackets."""
    out = ""
    for key in where:
        if type(key) is int:
            out += f"[{key}]"
        else:
            out = f"{out}.{key}" if out else key
    return out


def _kind(value: Any) -> str:
    return {dict: "map", list: "array", str: "string", bytes: "binary", bool: "boolean", type(None): "nil"}.get(
        type(value), type(value).__name__
    )


class _Fields:
    """The fields of one decoded map, read by name with type checks."""

    def __init__(self, body: dict[str, Any], kind: str, rid: RequestId):
        self.body, self.kind, self.rid = body, kind, rid

    def only(self, *names: str) -> None:
        allowed = {"type", "id", *names}
        for key in self.body:
            if key not in allowed:
                raise MessageError(
                    "bad_field",
                    f"{key!r} is not a field of a {self.kind!r} message (fields: {', '.join(sorted(allowed))})",
                    field=key,
                    request_id=self.rid,
                )

    def get(self, name: str, expected: str, test: Callable[[Any], bool], *, optional: bool = False) -> Any:
        if name not in self.body or (optional and self.body[name] is None):
            if optional:
                return None
            raise MessageError("bad_field", f"{name!r} is missing", field=name, request_id=self.rid)
        value = self.body[name]
        if not test(value):
            raise MessageError(
                "bad_field", f"{name!r} must be {expected} (got {_kind(value)} {show(value)})", field=name, request_id=self.rid
            )
        return value

    def text(self, name: str, *, optional: bool = False) -> Any:
        return self.get(name, "a string", _is_str, optional=optional)

    def field(self, field: Field) -> Any:
        """A field of the shared table, checked for its kind (absent or nil: None)."""
        expected, test = _KINDS[field.kind]
        return self.get(field.name, expected, test, optional=field.optional)


def _is_map(v: Any) -> bool:
    return type(v) is dict


def _is_str(v: Any) -> bool:
    return isinstance(v, str)


def _is_int(v: Any) -> bool:
    return isinstance(v, int) and not isinstance(v, bool)


def _is_number(v: Any) -> bool:
    return _is_int(v) or isinstance(v, float)


def _is_bool(v: Any) -> bool:
    return isinstance(v, bool)


def _is_texts(v: Any) -> bool:
    return isinstance(v, list) and all(isinstance(s, str) for s in v)


# a field kind (fields.KINDS) -> (what a message says it must be, the test)
_KINDS: dict[str, tuple[str, Callable[[Any], bool]]] = {
    "text": ("a string", _is_str),
    "whole": ("a whole number", _is_int),
    "number": ("a number", _is_number),
    "flag": ("true or false", _is_bool),
    "texts": ("a list of strings", _is_texts),
}


def _flat_reader(cls: type, fields: tuple[Field, ...]) -> Callable[[_Fields], Any]:
    """The reader of a flat message: only its fields, each of its kind, in table order."""
    names = tuple(f.name for f in fields)

    def read(f: _Fields) -> Any:
        f.only(*names)
        return cls(f.rid, *(f.field(field) for field in fields))

    return read


def _read_trial(f: _Fields) -> TrialReport:
    if len(f.body) != 3 or "event" not in f.body:  # type, id and event: nothing to name
        f.only("event")
    event = f.get("event", "a map of trial fields", _is_map)
    for name in ("outcome", "response", "extra"):
        if event.get(name) is not None and not isinstance(event[name], dict):
            raise BadEvent(name, "must be a map", event[name])
    return TrialReport(f.rid, TrialEvent.from_dict(event))


_REQUEST_READERS = {kind: _flat_reader(cls, FIELDS[kind]) for kind, cls in REQUEST_TYPES.items() if kind in FIELDS}
_REQUEST_READERS["trial"] = _read_trial


def _decision_check(field: Field) -> tuple[str, Callable[[Any], bool], bool]:
    """(expected, test, required) of a decision field; nil passes only a nullable one."""
    expected, test = _KINDS[field.kind]
    if field.nullable:
        return f"{expected} or nil", lambda v: v is None or test(v), not field.optional
    return expected, test, not field.optional


_DECISION_TYPES = {field.name: _decision_check(field) for field in DECISION}


def _read_decision(f: _Fields) -> DecisionReply:
    f.only("decision", "duplicate")
    d = f.get("decision", "a map of decision fields", lambda v: isinstance(v, dict))
    for key in d:
        if key not in _DECISION_TYPES:
            raise MessageError("bad_field", f"'decision.{key}' is not a decision field", field=f"decision.{key}", request_id=f.rid)
    for name, (expected, test, required) in _DECISION_TYPES.items():
        if name not in d:
            if required:
                raise MessageError("bad_field", f"'decision.{name}' is missing", field=f"decision.{name}", request_id=f.rid)
        elif not test(d[name]):
            raise MessageError(
                "bad_field",
                f"'decision.{name}' must be {expected} (got {_kind(d[name])} {show(d[name])})",
                field=f"decision.{name}",
                request_id=f.rid,
            )
    duplicate = f.field(DUPLICATE)
    return DecisionReply(f.rid, Decision.from_dict(d), bool(duplicate))


def _read_state(f: _Fields) -> StateReply:
    f.only("subject", "state")
    return StateReply(f.rid, f.text("subject"), f.get("state", "a map", lambda v: isinstance(v, dict)))


_REPLY_READERS = {kind: _flat_reader(cls, FIELDS[kind]) for kind, cls in REPLY_TYPES.items() if kind in FIELDS}
_REPLY_READERS.update(decision=_read_decision, state=_read_state)

# --------------------------------------------------------------------------- encoding


def _put(body: dict[str, Any], value: Any, fields: tuple[Field, ...]) -> None:
    """A flat message's fields into ``body``, in table order; a None optional one is left out."""
    for field in fields:
        v = getattr(value, field.name)
        if v is not None or not field.optional:
            body[field.name] = v


def _pack(body: dict[str, Any]) -> bytes:
    try:
        return msgpack.packb(body, use_bin_type=True)
    except (OverflowError, ValueError, TypeError) as err:
        raise MessageError("bad_field", f"value cannot be sent as msgpack ({err})", request_id=body.get("id")) from None


def _cut_list(items: list[str]) -> list[str]:
    if len(items) > MAX_LIST:
        items = items[: MAX_LIST - 1] + [_CUT]
    return [s if len(s) <= MAX_STR else s[: MAX_STR - len(_CUT)] + _CUT for s in items]


assert MAX_MESSAGE <= MAX_STR
