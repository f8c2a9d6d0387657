"""Decision policies on simulated observers: staircase, balanced random, anti-bias, thinning."""

import math

import numpy as np
import pytest

from rigloop.core.trial import CuePresentation, Outcome, Response, TrialEvent
from rigloop.rules import StaticView, load_example, load_rules
from rigloop.rules.model import Staircase
from rigloop.rules.policies import mini_block, run_ok, staircase_step
from rigloop.rules.state import ScheduleState


def event(trial, cue, result="correct", ul=0.0, value=None, kind="licks", wall=1.7e9):
    out = Outcome(reward_ul=ul, reward_time=1.0 if ul > 0 else None)
    return TrialEvent(subject="m1", rig="r1", session="s1", trial=trial, cues=(CuePresentation(cue, 0.0, 1.0),),
                      outcome=out, response=Response(kind=kind, value=value, result=result), wall_time=wall + trial)


def rules_text(block_extra, contingency=None, cues='a = "plain"\nb = "plain"\nc = "plain"', welfare=""):
    contingency = contingency or ("contingency.a = { p = 1.0, ul = 2.0 }\ncontingency.b = { p = 1.0, ul = 2.0 }\n"
                                  "contingency.c = { p = 1.0, ul = 2.0 }")
    return f"""
name = "p"
reward_unit_ul = 2.0
[learner]
model = "rescorla_wagner"
[features]
kind = "identity"
[cues]
{cues}
[stages.only.blocks.b]
{contingency}
{block_extra}
[welfare]
{welfare}
"""


# --------------------------------------------------------------------------- staircase


def psychometric(x, mid=0.3, width=0.06):
    """A two-alternative observer: P(correct) = 0.5 + 0.5 * logistic((x - mid) / width)."""
    return 0.5 + 0.5 / (1.0 + math.exp(-(x - mid) / width))


def run_staircase(down, seed, trials=4000, step=0.01):
    st = Staircase(parameter="contrast", start=0.8, down=down, up=1, step_harder=step, step_easier=step,
                   lo=0.0, hi=1.0, harder="lower")
    s = ScheduleState(stage="x", block="y", stair_level=st.start)
    rng = np.random.default_rng(seed)
    levels = []
    for _ in range(trials):
        x = s.stair_level
        correct = bool(rng.random() < psychometric(x))
        before = s.stair_reversals
        ch = staircase_step(st, s, correct)
        if ch["stair_reversals"] > before:
            levels.append(x)  # the level at which the direction turned
        s = ScheduleState(**{**s.to_dict(), **ch, "queue": ()})
    return levels


@pytest.mark.parametrize("down, target", [(2, 0.707), (3, 0.794)])
def test_staircase_converges_on_published_target(down, target):
    """A 1-up-k-down staircase settles where P(correct) = 0.5 ** (1/k): 70.7% for k = 2,
    79.4% for k = 3 (Levitt 1971, J Acoust Soc Am 49:467-477). Mean of reversal levels,
    dropping the first 8, over seeded runs of a simulated logistic observer."""
    means = []
    for seed in range(4):
        levels = run_staircase(down, seed)
        assert len(levels) > 100
        means.append(float(np.mean(levels[8:])))
    p_at = psychometric(float(np.mean(means)))
    assert p_at == pytest.approx(target, abs=0.02)
    assert 0.5 ** (1 / down) == pytest.approx(target, abs=5e-4)


def test_staircase_respects_bounds_and_direction():
    """Levels stay in [min, max]; 'higher is harder' moves up after k correct."""
    st = Staircase(parameter="delay", start=0.9, down=2, up=1, step_harder=0.2, step_easier=0.1,
                   lo=0.0, hi=1.0, harder="higher")
    s = ScheduleState(stage="x", block="y", stair_level=0.9)
    for _ in range(3):
        ch = staircase_step(st, s, True)
        s = ScheduleState(**{**s.to_dict(), **ch, "queue": ()})
    assert s.stair_level == 1.0
    s = ScheduleState(**{**s.to_dict(), **staircase_step(st, s, False), "queue": ()})
    assert s.stair_level == pytest.approx(0.9)


def test_staircase_level_is_sent_in_the_decision():
    """The two-choice example's staircase stage sends its contrast as the difficulty."""
    r = load_example("two_choice_staircase")
    s = r.open_session(r.start_subject(), "s1", 1.7e9)
    from rigloop.rules.engine import enter_stage

    s = enter_stage(r.spec, s, "contrast")
    view = StaticView(correct={"all": 0.8})
    for t in range(1, 9):
        s, plan = r.decide(s, view, t, np.random.default_rng(t))
        assert plan.difficulty == pytest.approx(s.stair_level)
        side = "left" if plan.cue == "light_left" else "right"
        s = r.observe(s, event(t, plan.cue, "correct", ul=5.0, value=side, kind="choice"))
    assert s.stair_level == pytest.approx(0.8)  # 8 correct = 4 steps of 0.05 down from 1.0
    assert any("difficulty contrast = " in x for x in plan.reasons)


# --------------------------------------------------------------------------- balanced random


@pytest.mark.parametrize("repeats, max_run", [(1, 1), (2, 1), (2, 2), (4, 3), (5, 2)])
def test_balanced_random_run_limit_and_balance(repeats, max_run):
    """Each mini-block holds every cue exactly `repeats` times and no cue runs longer than
    `max_run`, across mini-block boundaries too (decided through the engine)."""
    r = load_rules(rules_text(f'next_cue = {{ policy = "balanced", repeats = {repeats}, max_run = {max_run} }}'))
    s = r.open_session(r.start_subject(), "s1", 1.7e9)
    seq = []
    for t in range(1, 3 * repeats * 30 + 1):
        s, plan = r.decide(s, StaticView(), t, np.random.default_rng([7, t]))
        seq.append(plan.cue)
        s = r.observe(s, event(t, plan.cue, ul=2.0))
    assert run_ok(seq, None, 0, max_run)
    k = 3 * repeats
    for i in range(0, len(seq), k):
        assert sorted(seq[i : i + k]) == sorted(["a", "b", "c"] * repeats)


def test_mini_block_fallback_keeps_the_run_limit():
    """With no successful shuffle the interleaved fallback still respects the limit."""
    rng = np.random.default_rng(0)
    order = mini_block(("a", "b"), 4, 1, "a", 1, rng, attempts=0)
    assert run_ok(order, "a", 1, 1) and sorted(order) == ["a"] * 4 + ["b"] * 4


# --------------------------------------------------------------------------- anti-bias


def simulate_bias(policy, seed, trials=300, beta0=2.0, eta=0.05):
    """An invented biased chooser: P(right) = logistic(1.5 s + beta), s = +1 for a right
    cue; its side bias beta moves toward a choice that paid and away from one that did not."""
    r = load_rules(rules_text(
        policy,
        contingency="contingency.left = { p = 1.0, ul = 2.0 }\ncontingency.right = { p = 1.0, ul = 2.0 }",
        cues='left = "left"\nright = "right"'))
    s = r.open_session(r.start_subject(), "s1", 1.7e9)
    rng = np.random.default_rng(seed)
    beta, rights = beta0, []
    for t in range(1, trials + 1):
        s, plan = r.decide(s, StaticView(), t, np.random.default_rng([seed, t]))
        sgn = 1.0 if plan.cue == "right" else -1.0
        choice = "right" if rng.random() < 1 / (1 + math.exp(-(1.5 * sgn + beta))) else "left"
        paid = choice == plan.cue
        beta += eta * (1.0 if paid else -1.0) * (1.0 if choice == "right" else -1.0)
        rights.append(choice == "right")
        s = r.observe(s, event(t, plan.cue, "correct" if paid else "incorrect", ul=2.0 if paid else 0.0,
                               value=choice, kind="choice"))
    return beta, float(np.mean(rights[-100:]))


def test_counter_bias_shrinks_a_side_bias():
    """Against a right-biased chooser, anti-bias leaves a smaller bias than balanced random."""
    anti = [simulate_bias('next_cue = { policy = "counter_bias", window = 10, max_p = 0.8 }', s) for s in range(6)]
    rand = [simulate_bias('next_cue = { policy = "balanced", repeats = 2, max_run = 4 }', s) for s in range(6)]
    b_anti = np.mean([abs(b) for b, _ in anti])
    b_rand = np.mean([abs(b) for b, _ in rand])
    assert b_anti < 2.0 and b_anti < b_rand
    assert abs(np.mean([f for _, f in anti]) - 0.5) < abs(np.mean([f for _, f in rand]) - 0.5)


def test_counter_bias_favours_the_under_chosen_side():
    """After mostly right choices, left-side cues are offered more often, capped at max_p."""
    r = load_rules(rules_text(
        'next_cue = { policy = "counter_bias", window = 5, max_p = 0.8 }',
        contingency="contingency.left = { p = 1.0, ul = 2.0 }\ncontingency.right = { p = 1.0, ul = 2.0 }",
        cues='left = "left"\nright = "right"'))
    s = r.open_session(r.start_subject(), "s1", 1.7e9)
    for t in range(1, 30):
        s = r.observe(s, event(t, "right", ul=2.0, value="right", kind="choice"))
    assert s.right_bias > 0.99
    lefts = sum(r.decide(s, StaticView(), 30, np.random.default_rng(i))[1].cue == "left" for i in range(2000))
    assert lefts / 2000 == pytest.approx(0.8, abs=0.03)


# --------------------------------------------------------------------------- thinning, weighted, uncertain


def test_thinning_never_below_its_floor():
    """Thinned reward probability falls with certainty but never below the floor."""
    text = rules_text('reward = { policy = "thinning", floor = 0.6, certainty = "1 - sd(cue) / 0.5" }',
                      welfare="min_reward_prob = 0.1\nrelax = [\"min_reward_prob\"]")
    r = load_rules(text)
    s = r.open_session(r.start_subject(), "s1", 1.7e9)
    ps = []
    for sd in np.linspace(1.0, -1.0, 41):
        view = StaticView(sd={"a": sd, "b": sd, "c": sd})
        _, plan = r.decide(s, view, 1, np.random.default_rng(0))
        ps.append(plan.reward_prob)
        assert 0.6 <= plan.reward_prob <= 1.0
        assert not plan.overrides
    assert ps[0] == 1.0 and ps[-1] == pytest.approx(0.6) and all(a >= b - 1e-12 for a, b in zip(ps, ps[1:]))


def test_weighted_random_frequencies():
    """Weighted draws follow the weights (3:1:0)."""
    r = load_rules(rules_text('next_cue = { policy = "weighted", weights = { a = 3, b = 1, c = 0 } }'))
    s = r.open_session(r.start_subject(), "s1", 1.7e9)
    cues = [r.decide(s, StaticView(), 1, np.random.default_rng(i))[1].cue for i in range(4000)]
    assert cues.count("c") == 0
    assert cues.count("a") / 4000 == pytest.approx(0.75, abs=0.03)


def test_uncertainty_seeking_picks_largest_sd():
    """The most uncertain cue is offered; ties are broken at random."""
    r = load_rules(rules_text('next_cue = { policy = "uncertain" }'))
    s = r.open_session(r.start_subject(), "s1", 1.7e9)
    _, plan = r.decide(s, StaticView(sd={"a": 0.1, "b": 0.7, "c": 0.3}), 1, np.random.default_rng(0))
    assert plan.cue == "b" and plan.reasons[0].startswith("cue b: most uncertain value (sd 0.7")
    tied = {r.decide(s, StaticView(sd={"a": 0.5, "b": 0.5, "c": 0.1}), 1, np.random.default_rng(i))[1].cue
            for i in range(40)}
    assert tied == {"a", "b"}
