"""Simulated animals that differ as real ones do, the truth they store, and schedules timed against it."""

import ast
import math
import pathlib
import sys

import numpy as np
import pytest
from scipy import stats

from rigloop.cli import main
from rigloop.core.trial import CuePresentation, Decision, Response, TrialEvent
from rigloop.errors import BadArgument
from rigloop.offline import simulate, truth
from rigloop.offline.simulate import PRESETS, SimulatedAnimal, preset_animal, record_session
from rigloop.offline.sweep import animal_for, mix_presets, parse_mix, simulate_many
from rigloop.rules import load_example
from rigloop.store import Store

TONES = load_example("tone_reversal")
SHAPING = load_example("gonogo_shaping")
CHOICE = load_example("two_choice_staircase")


def _decision(session, trial, cue, p, *, stage="acquisition", block="forward", reasons=(), ul=4.0):
    return Decision("m1", session, trial, cue, p, ul if p > 0 else 0.0, p > 0, block, stage, reasons=reasons)


def drive(animal, cues, rewarded, *, session="s1", start=1):
    """Run ``animal`` through trials of ``cues`` (``rewarded``: cue -> reward p, armed when > 0)."""
    return [animal.trial(_decision(session, start + i, c, rewarded.get(c, 0.0)), "rig1", 1.8e9 + 8 * i)
            for i, c in enumerate(cues)]


def alternate(cues, n, seed=0):
    """``n`` cues in shuffled pairs, so each cue comes n / len(cues) times."""
    rng = np.random.default_rng(seed)
    return [c for _ in range(n // len(cues)) for c in rng.permutation(cues)]


def responded(event) -> bool:
    if event.response.kind == "choice":
        return event.response.value == "right"
    return event.response.value > 0


def within_binomial(hits, n, p, z=4.0):
    """|hits/n - p| within z binomial standard errors (4 s.e.: common practice for a seeded check)."""
    return abs(hits / n - p) <= z * math.sqrt(p * (1 - p) / n)


# --------------------------------------------------------------------------- presets


def test_every_preset_is_documented_with_its_parameters():
    """Each preset has a row in the module docstring's table naming each of its parameters."""
    rows = {line.split("|")[1].strip(): line for line in simulate.__doc__.splitlines() if line.startswith("| ``")}
    for name, params in PRESETS.items():
        row = rows[f"``{name}``"]
        for key, value in params.items():
            assert f"``{key} = {value}``" in row, (name, key)
    readme = (pathlib.Path(__file__).resolve().parents[1] / "README.md").read_text()
    for name in PRESETS:
        assert f"`{name}`" in readme, name


@pytest.mark.parametrize("rules", [TONES, SHAPING, CHOICE], ids=lambda r: r.name)
@pytest.mark.parametrize("preset", list(PRESETS))
def test_each_preset_runs_a_session_of_each_example(rules, preset):
    animal = preset_animal(preset, rules, "m1", 5)
    run = simulate.simulate_session(rules, animal, session="s1", max_trials=40)
    assert len(run.events) > 0
    for key, value in PRESETS[preset].items():
        assert getattr(animal, key) == value


@pytest.mark.parametrize("rules", [TONES, SHAPING, CHOICE], ids=lambda r: r.name)
@pytest.mark.parametrize("record_truth", [True, False])
def test_every_simulated_event_is_the_checked_construction(rules, record_truth):
    """The simulated animal assembles its events without TrialEvent's checks
    (TrialEvent._assembled); every event of every preset, with and without its truth in
    extra, equals TrialEvent(...) of the same fields: the same value, the same dict, the same
    order of extra's keys."""
    import dataclasses

    for preset in PRESETS:
        animal = preset_animal(preset, rules, "m1", 3)
        animal.record_truth = record_truth
        run = simulate.simulate_session(rules, animal, session="s1", max_trials=120)
        for event in run.events:
            checked = TrialEvent(**{f.name: getattr(event, f.name) for f in dataclasses.fields(event)})
            assert event == checked and event.to_dict() == checked.to_dict(), (preset, event)
            assert list(event.extra) == list(checked.extra)


def test_typical_preset_is_what_animal_for_builds_and_varies_by_seed():
    for seed in (0, 7, 1003):
        assert preset_animal("typical", CHOICE, "m1", seed) == animal_for(CHOICE, "m1", seed)
    alphas = {animal_for(TONES, "m1", s).alpha for s in range(1000, 1008)}
    biases = {animal_for(CHOICE, "m1", s).bias for s in range(1000, 1008)}
    assert len(alphas) > 4 and len(biases) > 4
    assert {animal_for(TONES, "m1", s).bias for s in range(8)} == {0.0}  # no side bias in a lick task


def test_preset_overrides_and_unknown_names():
    a = preset_animal("slow_reverser", TONES, "m1", 3, lapse=0.2, task="choice")
    assert (a.alpha_down, a.lapse, a.task) == (0.015, 0.2, "choice")
    with pytest.raises(BadArgument) as err:
        preset_animal("sleepy", TONES, "m1", 3)
    assert "sleepy" in str(err.value) and all(name in str(err.value) for name in PRESETS)


def test_parameters_are_checked_by_name():
    for field, value in [("fixed_p_respond", 1.5), ("alpha_down", 0.0), ("false_alarm_timeout_s", -1.0),
                         ("task", "lever"), ("cues", tuple(f"c{i}" for i in range(32)))]:
        with pytest.raises(BadArgument) as err:
            SimulatedAnimal("m1", **{field: value})
        assert err.value.argument == field


def test_non_discriminator_licks_on_ninety_percent_of_trials_to_every_cue():
    """Lick task: responds to each cue with p = 0.9 over 400 trials, whatever it is rewarded for."""
    animal = preset_animal("non_discriminator", TONES, "m1", 11)
    events = drive(animal, alternate(["tone_hi", "tone_lo"], 400), {"tone_hi": 1.0})
    for cue in ("tone_hi", "tone_lo"):
        mine = [e for e in events if e.cue_ids == (cue,)]
        assert len(mine) == 200
        assert within_binomial(sum(map(responded, mine)), len(mine), 0.9)
        assert {e.extra[f"true_p_respond[{cue}]"] for e in events} == {0.9}


def test_cue_blind_chooser_ignores_the_cue():
    """Choice task: the non-discriminator's true p(right) is the same for both cues on every trial,
    and its choices do not follow the cue (chi-square test of independence, scipy)."""
    animal = preset_animal("non_discriminator", CHOICE, "m1", 12, bias=0.0)
    events = drive(animal, alternate(["light_left", "light_right"], 400), {"light_left": 1.0, "light_right": 1.0})
    for e in events:
        assert e.extra["true_p_right[light_left]"] == e.extra["true_p_right[light_right]"]
    table = [[sum(responded(e) == r for e in events if e.cue_ids == (c,)) for r in (True, False)]
             for c in ("light_left", "light_right")]
    assert stats.chi2_contingency(table).pvalue > 0.001
    typical = drive(preset_animal("typical", CHOICE, "m1", 12, bias=0.0),
                    alternate(["light_left", "light_right"], 400), {"light_left": 1.0, "light_right": 1.0})
    assert sum(e.response.result == "correct" for e in typical) > 300  # a learner does follow it


def test_side_biased_chooses_right_more_than_left():
    """bias = 2 (log-odds), beta = 3: at equal values p(right) = lapse/2 + (1 - lapse) * logistic(2)
    exactly; with both sides paying it chooses right more often over 400 trials (binomial test,
    scipy), and its errors are mostly right choices, unlike an unbiased animal's."""
    cues = alternate(["light_left", "light_right"], 400)
    pays = {"light_left": 1.0, "light_right": 1.0}
    events = drive(preset_animal("side_biased", CHOICE, "m1", 13), cues, pays)
    first = 0.05 / 2 + 0.95 / (1 + math.exp(-2.0))
    assert events[0].extra["true_p_right[light_left]"] == pytest.approx(first, abs=1e-12)
    rights = sum(map(responded, events))
    assert stats.binomtest(rights, 400, 0.5, "greater").pvalue < 0.001

    def errors(evs):
        wrong = [e for e in evs if e.response.result == "incorrect"]
        return sum(map(responded, wrong)), sum(not responded(e) for e in wrong)

    right_errors, left_errors = errors(events)
    assert right_errors > 3 * max(left_errors, 1)
    r0, l0 = errors(drive(preset_animal("typical", CHOICE, "m1", 13, bias=0.0), cues, pays))
    assert right_errors / (right_errors + left_errors) > r0 / (r0 + l0)


def test_lapsing_animal_keeps_responding_to_an_unrewarded_cue():
    """With lapse 0.3 a trained animal still licks on at least 0.15 x P(>= 1 Poisson lick) of unrewarded trials."""
    events = drive(preset_animal("lapsing", TONES, "m1", 14), alternate(["tone_hi", "tone_lo"], 400), {"tone_hi": 1.0})
    last = [e.extra["true_p_respond[tone_lo]"] for e in events[-50:]]
    assert min(last) >= 0.15 * (1 - math.exp(-1.0)) - 1e-12
    assert max(last) < 0.3


def _reversal_trials(preset, seed):
    """Trials after a flip at trial 300 until the formerly rewarded cue's true p falls below 0.5."""
    animal = preset_animal(preset, TONES, "m1", seed)
    cues = alternate(["tone_hi", "tone_lo"], 600, seed)
    before = drive(animal, cues[:300], {"tone_hi": 1.0})
    assert before[-1].extra["true_p_respond[tone_hi]"] > 0.9
    after = drive(animal, cues[300:], {"tone_lo": 1.0}, start=301)
    return next((i for i, e in enumerate(after) if e.extra["true_p_respond[tone_hi]"] < 0.5), len(after))


def test_slow_reverser_keeps_responding_to_the_formerly_rewarded_cue_longer():
    for seed in (1, 2, 3):
        slow, fast = _reversal_trials("slow_reverser", seed), _reversal_trials("fast_reverser", seed)
        assert slow > 4 * fast, (seed, slow, fast)
        assert fast < 20


def test_alpha_down_is_the_rate_for_falling_values():
    """One Rescorla-Wagner step: up at alpha, down at alpha_down (Rescorla & Wagner 1972, section 1)."""
    a = SimulatedAnimal("m1", alpha=0.2, alpha_down=0.05)
    a._learn("x", 1.0)
    assert a.values["x"] == pytest.approx(0.2)
    a._learn("x", -0.3)
    assert a.values["x"] == pytest.approx(0.2 + 0.05 * (-0.3 - 0.2))


def test_fatigue_restarts_each_session():
    """engagement = 30: no omission in the first 30 trials of any session, omissions late in each."""
    animal = SimulatedAnimal("m1", engagement=30, seed=4)
    for session in ("s1", "s2", "s3"):
        events = drive(animal, alternate(["tone_hi", "tone_lo"], 90), {"tone_hi": 1.0}, session=session)
        assert all(e.extra["true_engaged"] == 1.0 and e.response.result != "omitted" for e in events[:30])
        late = [e.response.result == "omitted" for e in events[60:]]
        assert sum(late) > 10
        assert all((e.extra["true_engaged"] == 0.0) == (e.response.result == "omitted") for e in events)


def test_fatiguing_preset_tires_afresh_in_every_session():
    """Engaged for the first 150 trials of each session, then omitting more and more."""
    animal = preset_animal("fatiguing", TONES, "m1", 5)
    for session in ("s1", "s2"):
        events = drive(animal, alternate(["tone_hi", "tone_lo"], 250), {"tone_hi": 1.0}, session=session)
        engaged = [e.extra["true_engaged"] for e in events]
        assert set(engaged[:150]) == {1.0}
        assert 0 < engaged[150:200].count(0.0) < engaged[200:].count(0.0)


# --------------------------------------------------------------------------- punishment


def test_false_alarm_gets_a_timeout_and_teaches_the_lick_cost():
    animal = SimulatedAnimal("m1", false_alarm_timeout_s=4.0, lapse=1.0, seed=2)  # lapse 1: licks half the time
    events = drive(animal, alternate(["tone_hi", "tone_lo"], 200), {"tone_hi": 1.0})
    fas = [e for e in events if e.cue_ids == ("tone_lo",) and e.response.value > 0]
    assert fas
    for e in fas:
        assert (e.outcome.punishment, e.outcome.timeout_s) == ("timeout", 4.0)
        assert e.outcome.punishment_time == e.response.latency
    others = [e for e in events if e not in fas]
    assert all(e.outcome.punishment is None and e.outcome.timeout_s == 0.0 for e in others)
    assert animal.values["tone_lo"] < 0


def test_wrong_choice_gets_a_timeout_and_a_negative_value():
    sides = {"light_left": "left", "light_right": "right"}
    animal = SimulatedAnimal("m1", task="choice", sides=sides, false_alarm_timeout_s=2.5, lapse=1.0, seed=3)
    events = drive(animal, ["light_left"] * 40, {"light_left": 1.0})
    wrong = [e for e in events if e.response.result == "incorrect"]
    assert wrong and all(e.outcome.punishment == "timeout" and e.outcome.punishment_time == e.response.latency
                         and e.outcome.timeout_s == 2.5 for e in wrong)
    assert animal.values[("light_left", "right")] < 0  # it learnt lick_cost from each
    quiet = SimulatedAnimal("m1", task="choice", sides=sides, lapse=1.0, seed=3)
    drive(quiet, ["light_left"] * 40, {"light_left": 1.0})
    assert quiet.values.get(("light_left", "right"), 0.0) == 0.0  # unpunished, a wrong choice teaches 0


# --------------------------------------------------------------------------- the stored truth


def test_truth_names_every_cue_of_the_task_and_the_engagement():
    lick = preset_animal("typical", TONES, "m1", 1).trial(_decision("s1", 1, "tone_hi", 1.0), "rig1", 0.0)
    assert set(lick.extra) == {"true_p_respond[tone_hi]", "true_p_respond[tone_lo]", "true_engaged"}
    choice = preset_animal("typical", CHOICE, "m1", 1).trial(_decision("s1", 1, "light_left", 1.0), "rig1", 0.0)
    assert set(choice.extra) == {"true_p_right[light_left]", "true_p_right[light_right]", "true_engaged"}
    # before any learning: (lapse/2 + (1 - lapse) logistic(beta (0 - threshold))) x P(Poisson(1) >= 1)
    first = (0.025 + 0.95 / (1 + math.exp(8.0 * 0.05))) * (1 - math.exp(-1.0))
    assert lick.extra["true_p_respond[tone_lo]"] == pytest.approx(first, abs=1e-12)


def _calibration(events, key_of, bins=5):
    """[(summed true p, responses, summed p(1 - p))] in equal-count bins of the shown cue's true p."""
    rows = sorted((e.extra[key_of(e.cue_ids[0])], responded(e)) for e in events
                  if e.cue_ids and e.extra["true_engaged"] == 1.0)
    out = []
    for part in np.array_split(np.arange(len(rows)), bins):
        p = np.array([rows[i][0] for i in part])
        out.append((float(p.sum()), sum(rows[i][1] for i in part), float((p * (1 - p)).sum())))
    return out


def calibrated(expected, hits, var):
    """Responses within 4 standard errors of their expectation (a sum of Bernoulli trials with
    the stored p: Poisson-binomial variance sum p(1 - p)), plus one for discreteness."""
    return abs(hits - expected) <= 4 * math.sqrt(var) + 1


@pytest.mark.parametrize("preset", ["slow_learner", "lapsing", "slow_reverser"])
def test_stored_true_p_respond_matches_response_frequency(preset):
    """Binned by the stored true p of the shown cue, the licks in each bin match the bin's summed p."""
    events = []
    for seed in (1, 2, 3):
        animal = preset_animal(preset, TONES, "m1", seed)
        cues = alternate(["tone_hi", "tone_lo"], 600, seed)
        events += drive(animal, cues[:300], {"tone_hi": 1.0}) + drive(animal, cues[300:], {"tone_lo": 1.0}, start=301)
    for expected, hits, var in _calibration(events, "true_p_respond[{}]".format):
        assert calibrated(expected, hits, var), (expected, hits)


def test_stored_true_p_right_matches_choice_frequency_with_hard_trials():
    """Choice task, difficulty drawn each trial (perception errors included): same calibration check."""
    rng = np.random.default_rng(9)
    events = []
    for seed in (1, 2):
        animal = preset_animal("slow_learner", CHOICE, "m1", seed)
        for i in range(600):
            cue = ("light_left", "light_right")[int(rng.integers(2))]
            d = Decision("m1", "s1", i + 1, cue, 1.0, 5.0, True, "staircase", "contrast",
                         difficulty=float(rng.uniform(0.0, 0.6)))
            events.append(animal.trial(d, "rig1", 0.0))
    for expected, hits, var in _calibration(events, "true_p_right[{}]".format):
        assert calibrated(expected, hits, var), (expected, hits)


def test_truth_is_stored_with_every_trial(tmp_path):
    with Store(tmp_path / "sim.sqlite") as store:
        run = record_session(store, TONES, preset_animal("slow_reverser", TONES, "m1", 2), session="s1",
                             max_trials=30)
        rows = list(store.rows("trials", subject="m1"))
    assert len(rows) == len(run.events) == 30
    for row, event in zip(rows, run.events, strict=True):
        assert row["extra"] == dict(event.extra)
        assert set(row["extra"]) == {"true_p_respond[tone_hi]", "true_p_respond[tone_lo]", "true_engaged"}


# --------------------------------------------------------------------------- truth timing


def _event(session, trial, p, kind="lick", engaged=1.0):
    key = "true_p_respond[{}]" if kind == "lick" else "true_p_right[{}]"
    return TrialEvent("m1", "rig1", session, trial, cues=(CuePresentation(next(iter(p)), 0.5, 1.5),),
                      response=Response("licks", 1.0, "correct"), duration=3.0,
                      extra={**{key.format(c): v for c, v in p.items()}, "true_engaged": engaged})


def _sessions(plan, sizes):
    """Hand-built sessions of ``sizes`` trials from ``plan``: per trial (stage, block, truth p,
    reasons of the decision made after it); each decision names the block of the trial after it."""
    out, start = [], 0
    for k, size in enumerate(sizes):
        session, part = f"s{k + 1}", plan[start:start + size]
        first = _decision(session, 1, "x", 0.0, stage=part[0][0], block=part[0][1])
        events = [_event(session, i + 1, p) for i, (_, _, p, _) in enumerate(part)]
        nxt = plan[start + 1:start + size + 1]
        nxt += [part[-1]] * (size - len(nxt))  # after the last trial of all: no change
        decisions = [_decision(session, i + 2, "x", 0.0, stage=s, block=b, reasons=why)
                     for i, ((_, _, _, why), (s, b, _, _)) in enumerate(zip(part, nxt, strict=True))]
        out.append((first, events, decisions))
        start += size
    return out


def _tone_plan():
    """70 trials of tone_reversal, in two sessions (40 + 30):
    1-30 acquisition/forward (hi rewarded): hi 0.2 -> 0.9 from trial 10, lo 0.2      -> D = 10, lag 20
    31-50 reversal/reversed (lo rewarded): still hi 0.9 lo 0.2 until 45, then reversed -> ended early
    51-70 reversal/forward (hi rewarded): hi 0.1 lo 0.9 until 60, then hi 0.9 lo 0.1   -> D = 61, running
    """
    plan = []
    for n in range(1, 71):
        if n <= 30:
            stage, block, p = "acquisition", "forward", {"tone_hi": 0.9 if n >= 10 else 0.2, "tone_lo": 0.2}
        elif n <= 50:
            flipped = n >= 46
            stage, block, p = "reversal", "reversed", {"tone_hi": 0.1 if flipped else 0.9,
                                                       "tone_lo": 0.9 if flipped else 0.2}
        else:
            stage, block, p = "reversal", "forward", {"tone_hi": 0.9 if n >= 61 else 0.1,
                                                      "tone_lo": 0.1 if n >= 61 else 0.9}
        why = ()
        if n == 30:
            why = ("stage 'acquisition' advances to 'reversal': test after 30 trials in the stage",)
        elif n == 50:
            why = ("block 'reversed' ended: test after 20 trials -> block 'forward'",)
        plan.append((stage, block, p, why))
    return plan


def test_block_timing_on_a_hand_built_reversal_sequence():
    trials = truth.truth_trials(_sessions(_tone_plan(), [40, 30]))
    assert [t.n for t in trials] == list(range(1, 71))
    assert (trials[40].session, trials[40].trial) == ("s2", 1)
    got = truth.block_timing(trials, TONES.spec)
    assert [(b.stage, b.block, b.first, b.last) for b in got] == [
        ("acquisition", "forward", 1, 30), ("reversal", "reversed", 31, 50), ("reversal", "forward", 51, 70)]
    fwd, rev, again = got
    assert (fwd.discriminated, fwd.lag, fwd.early, fwd.ended) == (10, 20, False, True)
    assert fwd.ended_by.startswith("stage 'acquisition' advances to 'reversal'")
    # the reversal needs trials 46-55 but the block ended at 50 and the next one flips back
    assert (rev.discriminated, rev.lag, rev.early) == (None, None, True)
    assert rev.ended_by == "block 'reversed' ended: test after 20 trials -> block 'forward'"
    assert (again.discriminated, again.lag, again.ended, again.early) == (61, None, False, False)
    assert again.ended_by == "still running when the trials ran out"
    assert truth.lags(got) == [20] and truth.ended_early(got) == 1
    assert truth.trials_to_criterion(trials) == {"acquisition": 30}
    assert [(s.stage, s.first, s.last, s.to) for s in truth.stage_timing(trials)] == [
        ("acquisition", 1, 30, "reversal"), ("reversal", 31, 70, None)]


@pytest.mark.parametrize("learned_at, found, lags", [(15, [15, 21], [5, 19]), (25, [25, 25], [-5, 15])])
def test_lag_runs_on_through_blocks_with_the_same_direction(learned_at, found, lags):
    """gonogo_shaping: go_only (nothing to tell apart) 1-10, nogo_intro/mostly_go 11-20, then
    full_task/to_criterion 21-40 rewards the same cue. Learning at trial 25 is 5 trials after
    mostly_go ended (lag -5, early) and 15 before to_criterion ended; learning at 15 is found
    in to_criterion from its first trial, 21."""
    plan = []
    for n in range(1, 42):
        stage, block = ("lever_shaping", "go_only") if n <= 10 else (
            ("nogo_intro", "mostly_go") if n <= 20 else ("full_task", "to_criterion" if n <= 40 else "maintenance"))
        p = {"odor_a": 0.95, "odor_b": 0.2 if n >= learned_at else 0.8}
        plan.append((stage, block, p, ()))
    trials = truth.truth_trials(_sessions(plan, [41]))
    got = truth.block_timing(trials, SHAPING.spec)
    assert [b.block for b in got] == ["go_only", "mostly_go", "to_criterion", "maintenance"]
    assert not got[0].judged and got[0].discriminated is None
    assert [b.discriminated for b in got[1:3]] == found
    assert [b.lag for b in got[1:3]] == lags
    assert [b.early for b in got[1:3]] == [lags[0] < 0, False]


def test_choice_discrimination_is_p_right_of_the_right_cue_minus_the_left_cue():
    p = {"light_right": 0.8, "light_left": 0.45}
    direction = truth.block_direction(CHOICE.spec, "contrast", "staircase", "choice")
    assert direction == (("light_right",), ("light_left",))
    assert truth.discrimination(p, direction) == pytest.approx(0.35)
    assert truth.block_direction(TONES.spec, "acquisition", "forward", "lick") == (("tone_hi",), ("tone_lo",))
    assert truth.block_direction(SHAPING.spec, "lever_shaping", "go_only", "lick") is None
    # min over the positive cues minus max over the negative ones; None when one is missing
    p3 = {"a": 0.9, "b": 0.7, "c": 0.2, "d": 0.4}
    assert truth.discrimination(p3, (("a", "b"), ("c", "d"))) == 0.7 - 0.4
    assert truth.discrimination(p3, (("a",), ("d",))) == 0.9 - 0.4
    assert truth.discrimination(p3, (("a",), ("e",))) is None
    assert truth.discrimination(p3, (("a", "e"), ("d",))) is None


def test_first_held_and_median_iqr():
    assert truth.first_held([0.1, 0.4, 0.4, 0.1, 0.4, 0.4, 0.4], margin=0.3, hold=3) == 4
    assert truth.first_held([0.4, None, 0.4], margin=0.3, hold=2) is None
    assert truth.first_held([0.3], margin=0.3, hold=1) == 0
    with pytest.raises(BadArgument):
        truth.first_held([], hold=0)
    # numpy's default (linear) percentiles: [1, 2, 3, 4] -> median 2.5, quartiles 1.75 and 3.25
    assert truth.median_iqr([4, 1, 3, 2]) == (2.5, 1.75, 3.25)
    assert truth.median_iqr([]) is None


def test_truth_is_a_pure_module():
    """Standard library and numpy only (the rule tests/test_layout.py holds for the numeric core)."""
    tree = ast.parse((pathlib.Path(truth.__file__)).read_text())
    names = {a.name.split(".")[0] for n in ast.walk(tree) if isinstance(n, ast.Import) for a in n.names}
    names |= {n.module.split(".")[0] for n in ast.walk(tree) if isinstance(n, ast.ImportFrom) and n.level == 0}
    assert names <= set(sys.stdlib_module_names) | {"numpy"}
    assert not names & {"os", "sqlite3", "socket", "time", "io", "pathlib"}


# --------------------------------------------------------------------------- sweeps and the command


def test_mix_assigns_presets_in_proportion():
    mix = parse_mix("typical=0.75, non_discriminator=0.25")
    assert mix == [("typical", 0.75), ("non_discriminator", 0.25)]
    assert mix_presets(mix, 8) == ["typical"] * 6 + ["non_discriminator"] * 2
    assert mix_presets(parse_mix("typical=0.5,lapsing=0.5"), 3).count("typical") in (1, 2)
    assert len(mix_presets(parse_mix("typical=0.34,lapsing=0.33,fatiguing=0.33"), 10)) == 10
    for bad in ("typical=0.5", "typical", "typical=x,lapsing=0.5", "typical=0.5,typical=0.5", "sleepy=1"):
        with pytest.raises(BadArgument) as err:
            parse_mix(bad)
        assert err.value.argument == "--mix"


def test_simulate_many_judges_each_subject_against_its_truth(tmp_path):
    results = simulate_many(TONES, ["a1", "a2"], sessions=2, max_trials=200, db=str(tmp_path / "s.sqlite"),
                            animals=["fast_learner", "non_discriminator"])
    fast, flat = results
    assert (fast.animal, flat.animal) == ("fast_learner", "non_discriminator")
    assert "acquisition" in fast.left_stage and flat.left_stage == {}
    assert fast.judged >= 1 and len(fast.lags) + fast.early >= fast.judged
    with Store(tmp_path / "s.sqlite", create=False) as store:
        row = next(store.rows("trials", subject="a2"))
    assert row["extra"]["true_p_respond[tone_hi]"] == 0.9


def test_simulate_command_prints_truth_timing(capsys):
    assert main(["simulate", "tone_reversal", "--subjects", "1", "--sessions", "2", "--max-trials", "200",
                 "--animal", "fast_learner"]) == 0
    out = capsys.readouterr().out
    assert "block changes" in out and "sessions ended by:" in out  # the existing summary stays
    assert "against each animal's truth" in out
    assert "trials to leave acquisition:" in out and "block lag behind the truth" in out
    assert "sim001   fast_learner" in out


def test_simulate_command_refuses_an_unknown_preset(capsys):
    assert main(["simulate", "tone_reversal", "--subjects", "1", "--animal", "sleepy"]) == 2
    err = capsys.readouterr().err
    assert "'--animal'" in err and "sleepy" in err and "slow_reverser" in err


def test_warning_kinds_count_alike_and_cut_long_ones_at_a_word():
    """simulate's warnings summary: numbers blanked so like messages count together; a long
    message cut before 70 characters at a word and marked with …, never mid-word."""
    from rigloop.offline.sweep import _kind

    a = _kind("welfare: on track for 0.6 mL today (0.2 mL so far, 3.1 µL/min over the 30 planned minutes)")
    b = _kind("welfare: on track for 0.9 mL today (0.4 mL so far, 2.5 µL/min over the 45 planned minutes)")
    assert a == b and a.endswith(" …") and len(a) <= 72
    assert a[:-2] == "welfare: on track for # mL today (# mL so far, # µL/min over the #"
    assert _kind("session ended at trial 12") == "session ended at trial #"
