"""The trial message's fast path (``wire.packed._plain_trial`` with ``core.trial.plain_event``)
against its readable reference (``decode_request_reference``: the frame's limits, then
``TrialEvent.from_dict`` and the constructors' checks).

Whatever the bytes, both give the same thing: equal values of the same types (compared by
``repr``, which tells 1 from 1.0 and -0.0 from 0.0), or the same error (code, message,
field, request id). And the frames a rig usually sends do take the fast path, so it cannot
fall silent unnoticed. About 200 generated examples (the wire fuzz tests add thousands more through the same decoder); RIGLOOP_FULL=1 runs ten times as many."""

from __future__ import annotations

import os

import msgpack
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from strategies_wire import trial_events, trial_reports
from test_wire_fuzz import mutated

from rigloop import wire
from rigloop.core.trial import TrialEvent, plain_event
from rigloop.errors import BadEvent
from rigloop.offline.simulate import SimulatedAnimal
from rigloop.wire import MessageError, decode_request, encode_request
from rigloop.wire.packed import _plain_trial, decode_request_reference

SCALE = 10 if os.environ.get("RIGLOOP_FULL") else 1


def fuzz(n):
    return settings(max_examples=n * SCALE, deadline=None, suppress_health_check=list(HealthCheck))


def outcome(decode, frame):
    """("ok", repr of the value) or ("error", what the MessageError says)."""
    try:
        return "ok", repr(decode(frame))
    except MessageError as err:
        return "error", (err.code, str(err), err.field, err.request_id)


def same(frame: bytes) -> None:
    assert outcome(decode_request, frame) == outcome(decode_request_reference, frame)


def body_of(event: dict, rid=7) -> dict:
    return {"type": "trial", "id": rid, "event": event}


def plain() -> dict:
    """A trial as a rig sends it (the daemon's usual frame)."""
    return {"subject": "m1", "rig": "r", "session": "s1", "trial": 3, "cues": [["tone_lo", 0.5, 1.5]],
            "outcome": {"reward_ul": 4.0, "reward_time": 1.6, "punishment": None, "punishment_time": None,
                        "timeout_s": 0.0},
            "response": {"kind": "licks", "value": 2.0, "result": "correct", "latency": 0.9},
            "duration": 2.5, "wall_time": 1_000_000_040.0, "extra": {}}


# --------------------------------------------------------------------------- generated


@fuzz(60)
@given(trial_reports)
def test_valid_reports_decode_alike(report):
    frame = encode_request(report)
    same(frame)
    assert repr(decode_request(frame)) == repr(report)


@fuzz(80)
@given(st.data())
def test_mutated_frames_decode_alike(data):
    report = data.draw(trial_reports)
    same(data.draw(mutated(encode_request(report))))


@fuzz(50)
@given(trial_events())
def test_plain_event_equals_from_dict(event):
    d = event.to_dict()
    fast = plain_event(d)
    if fast is not None:  # extras (or anything unusual) go to from_dict
        assert repr(fast) == repr(TrialEvent.from_dict(d))
    else:
        assert event.extra or event.steps


# --------------------------------------------------------------------------- chosen cases


def edit(path: str, value) -> dict:
    ev = plain()
    where = ev
    *parents, last = path.split(".")
    for p in parents:
        where = where[p]
    if value is KeyError:
        del where[last]
    else:
        where[last] = value
    return ev


CASES = {
    "plain": plain(),
    "no outcome": edit("outcome", KeyError),
    "outcome nil": edit("outcome", None),
    "response nil": edit("response", None),
    "no cues": edit("cues", KeyError),
    "empty cues": edit("cues", []),
    "cues nil": edit("cues", None),
    "two cues out of order": edit("cues", [["b", 1.0, 1.2], ["a", 0.5, 0.7]]),
    "two cues at one onset": edit("cues", [["b", 0.5, 1.2], ["a", 0.5, 0.7]]),
    "a cue twice": edit("cues", [["a", 0.5, 1.2], ["a", 0.9, 1.0]]),
    "a cue as a map": edit("cues", [{"cue": "a", "onset": 0.5, "offset": 0.7}]),
    "int onset": edit("cues", [["a", 0, 0.7]]),
    "offset before onset": edit("cues", [["a", 0.9, 0.7]]),
    "negative zero times": edit("cues", [["a", -0.0, -0.0], ["b", 0.0, 0.0]]),
    "int trial": edit("trial", 0),
    "bool trial": edit("trial", True),
    "float trial": edit("trial", 3.0),
    "int reward": edit("outcome.reward_ul", 4),
    "reward without time": edit("outcome.reward_time", None),
    "nan latency": edit("response.latency", float("nan")),
    "inf wall time": edit("wall_time", float("inf")),
    "negative duration": edit("duration", -1.0),
    "short duration": edit("duration", 0.1),
    "duration nil": edit("duration", None),
    "int duration": edit("duration", 3),
    "bool value": edit("response.value", True),
    "int value": edit("response.value", 2),
    "text value": edit("response.value", "left"),
    "spaced value": edit("response.value", " left"),
    "bad result": edit("response.result", "great"),
    "bad punishment": edit("outcome.punishment", "shock"),
    "punishment": edit("outcome.punishment", "airpuff"),
    "unknown field": edit("mood", "calm"),
    "unknown outcome field": edit("outcome.volume", 1.0),
    "extras": edit("extra", {"b": 1, "a": "x"}),
    "extra nil": edit("extra", None),
    "extra empty list": edit("extra", []),
    "extra zero": edit("extra", 0),
    "extra false": edit("extra", False),
    "steps": edit("steps", [{"state": "s0", "action": "left", "time": 0.2, "reward_ul": 0.0}]),
    "steps empty": edit("steps", []),
    "steps nil": edit("steps", None),
    "outcome a list": edit("outcome", [1]),
    "long subject": edit("subject", "m" * 65),
    "spaced subject": edit("subject", "m1 "),
    "unprintable cue": edit("cues", [["a\n", 0.5, 0.7]]),
    "bytes cue": edit("cues", [[b"a", 0.5, 0.7]]),
    "no rig": edit("rig", KeyError),
}


@pytest.mark.parametrize("name", sorted(CASES))
def test_chosen_events_decode_alike(name):
    same(msgpack.packb(body_of(CASES[name]), use_bin_type=True))


@pytest.mark.parametrize("rid", [0, 2**63 - 1, 2**63, -1, True, "a-1", "", "x" * 33, "a b", 1.5, None])
def test_ids_decode_alike(rid):
    same(msgpack.packb(body_of(plain(), rid), use_bin_type=True))


def test_frames_the_encoder_would_not_write_decode_alike():
    good = msgpack.packb(body_of(plain()), use_bin_type=True)
    same(msgpack.packb(body_of(plain()), use_single_float=True))  # float32 times
    same(msgpack.packb(body_of(plain()), use_bin_type=False))  # old-style raw strings
    same(good + b"\x00")  # extra data after the message
    same(good[:-1])  # truncated
    same(bytearray(good))
    same(memoryview(good))
    # a key repeated in the event map: msgpack keeps the last; the reference refuses it
    event = msgpack.packb(plain(), use_bin_type=True)
    repeated = bytes([event[0] + 1]) + event[1:] + msgpack.packb("trial") + msgpack.packb(4)
    frame = b"\x83" + msgpack.packb("type") + msgpack.packb("trial") + msgpack.packb("id") + msgpack.packb(7) + \
        msgpack.packb("event") + repeated
    assert outcome(decode_request_reference, frame)[0] == "error"
    same(frame)
    # the top map with a fourth entry, or another type
    same(msgpack.packb({**body_of(plain()), "more": 1}))
    same(msgpack.packb({**body_of(plain()), "type": "open"}))


def test_the_usual_frames_take_the_fast_path():
    """A simulated rig's frames (as the daemon sees them) all decode on the fast path."""
    from rigloop.core import step as core_step
    from rigloop.core.subject import new_subject
    from rigloop.rules import load_example

    rules = load_example("tone_reversal")
    animal = SimulatedAnimal("m1", seed=3, record_truth=False)
    state = new_subject(animal.subject, rules)
    state, decision = core_step.begin_session(state, rules, session="s1", rig="r", wall_time=1e9)
    for i in range(40):
        event = animal.trial(decision, "r", 1e9 + 4 * i)
        frame = encode_request(wire.TrialReport(i + 1, event))
        fast = _plain_trial(frame)
        assert fast is not None, f"trial {i + 1} left the fast path: {msgpack.unpackb(frame)}"
        assert repr(fast) == repr(decode_request_reference(frame))
        state, decision, _ = core_step.step(state, fast.event, rules)


def test_plain_event_refuses_what_from_dict_refuses():
    for name in ("short duration", "reward without time", "a cue twice", "bool value"):
        assert plain_event(CASES[name]) is None
        with pytest.raises(BadEvent):
            TrialEvent.from_dict(CASES[name])
