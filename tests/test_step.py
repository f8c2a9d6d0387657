"""step is pure and deterministic; SubjectState round-trips exactly through bytes."""

import pytest

from rigloop import BadEvent, CuePresentation, Outcome, Response, TrialEvent
from rigloop.core.step import begin_session, session_seed, step, trial_rng
from rigloop.core.subject import SubjectState, new_subject
from rigloop.offline.simulate import SimulatedAnimal, simulate_session
from rigloop.rules import ScheduleState, load_example


@pytest.fixture(scope="module")
def rules():
    return load_example("tone_reversal")


@pytest.fixture(scope="module")
def run(rules):
    return simulate_session(rules, SimulatedAnimal("m01", seed=3), session="s1", max_trials=60)


def _opened(rules, subject="m01", session="s1"):
    state = new_subject(subject, rules)
    return begin_session(state, rules, session=session, rig="box1", wall_time=1.8e9)


def test_same_inputs_same_outputs_bit_for_bit(rules, run):
    """Two runs of the same session give identical states, decisions and quantities."""
    again = simulate_session(rules, SimulatedAnimal("m01", seed=3), session="s1", max_trials=60)
    assert again.decisions == run.decisions
    assert again.state.to_bytes() == run.state.to_bytes()
    assert [u.quantities for u in again.updates] == [u.quantities for u in run.updates]


def test_step_does_not_change_the_state_it_is_given(rules, run):
    """step returns a new state; the one passed in is untouched (its bytes are equal)."""
    state, _ = _opened(rules)
    before = state.to_bytes()
    step(state, run.events[0], rules)
    assert state.to_bytes() == before


def test_state_bytes_round_trip_exact(run):
    """to_bytes(from_bytes(b)) == b, and the rebuilt state steps identically."""
    blob = run.state.to_bytes()
    again = SubjectState.from_bytes(blob, ScheduleState)
    assert again.to_bytes() == blob


def test_rebuilt_state_continues_identically(rules, run):
    """A state rebuilt from bytes mid-session gives the same next decisions."""
    state, _ = _opened(rules)
    for event in run.events[:30]:
        state, _, _ = step(state, event, rules)
    copy = SubjectState.from_bytes(state.to_bytes(), ScheduleState)
    for event, expected in zip(run.events[30:], run.decisions[30:], strict=True):
        state, d1, _ = step(state, event, rules)
        copy, d2, _ = step(copy, event, rules)
        assert d1 == d2 == expected
    assert copy.to_bytes() == state.to_bytes()


def test_randomness_depends_on_seed_and_trial_only():
    """The per-trial generator is a function of (session seed, trial number)."""
    a = trial_rng(session_seed("m01", "s1"), 7).random(3)
    b = trial_rng(session_seed("m01", "s1"), 7).random(3)
    c = trial_rng(session_seed("m01", "s1"), 8).random(3)
    assert (a == b).all() and not (a == c).all()


def test_lazy_trial_generator_draws_what_trial_rng_draws():
    """The generator step hands the rules is built on first use and draws as trial_rng does."""
    from rigloop.core.step import _LazyTrialRng

    lazy, real = _LazyTrialRng(123, 7), trial_rng(123, 7)
    assert lazy._rng is None
    assert lazy.permutation(6).tolist() == real.permutation(6).tolist()
    assert lazy.random() == real.random()
    assert lazy.integers(5) == real.integers(5)
    assert lazy.normal() == real.normal()


def test_wrong_trial_number_is_rejected_and_changes_nothing(rules, run):
    state, _ = _opened(rules)
    bad = TrialEvent.from_dict({**run.events[0].to_dict(), "trial": 2})
    with pytest.raises(BadEvent, match=r"^'trial' must follow the last stored trial 0 \(expected 1\)"):
        step(state, bad, rules)


def test_unknown_cue_is_rejected(rules):
    state, _ = _opened(rules)
    event = TrialEvent("m01", "box1", "s1", 1, cues=(CuePresentation("odor_a", 0.5, 1.5),),
                       outcome=Outcome(), response=Response("licks", 0.0, "correct"), duration=3.0)
    with pytest.raises(BadEvent, match=r"'cues' names a cue this session does not use"):
        step(state, event, rules)


def test_event_for_another_session_is_rejected(rules, run):
    state, _ = _opened(rules, session="s2")
    with pytest.raises(BadEvent, match=r"is not the subject's open session 's2'"):
        step(state, run.events[0], rules)


def test_update_carries_regressors(run):
    """Each update names the value and sd of the presented cue at onset and the errors."""
    q = run.updates[10].quantities
    cue = run.events[10].cues[0].cue
    assert {f"value[{cue}]", f"sd[{cue}]", "delta_cue", "delta_outcome", "p_correct"} <= set(q)
    assert q[f"sd[{cue}]"] > 0


def test_changing_learner_between_sessions_starts_model_afresh(rules, run):
    """A rule file with a different learner keeps the schedule but restarts the model, and says so."""
    other = load_example("gonogo_shaping")
    state = run.state
    state2, first = begin_session(state, other, session="s2", rig="box1", wall_time=1.9e9)
    assert any("starts from its prior" in w for w in first.warnings)
    assert state2.learner.name == other.learner.name


def test_surprise_equals_its_array_form():
    """max |δ| / sd over a trial, with sd = sqrt(max(var, 0) + noise) (1 where not > 0),
    matches the numpy expression bit for bit, odd values included."""
    import numpy as np

    from rigloop.core.step import _surprise

    def array_form(errors, variances, noise):
        sd = np.sqrt(np.maximum(variances, 0.0) + noise)
        return float(np.max(np.abs(errors) / np.where(sd > 0, sd, 1.0))) if len(errors) else None

    rng = np.random.default_rng(1)
    odd = [0.0, -0.0, 1.0, -1.0, np.inf, 1e-300, 1e300, 0.3]
    with np.errstate(all="ignore"):
        for _ in range(2000):
            T = int(rng.integers(0, 7))
            errors = rng.choice(odd + list(rng.normal(size=3)), size=T)
            variances = rng.choice(odd + [-np.inf, np.nan] + list(rng.normal(size=3)), size=T)
            noise = float(rng.choice([0.0, 0.2]))
            a, b = array_form(errors, variances, noise), _surprise(errors, variances, noise)
            assert (a is None and b is None) or np.float64(a).tobytes() == np.float64(b).tobytes()
