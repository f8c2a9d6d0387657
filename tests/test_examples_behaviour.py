"""The shipped rule files follow the animal: judged against simulated animals' truth.

Each simulated trial carries the animal's true response probability to every cue
(``true_p_respond[cue]`` / ``true_p_right[cue]``, rigloop.simulate), so what rigloop
estimated and decided can be set against what the animal really did. The animals are
the presets of ``rigloop.simulate.PRESETS``, including ones that fail.
"""

from __future__ import annotations

import numpy as np
import pytest

from rigloop.offline import truth as T
from rigloop.offline.simulate import preset_animal, simulate_session
from rigloop.rules import load_example

DAY = 86_400.0


def _runs(rules, preset: str, seed: int, sessions: int, max_trials: int):
    """One simulated subject's sessions, a day apart (the daily water tally restarts)."""
    animal = preset_animal(preset, rules, f"{preset}{seed}", seed)
    state, runs = None, []
    for s in range(sessions):
        run = simulate_session(rules, animal, session=f"s{s}", state=state, max_trials=max_trials,
                               start_time=1.8e9 + DAY * s)
        state = run.state
        runs.append(run)
    return runs


def _coverage(runs, name: str) -> list[bool]:
    """For each engaged trial: did the 95% band before its response cover the truth for its cue?"""
    hits = []
    for run in runs:
        for event, update in zip(run.events, run.updates, strict=True):
            if not event.cues or event.extra.get("true_engaged", 1.0) != 1.0:
                continue
            cue = event.cues[0].cue
            truth = event.extra[f"true_{name}[{cue}]"]
            q = update.quantities
            hits.append(q[f"{name}_lo95[{cue}]"] <= truth <= q[f"{name}_hi95[{cue}]"])
    return hits


@pytest.mark.parametrize("preset", ["typical", "lapsing", "slow_reverser", "fatiguing"])
def test_lick_band_is_calibrated(preset):
    """The 95% band of P(lick | tone) covers the animal's true probability on 85-99% of trials.

    (A band that covers much less is overconfident, one that covers nearly always is
    uselessly wide.) The forgetting sigma2 sets how fast the estimate can follow: animals
    whose responding jumps within a few trials (fast_learner) are covered less, animals
    that hardly change (slow_learner) more (README, "The animal's own behaviour").
    """
    rules = load_example("tone_reversal")
    hits = [h for seed in range(4) for h in _coverage(_runs(rules, preset, seed, 2, 300), "p_respond")]
    assert len(hits) > 1000
    assert 0.85 <= np.mean(hits) <= 0.99, np.mean(hits)


def test_a_slow_learner_is_covered_at_least_as_often():
    """For an animal that changes slowly the band errs on the wide side, never the narrow one."""
    rules = load_example("tone_reversal")
    hits = [h for seed in range(4) for h in _coverage(_runs(rules, "slow_learner", seed, 2, 300), "p_respond")]
    assert np.mean(hits) >= 0.95


def test_choice_band_is_calibrated():
    """The 95% band of P(right | light) covers the truth on 85-99% of trials (two-choice task)."""
    rules = load_example("two_choice_staircase")
    hits = [h for seed in range(4) for h in _coverage(_runs(rules, "typical", seed, 2, 300), "p_right")]
    assert len(hits) > 1000
    assert 0.85 <= np.mean(hits) <= 0.99, np.mean(hits)


def _stages_reached(runs) -> set[str]:
    return {d.stage for run in runs for d in (run.first, *run.decisions)}


def test_a_non_discriminator_never_leaves_acquisition():
    """An animal that licks 90% of the time to both tones has learned nothing: no reversal, ever."""
    rules = load_example("tone_reversal")
    for seed in range(6):
        runs = _runs(rules, "non_discriminator", seed, 3, 400)
        assert _stages_reached(runs) == {"acquisition"}, seed


def test_a_non_discriminator_never_reaches_the_full_task():
    """Pressing to both odors passes lever shaping (it presses) but never the no-go stage's d' criterion."""
    rules = load_example("gonogo_shaping")
    for seed in range(4):
        runs = _runs(rules, "non_discriminator", seed, 3, 300)
        assert "full_task" not in _stages_reached(runs), seed


def test_a_cue_blind_chooser_never_leaves_side_training():
    """An animal that ignores the lights cannot pass side training, however biased or rewarded."""
    rules = load_example("two_choice_staircase")
    for seed in range(4):
        runs = _runs(rules, "cue_blind", seed, 3, 300)
        assert _stages_reached(runs) == {"side_training"}, seed


def test_learning_animals_leave_acquisition_and_reversals_follow_the_animal():
    """Typical learners leave acquisition; each reversal block ends soon after the animal's
    licking has truly reversed (median lag <= 60 trials) and never before it has."""
    rules = load_example("tone_reversal")
    lags, early, left = [], 0, 0
    for seed in range(6):
        trials = T.truth_trials(_runs(rules, "typical", seed, 3, 400))
        left += "acquisition" in T.trials_to_criterion(trials)
        timings = T.block_timing(trials, rules.spec)
        lags += T.lags(t for t in timings if t.stage == "reversal")
        early += T.ended_early(timings)
    assert left == 6
    assert len(lags) >= 30
    assert np.median(lags) <= 60, np.median(lags)
    assert early == 0


def test_gonogo_learners_reach_criterion_and_maintenance():
    """Typical learners go through all three stages and the sequential criterion passes."""
    rules = load_example("gonogo_shaping")
    for seed in range(4):
        runs = _runs(rules, "typical", seed, 3, 300)
        blocks = {d.block for run in runs for d in run.decisions}
        assert "maintenance" in blocks, seed


@pytest.mark.parametrize("example", ["tone_reversal", "gonogo_shaping", "two_choice_staircase"])
@pytest.mark.parametrize("preset", ["side_biased", "slow_reverser", "lapsing"])
def test_animals_that_struggle_pass_no_block_before_they_discriminate(example, preset):
    """Side-biased, slowly reversing and lapsing animals may take longer, but no block or stage of
    any shipped file ends before the animal's true responses tell the cues apart."""
    rules = load_example(example)
    early = judged = 0
    for seed in range(3):
        timings = T.block_timing(T.truth_trials(_runs(rules, preset, seed, 3, 300)), rules.spec)
        early += T.ended_early(timings)
        judged += sum(1 for t in timings if t.ended and t.judged)
    assert early == 0, f"{early} of {judged} judged blocks ended before the animal discriminated"
