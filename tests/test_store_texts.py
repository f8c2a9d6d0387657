"""The store's direct text writers (store/texts.py) give the same characters as the
reference: Python's own ``json`` encoder with sorted keys (``records.canonical_json``) over
the values' ``to_dict()``. Checked on whole simulated sessions of the shipped examples and
on generated events, decisions and quantities, including the odd values that must fall
back to the reference."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from rigloop.core.trial import CuePresentation, Decision, Outcome, Response, TrialEvent, TrialStep
from rigloop.offline.simulate import SimulatedAnimal, simulate_session
from rigloop.rules import load_example
from rigloop.store import canonical_json
from rigloop.store.records import _quantities, prepare
from rigloop.store.texts import decision_text, event_text, quantities_text

from strategies_store import quantity_maps
from strategies_wire import decisions, trial_events


def _same(ev: TrialEvent, d: Decision, q: dict) -> None:
    assert event_text(ev) == canonical_json(ev.to_dict())
    assert decision_text(d) == canonical_json(d.to_dict())
    checked = _quantities(q)
    assert quantities_text(checked) == canonical_json(checked)


@pytest.mark.parametrize("example", ["tone_reversal", "gonogo_shaping"])
def test_simulated_sessions_are_written_as_the_reference_writes_them(example):
    rules = load_example(example)
    run = simulate_session(rules, SimulatedAnimal("m1", seed=3), session="s1", max_trials=120)
    assert run.events
    for ev, d, u in zip(run.events, run.decisions, run.updates, strict=True):
        _same(ev, d, u.quantities)
        p = prepare(ev, d, u.quantities)
        assert (p.event_text, p.decision_text) == (canonical_json(ev.to_dict()), canonical_json(d.to_dict()))


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.filter_too_much, HealthCheck.too_slow])
@given(trial_events(), decisions, quantity_maps)
def test_generated_values_are_written_as_the_reference_writes_them(ev, d, q):
    _same(ev, d, q)


@settings(max_examples=100, deadline=None)
@given(st.text(max_size=20), st.floats(allow_nan=False, allow_infinity=False))
def test_any_text_and_float_in_a_decision(reason, x):
    d = Decision("m", "s", 2, None, 0.5, 1.0, True, "b", "st", difficulty=x, reasons=(reason, "ü\u2028\"\\"))
    assert decision_text(d) == canonical_json(d.to_dict())


def test_values_the_writers_were_not_made_for_fall_back_to_the_reference():
    steps = (TrialStep("a", "left", 0.5, 0.0), TrialStep("b", None, 1.0, 2.0))
    ev = TrialEvent("m", "r", "s", 1, (CuePresentation("a", 0.0, 0.5),), Outcome(2.0, 1.0), Response("choice", "left"),
                    extra={"z": 1, "a": "x", "m": None, "t": True}, steps=steps)
    assert event_text(ev) == canonical_json(ev.to_dict())
    bare = TrialEvent("m", "r", "s", 1)  # no cues, nothing in the outcome or the response
    assert event_text(bare) == canonical_json(bare.to_dict())
    odd = {"b": np.float64(0.1), "a": None, "c": 3, "d": np.float32(1.5), "e": -0.0, "f": 1e300, "g": 5e-324}
    checked = _quantities(odd)
    assert quantities_text(checked) == canonical_json(checked)
    # a value the canonical encoder refuses is refused the same way
    with pytest.raises(ValueError):
        quantities_text({"x": math.nan})
    with pytest.raises(ValueError):
        canonical_json({"x": math.nan})


def test_the_up_front_tests_send_the_unusual_the_checked_way_with_the_same_text():
    """event_text and decision_text test the usual values once up front; what fails that
    (no cue or two, a sum of times that overflows, a numpy float set behind the
    constructor's back) is written value by value or by the reference: the same characters."""
    big = 1.7e308  # finite, but two of them add up to inf
    one = (CuePresentation("a", 0.5, 1.0),)
    events = [
        TrialEvent("m", "r", "s", 1, (), Outcome(), Response()),
        TrialEvent("m", "r", "s", 1, (CuePresentation("b", 0.1, 0.2), CuePresentation("a", 0.5, 1.0)), Outcome(),
                   Response("licks", 3.0, "correct", 0.7)),
        TrialEvent("m", "r", "s", 1, one, Outcome(), Response("choice", "left"), duration=big, wall_time=big),
        TrialEvent("m", "r", "s", 1, one, Outcome(2.0, 0.8, "airpuff", 0.9, 1.5), Response("licks", -0.0, None, 0.0)),
    ]
    odd = TrialEvent("m", "r", "s", 1, one, Outcome(), Response("licks", 2.0))
    object.__setattr__(odd.response, "value", np.float64(2.5))
    events.append(odd)
    for ev in events:
        assert event_text(ev) == canonical_json(ev.to_dict())
    decisions_ = [
        Decision("m", "s", 2, None, 0.5, 1.0, True, "b", "st"),
        Decision("m", "s", 2, "a", 1.0, big, False, "b", "st", end_session=True, difficulty=big, valve_ms=3.5),
        Decision("m", "s", 2, "a", 0.25, 0.0, False, "b", "st", difficulty=-0.0, warnings=("w",)),
    ]
    odd_d = Decision("m", "s", 2, "a", 0.5, 1.0, True, "b", "st")
    object.__setattr__(odd_d, "reward_ul", np.float64(1.5))
    decisions_.append(odd_d)
    for d in decisions_:
        assert decision_text(d) == canonical_json(d.to_dict())
