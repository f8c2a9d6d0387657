"""The serial line protocol's messages: requests and replies <-> text lines.

See docs/protocol.md for every verb and key. Floats are written with ``repr`` so a
value read back is the same float (replay equals live); a reply line that would be
longer than ``max_line`` has its reasons, then warnings, then overrides cut, the last
kept text ending in ``[...]`` (an error reply's sentence likewise; a state reply drops
entries from the end and says ``omitted=N``).
"""

from __future__ import annotations

import re
from collections.abc import Callable
from functools import partial
from typing import Any

from ..core.trial import Decision, TrialEvent
from ..errors import BadArgument, BadEvent
from .checksum import crc16_hex
from .fields import DECISION, DUPLICATE, FIELDS, Field
from .messages import (
    ID_MAX,
    MAX_LINE,
    REPLY_TYPES,
    REQUEST_TYPES,
    DecisionReply,
    ErrorReply,
    MessageError,
    Reply,
    Request,
    RequestId,
    StateReply,
    TrialReport,
    check_id,
    show,
)
from .text import (
    FLOAT_RE,
    KEY_OK,
    NONFINITE_RE,
    PART_OK,
    TEXT_OK,
    Value,
    esc,
    fmt_float,
    fmt_scalar,
    fmt_str,
    join_line,
    read_flag,
    read_float,
    read_int,
    read_scalar,
    split_line,
    unesc,
)

CUT = "[...]"
REQUEST_VERBS = {"OPEN": "open", "TRIAL": "trial", "CLOSE": "close", "QUERY": "query", "PING": "ping"}
REPLY_VERBS = {"DECISION": "decision", "ACK": "ack", "STATE": "state", "PONG": "pong", "ERR": "error"}

# TrialEvent field (dotted, as BadEvent names it) -> serial key
_EVENT_KEYS = {
    "subject": "subj",
    "rig": "rig",
    "session": "sess",
    "trial": "n",
    "cues": "cues",
    "outcome.reward_ul": "rew",
    "outcome.reward_time": "rew",
    "outcome.punishment": "pun",
    "outcome.punishment_time": "pun",
    "outcome.timeout_s": "to",
    "response.kind": "resp",
    "response.value": "resp",
    "response.result": "res",
    "response.latency": "lat",
    "duration": "dur",
    "wall_time": "wall",
    "steps": "steps",
}
# Decision field -> serial key, for error keys (the text lists keep their field names there)
_DECISION_KEYS = {f.name: f.key for f in DECISION if f.kind != "texts"}
# the order of a DECISION line's keys; the text lists go last, where a long line is cut
_DECISION_LAYOUT = ("subj", "sess", "n", "cue", "p", "ul", "armed", "valve", "diff", "block", "stage", "end", "dup",
                    "over", "warn", "why")
# message type -> its line's key order, where that is not its table's: an ERR line's
# sentence goes last, where a long line is cut
_LAYOUTS = {"error": ("code", "field", "msg")}


# --------------------------------------------------------------------------- public


def parse_request_line(line: bytes, *, require_checksum: bool = False, max_line: int = MAX_LINE) -> Request:
    """One line from a rig -> a request value. Raises ``MessageError`` only."""
    return _parse(line, REQUEST_VERBS, _REQUEST_READERS, require_checksum, max_line)


def parse_reply_line(line: bytes, *, require_checksum: bool = False, max_line: int = MAX_LINE) -> Reply:
    """One line from rigloop -> a reply value (the rig's side). Raises ``MessageError`` only."""
    return _parse(line, REPLY_VERBS, _REPLY_READERS, require_checksum, max_line)


def format_request_line(req: Request, checksum: bool = True, *, max_line: int = MAX_LINE) -> bytes:
    """A request value -> one line ending in ``\\n``; ``too_large`` if it exceeds ``max_line``."""
    writer = _REQUEST_WRITERS.get(type(req))
    if writer is None:
        raise BadArgument("req", "a request value (OpenSession, TrialReport, ...)", req)
    fields = [("id", fmt_scalar(req.id))] + writer(req)
    line = join_line(_verb(REQUEST_VERBS, req.type), fields, checksum=checksum)
    if len(line) - 1 > max_line:
        raise MessageError(
            "too_large", f"{req.type} line would be {len(line) - 1} bytes; the limit is {max_line}", request_id=req.id
        )
    return line


def format_reply_line(reply: Reply, *, checksum: bool = True, max_line: int = MAX_LINE) -> bytes:
    """A reply value -> one line ending in ``\\n``, at most ``max_line`` bytes before it.

    Long texts are cut (see the module docstring); if the line still does not fit
    (very long names), raises ``MessageError('too_large')``.
    """
    writer = _REPLY_WRITERS.get(type(reply))
    if writer is None:
        raise BadArgument("reply", "a reply value (DecisionReply, Ack, ...)", reply)
    verb = _verb(REPLY_VERBS, reply.type)
    head = [("id", fmt_scalar(reply.id))] if reply.id is not None else []
    fixed, cuttable = writer(reply)
    overhead = 5 if checksum else 0  # "*XXXX"

    def size(fields: list[tuple[str, str]]) -> int:
        return len(verb) + sum(len(k) + len(v) + 2 for k, v in fields) + overhead

    fields = head + fixed
    budget = max_line - size(fields)
    tail: list[tuple[str, str]] = []
    if isinstance(reply, StateReply):
        tail = _fit_state(cuttable, budget)
    else:
        # cuttable: [(key, texts, is_list)] in line order; the last one is cut first
        encoded: list[tuple[str, str | None]] = [(k, _fmt_texts(items, is_list)) for k, items, is_list in cuttable]
        for i in reversed(range(len(encoded))):
            over = size(fields + [(k, v) for k, v in encoded if v is not None]) - max_line
            if over <= 0:
                break
            key, items, is_list = cuttable[i]
            encoded[i] = (key, _fit_texts(items, is_list, len(encoded[i][1]) - over))
        tail = [(k, v) for k, v in encoded if v is not None]
    fields = fields + tail
    line = join_line(verb, fields, checksum=checksum)
    if len(line) - 1 > max_line:
        raise MessageError(
            "too_large", f"{reply.type} line would be {len(line) - 1} bytes; the limit is {max_line}", request_id=reply.id
        )
    return line


def serial_key(field: str) -> str:
    """The serial key for a field named as in the msgpack encoding, for error replies a
    daemon sends over serial: ``'session'`` -> ``'sess'``, ``'event.outcome.reward_ul'``
    -> ``'rew'``, ``'event.extra.contrast'`` -> ``'x.contrast'``; others unchanged."""
    if field.startswith("event."):
        return _serial_key(field[len("event.") :], _EVENT_KEYS)
    if field.startswith("decision."):
        return _serial_key(field[len("decision.") :], _DECISION_KEYS)
    return _serial_key(field, {**_DECISION_KEYS, **_EVENT_KEYS})


# --------------------------------------------------------------------------- parsing


def _verb(table: dict[str, str], kind: str) -> str:
    return next(v for v, k in table.items() if k == kind)


class _Line:
    """The fields of one parsed line, taken by key with type checks."""

    def __init__(self, verb: str, fields: list[tuple[str, Value]]):
        self.verb = verb
        self.values: dict[str, Value] = {}
        self.twice: str | None = None  # the first key written twice (refused once the id is read)
        for key, val in fields:
            if key in self.values:
                self.twice = self.twice or key
                continue
            self.values[key] = val
        self.rid: RequestId | None = None

    def only(self, keys: tuple[str, ...], prefix: str | None = None) -> None:
        for key in self.values:
            if key not in keys and not (prefix and key.startswith(prefix) and len(key) > len(prefix)):
                extra = f", {prefix}<name>" if prefix else ""
                raise MessageError(
                    "bad_field", f"{key!r} is not a key of {self.verb} (keys: {', '.join(keys)}{extra})", field=key
                )

    def raw(self, key: str, *, optional: bool = False) -> str | None:
        val = self.values.get(key)
        if val is None:
            if optional:
                return None
            raise MessageError("bad_field", f"{key!r} is missing", field=key)
        return val.raw

    def text(self, key: str, *, optional: bool = False) -> str | None:
        raw = self.raw(key, optional=optional)
        return None if raw is None else unesc(raw, key)

    def number(self, key: str, *, optional: bool = False) -> float | None:
        raw = self.raw(key, optional=optional)
        return None if raw is None else read_float(raw, key)

    def field(self, field: Field) -> Any:
        """A field of the shared table read for its kind; left out: None (a flag: false,
        a text list: empty). A nil field is one left out of a line."""
        raw = self.raw(field.key, optional=field.optional or field.nullable)
        if raw is None:
            return _ABSENT.get(field.kind)
        return _READ[field.kind](raw, field.key)

    def prefixed(self, prefix: str) -> list[tuple[list[str], Any]]:
        out = []
        for key, val in self.values.items():
            if key.startswith(prefix) and len(key) > len(prefix):
                path = [unesc(seg, key) for seg in key[len(prefix) :].split(".")]
                out.append((path, read_scalar(val, key)))
        return out


def _parse(line: Any, verbs: dict[str, str], readers: dict[str, Callable], require_checksum: bool, max_line: int):
    if isinstance(line, str):
        try:
            line = line.encode("ascii")
        except UnicodeEncodeError:
            raise MessageError("bad_message", "line holds characters outside printable ASCII") from None
    if not isinstance(line, (bytes, bytearray, memoryview)):
        raise MessageError("bad_message", f"a line must be bytes (got {type(line).__name__})")
    try:
        verb, fields = split_line(line, require_checksum=require_checksum, max_line=max_line)
    except MessageError as err:
        if err.code == "bad_message":  # not a checksum failure: the id may still be readable
            err.request_id = salvage_line_id(bytes(line), max_line)
        raise
    parsed = _Line(verb, fields)
    if parsed.twice == "id":
        raise MessageError("bad_field", "'id' appears twice in the line", field="id")
    if "id" in parsed.values:
        try:
            parsed.rid = check_id(read_scalar(parsed.values["id"], "id"))
        except (BadArgument, MessageError) as err:
            raise MessageError("bad_field", str(err), field="id") from None
    try:
        if verb not in verbs:
            raise MessageError("unknown_type", f"unknown verb {show(verb)} (expected one of: {', '.join(verbs)})")
        if parsed.rid is None and verb != "ERR":
            raise MessageError("bad_field", "'id' is missing", field="id")
        if parsed.twice is not None:
            raise MessageError("bad_field", f"{parsed.twice!r} appears twice in the line", field=parsed.twice)
        return readers[verb](parsed)
    except MessageError as err:
        err.request_id = parsed.rid
        raise
    except BadEvent as err:
        table = _EVENT_KEYS if verb == "TRIAL" else _DECISION_KEYS
        key = _serial_key(err.field, table)
        raise MessageError(
            "bad_field", f"{key!r} ({err.field}) {err.rule} (got {show(err.value)})", field=key, request_id=parsed.rid
        ) from None
    except BadArgument as err:
        key = _serial_key(err.argument, _DECISION_KEYS if verb == "DECISION" else _EVENT_KEYS)
        raise MessageError("bad_field", f"{key!r}: {err}", field=key, request_id=parsed.rid) from None


_BARE_ID = re.compile(rb"(?<= )id=([A-Za-z0-9_.:-]{1,%d})(?= |\*|\Z)" % ID_MAX)


def salvage_line_id(line: bytes, max_line: int = MAX_LINE) -> RequestId | None:
    """The bare ``id=`` of a line that failed its syntax (a stray byte, a bad field),
    when it is written once and its checksum, if any, holds; else None. Lines whose
    checksum failed are not read: there the id may be the damaged part."""
    line = line.rstrip(b"\r\n")
    if len(line) > max_line:
        return None
    star = line.rfind(b"*")
    if star >= 0:
        said = line[star + 1 :].strip(b" ")
        if len(said) != 4 or said.upper() != crc16_hex(line[:star]).encode("ascii"):
            return None
        line = line[:star]
    found = _BARE_ID.findall(line)
    if len(found) != 1:
        return None
    raw = found[0].decode("ascii")
    return int(raw) if raw.isdigit() and int(raw) < 2**63 else raw


def _serial_key(name: str, table: dict[str, str]) -> str:
    if name in table:
        return table[name]
    if name.startswith("cues"):
        return "cues"
    if name.startswith("steps"):
        return "steps"
    if name.startswith("extra"):
        rest = name[len("extra") :].lstrip(".")
        return "x." + esc(rest, KEY_OK) if rest and rest != "key" else "x."
    if name.startswith("state"):
        rest = name[len("state") :].lstrip(".")
        return "s." + rest if rest and rest != "key" else "s."
    if name.startswith("decision."):
        return _serial_key(name[len("decision.") :], table)
    return name


def _texts(raw: str, key: str) -> tuple[str, ...]:
    return tuple(unesc(part, key) for part in raw.split("|"))


# a field kind (fields.KINDS) -> its reader (raw value, key) and its writer (value -> raw)
_READ: dict[str, Callable[[str, str], Any]] = {
    "text": unesc, "whole": read_int, "number": read_float, "flag": read_flag, "texts": _texts,
}
_ABSENT = {"flag": False, "texts": ()}
_WRITE: dict[str, Callable[[Any], str]] = {
    "text": fmt_str, "whole": str, "number": fmt_float, "flag": lambda v: "1" if v else "0",
}


def _flat_reader(cls: type, fields: tuple[Field, ...], layout: tuple[str, ...] | None = None) -> Callable[[_Line], Any]:
    """The reader of a flat message: only its keys (``layout``: their line order), each
    read for its kind, in table order."""
    keys = ("id", *(layout or (f.key for f in fields)))

    def read(f: _Line) -> Any:
        f.only(keys)
        return cls(f.rid, *(f.field(field) for field in fields))

    return read


_TRIAL_KEYS = ("id", *dict.fromkeys(_EVENT_KEYS.values()))


def _read_trial(f: _Line) -> TrialReport:
    f.only(_TRIAL_KEYS, "x.")
    cues = []
    raw = f.raw("cues", optional=True)
    if raw:
        for item in raw.split(","):
            parts = item.split(":")
            if len(parts) != 3:
                raise MessageError("bad_field", f"'cues' entries must be cue:onset:offset (got {show(item)})", field="cues")
            cues.append([unesc(parts[0], "cues"), read_float(parts[1], "cues"), read_float(parts[2], "cues")])
    outcome: dict[str, Any] = {}
    raw = f.raw("rew", optional=True)
    if raw is not None:
        parts = raw.split("@")
        if len(parts) > 2:
            raise MessageError("bad_field", f"'rew' must be uL or uL@time (got {show(raw)})", field="rew")
        outcome["reward_ul"] = read_float(parts[0], "rew")
        if len(parts) == 2:
            outcome["reward_time"] = read_float(parts[1], "rew")
    raw = f.raw("pun", optional=True)
    if raw is not None:
        parts = raw.split("@")
        if len(parts) > 2:
            raise MessageError("bad_field", f"'pun' must be kind, kind@time or @time (got {show(raw)})", field="pun")
        outcome["punishment"] = unesc(parts[0], "pun") or None
        if len(parts) == 2:
            outcome["punishment_time"] = read_float(parts[1], "pun")
    timeout = f.number("to", optional=True)
    if timeout is not None:
        outcome["timeout_s"] = timeout
    response: dict[str, Any] = {}
    raw = f.raw("resp", optional=True)
    if raw is not None:
        kind, sep, value = raw.partition(":")
        response["kind"] = unesc(kind, "resp")
        if sep:
            numeric = FLOAT_RE.fullmatch(value) or NONFINITE_RE.fullmatch(value)
            response["value"] = read_float(value, "resp") if numeric else unesc(value, "resp")
    result = f.text("res", optional=True)
    if result is not None:
        response["result"] = result
    latency = f.number("lat", optional=True)
    if latency is not None:
        response["latency"] = latency
    extra: dict[str, Any] = {}
    for path, value in f.prefixed("x."):
        name = ".".join(path)
        if name in extra:
            raise MessageError("bad_field", f"extra field {show(name)} appears twice", field="x." + esc(name, KEY_OK))
        extra[name] = value
    steps = _read_steps(f.raw("steps", optional=True))
    data = {
        "subject": f.text("subj"),
        "rig": f.text("rig"),
        "session": f.text("sess"),
        "trial": read_int(f.raw("n"), "n"),
        "cues": cues,
        "outcome": outcome,
        "response": response,
        "duration": f.number("dur", optional=True),
        "wall_time": f.number("wall", optional=True) or 0.0,
        "extra": extra,
    }
    if steps:
        data["steps"] = steps
    return TrialReport(f.rid, TrialEvent.from_dict(data))


def _read_steps(raw: str | None) -> list[dict[str, Any]]:
    """``steps=state:action:time:uL,...`` (action empty for none; ``:uL`` may be left out)."""
    if not raw:
        return []
    steps = []
    for item in raw.split(","):
        parts = item.split(":")
        if len(parts) not in (3, 4):
            raise MessageError("bad_field", f"'steps' entries must be state:action:time or state:action:time:uL "
                                            f"(got {show(item)})", field="steps")
        step = {"state": unesc(parts[0], "steps"), "action": unesc(parts[1], "steps") or None,
                "time": read_float(parts[2], "steps")}
        if len(parts) == 4:
            step["reward_ul"] = read_float(parts[3], "steps")
        steps.append(step)
    return steps


_REQUEST_READERS = {verb: _flat_reader(REQUEST_TYPES[kind], FIELDS[kind], _LAYOUTS.get(kind))
                    for verb, kind in REQUEST_VERBS.items() if kind in FIELDS}
_REQUEST_READERS["TRIAL"] = _read_trial


def _read_decision(f: _Line) -> DecisionReply:
    f.only(("id", *_DECISION_LAYOUT))
    decision = Decision(*(f.field(field) for field in DECISION))
    return DecisionReply(f.rid, decision, f.field(DUPLICATE))


def _read_state(f: _Line) -> StateReply:
    f.only(("id", "subj", "omitted"), "s.")
    omitted = f.raw("omitted", optional=True)
    if omitted is not None:
        read_int(omitted, "omitted")
    state: dict[str, Any] = {}
    for path, value in f.prefixed("s."):
        node = state
        for seg in path[:-1]:
            node = node.setdefault(seg, {})
            if not isinstance(node, dict):
                raise MessageError("bad_field", f"state entry {show('.'.join(path))} is both a value and a map", field="s.")
        if path[-1] in node:
            raise MessageError("bad_field", f"state entry {show('.'.join(path))} appears twice or is both a value and a map", field="s.")
        node[path[-1]] = value
    return StateReply(f.rid, f.text("subj"), state)


_REPLY_READERS = {verb: _flat_reader(REPLY_TYPES[kind], FIELDS[kind], _LAYOUTS.get(kind))
                  for verb, kind in REPLY_VERBS.items() if kind in FIELDS}
_REPLY_READERS.update(DECISION=_read_decision, STATE=_read_state)

# --------------------------------------------------------------------------- writing


def _write_flat(value: Any, fields: tuple[Field, ...]) -> list[tuple[str, str]]:
    """A flat message's (key, raw) pairs in table order; a None field is left out."""
    return [(f.key, _WRITE[f.kind](v)) for f in fields if (v := getattr(value, f.name)) is not None]


def _part_value(v: float | str) -> str:
    if isinstance(v, float):
        return fmt_float(v)
    text = esc(v, PART_OK)
    if FLOAT_RE.fullmatch(text) or NONFINITE_RE.fullmatch(text):  # reads as a number: escape its first character
        text = "".join(f"%{b:02X}" for b in v[0].encode()) + text[1:]
    return text


def _write_trial(r: TrialReport) -> list[tuple[str, str]]:
    e = r.event
    out = [("subj", fmt_str(e.subject)), ("rig", fmt_str(e.rig)), ("sess", fmt_str(e.session)), ("n", str(e.trial))]
    if e.cues:
        out.append(("cues", ",".join(f"{esc(c.cue, PART_OK)}:{fmt_float(c.onset)}:{fmt_float(c.offset)}" for c in e.cues)))
    o = e.outcome
    if o.reward_ul != 0 or o.reward_time is not None:
        out.append(("rew", fmt_float(o.reward_ul) + ("" if o.reward_time is None else "@" + fmt_float(o.reward_time))))
    if o.punishment is not None or o.punishment_time is not None:
        kind = "" if o.punishment is None else esc(o.punishment, PART_OK)
        out.append(("pun", kind + ("" if o.punishment_time is None else "@" + fmt_float(o.punishment_time))))
    if o.timeout_s != 0:
        out.append(("to", fmt_float(o.timeout_s)))
    p = e.response
    if p.kind != "none" or p.value is not None:
        out.append(("resp", esc(p.kind, PART_OK) + ("" if p.value is None else ":" + _part_value(p.value))))
    if p.result is not None:
        out.append(("res", fmt_str(p.result)))
    if p.latency is not None:
        out.append(("lat", fmt_float(p.latency)))
    out.append(("dur", fmt_float(e.duration)))
    if e.wall_time != 0:
        out.append(("wall", fmt_float(e.wall_time)))
    if e.steps:
        out.append(("steps", ",".join(
            f"{esc(s.state, PART_OK)}:{'' if s.action is None else esc(s.action, PART_OK)}:{fmt_float(s.time)}"
            + ("" if s.reward_ul == 0 else ":" + fmt_float(s.reward_ul)) for s in e.steps)))
    out.extend(("x." + esc(k, KEY_OK), fmt_scalar(v)) for k, v in e.extra.items())
    return out


_REQUEST_WRITERS = {cls: partial(_write_flat, fields=FIELDS[kind]) for kind, cls in REQUEST_TYPES.items() if kind in FIELDS}
_REQUEST_WRITERS[TrialReport] = _write_trial
assert set(REQUEST_TYPES.values()) == set(_REQUEST_WRITERS)


# a DECISION line's fields in line order: (key, attribute, writer; None for a text list)
_DECISION_LINE = tuple((f.key, f.name, _WRITE.get(f.kind))
                       for key in _DECISION_LAYOUT for f in (*DECISION, DUPLICATE) if f.key == key)


def _write_decision(r: DecisionReply):
    """The decision's fields in line order; its non-empty text lists are the cuttable part."""
    d = r.decision
    out, cuttable = [], []
    for key, name, write in _DECISION_LINE:
        value = r.duplicate if key == "dup" else getattr(d, name)
        if write is None:
            if value:
                cuttable.append((key, list(value), True))
        elif value is not None:
            out.append((key, write(value)))
    return out, cuttable


def _write_error(r: ErrorReply):
    out = [("code", r.code)]
    if r.field is not None:
        out.append(("field", fmt_str(r.field)))
    return out, [("msg", [r.message], False)]


def _flatten(state: dict[str, Any], prefix: str) -> list[tuple[str, str]]:
    out = []
    for key, value in state.items():
        name = prefix + esc(key, KEY_OK)
        if isinstance(value, dict):
            out.extend(_flatten(value, name + "."))
        else:
            out.append((name, fmt_scalar(value)))
    return out


def _write_flat_reply(reply: Reply, fields: tuple[Field, ...]):
    return _write_flat(reply, fields), []


_REPLY_WRITERS = {cls: partial(_write_flat_reply, fields=FIELDS[kind]) for kind, cls in REPLY_TYPES.items() if kind in FIELDS}
_REPLY_WRITERS.update({
    DecisionReply: _write_decision,
    StateReply: lambda r: ([("subj", fmt_str(r.subject))], _flatten(r.state, "s.")),
    ErrorReply: _write_error,
})
assert set(REPLY_TYPES.values()) == set(_REPLY_WRITERS)


def _fmt_texts(items: list[str], is_list: bool) -> str:
    ok = TEXT_OK if is_list else TEXT_OK | {"|"}
    return '"' + "|".join(esc(s, ok) for s in items) + '"'


def _fit_texts(items: list[str], is_list: bool, room: int) -> str | None:
    """The quoted value of at most ``room`` characters: whole items first, the last
    one cut at a character boundary, ending in ``[...]``; None if nothing fits."""
    ok = TEXT_OK if is_list else TEXT_OK | {"|"}
    avail = room - 2 - len(CUT)
    if avail < 0:
        return None
    kept: list[str] = []
    used = 0
    for item in items:
        sep = 1 if kept else 0
        enc = esc(item, ok)
        if used + sep + len(enc) <= avail:
            kept.append(enc)
            used += sep + len(enc)
            continue
        left = avail - used - sep
        part = []
        for ch in item:
            e = esc(ch, ok)
            if len(e) > left:
                break
            part.append(e)
            left -= len(e)
        if part:
            kept.append("".join(part))
        break
    return '"' + "|".join(kept) + CUT + '"'


def _fit_state(entries: list[tuple[str, str]], budget: int) -> list[tuple[str, str]]:
    """Entries that fit in ``budget`` characters, dropping from the end; says how many went."""
    total = sum(len(k) + len(v) + 2 for k, v in entries)
    if total <= budget:
        return entries
    kept = list(entries)
    while kept:
        dropped = len(entries) - len(kept)
        note = 9 + len(str(dropped))  # " omitted=N"
        if sum(len(k) + len(v) + 2 for k, v in kept) + (note if dropped else 0) <= budget:
            break
        kept.pop()
    return kept + [("omitted", str(len(entries) - len(kept)))]

