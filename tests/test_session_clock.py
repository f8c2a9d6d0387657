"""The session's clock: a trial whose wall_time jumps far from the session's clock is
flagged in the next decision and not counted toward session minutes (it used to end the
session without a word), and a session that ends on time says which readings ended it.
In the rule engine and through a real daemon over ZeroMQ."""

from __future__ import annotations

import numpy as np
import pytest

from rigloop.core.trial import CuePresentation, Outcome, Response, TrialEvent
from rigloop.rules import StaticView, load_example, load_rules
from rigloop.rules.engine import CLOCK_JUMP_S, session_minutes
from rigloop.serve.daemon import Daemon, Settings
from rigloop.testing import ZmqRig

T0 = 1.7e9  # 2023-11-14T22:13:20+00:00


def event(trial, wall, cue="a", duration=4.0, session="s1", subject="m1", rig="r1"):
    return TrialEvent(subject=subject, rig=rig, session=session, trial=trial,
                      cues=(CuePresentation(cue, 0.5, 2.5),), outcome=Outcome(reward_ul=0.0),
                      response=Response(kind="licks", value=0.0, result="correct"), duration=duration,
                      wall_time=wall)


def clock_warnings(plan):
    return [w for w in plan.warnings if w.startswith("clock:")]


def rules(session_end=""):
    return load_rules(f"""
name = "clock"
reward_unit_ul = 3.0
[learner]
model = "kalman_filter"
[features]
kind = "identity"
[cues]
a = "go"
[stages.s.blocks.x]
contingency.a = {{ p = 1.0, ul = 3.0 }}
[session_end]
{session_end}
[welfare]
max_session_min = 30
""")


def test_a_jump_of_days_is_flagged_and_not_counted():
    """Open at T0, first trial ten days later (the rig's clock against another): the
    decision warns and the session goes on; later trials on the rig's clock count."""
    r = rules()
    s = r.open_session(r.start_subject(), "s1", T0)
    s = r.observe(s, event(1, T0 + 10 * 86400.0))
    assert session_minutes(s) == pytest.approx(4.0 / 60)  # the trial's own 4 s, not ten days
    s, plan = r.decide(s, StaticView(), 2, np.random.default_rng(0))
    assert not plan.end_session
    assert clock_warnings(plan) == [
        "clock: trial 1's wall_time 2023-11-24T22:13:20+00:00 is 240 h after the session's last clock reading "
        "2023-11-14T22:13:20+00:00; the jump is not counted toward session_min (more than 3 h cannot be a "
        "pause within a session). Check the rig's clock, and send the rig's wall_time with open"]
    s = r.observe(s, event(2, T0 + 10 * 86400.0 + 600.0))
    assert session_minutes(s) == pytest.approx(10.0 + 4.0 / 60)
    s, plan = r.decide(s, StaticView(), 3, np.random.default_rng(0))
    assert clock_warnings(plan) == [] and not plan.end_session


def test_a_gap_up_to_the_threshold_still_counts():
    """A pause of up to CLOCK_JUMP_S is time in the rig: it counts and ends the session."""
    r = rules()
    s = r.open_session(r.start_subject(), "s1", T0)
    s = r.observe(s, event(1, T0 + CLOCK_JUMP_S))
    _, plan = r.decide(s, StaticView(), 2, np.random.default_rng(0))
    assert plan.end_session and clock_warnings(plan) == []


def test_welfare_end_names_the_clock_readings():
    """The welfare session cap's end says from which reading to which it measured."""
    r = rules()
    s = r.open_session(r.start_subject(), "s1", T0)
    s = r.observe(s, event(1, T0 + 30 * 60 - 2.0))
    _, plan = r.decide(s, StaticView(), 2, np.random.default_rng(0))
    assert plan.end_session
    assert plan.overrides == ("welfare: session length 30.033 min reached the limit (30 min) -> session ends",)
    assert plan.reasons[-1] == ("session clock: 30.033 min from 2023-11-14T22:13:20+00:00 to "
                                "2023-11-14T22:43:22+00:00 (the latest trial's start + duration)")


def test_a_time_criterion_names_the_clock_readings():
    """A session_end criterion that reads session_min carries the clock in its reason;
    one that does not (misses) does not."""
    r = rules('time_up = "session_min >= 20"\ndisengaged = "misses_in_row >= 1"')
    s = r.open_session(r.start_subject(), "s1", T0)
    s = r.observe(s, event(1, T0 + 20 * 60.0))
    _, plan = r.decide(s, StaticView(), 2, np.random.default_rng(0))
    assert plan.reasons == ("session ends (time_up): session_min = 20.067 >= 20; session clock: 20.067 min from "
                            "2023-11-14T22:13:20+00:00 to 2023-11-14T22:33:24+00:00 (the latest trial's start + "
                            "duration)",)


def test_daemon_readme_example_warns_instead_of_ending(tmp_path):
    """The README's exchange with an open on one clock and a trial at wall_time 1800000002
    (two and a half years later): the daemon's decision warns and the session stays open."""
    settings = Settings(data=str(tmp_path / "data"), rules=("tone_reversal",), zmq="tcp://127.0.0.1:*",
                        publish="tcp://127.0.0.1:*", log_trials=False, selftest_timeout_s=0.5)
    d = Daemon(settings).start_thread()
    try:
        with ZmqRig(d.endpoints["zmq"], "box2", timeout_s=5.0, retries=3) as rig:
            first = rig.open("m07", "s3", "tone_reversal", seed=20260101, wall_time=T0)
            cue = first.decision.cue
            reply = rig.trial(event(1, 1800000002.0, cue=cue, session="s3", subject="m07", rig="box2"))
            assert not reply.decision.end_session
            assert reply.decision.warnings[0].startswith("clock: trial 1's wall_time 2027-01-15T08:00:02+00:00 is ")
            assert "not counted toward session_min" in reply.decision.warnings[0]
    finally:
        d.stop()
        d.join()


def test_example_session_end_reason_is_unchanged_for_non_time_criteria():
    """Water and misses criteria of the shipped example keep their reason text."""
    spec = load_example("tone_reversal").spec
    names = {c.name: c.when.names_used() for c in spec.session_end}
    assert "session_min" in names["time_up"] and "session_min" not in names["water_earned"]
