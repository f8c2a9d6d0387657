"""Multi-step trials: the TrialStep value, both wire encodings, the store, CSV import.

A trial without steps is exactly the one-step trial it always was (its dict, its line,
its stored text); a trial with steps keeps them through every path, and bad steps are
refused with the field named.
"""

from __future__ import annotations

import dataclasses
import os
import time

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from rigloop import wire
from rigloop.core.trial import CuePresentation, Outcome, Response, TrialEvent, TrialStep
from rigloop.errors import BadEvent
from rigloop.offline.csv_map import MappingError, load_mapping
from rigloop.offline.csv_rows import parse_csv
from rigloop.offline.simulate import SimulatedAnimal
from rigloop.serve.daemon import Daemon, Settings
from rigloop.store import Store
from rigloop.testing import PtyPort, SerialRig, ZmqRig

RULES = "tone_reversal"


def _two_step_event(trial: int = 1, **kw) -> TrialEvent:
    base = dict(
        subject="m1", rig="box3", session="s1", trial=trial,
        cues=(CuePresentation("centre_light", 0.0, 0.5),),
        response=Response("choice", "left", None, 0.4),
        outcome=Outcome(4.0, 1.3),
        steps=(TrialStep("centre_light", "left", 0.4), TrialStep("port_a_light", "right", 1.2, 4.0)),
    )
    base.update(kw)
    return TrialEvent(**base)


# --------------------------------------------------------------------------- the value


def test_a_trial_without_steps_is_todays_trial():
    ev = _two_step_event(steps=())
    assert ev.steps == ()
    assert "steps" not in ev.to_dict()
    line = wire.format_request_line(wire.TrialReport("1", ev))
    assert b"steps=" not in line


def test_steps_round_trip_as_plain_data():
    ev = _two_step_event()
    d = ev.to_dict()
    assert d["steps"] == [
        {"state": "centre_light", "action": "left", "time": 0.4, "reward_ul": 0.0},
        {"state": "port_a_light", "action": "right", "time": 1.2, "reward_ul": 4.0},
    ]
    assert TrialEvent.from_dict(d) == ev
    assert ev.duration == pytest.approx(1.3)


def test_duration_covers_the_last_step():
    ev = _two_step_event(outcome=Outcome(), steps=(TrialStep("a", "left", 0.2), TrialStep("b", None, 2.5)))
    assert ev.duration == 2.5
    with pytest.raises(BadEvent) as err:
        _two_step_event(outcome=Outcome(), steps=(TrialStep("a", "left", 3.0),), duration=2.0)
    assert err.value.field == "duration"


@pytest.mark.parametrize("steps, field, words", [
    ([{"state": "a", "time": 2.0}, {"state": "b", "time": 1.0}], "steps[1].time", "previous step"),
    ([{"state": "a", "acton": "left"}], "steps[0].acton", "not a step field"),
    ([{"action": "left", "time": 1.0}], "steps[0].state", "missing"),
    ([{"state": "", "time": 1.0}], "steps[0].state", "non-empty"),
    ([{"state": "a", "time": -1.0}], "steps[0].time", ">= 0"),
    ([{"state": "a", "time": float("nan")}], "steps[0].time", "finite"),
    ([{"state": "a", "action": 3}], "steps[0].action", "string or nil"),
    ([{"state": "a", "reward_ul": -2.0}], "steps[0].reward_ul", ">= 0"),
    ([["a", "left", 1.0]], "steps[0]", "map of state"),
    ("a:left:1", "steps", "list of steps"),
    ([{"state": "a"}] * 17, "steps", "at most 16"),
    ([{"state": "a", "time": 1.0, "reward_ul": 3.0}], "steps", "add up to 3 uL"),
])
def test_bad_steps_are_refused_naming_the_field(steps, field, words):
    data = _two_step_event().to_dict()
    data["steps"] = steps
    with pytest.raises(BadEvent) as err:
        TrialEvent.from_dict(data)
    assert err.value.field == field
    assert words in str(err.value)


# --------------------------------------------------------------------------- codecs


def test_serial_line_worked_example_reads_back():
    """The worked example of docs/protocol.md, character for character."""
    ev = _two_step_event(trial=3)
    line = wire.format_request_line(wire.TrialReport("7", ev), checksum=False)
    assert line == (b'TRIAL id="7" subj=m1 rig=box3 sess=s1 n=3 cues=centre_light:0.0:0.5 rew=4.0@1.3 '
                    b'resp=choice:left lat=0.4 dur=1.3 steps=centre_light:left:0.4,port_a_light:right:1.2:4.0\n')
    assert wire.parse_request_line(line).event == ev
    # an empty action is no action; a step's reward may be left out
    got = wire.parse_request_line(b"TRIAL id=1 subj=m1 rig=box3 sess=s1 n=1 steps=centre_light::0.4,port_b_light:left:1.0\n")
    assert got.event.steps == (TrialStep("centre_light", None, 0.4), TrialStep("port_b_light", "left", 1.0))


@pytest.mark.parametrize("raw, words", [
    (b"steps=a:left", "state:action:time"),
    (b"steps=a:left:soon", "steps"),
    (b"steps=a:left:2.0,b:right:1.0", "previous step"),
])
def test_bad_serial_steps_name_the_key(raw, words):
    with pytest.raises(wire.MessageError) as err:
        wire.parse_request_line(b"TRIAL id=1 subj=m1 rig=box3 sess=s1 n=1 " + raw + b"\n")
    assert err.value.field == "steps"
    assert words in str(err.value)


def test_msgpack_round_trip_and_bad_step_field_path():
    ev = _two_step_event()
    frame = wire.encode_request(wire.TrialReport("9", ev))
    assert wire.decode_request(frame).event == ev
    import msgpack

    body = msgpack.unpackb(frame)
    body["event"]["steps"][1]["time"] = 0.1
    with pytest.raises(wire.MessageError) as err:
        wire.decode_request(msgpack.packb(body))
    assert err.value.field == "event.steps[1].time"


# --------------------------------------------------------------------------- live paths


def _settings(tmp_path, **kw):
    base = dict(data=str(tmp_path / "data"), rules=(RULES,), zmq="tcp://127.0.0.1:*",
                publish="tcp://127.0.0.1:*", log_trials=False, selftest_timeout_s=0.5)
    base.update(kw)
    return Settings(**base)


def _with_steps(ev: TrialEvent) -> TrialEvent:
    """A simulated trial with two steps added (the reward, if any, at the second)."""
    cue = ev.cues[0].cue if ev.cues else "none"
    paid = ev.outcome.reward_ul
    return dataclasses.replace(ev, steps=(TrialStep(cue, "lick", 0.3), TrialStep("port", None, 1.0, paid)))


def _drive(rig, subject: str, rig_name: str, n: int) -> list[TrialEvent]:
    animal = SimulatedAnimal(subject, seed=5)
    decision = rig.open(subject, "s1", RULES).decision
    sent, t = [], time.time()
    for _ in range(n):
        ev = _with_steps(animal.trial(decision, rig_name, t))
        t += 8.0
        sent.append(ev)
        decision = rig.trial(ev).decision
    rig.close_session(subject, "s1")
    return sent


def _stored(data_dir: str, subject: str) -> list[TrialEvent]:
    with Store(os.path.join(data_dir, "rigloop.sqlite")) as store:
        return list(store.trials(subject, "s1"))


def test_steps_reach_the_store_over_zeromq(tmp_path):
    d = Daemon(_settings(tmp_path)).start_thread()
    rig = ZmqRig(d.endpoints["zmq"], "rig1", timeout_s=2.0, retries=3)
    try:
        sent = _drive(rig, "m1", "rig1", 8)
    finally:
        rig.close()
        d.stop()
        d.join()
    stored = _stored(d.settings.data, "m1")
    assert [e.steps for e in stored] == [e.steps for e in sent]
    assert all(len(e.steps) == 2 for e in stored)


def test_steps_reach_the_store_over_a_pty(tmp_path):
    port = PtyPort(tmp_path)
    d = Daemon(_settings(tmp_path, serial=((port.path, "rig_s"),))).start_thread()
    rig = SerialRig(port, "rig_s", timeout_s=0.5, retries=20)
    try:
        deadline = time.monotonic() + 10.0
        while True:
            try:
                rig.ping()
                break
            except Exception:
                if time.monotonic() > deadline:
                    raise AssertionError("the daemon never answered on the serial port") from None
                time.sleep(0.05)
        sent = _drive(rig, "m2", "rig_s", 6)
    finally:
        d.stop()
        d.join()
        port.close()
    stored = _stored(d.settings.data, "m2")
    assert [e.steps for e in stored] == [e.steps for e in sent]


# --------------------------------------------------------------------------- CSV


_MAP = """
[trial]
subject = "animal"
session = "sess"
trial = "n"
rig = { value = "box3" }

[[step]]
state = { value = "centre_light" }
action = "first_poke"
time = "first_s"

[[step]]
state = "second_state"
action = "second_poke"
time = "second_s"
reward_ul = "paid_ul"

[outcome]
reward_ul = "paid_ul"
reward_time = "paid_s"
"""

_CSV = """animal,sess,n,first_poke,first_s,second_state,second_poke,second_s,paid_ul,paid_s
m1,s1,1,left,0.4,port_a_light,right,1.2,4.0,1.3
m1,s1,2,right,0.5,,,,0,
m1,s1,3,right,0.5,port_b_light,,1.1,0,
"""


def test_csv_import_reads_steps(tmp_path):
    path = tmp_path / "trials.csv"
    path.write_text(_CSV)
    events, problems = parse_csv(path, load_mapping(_MAP))
    assert problems == []
    assert events[0].steps == (TrialStep("centre_light", "left", 0.4), TrialStep("port_a_light", "right", 1.2, 4.0))
    assert events[1].steps == (TrialStep("centre_light", "right", 0.5),)  # a blank state ends the steps
    assert events[2].steps[1] == TrialStep("port_b_light", None, 1.1)


def test_csv_step_problems_name_the_column(tmp_path):
    path = tmp_path / "trials.csv"
    path.write_text(_CSV.replace("m1,s1,3,right,0.5,port_b_light,,1.1", "m1,s1,3,right,0.5,port_b_light,,0.1"))
    _, problems = parse_csv(path, load_mapping(_MAP))
    assert len(problems) == 1
    assert problems[0].column == "second_s" and "previous step" in problems[0].reason
    with pytest.raises(MappingError) as err:
        load_mapping("[trial]\nsubject='a'\nsession='b'\ntrial='n'\nrig='r'\n[[step]]\naction='x'\n")
    assert "step[1].state is required" in str(err.value) and "step[1].time is required" in str(err.value)


# --------------------------------------------------------------------------- property

_names = st.text(st.characters(min_codepoint=33, max_codepoint=126), min_size=1, max_size=12)
_times = st.floats(0.0, 100.0, allow_nan=False, allow_infinity=False)


@st.composite
def _step_lists(draw):
    times = sorted(draw(st.lists(_times, min_size=1, max_size=6)))
    steps = [TrialStep(draw(_names), draw(st.none() | _names), t) for t in times]
    if draw(st.booleans()):  # a paid last step
        last = steps[-1]
        steps[-1] = TrialStep(last.state, last.action, last.time, draw(st.floats(0.5, 20.0)))
    return steps


@settings(max_examples=150, deadline=None)
@given(_step_lists())
def test_any_valid_steps_survive_both_encodings(steps):
    """Names with ':', ',', '%', '@', '|', quotes and the like, any times in order: the
    serial line (escaped parts) and the msgpack frame give the same event back."""
    paid = steps[-1].reward_ul
    ev = _two_step_event(steps=tuple(steps), outcome=Outcome(paid, steps[-1].time if paid else None),
                         response=Response(), cues=())
    report = wire.TrialReport("5", ev)
    assert wire.parse_request_line(wire.format_request_line(report)).event == ev
    assert wire.decode_request(wire.encode_request(report)).event == ev


def test_export_writes_steps_only_for_multi_step_trials(tmp_path):
    """CSV gets step1_state ... columns and JSONL a steps list when trials have steps; a
    store of one-step trials exports exactly the columns it always did."""
    from rigloop.offline.export import export_text
    from rigloop.offline.simulate import preset_animal, record_session
    from rigloop.rules.load import load_example

    for name, preset in (("two_step", "model_based"), (RULES, "typical")):
        rules = load_example(name)
        with Store(str(tmp_path / f"{name}.sqlite")) as store:
            record_session(store, rules, preset_animal(preset, rules, "m1", 1), session="s1", max_trials=5)
            csv_text = export_text(store, "trials", "csv")
            jsonl = export_text(store, "trials", "jsonl")
        header = csv_text.splitlines()[0]
        if name == "two_step":
            assert header.endswith("step1_state,step1_action,step1_time,step1_reward_ul,"
                                   "step2_state,step2_action,step2_time,step2_reward_ul")
            assert '"steps":[{' in jsonl
        else:
            assert "step1_" not in header and '"steps"' not in jsonl
