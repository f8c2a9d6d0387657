"""Protocol promises under faults, against a real daemon (in-process, real ZeroMQ
sockets on random loopback ports, real pseudo-terminals): oversized frames, error
replies that echo a readable id, repeated opens, non-finite serial numbers, bad rig
profiles, the session life cycle the protocol page describes, and a fuzz campaign
that checks every malformed message gets exactly one reply with the right code.

Every receive has a timeout that fails with a message. The campaign is small by
default (a few hundred messages); RIGLOOP_FULL=1 runs fifty times as many.
"""

from __future__ import annotations

import collections
import os
import random
import time

import msgpack
import pytest

from rigloop import wire
from rigloop.core.trial import TrialEvent
from rigloop.links import zmq as zlink
from rigloop.serve.daemon import Daemon, Settings
from rigloop.store import Store
from rigloop.testing import PtyPort, RigRefused, SerialRig, ZmqRig

RULES = "tone_reversal"
FULL = bool(os.environ.get("RIGLOOP_FULL"))


@pytest.fixture
def served(tmp_path):
    """A daemon with one serial port (rig ``rig_s``), a ZeroMQ rig ``rig1``, a raw
    DEALER socket and a serial rig on the pty's master side."""
    port = PtyPort(tmp_path)
    settings = Settings(data=str(tmp_path / "data"), rules=(RULES,), zmq="tcp://127.0.0.1:*", publish=None,
                        serial=((port.path, "rig_s"),), log_trials=False)
    d = Daemon(settings).start_thread()
    rig = ZmqRig(d.endpoints["zmq"], "rig1", timeout_s=3.0, retries=2)
    raw = zlink.raw_socket(rig.ctx, "dealer")
    raw.connect(d.endpoints["zmq"])
    serial = SerialRig(port, "rig_s", timeout_s=3.0, retries=1)
    _wait_serial_up(serial)
    try:
        yield d, rig, raw, serial
    finally:
        raw.close(0)
        rig.close()
        d.stop()
        d.join()
        port.close()


def _wait_serial_up(rig: SerialRig, tries: int = 100) -> None:
    for _ in range(tries):
        try:
            rig.ping()
            return
        except Exception:
            time.sleep(0.05)
    raise AssertionError("the daemon never answered on the serial port")


def _ask(sock, payload: bytes | list[bytes], timeout_ms: int = 5000) -> dict:
    """Send one message on a raw DEALER and return its one reply, unpacked."""
    if isinstance(payload, list):
        sock.send_multipart(payload)
    else:
        sock.send(payload)
    assert sock.poll(timeout_ms), "no reply from the daemon within the timeout"
    return msgpack.unpackb(sock.recv_multipart()[-1], raw=False)


def _pack(body: dict) -> bytes:
    return msgpack.packb(body, use_bin_type=True)


def _line_reply(serial: SerialRig, line: bytes) -> wire.ErrorReply:
    serial.send_raw(line)
    got = serial.read_replies(5.0, count=1)
    assert got, f"no reply to {line[:60]!r} within the timeout"
    return got[0]


# --------------------------------------------------------------------------- item 2: oversized frames


def test_oversized_frame_gets_too_large_with_its_id_and_is_counted(served):
    """A frame over 65,536 bytes is answered ``too_large`` (echoing its id), counted
    in status, and the connection keeps working."""
    d, rig, raw, _ = served
    before = rig.status()["errors_by_code"].get("too_large", 0)
    frame = _pack({"type": "ping", "id": 41, "pad": "x" * 70_000})
    reply = _ask(raw, frame)
    assert (reply["type"], reply["code"], reply["id"]) == ("error", "too_large", 41)
    assert reply["message"] == f"frame is {len(frame)} bytes; the limit is 65536"
    assert _ask(raw, _pack({"type": "ping", "id": 42})) == {"type": "pong", "id": 42}
    assert rig.status()["errors_by_code"]["too_large"] == before + 1


# --------------------------------------------------------------------------- item 3: readable ids


def _dup_key_frame(rid: int) -> bytes:
    return b"\x83" + _pack("type") + _pack("ping") + _pack("id") + _pack(rid) + _pack("type") + _pack("ping")


def _bad_utf8_frame(rid: int) -> bytes:
    return b"\x83" + _pack("type") + _pack("ping") + _pack("id") + _pack(rid) + _pack("note") + b"\xa2\xff\xfe"


ZMQ_ID_CASES = {
    "binary string": (lambda rid: _pack({"type": "ping", "id": rid, "x": b"\x00\x01"}), "bad_field", "x"),
    "over-long string": (lambda rid: _pack({"type": "ping", "id": rid, "x": "y" * 5000}), "too_large", "x"),
    "over-long list": (lambda rid: _pack({"type": "ping", "id": rid, "x": [0] * 300}), "too_large", "x"),
    "duplicated key": (_dup_key_frame, "bad_field", "type"),
    "bad UTF-8 elsewhere": (_bad_utf8_frame, "bad_message", None),
    "bytes after the map": (lambda rid: _pack({"type": "ping", "id": rid}) + b"\x01", "bad_message", None),
}


@pytest.mark.parametrize("case", sorted(ZMQ_ID_CASES))
def test_zmq_error_replies_echo_a_readable_id(served, case):
    """An error about another field still echoes the request's id (msgpack)."""
    _, _, raw, _ = served
    make, code, field = ZMQ_ID_CASES[case]
    for rid in (7, "rig1:42"):
        reply = _ask(raw, make(rid))
        assert (reply["code"], reply["id"], reply.get("field")) == (code, rid, field), reply


def test_zmq_unreadable_ids_stay_nil(served):
    """An id that is missing, invalid or given twice is not guessed at."""
    _, _, raw, _ = served
    twice = b"\x82" + _pack("id") + _pack(1) + _pack("id") + _pack(2)
    for frame in (_pack({"type": "ping"}), _pack({"type": "ping", "id": -1}), twice, b"\xc1\x00"):
        assert _ask(raw, frame)["id"] is None


SERIAL_ID_CASES = {
    "duplicated key": (b"PING id=9 x=1 x=2\n", "bad_field", "x", "'x' appears twice in the line"),
    "bad UTF-8 elsewhere": (b"QUERY id=9 subj=m%FF\n", "bad_field", "subj", "'subj' decodes to bytes that are not UTF-8"),
    "stray byte": (b"PING id=9 \x07\n", "bad_message", None, "line holds byte 0x07 at column 11; lines are printable ASCII"),
    "bad syntax": (b"PING id=9 =x\n", "bad_message", None, "expected ' key=value' at column 10 after PING"),
}


@pytest.mark.parametrize("case", sorted(SERIAL_ID_CASES))
def test_serial_error_replies_echo_a_readable_id(served, case):
    """The same over serial; a line whose checksum failed still carries no id."""
    _, _, _, serial = served
    line, code, field, message = SERIAL_ID_CASES[case]
    reply = _line_reply(serial, line)
    assert (reply.code, reply.id, reply.field, reply.message) == (code, 9, field, message)
    assert _line_reply(serial, b"PING id=9*0000\n").id is None


# --------------------------------------------------------------------------- item 4: repeated open


def test_repeated_open_same_content_is_a_duplicate_other_content_a_conflict(served):
    """Same open again: the stored decision, duplicate. A different rig, rule file,
    seed or profile: ``conflict`` naming the field that differs; nothing changes."""
    d, rig, raw, _ = served
    first = rig.open("r4", "s1", RULES, seed=11)
    again = rig.open("r4", "s1", RULES, seed=11)
    assert again.duplicate and not first.duplicate and again.decision == first.decision
    assert rig.open("r4", "s1", RULES).duplicate  # no seed asked for: nothing differs
    cases = [({"seed": 12}, "seed", "seed 11, and this open says 12"),
             ({"rules": "two_choice_staircase"}, "rules", "rules 'tone_reversal', and this open says "
                                                         "'two_choice_staircase'"),
             ({"rig": "rig9"}, "rig", "rig 'rig1', and this open says 'rig9'"),
             ({"profile": "lickspout_hf"}, "profile", "profile None, and this open says 'lickspout_hf'")]
    for change, field, words in cases:
        body = {"type": "open", "id": 5, "subject": "r4", "rig": "rig1", "session": "s1", "rules": RULES,
                "seed": 11, **change}
        reply = _ask(raw, _pack(body))
        assert (reply["code"], reply["field"], reply["id"]) == ("conflict", field, 5), reply
        assert reply["message"] == (f"session 's1' of subject 'r4' is already open with {words}; resend the "
                                    "original open, or use a new session id")
    assert rig.open("r4", "s1", RULES, seed=11).decision == first.decision


# --------------------------------------------------------------------------- item 5: non-finite serial numbers


@pytest.mark.parametrize("text", ["nan", "inf", "-inf", "NaN", "+Infinity"])
def test_serial_non_finite_numbers_are_refused_and_not_stored(served, text):
    """``x.v=nan`` (and the infinities) in an extra or a numeric key is ``bad_field``
    naming the key, as a NaN float is on ZeroMQ; nothing is stored."""
    d, _, raw, serial = served
    first = serial.open("n5", "s1", RULES)
    assert first.decision.trial == 1
    for key in ("x.v", "lat", "dur", "wall"):
        line = f"TRIAL id=3 subj=n5 rig=rig_s sess=s1 n=1 {key}={text}\n".encode()
        reply = _line_reply(serial, line)
        assert (reply.code, reply.field, reply.id) == ("bad_field", key, 3), reply
        assert reply.message == f"'{key}' must be a finite number; NaN and infinities are refused (got '{text}')"
    # the ZeroMQ twin: a msgpack NaN in extra
    event = {"subject": "n5", "rig": "rig_s", "session": "s1", "trial": 1, "extra": {"v": float(text)}}
    zreply = _ask(raw, _pack({"type": "trial", "id": 4, "event": event}))
    assert (zreply["code"], zreply["field"]) == ("bad_field", "event.extra.v")
    # quoted, it is a string and is stored as one
    ok = _line_reply(serial, f'TRIAL id=6 subj=n5 rig=rig_s sess=s1 n=1 x.v="{text}"\n'.encode())
    assert isinstance(ok, wire.DecisionReply), ok
    with Store(os.path.join(d.settings.data, "rigloop.sqlite")) as store:
        event, _ = store.lookup("n5", "s1", 1)
    assert event.extra == {"v": text}


# --------------------------------------------------------------------------- item 7: rig profiles


def test_unknown_profile_field_is_bad_field_naming_it(served, tmp_path, monkeypatch):
    """A rig profile with an unknown field (or no such profile) refuses the open with
    ``bad_field`` on ``profile``, the sentence naming the field; nothing is opened."""
    _, rig, _, _ = served
    root = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
    text = open(os.path.join(root, "rig_profiles", "lickspout_hf.toml"), encoding="utf-8").read()
    (tmp_path / "rig_profiles").mkdir()
    (tmp_path / "rig_profiles" / "typo_box.toml").write_text(
        text.replace("baud = 115200", "baud = 115200\nbuad = 9600").replace('name = "lickspout_hf"',
                                                                           'name = "typo_box"\ncolour = "red"'),
        encoding="utf-8")
    monkeypatch.chdir(tmp_path)
    with pytest.raises(RigRefused) as got:
        rig.open("p7", "s1", RULES, profile="typo_box")
    reply = got.value.reply
    assert (reply.code, reply.field) == ("bad_field", "profile")
    assert reply.message.startswith("rig profile 'typo_box' cannot be used: colour: unknown key (allowed: ")
    assert "serial.buad: unknown key" in reply.message
    assert reply.message.endswith("(fix the profile file on the rigloop host, or name another profile)")
    with pytest.raises(RigRefused) as got:
        rig.open("p7", "s1", RULES, profile="no_such_box")
    assert (got.value.reply.field, got.value.reply.code) == ("profile", "bad_field")
    assert "no rig profile named 'no_such_box'" in got.value.reply.message
    assert rig.open("p7", "s1", RULES, profile="lickspout_hf").decision.trial == 1


# --------------------------------------------------------------------------- item 8: what the protocol page says


def test_session_life_cycle_as_documented(served):
    """After ``end_session`` the session stays open: trials are still stored and each
    is answered with end_session=true and no cue; a second close is acked again; a
    trial or an open after close is ``unknown_session``."""
    d, rig, _, _ = served
    t0 = 1_767_225_600.0
    first = rig.open("l8", "s1", RULES, seed=3, wall_time=t0)
    ev = TrialEvent.from_dict({"subject": "l8", "rig": "rig1", "session": "s1", "trial": 1, "wall_time": t0 + 1,
                               "duration": 2.0, "cues": [[first.decision.cue, 0.0, 1.0]]})
    assert not rig.trial(ev).decision.end_session
    late = ev.to_dict() | {"trial": 2, "wall_time": t0 + 46 * 60}
    ended = rig.trial(TrialEvent.from_dict(late)).decision
    assert ended.end_session
    after = rig.trial(TrialEvent.from_dict(late | {"trial": 3, "wall_time": t0 + 47 * 60})).decision
    assert after.end_session and after.cue is None and after.reasons == ("session already ended",)
    assert rig.query("l8").state["open_session"] == "s1"
    assert rig.close_session("l8", "s1").of == "close"
    assert rig.close_session("l8", "s1").of == "close"
    with pytest.raises(RigRefused, match="session 's1' of subject 'l8' is closed; open a new session"):
        rig.trial(TrialEvent.from_dict(late | {"trial": 4}))
    with pytest.raises(RigRefused, match="session 's1' of subject 'l8' was closed; use a new session id"):
        rig.open("l8", "s1", RULES, seed=3)
    with Store(os.path.join(d.settings.data, "rigloop.sqlite")) as store:
        assert store.last_trial("l8", "s1") == 3


def test_blank_lines_are_ignored_and_a_malformed_checksum_is_bad_message(served):
    """Blank lines get no reply; a ``*`` not followed by 4 hex digits is bad_message
    and a wrong checksum ``checksum``, both without id (the line cannot be trusted)."""
    _, _, _, serial = served
    serial.send_raw(b"\n\r\n   \n")
    reply = _line_reply(serial, b"PING id=1*12G4\n")
    assert (reply.code, reply.id) == ("bad_message", None)  # the line cannot be checked: its id is not trusted
    assert reply.message == "'*' at column 10 must start a 4-digit checksum at the end of the line (write a literal * as %2A)"
    reply = _line_reply(serial, b"PING id=1*0000\n")
    assert (reply.code, reply.id) == ("checksum", None)
    assert serial.ping()  # the blank lines produced nothing: the next reply is the pong


def test_a_loopback_client_naming_a_serial_rig_is_served(served):
    """Without CURVE a ZeroMQ client is not tied to a rig name: it may name the
    serial port's rig (e.g. to query or close a session from a desk)."""
    _, rig, _, serial = served
    serial.open("q8", "s1", RULES)
    other = ZmqRig(rig.endpoint, "rig_s", timeout_s=3.0, retries=1, ctx=rig.ctx)
    try:
        assert other.open("q8", "s1", RULES).duplicate
        assert other.close_session("q8", "s1").of == "close"
    finally:
        other.link.close()


# --------------------------------------------------------------------------- the fuzz campaign


def _zmq_case(rnd: random.Random, rid: int) -> tuple[list[bytes], str, int | None]:
    """One malformed ZeroMQ message: (frames, expected code, expected id in the reply)."""
    kind = rnd.randrange(20)
    ghost = {"subject": "ghost", "rig": "rig1", "session": "s9", "trial": 1}
    if kind == 0:
        return [b"\xc1" + rnd.randbytes(rnd.randrange(0, 40))], "bad_message", None
    if kind == 1:
        return [_pack(rnd.choice([[1, 2], 5, "ping", None]))], "bad_message", None
    if kind == 2:
        frame = _pack({"type": "ping", "id": rid, "pad": "abc"})
        return [frame[: rnd.randrange(1, len(frame) - 1)]], "bad_message", None
    if kind == 3:
        return [_pack({"type": rnd.choice(["nope", "", "PING"]), "id": rid})], "unknown_type", rid
    if kind == 4:
        return [_pack({"type": "ping", "id": rid, "x": rnd.randbytes(3)})], "bad_field", rid
    if kind == 5:
        return [_pack({"type": "ping", "id": rid, "x": "s" * rnd.randrange(4097, 9000)})], "too_large", rid
    if kind == 6:
        return [_pack({"type": "ping", "id": rid, "x": [1] * rnd.randrange(257, 600)})], "too_large", rid
    if kind == 7:
        return [_dup_key_frame(rid)], "bad_field", rid
    if kind == 8:
        return [_bad_utf8_frame(rid)], "bad_message", rid
    if kind == 9:
        deep: object = 1
        for _ in range(rnd.randrange(7, 12)):
            deep = [deep]
        return [_pack({"type": "ping", "id": rid, "x": deep})], "too_large", rid
    if kind == 10 and rnd.random() < 0.3:
        return [_pack({"type": "ping", "id": rid, "x": "z" * rnd.randrange(65_600, 200_000)})], "too_large", rid
    if kind in (10, 11):
        return [_pack({"type": "trial", "id": rid, "event": ghost})], "unknown_session", rid
    if kind == 12:
        return [_pack({"type": "ping"})], "bad_field", None
    if kind == 13:
        return [_pack({"type": "ping", "id": rnd.choice([-1, 2**63, "", "bad id", 1.5, True])})], "bad_field", None
    if kind == 14:
        return [_pack({"type": "query", "id": rid, "subject": "a", "colour": 1})], "bad_field", rid
    if kind == 15:
        event = ghost | {"extra": {"v": rnd.choice([float("nan"), float("inf"), float("-inf")])}}
        return [_pack({"type": "trial", "id": rid, "event": event})], "bad_field", rid
    if kind == 16:
        return [_pack({"type": "ping", "id": rid, "t": msgpack.ExtType(5, b"ab")})], "bad_field", rid
    if kind == 17:
        return [b"a", b"b"], "bad_message", None  # two payload frames
    if kind == 18:
        return [_pack({"type": "ping", "id": rid}) + b"\x00"], "bad_message", rid
    return [b""], "bad_message", None


def _serial_case(rnd: random.Random, rid: int) -> tuple[bytes, str, int | None]:
    """One malformed serial line: (line, expected code, expected id in the reply)."""
    kind = rnd.randrange(12)
    if kind == 0:
        return f"XYZZY id={rid} a=1\n".encode(), "unknown_type", rid
    if kind == 1:
        return f"PING id={rid}*0000\n".encode(), "checksum", None  # (0000 is no PING line's CRC here)
    if kind == 2:
        return f"PING id={rid} \xff\n".encode("latin-1"), "bad_message", rid
    if kind == 3:
        return b"TRIAL id=1 " + b"Q" * rnd.randrange(520, 900) + b"\n", "too_large", None
    if kind == 4:
        return f"QUERY id={rid} subj=a subj=b\n".encode(), "bad_field", rid
    if kind == 5:
        value = rnd.choice(["nan", "inf", "-inf", "NAN"])
        return f"TRIAL id={rid} subj=ghost rig=rig_s sess=s9 n=1 x.v={value}\n".encode(), "bad_field", rid
    if kind == 6:
        return f"PING id={rid} colour=red\n".encode(), "bad_field", rid
    if kind == 7:
        return f"TRIAL id={rid} subj=ghost rig=rig_s sess=s9 n=1\n".encode(), "unknown_session", rid
    if kind == 8:
        return b"PING\n", "bad_field", None
    if kind == 9:
        return f"QUERY id={rid} subj=a%G1\n".encode(), "bad_field", rid
    if kind == 10:
        return f"PING id={rid} =x\n".encode(), "bad_message", rid
    return f"PING id={rid}*12G4\n".encode(), "bad_message", None


def _tally(replies: list[tuple[object, str]], expected: dict, unnamed: collections.Counter, where: str) -> None:
    """Every reply is an error with the expected code; each readable id answered once."""
    seen: collections.Counter = collections.Counter()
    nil: collections.Counter = collections.Counter()
    for rid, code in replies:
        if rid is None:
            nil[code] += 1
        else:
            assert expected.get(rid) == code, f"{where}: id {rid} answered {code}, expected {expected.get(rid)}"
            seen[rid] += 1
    assert set(seen) == set(expected) and set(seen.values()) <= {1}, f"{where}: ids answered {len(seen)}/{len(expected)}"
    assert nil == unnamed, f"{where}: replies without id {dict(nil)}, expected {dict(unnamed)}"


def test_fuzz_campaign_every_bad_message_gets_one_reply(served, capsys):
    """Malformed ZeroMQ messages and serial lines of every kind: each gets exactly one
    error reply with the right code, the id when readable, and status counts them."""
    d, rig, raw, serial = served
    rnd = random.Random(12)
    n_zmq, n_serial = (20_000, 5_000) if FULL else (400, 200)
    before = rig.status()
    zmq_expected: dict[int, str] = {}
    zmq_nil: collections.Counter = collections.Counter()
    zmq_replies: list[tuple[object, str]] = []
    by_code: collections.Counter = collections.Counter()
    chunk = 50
    for start in range(0, n_zmq, chunk):
        batch = []
        for rid in range(start + 1, min(n_zmq, start + chunk) + 1):
            frames, code, echo = _zmq_case(rnd, rid)
            batch.append(frames)
            by_code[code] += 1
            if echo is None:
                zmq_nil[code] += 1
            else:
                zmq_expected[echo] = code
        for frames in batch:
            raw.send_multipart(frames)
        for _ in batch:
            assert raw.poll(10_000), f"zmq: {len(zmq_replies)} replies for {n_zmq} messages; the daemon went silent"
            reply = msgpack.unpackb(raw.recv_multipart()[-1], raw=False)
            assert reply["type"] == "error", reply
            zmq_replies.append((reply["id"], reply["code"]))
    assert _ask(raw, _pack({"type": "ping", "id": 0})) == {"type": "pong", "id": 0}  # nothing else was queued
    _tally(zmq_replies, zmq_expected, zmq_nil, "zmq")

    serial_expected: dict[int, str] = {}
    serial_nil: collections.Counter = collections.Counter()
    serial_replies: list[tuple[object, str]] = []
    chunk = 20
    for start in range(0, n_serial, chunk):
        lines = []
        for rid in range(start + 1, min(n_serial, start + chunk) + 1):
            line, code, echo = _serial_case(rnd, rid)
            lines.append(line + (b"\n" if rnd.random() < 0.1 else b""))  # a blank line now and then: no reply
            by_code[code] += 1
            if echo is None:
                serial_nil[code] += 1
            else:
                serial_expected[echo] = code
        serial.send_raw(b"".join(lines))
        got = serial.read_replies(10.0, count=len(lines))
        assert len(got) == len(lines), f"serial: {len(got)} replies for {len(lines)} lines"
        for reply in got:
            assert isinstance(reply, wire.ErrorReply), reply
            serial_replies.append((reply.id, reply.code))
    assert serial.ping()  # the next reply after the campaign is the pong: no extra replies
    _tally(serial_replies, serial_expected, serial_nil, "serial")

    after = rig.status()
    counted = {code: after["errors_by_code"].get(code, 0) - before["errors_by_code"].get(code, 0)
               for code in after["errors_by_code"]}
    assert {c: n for c, n in counted.items() if n} == dict(by_code)
    assert after["counts"]["errors"] - before["counts"]["errors"] == n_zmq + n_serial
    assert after["counts"]["trials"] == before["counts"]["trials"]
    assert d.error is None  # crashes: 0
    with capsys.disabled():
        print(f"\nfuzz campaign: {n_zmq + n_serial} messages ({n_zmq} ZeroMQ, {n_serial} serial), "
              f"{len(zmq_replies) + len(serial_replies)} replies, by code {dict(sorted(by_code.items()))}, "
              f"with id {len(zmq_expected) + len(serial_expected)}, crashes 0")
