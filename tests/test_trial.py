"""TrialEvent and Decision validate on construction and round-trip through plain data."""

import math

import pytest

from rigloop import BadEvent, CuePresentation, Decision, Outcome, Response, TrialEvent


def make(**kw):
    base = dict(
        subject="m01",
        rig="box1",
        session="s1",
        trial=1,
        cues=(CuePresentation("tone_hi", 0.0, 1.0),),
        outcome=Outcome(reward_ul=4.0, reward_time=1.0),
        response=Response(kind="licks", value=3, result="correct", latency=0.4),
    )
    base.update(kw)
    return TrialEvent(**base)


def test_round_trip_plain_data():
    """Every field survives to_dict/from_dict exactly."""
    event = make(extra={"contrast": 0.5, "note": "ok"}, wall_time=1.7e9)
    assert TrialEvent.from_dict(event.to_dict()) == event


def test_negative_reward_names_field():
    with pytest.raises(BadEvent, match=r"^'outcome.reward_ul' must be a finite number >= 0 \(got -4.0\)$"):
        Outcome(reward_ul=-4.0, reward_time=1.0)


@pytest.mark.parametrize("bad", [math.nan, math.inf])
def test_non_finite_times_rejected(bad):
    with pytest.raises(BadEvent, match="onset"):
        CuePresentation("tone_hi", bad, 1.0)


def test_offset_before_onset():
    with pytest.raises(BadEvent, match=r"offset.*before its onset"):
        CuePresentation("tone_hi", 2.0, 1.0)


def test_trial_numbering_and_cue_context():
    event = make(trial=5)
    event.check_context(known_cues=["tone_hi"], last_trial=4)
    with pytest.raises(BadEvent, match=r"follow the last stored trial 3"):
        event.check_context(last_trial=3)
    with pytest.raises(BadEvent, match=r"does not use"):
        event.check_context(known_cues=["tone_lo"])


def test_outcome_before_cue_where_forbidden():
    event = make(cues=(CuePresentation("tone_hi", 2.0, 3.0),), outcome=Outcome(4.0, 1.0))
    with pytest.raises(BadEvent, match=r"before the first cue"):
        event.check_context(outcome_before_cue_ok=False)


def test_unknown_field_rejected():
    data = make().to_dict()
    data["valve"] = 3
    with pytest.raises(BadEvent, match=r"^'valve' is not a trial field"):
        TrialEvent.from_dict(data)


def test_decision_round_trip():
    d = Decision("m01", "s1", 2, "tone_hi", 0.8, 4.0, True, "acquisition", "stage1", reasons=("why",))
    assert Decision.from_dict(d.to_dict()) == d
    assert list(d.to_dict()) == list(Decision.__dataclass_fields__)  # every field, in order
    # values that need converting still are converted (int -> float, truthy -> bool)
    c = Decision("m01", "s1", 2, None, 1, 4, 1, "a", "b", end_session=0, difficulty=2, reasons=["x"])
    assert (c.reward_prob, c.reward_ul, c.reward_armed, c.end_session, c.difficulty, c.reasons) == (
        1.0, 4.0, True, False, 2.0, ("x",))
    assert type(c.reward_prob) is float and type(c.difficulty) is float
    with pytest.raises(BadEvent, match="reward_prob"):
        Decision("m01", "s1", 2, "tone_hi", 1.5, 4.0, True, "a", "b")
