""""Water today" adds up over the lab's day: [welfare] timezone and day_starts, default UTC
from 00:00 (the same on every machine, so replay decides alike everywhere)."""

from __future__ import annotations

from datetime import datetime

import pytest

from rigloop.core.trial import CuePresentation, Outcome, Response, TrialEvent
from rigloop.errors import RuleError
from rigloop.rules import load_rules
from rigloop.rules.engine import utc_day
from rigloop.rules.welfare import DEFAULTS, WelfareLimits, lab_day

BERLIN_6 = WelfareLimits(timezone="Europe/Berlin", day_starts="06:00")


def at(text: str) -> float:
    """Epoch seconds of an ISO time with its UTC offset written out. The offsets are the
    EU rule (Directive 2000/84/EC): Berlin is UTC+1, and UTC+2 from the last Sunday of
    March 01:00 UTC to the last Sunday of October 01:00 UTC (recalled from memory)."""
    return datetime.fromisoformat(text).timestamp()


@pytest.mark.parametrize("moment, day", [
    ("2031-03-03T05:59:59+01:00", "2031-03-02"),   # before 06:00 local: still the day before
    ("2031-03-03T06:00:00+01:00", "2031-03-03"),
    ("2031-03-03T23:30:00+01:00", "2031-03-03"),   # UTC is already... still 3 March (22:30Z)
    ("2031-03-04T00:30:00+01:00", "2031-03-03"),   # UTC 23:30Z on 3 March; local after midnight, before 06:00
    ("2031-07-01T05:30:00+02:00", "2031-06-30"),   # summer time: 03:30Z
    ("2031-07-01T06:00:00+02:00", "2031-07-01"),   # 04:00Z
    ("2031-03-30T05:59:00+02:00", "2031-03-29"),   # the morning the clocks went forward (01:00Z)
])
def test_lab_day_in_berlin_from_six(moment, day):
    assert lab_day(at(moment), BERLIN_6) == day


def test_default_is_utc_midnight_on_any_machine():
    """No setting: the UTC date, whatever the machine's own zone."""
    for moment in ("2031-03-03T00:00:00+00:00", "2031-03-02T23:59:59+00:00", "2031-03-03T05:00:00+09:00"):
        assert lab_day(at(moment), DEFAULTS) == utc_day(at(moment))
    assert lab_day(at("2031-03-03T05:00:00+09:00"), DEFAULTS) == "2031-03-02"
    assert lab_day(at("2031-03-03T05:00:00+00:00"), WelfareLimits(day_starts="06:00")) == "2031-03-02"


def rules(welfare: str):
    return load_rules(f"""
name = "day"
reward_unit_ul = 3.0
[learner]
model = "kalman_filter"
[features]
kind = "identity"
[cues]
a = "go"
[stages.s.blocks.x]
contingency.a = {{ p = 1.0, ul = 3.0 }}
[welfare]
{welfare}
""")


def rewarded(trial: int, wall: float, session: str) -> TrialEvent:
    return TrialEvent(subject="m1", rig="r1", session=session, trial=trial,
                      cues=(CuePresentation("a", 0.5, 2.5),), outcome=Outcome(reward_ul=3.0, reward_time=2.5),
                      response=Response(kind="licks", value=3.0, result="correct"), duration=4.0, wall_time=wall)


def water_after_two_sessions(r, first: str, second: str) -> float:
    s = r.open_session(r.start_subject(), "s1", at(first))
    s = r.observe(s, rewarded(1, at(first) + 10, "s1"))
    s = r.open_session(s, "s2", at(second))
    return s.ul_today


def test_sessions_either_side_of_the_lab_day_start():
    """05:00 and 07:00 Berlin time on one date: one UTC day (04:00Z, 06:00Z), so the
    default keeps the tally; a lab day from 06:00 Berlin starts a new one."""
    first, second = "2031-03-03T05:00:00+01:00", "2031-03-03T07:00:00+01:00"
    assert water_after_two_sessions(rules(""), first, second) == 3.0
    berlin = rules('timezone = "Europe/Berlin"\nday_starts = "06:00"')
    assert berlin.spec.welfare.timezone == "Europe/Berlin"
    assert water_after_two_sessions(berlin, first, second) == 0.0
    # 23:00 and 01:00 local: two UTC... one lab day from 06:00 (the night session stays on it)
    assert water_after_two_sessions(berlin, "2031-03-03T23:00:00+01:00", "2031-03-04T01:00:00+01:00") == 3.0


def test_bad_day_settings_are_named():
    with pytest.raises(RuleError) as err:
        rules('timezone = "Mars/Olympus"\nday_starts = "6am"')
    assert err.value.problems == [
        'welfare.timezone: must be a time zone name such as "Europe/Berlin" or "UTC" (got \'Mars/Olympus\'; '
        "the machine's time zone database has no such zone)",
        'welfare.day_starts: must be a local time "HH:MM" from "00:00" to "23:59", the start of the lab\'s day '
        "for water today (got '6am')",
    ]


def test_check_says_which_day_water_today_adds_up_over():
    """`rigloop check` names the day's start and zone, and says when it is only the default."""
    from rigloop.rules import load_example
    from rigloop.rules.plan import describe

    text = describe(load_example("tone_reversal"))
    assert ("'water today' adds up over a day that starts at 00:00 UTC (the default: set [welfare] timezone "
            "and day_starts to your lab's day)") in text
