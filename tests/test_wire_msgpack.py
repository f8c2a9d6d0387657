"""msgpack codec: exact round trips, limits, schema errors that name the field."""

from __future__ import annotations

import ast
import pathlib

import msgpack
import pytest
from hypothesis import HealthCheck, given, settings
from strategies_wire import replies, requests

from rigloop import CuePresentation, Decision, Outcome, Response, TrialEvent, WireError
from rigloop.wire import (
    ERROR_CODES,
    MAX_FRAME,
    DecisionReply,
    ErrorReply,
    MessageError,
    Ping,
    QueryState,
    StateReply,
    TrialReport,
    decode_reply,
    decode_request,
    encode_reply,
    encode_request,
)

SETTINGS = settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])


def event(**kw):
    base = dict(
        subject="m07",
        rig="box2",
        session="s3",
        trial=12,
        cues=(CuePresentation("tone_hi", 0.0, 1.0),),
        outcome=Outcome(reward_ul=4.0, reward_time=1.0),
        response=Response(kind="licks", value=3, result="correct", latency=0.42),
        duration=3.0,
    )
    base.update(kw)
    return TrialEvent(**base)


def decision(**kw):
    base = dict(subject="m07", session="s3", trial=13, cue="tone_lo", reward_prob=0.8, reward_ul=4.0,
                reward_armed=True, block="acq", stage="s1", valve_ms=41.5, reasons=("stage s1 holds",))
    base.update(kw)
    return Decision(**base)


def pack(body) -> bytes:
    return msgpack.packb(body, use_bin_type=True)


def trial_body(**event_changes):
    body = {"type": "trial", "id": 17, "event": event().to_dict()}
    body["event"].update(event_changes)
    return body


@SETTINGS
@given(requests)
def test_request_round_trip(req):
    """Every valid request decodes to exactly the value that was encoded."""
    assert decode_request(encode_request(req)) == req


@SETTINGS
@given(replies)
def test_reply_round_trip(reply):
    """Every valid reply decodes to exactly the value that was encoded."""
    assert decode_reply(encode_reply(reply)) == reply


def test_trial_frame_shape():
    """A trial is a map with type, id and the event's plain fields."""
    body = msgpack.unpackb(encode_request(TrialReport(17, event())))
    assert body["type"] == "trial" and body["id"] == 17
    assert body["event"]["cues"] == [["tone_hi", 0.0, 1.0]]
    assert body["event"]["outcome"]["reward_ul"] == 4.0


def test_unknown_type_message_pinned():
    """An unknown type says which types exist and keeps the id for the reply."""
    with pytest.raises(MessageError, match=r"^unknown message type 'hello' \(expected one of: open, trial, close, query, ping\)$") as info:
        decode_request(pack({"type": "hello", "id": 5}))
    assert info.value.code == "unknown_type" and info.value.request_id == 5


def test_too_large_message_pinned():
    """A frame over the cap is refused before it is parsed."""
    with pytest.raises(MessageError, match=r"^frame is 65537 bytes; the limit is 65536$") as info:
        decode_request(b"\x00" * (MAX_FRAME + 1))
    assert info.value.code == "too_large"


def test_bad_reward_names_nested_field_pinned():
    """A trial field the event rejects is reported with its dotted name under 'event'."""
    outcome = {"reward_ul": -4.0, "reward_time": 1.0, "punishment": None, "punishment_time": None, "timeout_s": 0.0}
    with pytest.raises(MessageError, match=r"^'event.outcome.reward_ul' must be a finite number >= 0 \(got -4.0\)$") as info:
        decode_request(pack(trial_body(outcome=outcome)))
    err = info.value
    assert (err.code, err.field, err.request_id) == ("bad_field", "event.outcome.reward_ul", 17)
    assert isinstance(err, WireError) and isinstance(err, ValueError)


@pytest.mark.parametrize(
    "body, code, field",
    [
        ({"id": 1}, "bad_field", "type"),
        ({"type": "ping"}, "bad_field", "id"),
        ({"type": 3, "id": 1}, "bad_field", "type"),
        ({"type": "ping", "id": True}, "bad_field", "id"),
        ({"type": "ping", "id": -1}, "bad_field", "id"),
        ({"type": "ping", "id": "x" * 33}, "bad_field", "id"),
        ({"type": "ping", "id": 1, "extra": 2}, "bad_field", "extra"),
        ({"type": "query", "id": 1}, "bad_field", "subject"),
        ({"type": "query", "id": 1, "subject": 7}, "bad_field", "subject"),
        ({"type": "query", "id": 1, "subject": ""}, "bad_field", "subject"),
        ({"type": "open", "id": 1, "subject": "m", "rig": "r", "session": "s", "rules": "x", "seed": -3}, "bad_field", "seed"),
        ({"type": "open", "id": 1, "subject": "m", "rig": "r", "session": "s", "rules": "x", "seed": 1.5}, "bad_field", "seed"),
        ({"type": "trial", "id": 1}, "bad_field", "event"),
        ({"type": "trial", "id": 1, "event": []}, "bad_field", "event"),
        ({"type": "ping", "id": 1, "blob": b"\x00"}, "bad_field", "blob"),
        ({"type": "ping", "id": 1, "t": msgpack.ExtType(5, b"x")}, "bad_field", "t"),
        ({"type": "ping", "id": 1, "s": "x" * 5000}, "too_large", "s"),
        ({"type": "ping", "id": 1, "l": [0] * 300}, "too_large", "l"),
        ({"type": "ping", "id": 1, "m": {str(i): i for i in range(200)}}, "too_large", None),
        ({"type": "ping", "id": 1, "k" * 65: 1}, "too_large", None),
    ],
)
def test_schema_errors(body, code, field):
    """Missing, unknown, mistyped and oversized fields each give a code and the field."""
    with pytest.raises(MessageError) as info:
        decode_request(pack(body))
    assert (info.value.code, info.value.field) == (code, field)


@pytest.mark.parametrize(
    "changes, field",
    [
        ({"trial": 0}, "event.trial"),
        ({"cues": "tone"}, "event.cues"),
        ({"cues": [["tone", 2.0, 1.0]]}, "event.cues[tone].offset"),
        ({"outcome": 3}, "event.outcome"),
        ({"extra": [1, 2]}, "event.extra"),
        ({"extra": {"a": [1]}}, "event.extra.a"),
        ({"response": {"kind": "licks", "value": True}}, "event.response.value"),
        ({"wall_time": None}, "event.wall_time"),
        ({"colour": "red"}, "event.colour"),
    ],
)
def test_trial_field_errors(changes, field):
    """Faults inside the event become bad_field with the event's field name."""
    with pytest.raises(MessageError) as info:
        decode_request(pack(trial_body(**changes)))
    assert (info.value.code, info.value.field) == ("bad_field", field)


def test_bytes_level_attacks():
    """Hostile bytes: each gives a MessageError with a fitting code, never anything else."""
    cases = {
        b"": "bad_message",
        b"\xc1": "bad_message",  # reserved byte
        b"\x81\xa4type": "bad_message",  # truncated
        pack({"type": "ping", "id": 1}) + b"\x00": "bad_message",  # trailing bytes
        b"\xdd\x7f\xff\xff\xff": "bad_message",  # array32 claiming 2**31 items in 5 bytes
        b"\xdb\x7f\xff\xff\xff": "bad_message",  # str32 claiming 2 GiB
        b"\x91" * 5000 + b"\xc0": "too_large",  # 5000 nested arrays
        b"\x81" * 2000 + b"\xc0": "too_large",  # nested maps (keys are maps)
        b"\x81\x01\x02": "bad_field",  # int map key
        b"\x81\xa1\xff\x01": "bad_message",  # invalid UTF-8
        b"\x82\xa4type\xa4ping\xa4type\xa4ping": "bad_field",  # duplicate key
        pack([1, 2, 3]): "bad_message",
        pack("ping"): "bad_message",
    }
    for frame, code in cases.items():
        with pytest.raises(MessageError) as info:
            decode_request(frame)
        assert info.value.code == code, frame[:20]
        assert len(str(info.value)) < 200


def test_nesting_limit_after_decode():
    """Nesting that msgpack accepts but exceeds our limit is refused."""
    deep = 1
    for _ in range(10):
        deep = [deep]
    with pytest.raises(MessageError) as info:
        decode_request(pack({"type": "ping", "id": 1, "d": deep}))
    assert info.value.code == "too_large"


def test_non_bytes_input():
    """Passing something that is not bytes is a bad_message, not a TypeError."""
    for thing in (None, "ping", 3, [b"x"]):
        with pytest.raises(MessageError) as info:
            decode_request(thing)
        assert info.value.code == "bad_message"


def test_errors_carry_no_payload():
    """Error messages do not echo long payload content."""
    secret = "s" * 3000
    with pytest.raises(MessageError) as info:
        decode_request(pack({"type": "query", "id": 1, "subject": secret}))
    assert secret[:100] not in str(info.value) and len(str(info.value)) < 300


def test_decision_reply_frame_and_duplicate_flag():
    """A resent decision says duplicate: true; the decision's fields sit under 'decision'."""
    body = msgpack.unpackb(encode_reply(DecisionReply(17, decision(), duplicate=True)))
    assert body["duplicate"] is True and body["decision"]["valve_ms"] == 41.5


def test_decision_reply_types_checked_on_the_rig_side():
    """decode_reply refuses a decision whose types are wrong (no silent coercion)."""
    good = msgpack.unpackb(encode_reply(DecisionReply(1, decision())))
    for name, bad in [("reasons", "abc"), ("reward_armed", 1), ("trial", 1.0), ("cue", 3)]:
        body = dict(good, decision=dict(good["decision"], **{name: bad}))
        with pytest.raises(MessageError) as info:
            decode_reply(pack(body))
        assert info.value.field == f"decision.{name}"
    body = dict(good, decision={k: v for k, v in good["decision"].items() if k != "block"})
    with pytest.raises(MessageError, match="'decision.block' is missing"):
        decode_reply(pack(body))


def test_long_reasons_are_cut_to_limits():
    """Reasons longer than the string limit are cut with a marker; the reply still decodes."""
    reply = DecisionReply(1, decision(reasons=("r" * 10_000,) + ("ok",) * 300))
    back = decode_reply(encode_reply(reply)).decision
    assert back.reasons[0].endswith("[...]") and len(back.reasons[0]) == 4096
    assert len(back.reasons) == 256 and back.reasons[-1] == "[...]"


def test_error_reply_without_id_round_trips():
    """An error answering an unreadable request has id nil."""
    reply = ErrorReply(None, "bad_message", "frame is empty")
    assert decode_reply(encode_reply(reply)) == reply


def test_error_reply_from_decode_error():
    """ErrorReply.from_error echoes the request id, code and field of a decode error."""
    with pytest.raises(MessageError) as info:
        decode_request(pack({"type": "query", "id": "r-9", "subject": 3}))
    reply = ErrorReply.from_error(info.value)
    assert (reply.id, reply.code, reply.field) == ("r-9", "bad_field", "subject")
    assert reply.message == "'subject' must be a string (got int 3)"


def test_state_reply_validation():
    """State summaries hold scalars or non-empty maps, at most 3 deep."""
    StateReply(1, "m07", {"block": "acq", "p": {"tone": 0.8}})
    for bad in ({"a": {}}, {"a": {"b": {"c": {"d": 1}}}}, {"a": float("nan")}, {"a": [1]}, {"": 1}, {"a": "x" * 300}):
        with pytest.raises(ValueError):
            StateReply(1, "m07", bad)


def test_values_validate_on_construction():
    """Request values refuse bad ids and names when built."""
    for bad in (-1, True, 1.5, "", "has space", "x" * 33):
        with pytest.raises(ValueError, match="'id' must be"):
            Ping(bad)
    with pytest.raises(ValueError, match="'subject' must be"):
        QueryState(1, " m07")
    with pytest.raises(ValueError, match="'code' must be"):
        ErrorReply(1, "oops", "x")


def test_error_codes_are_documented():
    """Every error code has a description, and docs/protocol.md lists each one."""
    root = pathlib.Path(__file__).parents[1]
    doc = "".join(p.read_text(encoding="utf-8") for p in (root / "docs" / "protocol.md", root / "README.md") if p.exists())
    for code, text in ERROR_CODES.items():
        assert text and f"`{code}`" in doc


def test_wire_imports_no_io():
    """The wire package imports no I/O module (sockets, serial, files, clocks)."""
    banned = {"zmq", "serial", "sqlite3", "socket", "asyncio", "time", "os"}
    for path in (pathlib.Path(__file__).parents[1] / "rigloop" / "wire").glob("*.py"):
        for node in ast.walk(ast.parse(path.read_text())):
            names = [a.name for a in node.names] if isinstance(node, ast.Import) else (
                [node.module or ""] if isinstance(node, ast.ImportFrom) and node.level == 0 else [])
            for name in names:
                assert name.split(".")[0] not in banned, f"{path.name} imports {name}"


def test_documented_msgpack_exchange_is_valid():
    """Each map of the documented ZeroMQ exchange decodes; the faulty trial gives exactly
    the error reply shown after it."""
    import json
    import re

    root = pathlib.Path(__file__).parents[1]
    doc = "".join(p.read_text(encoding="utf-8") for p in (root / "docs" / "protocol.md", root / "README.md") if p.exists())
    block = doc.split("### Example exchange (msgpack maps shown as JSON)", 1)[1].split("```")[1]
    block = "\n".join(ln for ln in block.splitlines() if ln.strip() != "...")
    parts = re.split(r"(rig →|←)", block)[1:]
    pairs = [(parts[i], json.loads(parts[i + 1])) for i in range(0, len(parts), 2)]
    assert len(pairs) == 12
    pending_error = None
    for arrow, body in pairs:
        frame = pack(body)
        if arrow == "←":
            reply = decode_reply(frame)
            if pending_error is not None:
                assert reply == ErrorReply.from_error(pending_error)
                pending_error = None
        else:
            try:
                decode_request(frame)
            except MessageError as err:
                pending_error = err
    assert pending_error is None
