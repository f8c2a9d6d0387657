"""Serial line protocol: syntax, exact round trips, checksum, LineDecoder bounds."""

from __future__ import annotations

import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st
from strategies_wire import replies, requests

from rigloop import CuePresentation, Decision, Outcome, Response, TrialEvent
from rigloop.wire import (
    MAX_LINE,
    Ack,
    CloseSession,
    DecisionReply,
    ErrorReply,
    LineDecoder,
    MessageError,
    OpenSession,
    Ping,
    Pong,
    QueryState,
    StateReply,
    TrialReport,
    crc16,
    crc16_hex,
    format_reply_line,
    format_request_line,
    parse_reply_line,
    parse_request_line,
    serial_key,
)

SETTINGS = settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])


def crc16_bitwise(data: bytes) -> int:
    """CRC-16/CCITT-FALSE the way a microcontroller computes it, one bit at a time."""
    crc = 0xFFFF
    for b in data:
        crc ^= b << 8
        for _ in range(8):
            crc = ((crc << 1) ^ 0x1021 if crc & 0x8000 else crc << 1) & 0xFFFF
    return crc


def with_crc(text: str) -> bytes:
    body = text.encode()
    return body + b"*" + crc16_hex(body).encode() + b"\n"


# --------------------------------------------------------------------------- checksum


def test_checksum_check_value():
    """CRC-16/CCITT-FALSE of "123456789" is 0x29B1: the check value of CRC-16/IBM-3740
    (alias CRC-16/CCITT-FALSE) in Greg Cook's "Catalogue of parametrised CRC algorithms"."""
    assert crc16(b"123456789") == 0x29B1
    assert crc16_bitwise(b"123456789") == 0x29B1
    assert crc16(b"") == 0xFFFF  # init value, no bytes processed (Rocksoft model, xorout 0)


@given(st.binary(max_size=300))
@settings(max_examples=100)
def test_checksum_matches_bitwise_reference(data):
    """The library CRC equals the bit-by-bit microcontroller algorithm for any bytes."""
    assert crc16(data) == crc16_bitwise(data)


def test_checksum_worked_example():
    """The worked example in docs/protocol.md: 'PING id=1' has checksum 46B8."""
    assert crc16_hex(b"PING id=1") == "46B8"
    assert format_request_line(Ping(1)) == b"PING id=1*46B8\n"
    assert parse_request_line(b"PING id=1*46b8\r\n") == Ping(1)


def test_checksum_mismatch_message_pinned():
    """A wrong checksum names what the line said and what its bytes give."""
    with pytest.raises(MessageError, match=r"^checksum mismatch: the line says 0000 but its bytes give 46B8$") as info:
        parse_request_line(b"PING id=1*0000\n")
    assert info.value.code == "checksum" and info.value.request_id is None


def test_checksum_required_per_port():
    """With require_checksum a line without one is refused; otherwise it is optional."""
    assert parse_request_line(b"PING id=1\n") == Ping(1)
    with pytest.raises(MessageError, match="no checksum") as info:
        parse_request_line(b"PING id=1\n", require_checksum=True)
    assert info.value.code == "checksum"
    assert parse_request_line(b"PING id=1*46B8", require_checksum=True) == Ping(1)


def test_flipped_bit_caught_by_checksum():
    """Any single flipped bit in a checksummed line is caught (a CRC detects every 1-bit
    error); only a flip that changes a hex letter's case in the checksum is harmless."""
    line = format_request_line(TrialReport(17, example_event()))
    for i in range(len(line) - 1):
        for bit in range(7):
            bad = bytearray(line)
            bad[i] ^= 1 << bit
            if bytes(bad).upper() == line.upper() and i > line.index(b"*"):
                continue
            try:
                parse_request_line(bytes(bad))
            except MessageError:
                continue
            pytest.fail(f"flip at byte {i} bit {bit} accepted")


# --------------------------------------------------------------------------- messages


def example_event(**kw):
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


def test_hand_typed_trial_line():
    """The example line from the docs decodes to the trial a person means."""
    line = b"TRIAL id=17 subj=m07 rig=box2 sess=s3 n=12 cues=tone_hi:0:1 rew=4@1 resp=licks:3 res=correct lat=0.42 dur=3\n"
    assert parse_request_line(line) == TrialReport(17, example_event())


def test_trial_line_exact_text():
    """format_request_line writes the documented fields in a fixed order."""
    event = example_event(extra={"contrast": 0.5, "note": "ok go"}, wall_time=1767225600.25)
    assert format_request_line(TrialReport(17, event), checksum=False) == (
        b"TRIAL id=17 subj=m07 rig=box2 sess=s3 n=12 cues=tone_hi:0.0:1.0 rew=4.0@1.0 resp=licks:3.0 "
        b'res=correct lat=0.42 dur=3.0 wall=1767225600.25 x.contrast=0.5 x.note="ok go"\n'
    )


def test_other_request_lines():
    """OPEN, CLOSE, QUERY and PING read as documented; verbs are case-insensitive."""
    assert parse_request_line(b"OPEN id=1 subj=m07 rig=box2 sess=s3 rules=acq_v2 seed=42 profile=box_std") == OpenSession(
        1, "m07", "box2", "s3", "acq_v2", seed=42, profile="box_std"
    )
    assert parse_request_line(b"close id=a:1 subj=m07 rig=box2 sess=s3") == CloseSession("a:1", "m07", "box2", "s3")
    assert parse_request_line(b"  QUERY id=4 subj=m07  ") == QueryState(4, "m07")
    assert parse_request_line(b'PING id="17"') == Ping("17")


def test_floats_are_exact():
    """Floats are written with repr, so the value read back is the same float."""
    event = example_event(wall_time=0.1 + 0.2, cues=(CuePresentation("a", 1e-300, 1 / 3),), duration=1e16)
    back = parse_request_line(format_request_line(TrialReport(1, event))).event
    assert back.wall_time == 0.1 + 0.2 and back.cues[0].onset == 1e-300 and back.cues[0].offset == 1 / 3
    assert back.duration == 1e16


def test_escaping_of_odd_names_and_values():
    """Spaces, '*', '%', quotes, ':' and non-ASCII survive via %XX escapes and quotes."""
    event = example_event(
        subject="m 07*", cues=(CuePresentation("tone:hi,%", 0.0, 1.0),),
        response=Response(kind="choice", value="3"), extra={"nöte": 'say "hi"', "n": "12", "t": "true"},
    )
    line = format_request_line(TrialReport("x-1", event))
    assert line.count(b"*") == 1 and all(b < 0x7F for b in line)
    assert b'subj="m 07%2A"' in line and b"resp=choice:%33" in line and b'x.n="12"' in line
    assert parse_request_line(line) == TrialReport("x-1", event)


def test_decision_line_exact_text():
    """A decision line carries every field; reasons are '|'-separated in quotes."""
    d = Decision("m07", "s3", 13, "tone_lo", 0.8, 4.0, True, "acq", "s1", valve_ms=41.5,
                 reasons=("stage s1: p_lo=0.81 >= 0.8", "block acq"), warnings=("water low",))
    line = format_reply_line(DecisionReply(17, d), checksum=False)
    assert line == (b"DECISION id=17 subj=m07 sess=s3 n=13 cue=tone_lo p=0.8 ul=4.0 armed=1 valve=41.5 "
                    b'block=acq stage=s1 end=0 dup=0 warn="water low" why="stage s1: p_lo=0.81 >= 0.8|block acq"\n')
    assert parse_reply_line(line) == DecisionReply(17, d)


def test_other_reply_lines():
    """ACK, PONG, STATE and ERR lines read back to their values."""
    for reply in (
        Ack(3, "close"),
        Pong("p1"),
        StateReply(4, "m07", {"block": "acq", "p": {"tone_hi": 0.8, "tone.lo": 0.1}, "note": "17"}),
        ErrorReply(17, "bad_field", "'rew' must be ...", field="rew"),
        ErrorReply(None, "bad_message", "a line must start with a verb"),
    ):
        assert parse_reply_line(format_reply_line(reply)) == reply
    assert format_reply_line(Ack(3, "close"), checksum=False) == b"ACK id=3 of=close\n"
    assert format_reply_line(ErrorReply(None, "checksum", "bad"), checksum=False) == b'ERR code=checksum msg="bad"\n'


@SETTINGS
@given(requests)
def test_request_line_round_trip(req):
    """Every valid request that fits a line reads back exactly."""
    try:
        line = format_request_line(req)
    except MessageError as err:
        assert err.code == "too_large"
        assume(False)
    assert len(line) <= MAX_LINE + 1 and line.endswith(b"\n")
    assert parse_request_line(line) == req
    assert parse_request_line(format_request_line(req, checksum=False)) == req


@SETTINGS
@given(replies)
def test_reply_line_round_trip(reply):
    """Every valid reply reads back exactly when it fits a line without cutting."""
    line = format_reply_line(reply)
    assert len(line) <= MAX_LINE + 1
    back = parse_reply_line(line, require_checksum=True)
    # a reply that had to be cut (a field shortened, or dropped when not even the
    # marker fitted) is what it is; the rest must read back exactly
    assume(line == format_reply_line(reply, max_line=1 << 20))
    assert back == reply


def test_long_reasons_are_cut_to_fit():
    """Reasons too long for a line are cut (marked [...]); overrides, warnings and numbers stay."""
    d = Decision("m07", "s3", 13, "tone_lo", 0.8, 4.0, True, "acq", "s1",
                 reasons=tuple(f"rule {i} fired: p_lo=0.{i}1 >= 0.8 after {i * 37} trials" for i in range(30)),
                 overrides=("reward floor 0.5",), warnings=("water 0.4 mL below pace",))
    line = format_reply_line(DecisionReply(1, d))
    assert len(line) == MAX_LINE + 1 or len(line) <= MAX_LINE + 1
    back = parse_reply_line(line).decision
    assert back.reasons[-1].endswith("[...]") and back.reasons[:-1] == d.reasons[: len(back.reasons) - 1]
    assert back.overrides == d.overrides and back.warnings == d.warnings
    assert back.reward_prob == 0.8 and back.trial == 13


def test_long_texts_cut_for_small_lines():
    """With a small line cap, reasons go first, then warnings; unicode is cut whole."""
    d = Decision("m07", "s3", 13, None, 0.5, 4.0, False, "acq", "s1", reasons=("é" * 100,), warnings=("w" * 100,))
    line = format_reply_line(DecisionReply(1, d), max_line=160)
    assert len(line) <= 161
    back = parse_reply_line(line, max_line=160).decision
    assert back.reasons == () or back.reasons[0].endswith("[...]")
    assert back.warnings[0].endswith("[...]") or back.warnings == d.warnings
    message = ErrorReply(1, "internal", "x" * 1000)
    cut = parse_reply_line(format_reply_line(message))
    assert cut.message.endswith("[...]") and len(format_reply_line(message)) <= MAX_LINE + 1


def test_big_state_drops_entries():
    """A state too big for a line keeps the first entries and says how many were omitted."""
    state = {f"k{i:03d}": i * 1.5 for i in range(100)}
    line = format_reply_line(StateReply(1, "m07", state))
    assert len(line) <= MAX_LINE + 1 and b"omitted=" in line
    back = parse_reply_line(line)
    assert back.state == {k: v for k, v in state.items() if k in back.state} and len(back.state) > 10


def test_reply_too_large_even_without_texts():
    """Names too long for any line give too_large instead of a broken line."""
    d = Decision("m" * 64, "s" * 64, 1, "c" * 64, 0.5, 1.0, False, "b" * 64, "é" * 64)
    with pytest.raises(MessageError) as info:
        format_reply_line(DecisionReply(1, d), max_line=200)
    assert info.value.code == "too_large"


@pytest.mark.parametrize(
    "line, code, field",
    [
        (b"", "bad_message", None),
        (b"=3", "bad_message", None),
        (b"HELLO id=1", "unknown_type", None),
        (b"PING", "bad_field", "id"),
        (b"PING id=1.5", "bad_field", "id"),
        (b"PING id=1 id=2", "bad_field", "id"),
        (b"PING id=1 color=red", "bad_field", "color"),
        (b"PING id=1 *", "bad_message", None),
        (b"PING id=1*12", "bad_message", None),
        (b"PING id=a*b", "bad_message", None),
        (b'PING id="1', "bad_message", None),
        (b"PING id=1\tx=2", "bad_message", None),
        (b"PING id=1 \xff", "bad_message", None),
        (b"QUERY id=1 subj=%zz", "bad_field", "subj"),
        (b"QUERY id=1 subj=%ff", "bad_field", "subj"),
        (b"QUERY id=1 subj=", "bad_field", "subj"),
        (b"TRIAL id=1 rig=b sess=s n=1", "bad_field", "subj"),
        (b"TRIAL id=1 subj=m rig=b sess=s n=0", "bad_field", "n"),
        (b"TRIAL id=1 subj=m rig=b sess=s n=x", "bad_field", "n"),
        (b"TRIAL id=1 subj=m rig=b sess=s n=1 rew=-4@1", "bad_field", "rew"),
        (b"TRIAL id=1 subj=m rig=b sess=s n=1 rew=4", "bad_field", "rew"),
        (b"TRIAL id=1 subj=m rig=b sess=s n=1 rew=4@1@2", "bad_field", "rew"),
        (b"TRIAL id=1 subj=m rig=b sess=s n=1 rew=nan@1", "bad_field", "rew"),
        (b"TRIAL id=1 subj=m rig=b sess=s n=1 rew=1e999@1", "bad_field", "rew"),
        (b"TRIAL id=1 subj=m rig=b sess=s n=1 cues=a:1", "bad_field", "cues"),
        (b"TRIAL id=1 subj=m rig=b sess=s n=1 cues=a:2:1", "bad_field", "cues"),
        (b"TRIAL id=1 subj=m rig=b sess=s n=1 cues=a:0:1,a:1:2", "bad_field", "cues"),
        (b"TRIAL id=1 subj=m rig=b sess=s n=1 pun=zap", "bad_field", "pun"),
        (b"TRIAL id=1 subj=m rig=b sess=s n=1 res=great", "bad_field", "res"),
        (b"TRIAL id=1 subj=m rig=b sess=s n=1 lat=5 dur=1", "bad_field", "dur"),
        (b"TRIAL id=1 subj=m rig=b sess=s n=1 x.=3", "bad_field", "x."),
        (b"TRIAL id=1 subj=m rig=b sess=s n=1 x.a=99999999999999999999", "bad_field", "x.a"),
        (b"OPEN id=1 subj=m rig=b sess=s rules=r seed=-1", "bad_field", "seed"),
    ],
)
def test_bad_lines(line, code, field):
    """Each malformed line gives one MessageError with a fitting code and key."""
    with pytest.raises(MessageError) as info:
        parse_request_line(line)
    assert (info.value.code, info.value.field) == (code, field)


def test_bad_field_message_names_serial_key_pinned():
    """A trial fault names the serial key and the event field it maps to."""
    with pytest.raises(MessageError, match=r"^'rew' \(outcome.reward_ul\) must be a finite number >= 0 \(got -4.0\)$") as info:
        parse_request_line(b"TRIAL id=17 subj=m rig=b sess=s n=1 rew=-4@1")
    assert info.value.request_id == 17


def test_request_too_long_for_a_line():
    """A request that cannot fit a line is refused by the formatter, not silently cut."""
    event = example_event(extra={f"k{i}": "v" * 20 for i in range(30)})
    with pytest.raises(MessageError) as info:
        format_request_line(TrialReport(1, event))
    assert info.value.code == "too_large"


# --------------------------------------------------------------------------- decoder


def decode_all(data: bytes, **kw) -> tuple[list, LineDecoder]:
    dec = LineDecoder(**kw)
    dec.feed(data)
    return list(dec), dec


def test_decoder_mixed_stream():
    """Good lines decode; each bad line costs one error naming its line number."""
    stream = b"PING id=1\r\nHELLO\n\nPING id=2*0000\r\rQUERY id=3 subj=m07\n\x00\x01\n"
    events, dec = decode_all(stream)
    assert events[0] == Ping(1) and events[3] == QueryState(3, "m07")
    assert [(e.code, e.line) for e in events if isinstance(e, MessageError)] == [
        ("unknown_type", 2), ("checksum", 3), ("bad_message", 5)
    ]
    stats = dec.statistics()
    assert (stats.lines, stats.good, stats.bad) == (5, 2, 3)


def test_decoder_errors_have_printable_excerpts():
    """An error's excerpt is short printable ASCII, whatever the line held."""
    events, _ = decode_all(b"\x00\xff\x7f" + b"A" * 200 + b"\n")
    (err,) = events
    assert err.excerpt.isascii() and err.excerpt.isprintable() and len(err.excerpt) < 60


def test_megabytes_without_newline_stay_bounded():
    """4 MiB with no line end: one too_large error, buffer never above max_line, then resync."""
    dec = LineDecoder(max_line=128)
    chunk = bytes(range(256)).replace(b"\n", b"").replace(b"\r", b"") * 256
    total = 0
    while total < 4 * 2**20:
        dec.feed(chunk)
        total += len(chunk)
    assert dec.statistics().peak_buffer <= 128
    dec.feed(b"tail\nPING id=9\n")
    events = list(dec)
    assert [e.code for e in events[:-1]] == ["too_large"] and events[-1] == Ping(9)
    stats = dec.statistics()
    assert stats.dropped_bytes == total + 4 and stats.too_large == 1 and stats.peak_buffer <= 128


def test_too_large_message_pinned():
    """An overlong line is reported at once, with the limit."""
    dec = LineDecoder(max_line=64)
    dec.feed(b"X" * 65)
    (err,) = list(dec)
    assert str(err) == "line is longer than 64 bytes; it was discarded" and err.line == 1


def test_line_of_exactly_max_line_is_accepted():
    """max_line counts bytes before the terminator; a line of exactly that length is fine."""
    line = b"PING id=" + b"1" * 8
    events, _ = decode_all(line + b"\r\n", max_line=len(line))
    assert events == [Ping(11111111)]
    events, _ = decode_all(line + b"1\n", max_line=len(line))
    assert events[0].code == "too_large"


def test_reset_drops_torn_line():
    """After reset() the partial line is gone and the next line decodes alone."""
    dec = LineDecoder()
    dec.feed(b"TRIAL id=1 subj=m07 ri")
    dec.reset()
    dec.feed(b"PING id=2\n")
    assert list(dec) == [Ping(2)]
    assert dec.statistics().dropped_bytes == len(b"TRIAL id=1 subj=m07 ri") and dec.statistics().resets == 1


def test_decoder_require_checksum():
    """A port that requires checksums refuses lines without one, and only those."""
    events, _ = decode_all(b"PING id=1\n" + with_crc("PING id=2"), require_checksum=True)
    assert events[0].code == "checksum" and events[1] == Ping(2)


def test_decoder_arguments_checked():
    with pytest.raises(ValueError, match="'max_line' must be"):
        LineDecoder(max_line=0)


@st.composite
def streams(draw):
    reqs = draw(st.lists(requests, min_size=1, max_size=5))
    lines = []
    for req in reqs:
        try:
            lines.append(format_request_line(req, checksum=draw(st.booleans())))
        except MessageError:
            continue
        if draw(st.booleans()):
            lines.append(draw(st.binary(max_size=80)).replace(b"\n", b"") + b"\n")
    return b"".join(lines)


@SETTINGS
@given(streams(), st.data())
def test_byte_by_byte_equals_all_at_once(data, draw):
    """Feeding one byte at a time, or in random chunks, yields the same events as one feed."""
    whole, _ = decode_all(data)
    dec = LineDecoder()
    out = []
    for i in range(len(data)):
        dec.feed(data[i : i + 1])
        out.extend(dec)
    assert out == whole
    cuts = sorted(draw.draw(st.lists(st.integers(0, len(data)), max_size=6)))
    dec = LineDecoder()
    for a, b in zip([0] + cuts, cuts + [len(data)]):
        dec.feed(data[a:b])
    assert list(dec) == whole


def test_serial_key_translates_field_names():
    """Field names of the msgpack encoding map to the serial keys a firmware author sees."""
    assert serial_key("session") == "sess" and serial_key("trial") == "n"
    assert serial_key("event.outcome.reward_ul") == "rew" and serial_key("event.extra.contrast") == "x.contrast"
    assert serial_key("event.cues[tone].onset") == "cues" and serial_key("decision.valve_ms") == "valve"
    assert serial_key("rules") == "rules"


def _doc_text() -> str:
    import pathlib

    root = pathlib.Path(__file__).parents[1]
    return "".join(p.read_text(encoding="utf-8") for p in (root / "docs" / "protocol.md", root / "README.md") if p.exists())


def test_documented_serial_exchange_is_valid():
    """Every '>' and '<' line of the documented serial exchange parses (checksums included);
    each reply written there is exactly what format_reply_line writes for it."""
    lines = [ln for ln in _doc_text().splitlines() if ln.startswith(("> ", "< "))]
    assert len(lines) >= 10
    for ln in lines:
        raw = ln[2:].encode() + b"\n"
        if ln.startswith(">"):
            try:
                parse_request_line(raw)
            except MessageError as err:
                assert err.code in ("bad_field", "checksum"), ln  # the exchange shows two faulty lines on purpose
        else:
            assert format_reply_line(parse_reply_line(raw, require_checksum=True)) == raw, ln


def test_documented_error_replies_match_decoder():
    """The ERR lines in the documented exchange are what the decoder's errors produce."""
    doc = _doc_text()
    for bad in (b"TRIAL id=5 subj=m07 rig=box2 sess=s3 n=13 rew=-4@1", b"PING id=6*0000"):
        with pytest.raises(MessageError) as info:
            parse_request_line(bad)
        line = format_reply_line(ErrorReply.from_error(info.value)).decode().rstrip("\n")
        assert "< " + line in doc
