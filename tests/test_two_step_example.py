"""The shipped two-stage example end to end: simulated animals whose truth is known, the
stage criterion on the posterior of w, the learner's state, and the devaluation probe.

The criterion ``p_model_based(0.5) >= 0.95`` reads only the animal's own first-stage
choices (through the two_step learner's posterior), so an animal that repeats what paid
(model-free), chooses at random, or pokes one side must never pass it; one that plans
through the transitions must.
"""

from __future__ import annotations

import numpy as np
import pytest

from rigloop.core.step import step
from rigloop.core.subject import SubjectState
from rigloop.core.trial import TrialEvent
from rigloop.core.two_step import PRESETS, TwoStepValues
from rigloop.errors import BadArgument
from rigloop.offline.simulate import preset_animal, simulate_session
from rigloop.offline.two_step_sim import two_step_animal
from rigloop.rules.load import load_example, load_rules
from rigloop.rules.state import ScheduleState

TRIALS = 300


@pytest.fixture(scope="module")
def rules():
    return load_example("two_step")


def _stages(rules, preset: str, seed: int):
    animal = preset_animal(preset, rules, f"m{seed}", seed)
    run = simulate_session(rules, animal, session="s1", max_trials=TRIALS)
    return run, [d.stage for d in run.decisions]


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_a_planning_animal_passes_the_criterion(rules, seed):
    run, stages = _stages(rules, "model_based", seed)
    assert "planning" in stages
    assert len(run.events) == TRIALS
    assert all(len(e.steps) == 2 for e in run.events)
    assert run.state.learner.p_model_based(0.5) >= 0.95


@pytest.mark.parametrize("preset", ["model_free", "non_discriminator", "side_biased", "slow_reverser", "lapsing"])
@pytest.mark.parametrize("seed", [1, 2])
def test_animals_that_do_not_plan_never_pass(rules, preset, seed):
    run, stages = _stages(rules, preset, seed)
    assert set(stages) == {"two_stage_training"}, f"{preset} seed {seed} passed a criterion it cannot meet"
    assert run.state.learner.p_model_based(0.5) < 0.95


def test_a_mostly_habitual_hybrid_never_passes():
    """A hybrid with w = 0.25 (it mostly repeats what paid) checked on every trial from
    200 to 400 by the posterior alone: none of 8 passes P(w > 0.5) >= 0.95 (over 20
    animals we saw none; at w = 0.5, the boundary itself, 1 in 20)."""
    from rigloop.core.two_step import TwoStepParams, WPosterior, hybrid_agent

    for seed in range(8):
        run = hybrid_agent(0.25, 400, seed)
        post = WPosterior.start(TwoStepParams())
        for t in range(400):
            post = post.updated(int(run.a1[t]), int(run.s2[t]), int(run.a2[t]), float(run.reward[t]))
            assert t < 199 or post.p_above(0.5) < 0.95, f"seed {seed} trial {t + 1}"


def test_a_model_free_animal_puts_its_mass_below_one_half(rules):
    run, _ = _stages(rules, "model_free", 4)
    post = run.state.learner.posterior
    assert post.mean < 0.5
    assert post.p_above(0.5) < 0.5


def test_trials_without_steps_teach_the_learner_nothing(rules):
    run, _ = _stages(rules, "model_based", 5)
    state = run.state
    ev = run.events[-1]
    bare = TrialEvent.from_dict({**{k: v for k, v in ev.to_dict().items() if k != "steps"},
                                 "session": "s1", "trial": state.last_trial + 1})
    after, _, _ = step(state, bare, rules)
    assert after.learner.posterior.n_trials == state.learner.posterior.n_trials
    assert np.array_equal(after.learner.posterior.log_post, state.learner.posterior.log_post)


def test_learner_state_round_trips_through_the_state_bytes(rules):
    run, _ = _stages(rules, "hybrid", 6)
    blob = run.state.to_bytes()
    back = SubjectState.from_bytes(blob, ScheduleState)
    assert back.to_bytes() == blob
    a, b = run.state.learner, back.learner
    assert a.p_model_based(0.5) == b.p_model_based(0.5)
    assert np.array_equal(a.w, b.w)


def test_check_knows_the_criterion_and_its_range(rules):
    assert "p_model_based" in rules.text
    bad = rules.text.replace("p_model_based(0.5) >= 0.95", "p_model_based(centre_light) >= 0.95")
    with pytest.raises(Exception) as err:
        load_rules(bad)
    assert "p_model_based" in str(err.value)
    typo = rules.text.replace("p_model_based(0.5)", "p_model_base(0.5)")
    with pytest.raises(Exception) as err:
        load_rules(typo)
    assert "p_model_based" in str(err.value)  # the "did you mean"


def test_presets_of_the_two_stage_task_refuse_other_tasks():
    other = load_example("tone_reversal")
    with pytest.raises(Exception) as err:
        preset_animal("model_based", other, "m1", 1)
    assert "two_step" in str(err.value)


# --------------------------------------------------------------------------- devaluation


def _trained(kind: str, seed: int = 3, n: int = 200):
    """An agent after n trials of the task (rewards in both states)."""
    animal = two_step_animal(kind, "m1", seed)
    for _ in range(n):
        a1, s2, a2 = animal.choose()
        r = float(animal._rng.random() < animal.probabilities[s2, a2])
        animal.values = animal.values.learned(a1, s2, a2, r, animal.params)
    return animal


def _devalue(values: TwoStepValues, state: int) -> TwoStepValues:
    """The outcome of one second-stage state devalued between sessions (e.g. the animal
    was sated on it): its second-stage values are worth nothing to the animal now. Only
    what is computed from the model changes at once; cached first-stage values do not."""
    q2 = values.q2.copy()
    q2[state] = 0.0
    r_state = values.r_state.copy()
    r_state[state] = 0.0
    return TwoStepValues(q1=values.q1, q2=q2, counts=values.counts, m=values.m, r_state=r_state,
                         previous_a1=values.previous_a1)


def test_devaluation_moves_a_planner_at_once_and_a_habit_only_after_reexperience():
    """The devaluation pattern (Dickinson & Balleine; Daw, Niv & Dayan 2005, Nat Neurosci
    8:1704, model-based vs cached values): after devaluing state A's outcome, the
    model-based first-stage values drop for the action that commonly leads to A on the
    very next choice; the model-free values are unchanged until the animal experiences
    the devalued outcome again."""
    params = PRESETS["hybrid"][1]
    mb = _trained("model_based")
    s = int(np.argmax(mb.values.q2.max(axis=1)))  # devalue the outcome it values most
    other = 1 - s  # action s commonly leads to state s
    before, after = mb.values, _devalue(mb.values, s)
    drop_mb = (before.q_mb[s] - before.q_mb[other]) - (after.q_mb[s] - after.q_mb[other])
    assert drop_mb > 0.1
    assert after.q_mb[s] < after.q_mb[other]  # it now prefers the other action, before any trial
    mf = _trained("model_free")
    s = int(np.argmax(mf.values.q1))  # its most valued first choice, and the state it commonly leads to
    before, after = mf.values, _devalue(mf.values, s)
    assert np.array_equal(before.q1, after.q1)  # nothing changes at once
    v = after
    for _ in range(10):  # re-experience: action s, reaching state s, worth nothing now
        v = v.learned(s, s, int(np.argmax(before.q2[s])), 0.0, params)
    assert after.q1[s] > 0.1
    assert v.q1[s] < 0.5 * after.q1[s]

def test_devaluation_probe_example_loads():
    rules = load_example("two_step_devaluation")
    assert rules.learner.name == "two_step"


# --------------------------------------------------------------------------- live


def test_a_live_daemon_runs_the_two_stage_task_over_zeromq_and_serial(tmp_path):
    """The virtual two-stage rig against a real daemon: steps arrive over ZeroMQ and over a
    pty, are stored, and replay gives every decision the rigs got."""
    import os
    import time

    from rigloop.replay import replay_subject
    from rigloop.serve.daemon import Daemon, Settings
    from rigloop.store import Store
    from rigloop.testing import PtyPort, SerialRig, ZmqRig
    from rigloop.testing.two_step_rig import run_two_step_session

    port = PtyPort(tmp_path)
    d = Daemon(Settings(data=str(tmp_path / "data"), rules=("two_step",), zmq="tcp://127.0.0.1:*",
                        publish="tcp://127.0.0.1:*", log_trials=False, selftest_timeout_s=0.5,
                        serial=((port.path, "box4"),))).start_thread()
    zrig = ZmqRig(d.endpoints["zmq"], "box3", timeout_s=2.0, retries=3)
    srig = SerialRig(port, "box4", timeout_s=0.5, retries=20)
    try:
        got_z = run_two_step_session(zrig, "model_based", "m1", "d1", trials=40, seed=3)
        deadline = time.monotonic() + 10.0
        while True:
            try:
                srig.ping()
                break
            except Exception:
                if time.monotonic() > deadline:
                    raise AssertionError("the daemon never answered on the serial port") from None
                time.sleep(0.05)
        got_s = run_two_step_session(srig, "model_free", "m2", "d1", trials=30, seed=4)
    finally:
        zrig.close()
        d.stop()
        d.join()
        port.close()
    with Store(os.path.join(d.settings.data, "rigloop.sqlite")) as store:
        for subject, got in (("m1", got_z), ("m2", got_s)):
            stored = list(store.trials(subject, "d1"))
            assert [e.steps for e in stored] == [e.steps for e, _ in got]
            assert all(len(e.steps) == 2 for e in stored)
            result = replay_subject(store, subject)
            assert result.differing == 0, result.summary()


def test_check_warns_when_the_criterion_has_no_two_step_learner(rules):
    text = rules.text.replace('model = "two_step"', 'model = "rescorla_wagner"')
    text = "\n".join(line for line in text.splitlines() if not line.startswith(("alpha1", "alpha2", "lam")))
    from rigloop.rules.lint import warnings

    other = load_rules(text)
    assert any("p_model_based() reads the two_step learner" in w for w in warnings(other.spec))
    assert not any("p_model_based" in w for w in warnings(rules.spec))


def test_a_two_step_animal_takes_drawn_parameters():
    """A population can set each animal's parameters: w, the learner's others, bias and
    lapse win over the preset's; a cue-task parameter is refused with the valid names."""
    animal = two_step_animal("hybrid", "m9", 3, w=0.2, beta1=2.0, lapse=0.1)
    assert animal.params.w == 0.2 and animal.params.beta1 == 2.0 and animal.lapse == 0.1
    assert animal.params.alpha2 == two_step_animal("hybrid", "m9", 3).params.alpha2
    with pytest.raises(BadArgument, match=r"a parameter of a two-step animal \(alpha1, .*bias, lapse\)"):
        two_step_animal("hybrid", "m9", 3, alpha=0.1)
    with pytest.raises(BadArgument, match="'w' must be a number in"):
        two_step_animal("hybrid", "m9", 3, w=1.5)
