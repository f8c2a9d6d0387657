"""The decisions-only simulation path (rigloop/offline/lockstep) against the per-subject ``step``.

The reference is ``step`` itself (the path the daemon, replay and the step digest hold):
every decision, the schedule, curves and behaviour estimates, and with the learner run
the whole final state in bytes, must be identical, on every shipped example the path
admits, with learning and failing simulated animals. Rule files whose decisions read the
learner, and runs that store, take the per-subject step.
"""

from __future__ import annotations

import dataclasses

import pytest

from rigloop.core.step import begin_session, session_seed, step
from rigloop.core.subject import new_subject
from rigloop.offline import compare
from rigloop.offline.compare import AnimalTask, run_animal
from rigloop.offline.lockstep import (
    DECISIONS_ONLY,
    PER_SUBJECT,
    LearnerRead,
    decide_step,
    learner_free,
    path_for,
    reads_curves,
)
from rigloop.offline.population import draw_animals, load_population
from rigloop.offline.simulate import preset_animal
from rigloop.rules import load_rules
from rigloop.rules.load import load_any

ADMITTED = ("tone_reversal", "gonogo_shaping", "two_choice_staircase")
REFUSED = ("two_step", "two_step_devaluation")
# learning and failing animals: the decisions must follow each the same way on both paths
PRESETS = {
    "tone_reversal": ("fast_learner", "non_discriminator", "slow_reverser"),
    "gonogo_shaping": ("fast_learner", "cue_blind", "lapsing"),
    "two_choice_staircase": ("fast_learner", "side_biased", "fatiguing"),
}


def _run(rules, preset, mode, sessions=2, cap=180):
    """Decisions and final state of one preset animal: ``mode`` 'step', 'learn' or 'lean'."""
    animal = preset_animal(preset, rules, "m1", seed=11)
    state = new_subject("m1", rules)
    decisions = []
    for k in range(sessions):
        session = f"d{k + 1:03d}"
        t = 1.8e9 + 86400.0 * k
        state, decision = begin_session(state, rules, session=session, rig="sim-rig", wall_time=t,
                                        seed=session_seed("m1", session))
        decisions.append(decision)
        for i in range(cap):
            if decision.end_session:
                break
            event = animal.trial(decision, "sim-rig", t + 8.0 * i)
            if mode == "step":
                state, decision, _ = step(state, event, rules)
            elif mode == "learn":
                state, decision = decide_step(state, event, rules, learn=True)
            else:  # what compare and simulate run without a store
                state, decision = decide_step(state, event, rules, learn=False, curves=reads_curves(rules))
            decisions.append(decision)
    return decisions, state


@pytest.mark.parametrize("name", ADMITTED)
def test_every_decision_and_the_final_state_equal_the_per_subject_step(name):
    rules = load_any(name)
    assert path_for(rules) == (DECISIONS_ONLY, "no decision reads the learner and nothing is stored")
    for preset in PRESETS[name]:
        ref, ref_state = _run(rules, preset, "step")
        learned, learned_state = _run(rules, preset, "learn")
        lean, lean_state = _run(rules, preset, "lean")
        assert learned == ref and lean == ref, (name, preset)
        assert learned_state.to_bytes() == ref_state.to_bytes(), (name, preset)
        # without the learner (and the curves, when no decision reads them): everything else is the same
        prior = new_subject("m1", rules).learner
        curves = ref_state.curves if reads_curves(rules) else {}
        assert lean_state.curves == curves, (name, preset)
        assert dataclasses.replace(lean_state, learner=prior).to_bytes() == \
            dataclasses.replace(ref_state, learner=prior, curves=curves).to_bytes(), (name, preset)
        assert lean_state.learner.state().keys() == prior.state().keys()
        if preset == "fast_learner":  # the run moved through the schedule (trial 1 alone would prove little)
            assert len({(d.stage, d.block) for d in ref}) >= 2, name


def test_compare_results_equal_on_both_paths(monkeypatch):
    """run_animal's numbers (stages, water, interventions, lags) do not depend on the path."""
    pop = load_population("spring_cohort")
    draws = draw_animals(pop, 2, 5)
    tasks = [AnimalTask(name, load_any(name).text, load_any(name).source, d, 2) for name in ADMITTED[:2]
             for d in draws]
    tasks = [dataclasses.replace(t, days=1) for t in tasks]
    lean = [run_animal(t) for t in tasks]
    monkeypatch.setattr(compare, "path_for", lambda rules, db=None: (PER_SUBJECT, "forced by the test"))
    ref = [run_animal(t) for t in tasks]
    assert lean == ref
    assert sum(r.trials for r in ref) > 600


def _variant(old: str, new: str):
    text = load_any("tone_reversal").text
    assert old in text
    return load_rules(text.replace(old, new, 1), source="<variant>")


def test_rule_files_that_read_the_learner_take_the_per_subject_step():
    for name in REFUSED:
        path, why = path_for(load_any(name))
        assert path == PER_SUBJECT and "two_step" in why
    valued = _variant('advance = { when = "trials_in_stage >= 60 and ',
                      'advance = { when = "trials_in_stage >= 60 and value(tone_hi) > 0.5 and ')
    path, why = path_for(valued)
    assert path == PER_SUBJECT and "value()" in why
    uncertain = _variant('next_cue = { policy = "balanced", repeats = 2, max_run = 3 }',
                         'next_cue = { policy = "uncertain" }')
    path, why = path_for(uncertain)
    assert path == PER_SUBJECT and "uncertain" in why
    path, why = path_for(load_any("tone_reversal"), db="x.sqlite")
    assert path == PER_SUBJECT and "stored" in why


def test_rule_files_that_read_the_curves_keep_them():
    assert not reads_curves(load_any("tone_reversal"))
    assert reads_curves(load_any("two_choice_staircase"))  # it reads p_correct / p_lower
    curved = _variant('advance = { when = "trials_in_stage >= 60 and ',
                      'advance = { when = "trials_in_stage >= 60 and p_lower(all) > 0.6 and ')
    assert reads_curves(curved) and learner_free(curved)[0]
    ref, _ = _run(curved, "fast_learner", "step")
    assert _run(curved, "fast_learner", "lean")[0] == ref


def test_a_decision_that_reads_the_learner_fails_loudly_without_one():
    """The stand-in learner raises rather than letting a decision read a stale prior."""
    rules = _variant('next_cue = { policy = "balanced", repeats = 2, max_run = 3 }',
                     'next_cue = { policy = "uncertain" }')
    assert not learner_free(rules)[0]
    with pytest.raises(LearnerRead, match="learner_free"):
        _run(rules, "typical", "lean", sessions=1, cap=3)
    assert _run(rules, "typical", "learn", sessions=1, cap=30)[0] == _run(rules, "typical", "step", sessions=1,
                                                                          cap=30)[0]


def test_simulate_summaries_equal_on_both_paths(monkeypatch):
    """rigloop simulate's per-subject summaries (blocks, stages, water, truth timing) do not depend on the path."""
    from rigloop.offline import sweep

    rules = load_any("tone_reversal")
    args = [(rules.text, rules.source, f"m{i}", 100 + i, 2, 200, None, None, preset)
            for i, preset in enumerate(("fast_learner", "non_discriminator"))]
    lean = [sweep.simulate_item(a) for a in args]
    monkeypatch.setattr(sweep, "path_for", lambda rules, db=None: (PER_SUBJECT, "forced by the test"))
    assert [sweep.simulate_item(a) for a in args] == lean
    assert lean[0].blocks  # the fast learner's blocks changed


def test_simulate_session_refuses_decisions_only_where_it_does_not_hold(tmp_path):
    from rigloop.errors import BadArgument
    from rigloop.offline.simulate import simulate_session
    from rigloop.store import Store

    rules = load_any("tone_reversal")
    with Store(str(tmp_path / "s.sqlite")) as store, pytest.raises(BadArgument, match="decisions_only"):
        simulate_session(rules, preset_animal("typical", rules, "m1", 1), session="s1", store=store,
                         decisions_only=True)
    two = load_any("two_step")
    with pytest.raises(BadArgument, match="two_step"):
        simulate_session(two, preset_animal("typical", two, "m1", 1), session="s1", decisions_only=True)
