"""Fuzzing the decoders: whatever arrives, only MessageError comes out (never a crash,
never 'internal', which would mean a bug of ours), and a bad serial line costs only
itself. About 2,000 examples in all; RIGLOOP_FULL=1 runs ten times as many."""

from __future__ import annotations

import os

import msgpack
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from strategies_wire import replies, requests

from rigloop.wire import (
    LineDecoder,
    MessageError,
    decode_reply,
    decode_request,
    encode_reply,
    encode_request,
    format_request_line,
    parse_reply_line,
    parse_request_line,
)

SCALE = 10 if os.environ.get("RIGLOOP_FULL") else 1  # RIGLOOP_FULL=1: a ten times longer campaign


def fuzz(n):
    return settings(max_examples=n * SCALE, deadline=None, suppress_health_check=list(HealthCheck))


def refused_cleanly(decode, data) -> bool:
    """True if decode accepted data; False if it raised a proper MessageError."""
    try:
        decode(data)
    except MessageError as err:
        assert err.code != "internal", f"decoder bug: {err}"
        assert len(str(err)) <= 400
        return False
    return True


@st.composite
def mutated(draw, frame: bytes) -> bytes:
    data = bytearray(frame)
    for _ in range(draw(st.integers(1, 3))):
        op = draw(st.sampled_from(["flip", "truncate", "insert", "splice", "repeat"]))
        i = draw(st.integers(0, max(len(data) - 1, 0)))
        if op == "flip" and data:
            data[i] ^= 1 << draw(st.integers(0, 7))
        elif op == "truncate":
            del data[i:]
        elif op == "insert":
            data[i:i] = draw(st.binary(min_size=1, max_size=8))
        elif op == "splice":
            j = draw(st.integers(i, len(data)))
            data[i:j] = draw(st.sampled_from([b"\xdd\xff\xff\xff\xff", b"\xdb\x7f\xff\xff\xff", b"\xc1", b"\x91" * 40, b"\xd7\xff" + b"\0" * 8, b"\xc4\x01\x00", b"\x01"]))
        elif op == "repeat" and data:
            j = draw(st.integers(i, len(data)))
            data[i:i] = data[i:j]
    return bytes(data)


@fuzz(400)
@given(st.binary(max_size=200))
def test_random_bytes(data):
    """Random bytes never raise anything but MessageError, on either side."""
    refused_cleanly(decode_request, data)
    refused_cleanly(decode_reply, data)


@fuzz(500)
@given(st.one_of(requests.map(encode_request), replies.map(encode_reply)).flatmap(mutated))
def test_mutated_frames(frame):
    """Valid frames flipped, truncated, spliced with hostile headers or repeated: only MessageError."""
    refused_cleanly(decode_request, frame)
    refused_cleanly(decode_reply, frame)


_junk = st.recursive(
    st.one_of(st.none(), st.booleans(), st.integers(-(2**63), 2**64 - 1), st.floats(), st.text(max_size=8), st.binary(max_size=4)),
    lambda inner: st.one_of(st.lists(inner, max_size=3), st.dictionaries(st.text(max_size=4), inner, max_size=3)),
    max_leaves=8,
)


@st.composite
def wrong_schema(draw):
    reply = draw(st.booleans())
    body = msgpack.unpackb(encode_reply(draw(replies)) if reply else encode_request(draw(requests)))
    target = body
    for nested in ("event", "decision", "state"):
        if nested in body and draw(st.booleans()):
            target = body[nested]
            for sub in ("outcome", "response", "extra", "cues"):
                if isinstance(target, dict) and sub in target and draw(st.booleans()):
                    target = target[sub]
            break
    keys = list(target) if isinstance(target, dict) else list(range(len(target)))
    action = draw(st.sampled_from(["replace", "delete", "add"]))
    if action == "add" or not keys:
        if isinstance(target, dict):
            target[draw(st.text(max_size=6))] = draw(_junk)
        else:
            target.append(draw(_junk))
    elif action == "replace":
        target[draw(st.sampled_from(keys))] = draw(_junk)
    else:
        del target[draw(st.sampled_from(keys))]
    return reply, msgpack.packb(body, use_bin_type=True)


@fuzz(300)
@given(wrong_schema())
def test_wrong_schema_types(case):
    """Fields replaced by values of any type, deleted or added: only MessageError."""
    reply, frame = case
    refused_cleanly(decode_reply if reply else decode_request, frame)


@fuzz(300)
@given(st.one_of(st.binary(max_size=120), st.text(st.characters(min_codepoint=32, max_codepoint=126), max_size=120).map(str.encode)))
def test_random_lines(data):
    """Random bytes and random printable text as a line: only MessageError, on either side."""
    refused_cleanly(parse_request_line, data)
    refused_cleanly(parse_reply_line, data)
    dec = LineDecoder()
    dec.feed(data + b"\n")
    for event in dec:
        assert not isinstance(event, MessageError) or event.code != "internal"


def _line(req, checksum):
    try:
        return format_request_line(req, checksum=checksum).rstrip(b"\n")
    except MessageError:
        return b"PING id=1"


@st.composite
def line_streams(draw):
    """[(line without terminator, the request it must decode to or None)]"""
    out = []
    for _ in range(draw(st.integers(1, 6))):
        kind = draw(st.sampled_from(["good", "mutated", "junk"]))
        if kind == "good":
            req = draw(requests)
            line = _line(req, draw(st.booleans()))
            out.append((line, req if line != b"PING id=1" else None))
        elif kind == "mutated":
            line = draw(mutated(_line(draw(requests), True)))
            out.append((line.replace(b"\n", b"").replace(b"\r", b""), None))
        else:
            junk = draw(st.one_of(st.binary(max_size=40), st.binary(min_size=500, max_size=700)))
            out.append((junk.replace(b"\n", b"").replace(b"\r", b""), None))
    return out


@fuzz(500)
@given(line_streams(), st.sampled_from([b"\n", b"\r\n", b"\r"]))
def test_bad_lines_cost_only_themselves(lines, eol):
    """Each non-blank line yields exactly one event, in order; good lines decode exactly
    whatever bad lines (garbage, NUL, non-ASCII, overlong, mutated) sit around them."""
    dec = LineDecoder()
    dec.feed(eol.join(line for line, _ in lines) + eol)
    events = list(dec)
    expected = [(line, req) for line, req in lines if line.strip(b" ")]
    assert len(events) == len(expected)
    for event, (line, req) in zip(events, expected):
        if req is not None:
            assert event == req
        elif isinstance(event, MessageError):
            assert event.code != "internal", event
            assert len(line) <= 512 or event.code == "too_large"
    stats = dec.statistics()
    assert stats.lines == len(expected) == stats.good + stats.bad and stats.peak_buffer <= 512
