"""The rule engine: transitions with reasons, welfare overrides, determinism, tallies."""

import itertools

import numpy as np
import pytest

from rigloop.core.trial import CuePresentation, Decision, Outcome, Response, TrialEvent
from rigloop.rules import Plan, ScheduleState, StaticView, load_example, load_rules

T0 = 1.7e9  # 2023-11-14 22:13:20 UTC


def event(trial, cue, result="correct", ul=0.0, value=None, kind="licks", wall=None, duration=None):
    out = Outcome(reward_ul=ul, reward_time=1.0 if ul > 0 else None)
    return TrialEvent(subject="m1", rig="r1", session="s1", trial=trial, cues=(CuePresentation(cue, 0.0, 1.0),),
                      outcome=out, response=Response(kind=kind, value=value, result=result),
                      wall_time=T0 + 10 * trial if wall is None else wall, duration=duration)


POLICIES = {
    "sequence": 'next_cue = { policy = "sequence", sequence = ["a", "b", "b"] }',
    "balanced": 'next_cue = { policy = "balanced", repeats = 2, max_run = 2 }',
    "weighted": 'next_cue = { policy = "weighted", weights = { a = 1, b = 5 } }',
    "uncertain": 'next_cue = { policy = "uncertain" }',
    "counter_bias": 'next_cue = { policy = "counter_bias", window = 5 }',
}
REWARDS = {
    "fixed": "",
    "thinning": 'reward = { policy = "thinning", floor = 0.0, certainty = "1" }',
}


def rules_for(policy, reward, p_a=0.2, p_b=0.0, welfare=""):
    roles = 'a = "left"\nb = "right"' if policy == "counter_bias" else 'a = "go"\nb = "nogo"'
    ul_b = 3.0 if p_b > 0 else 0.0
    return load_rules(f"""
name = "w"
reward_unit_ul = 3.0
[learner]
model = "kalman_filter"
[features]
kind = "identity"
[cues]
{roles}
[stages.s.blocks.x]
contingency.a = {{ p = {p_a}, ul = 3.0 }}
contingency.b = {{ p = {p_b}, ul = {ul_b} }}
{POLICIES[policy]}
{REWARDS[reward]}
[welfare]
min_reward_prob = 0.5
max_unrewarded_run = 4
max_session_min = 30
{welfare}
""")


@pytest.mark.parametrize("policy, reward", list(itertools.product(POLICIES, REWARDS)))
def test_welfare_limits_override_every_policy(policy, reward):
    """For every next-cue x reward policy: the floor lifts a low probability, the
    unrewarded-run cap forces an armed rewarded cue, and the session cap ends the session;
    each override is recorded."""
    r = rules_for(policy, reward)
    view = StaticView(sd={"a": 0.2, "b": 0.9})
    s = r.open_session(r.start_subject(), "s1", T0)
    # floor: any offer of cue a has p >= 0.5 although the block says 0.2 (or thinning says 0)
    for t in range(1, 60):
        s2, plan = r.decide(s, view, t, np.random.default_rng(t))
        if plan.cue == "a":
            assert plan.reward_prob == 0.5
            assert any("below the floor 0.5" in o for o in plan.overrides)
        else:
            assert plan.reward_prob == 0.0 and not plan.reward_armed
    # unrewarded run at the cap: a rewarded cue, armed, whatever the policy picked
    for t in range(1, 5):
        s = r.observe(s, event(t, "b", "correct"))
    assert s.unrewarded_in_row == 4
    for seed in range(20):
        _, plan = r.decide(s, view, 5, np.random.default_rng(seed))
        assert (plan.cue, plan.reward_prob, plan.reward_armed, plan.reward_ul) == ("a", 1.0, True, 3.0)
        assert plan.overrides and plan.overrides[0].startswith("welfare: 4 unrewarded trials in a row (limit 4) ->")
    # session cap: the session ends at 30 minutes whatever the policies say
    s = r.observe(s, event(5, "a", "correct", ul=3.0, wall=T0 + 30 * 60 - 1.0))  # ends 1 s later
    _, plan = r.decide(s, view, 6, np.random.default_rng(0))
    assert plan.end_session and plan.cue is None and not plan.reward_armed
    assert plan.overrides[0] == "welfare: session length 30 min reached the limit (30 min) -> session ends"


def test_unrewarded_cap_message_is_pinned():
    r = rules_for("sequence", "fixed", p_a=1.0)
    s = r.open_session(r.start_subject(), "s1", T0)
    for t in range(1, 5):
        s = r.observe(s, event(t, "b", "correct"))
    s = s.__class__.from_dict({**s.to_dict(), "trials_in_block": 0})  # the sequence offers 'a' first
    _, plan = r.decide(s, StaticView(), 5, np.random.default_rng(0))
    assert plan.overrides == ("welfare: 4 unrewarded trials in a row (limit 4) -> reward armed",)


def test_decisions_are_deterministic():
    """The same (state, view, trial, seed) gives the same plan and state, bit for bit."""
    for name in ("tone_reversal", "gonogo_shaping", "two_choice_staircase"):
        r = load_example(name)
        s = r.open_session(r.start_subject(), "s1", T0)
        view = StaticView(mean={"tone_hi": 0.4}, sd={"tone_hi": 0.3}, correct={"all": 0.7})
        for t in range(1, 30):
            a = r.decide(s, view, t, np.random.default_rng([99, t]))
            b = r.decide(s, view, t, np.random.default_rng([99, t]))
            assert a == b
            s = r.observe(a[0], event(t, a[1].cue, "correct", ul=a[1].reward_ul if a[1].reward_armed else 0.0))
        assert ScheduleState.from_dict(s.to_dict()) == s


def test_plan_builds_a_decision():
    """Plan.as_kwargs fills a Decision with the lead's address fields."""
    r = load_example("tone_reversal")
    s = r.open_session(r.start_subject(), "s1", T0)
    _, plan = r.decide(s, StaticView(), 1, np.random.default_rng(1))
    assert isinstance(plan, Plan)
    d = Decision(subject="m1", session="s1", trial=1, valve_ms=None, **plan.as_kwargs())
    assert (d.cue, d.block, d.stage) == (plan.cue, "forward", "acquisition")


def test_reversal_block_end_reason():
    """A block ends on its posterior criterion; the reason quotes the numbers and trial count."""
    r = load_example("tone_reversal")
    from rigloop.rules.engine import enter_stage

    s = enter_stage(r.spec, r.open_session(r.start_subject(), "s1", T0), "reversal")
    for t in range(1, 41):
        s = r.observe(s, event(t, "tone_lo", "correct", ul=4.0))
    # licks to tone_lo at logit 2.2 (p 0.9), to tone_hi at logit -2.2 (p 0.1): P(difference > 0.3) near 1
    view = StaticView(behaviour={"tone_lo": (2.2, 0.2), "tone_hi": (-2.2, 0.2)})
    s, plan = r.decide(s, view, 41, np.random.default_rng(0))
    assert plan.reasons[0] == (
        "block 'reversed' ended: p_discriminates(tone_lo, tone_hi, 0.3) = 1 >= 0.95 "
        "after 40 trials -> block 'forward'"
    )
    assert (plan.block, s.trials_in_block, s.blocks_in_stage) == ("forward", 0, 1)


def test_min_trials_hold_a_block():
    r = load_example("tone_reversal")
    from rigloop.rules.engine import enter_stage

    s = enter_stage(r.spec, r.open_session(r.start_subject(), "s1", T0), "reversal")
    for t in range(1, 40):
        s = r.observe(s, event(t, "tone_lo", "correct", ul=4.0))
    view = StaticView(behaviour={"tone_lo": (2.2, 0.2), "tone_hi": (-2.2, 0.2)})
    _, plan = r.decide(s, view, 40, np.random.default_rng(0))
    assert plan.block == "reversed"


def test_a_learner_that_learned_the_payouts_does_not_end_a_block():
    """The reversal criterion reads the animal's licking: confident values alone end nothing."""
    r = load_example("tone_reversal")
    from rigloop.rules.engine import enter_stage

    s = enter_stage(r.spec, r.open_session(r.start_subject(), "s1", T0), "reversal")
    for t in range(1, 101):
        s = r.observe(s, event(t, "tone_lo", "correct", ul=4.0))
    # the task's payouts learned perfectly; the animal licks 90% to both tones
    view = StaticView(mean={"tone_lo": 0.95, "tone_hi": 0.0}, sd={"tone_lo": 0.05, "tone_hi": 0.05},
                      behaviour={"tone_lo": (2.2, 0.05), "tone_hi": (2.2, 0.05)})
    _, plan = r.decide(s, view, 101, np.random.default_rng(0))
    assert plan.block == "reversed"


def test_stage_advance_and_step_back():
    """Stages advance and step back on their criteria, with reasons."""
    r = load_example("gonogo_shaping")
    s = r.open_session(r.start_subject(), "s1", T0)
    for t in range(1, 31):
        s = r.observe(s, event(t, "odor_a", "correct", ul=6.0))
    # presses to odor_a at logit 2.2 +/- 0.3 (p 0.9, 95% band from 0.834)
    s, plan = r.decide(s, StaticView(behaviour={"odor_a": (2.2, 0.09)}), 31, np.random.default_rng(0))
    assert plan.stage == "nogo_intro"
    assert plan.reasons[0] == ("stage 'lever_shaping' advances to 'nogo_intro': p_respond(odor_a) = 0.9 >= 0.85; "
                               "p_respond_lower(odor_a) = 0.834 >= 0.5; trials_in_stage = 30 >= 30 after 30 trials "
                               "in the stage")
    for t in range(31, 81):  # false alarms: responding, so no disengagement
        s = r.observe(s, event(t, "odor_b", "incorrect"))
    s, plan = r.decide(s, StaticView(behaviour={"odor_a": (-1.4, 0.09)}), 81, np.random.default_rng(0))
    assert plan.stage == "lever_shaping" and "steps back to 'lever_shaping'" in plan.reasons[0]


WALD_SPRT = 'sprt = { test = "wald", p0 = 0.6, p1 = 0.85, alpha = 0.05, beta = 0.2, cond = "all" }'


def test_go_nogo_counts_dprime_and_sprt():
    """Go/no-go counts feed d' (log-linear) and the block's Wald SPRT reaches its verdict."""
    import re

    from rigloop.core.performance import dprime
    from rigloop.rules.engine import ScheduleEnv, enter_stage
    from rigloop.rules.load import example_text

    # the example's criterion block, with Wald's SPRT named explicitly (cusum is the default)
    text, n = re.subn(r"^sprt = \{.*\}$", WALD_SPRT, example_text("gonogo_shaping"), flags=re.M)
    assert n == 1
    r = load_rules(text)
    s = enter_stage(r.spec, r.open_session(r.start_subject(), "s1", T0), "full_task")
    t = 0
    for _ in range(20):
        for cue, res in (("odor_a", "correct"), ("odor_b", "correct"), ("odor_a", "correct"), ("odor_b", "incorrect")):
            t += 1
            s = r.observe(s, event(t, cue, res, ul=6.0 if cue == "odor_a" else 0.0))
    assert (s.hits, s.misses, s.false_alarms, s.correct_rejections) == (40, 0, 20, 20)
    env = ScheduleEnv(s, StaticView(), r.spec.stages["full_task"].blocks["to_criterion"])
    assert env.name("dprime") == pytest.approx(dprime(40, 0, 20, 20)[0])
    assert s.sprt_verdict == "continue"
    for _ in range(40):
        t += 1
        s = r.observe(s, event(t, "odor_a", "correct", ul=6.0))
    assert s.sprt_verdict == "accept_h1"
    s, plan = r.decide(s, StaticView(), t + 1, np.random.default_rng(0))
    assert plan.block == "maintenance" and plan.reasons[0].startswith("block 'to_criterion' ended: sprt_accept = true")


def test_misses_in_row_and_disengagement():
    """Go-cue misses and omissions extend the run; a correct no-go leaves it; the session
    ends on the disengagement criterion."""
    r = load_example("tone_reversal")
    s = r.open_session(r.start_subject(), "s1", T0)
    for t in range(1, 15):
        s = r.observe(s, event(t, "tone_hi" if t % 2 else "tone_lo", "incorrect" if t % 2 else "correct"))
    assert s.misses_in_row == 7
    for t in range(15, 23):
        s = r.observe(s, event(t, "tone_hi", "omitted"))
    assert s.misses_in_row == 15
    s, plan = r.decide(s, StaticView(), 23, np.random.default_rng(0))
    assert plan.end_session and plan.reasons == ("session ends (disengaged): misses_in_row = 15 >= 15",)
    assert plan.warnings[-1].startswith("welfare: 0 mL today is below the daily minimum 1 mL -> supplement 1 mL")
    _, again = r.decide(s, StaticView(), 24, np.random.default_rng(0))
    assert again.end_session and again.reasons == ("session already ended",)


def test_water_projection_warning_and_day_roll():
    """A slow session warns that the day's water will fall short; a new UTC day resets
    the tally, a second session the same day keeps it."""
    r = load_example("tone_reversal")
    s = r.open_session(r.start_subject(), "s1", T0)
    s = r.observe(s, event(1, "tone_hi", "correct", ul=4.0, wall=T0 + 600, duration=5.0))
    _, plan = r.decide(s, StaticView(), 2, np.random.default_rng(0))
    # 4 µL over 605 s = 0.397 µL/min; 4 + 0.397 * (50 - 10.083) = 19.8 µL = 0.02 mL
    assert plan.warnings == (
        "welfare: on track for 0.02 mL today (0.004 mL so far, 0.397 µL/min over the 39.917 planned minutes left) "
        "< daily minimum 1 mL",
    )
    same_day = r.open_session(s, "s2", T0 + 3600)
    assert same_day.ul_today == 4.0 and same_day.ul_session == 0.0 and same_day.trials_in_session == 0
    next_day = r.open_session(s, "s3", T0 + 86400)
    assert next_day.ul_today == 0.0 and next_day.day == "2023-11-15"


def test_observe_is_pure():
    """observe returns a new state and leaves the old one unchanged."""
    r = load_example("two_choice_staircase")
    s0 = r.open_session(r.start_subject(), "s1", T0)
    before = s0.to_dict()
    s1 = r.observe(s0, event(1, "light_left", "correct", ul=5.0, value="left", kind="choice"))
    assert s0.to_dict() == before and s1 != s0
    assert s1.right_bias == pytest.approx(0.5 - 0.5 / 15)


class _CountingRng:
    """A generator that counts its uniform draws."""

    def __init__(self, seed):
        self.rng, self.draws = np.random.default_rng(seed), 0

    def random(self, *args):
        self.draws += 1
        return self.rng.random(*args)

    def __getattr__(self, name):
        return getattr(self.rng, name)


@pytest.mark.parametrize("p_a, draws", [(1.0, 0), (0.0, 0), (0.7, 1)])
def test_the_arming_draw_is_made_only_when_it_can_matter(p_a, draws):
    """A reward probability of 0 or 1 arms (or not) without a draw; one inside (0, 1) draws once."""
    r = rules_for("sequence", "fixed", p_a=p_a, p_b=0.0 if p_a else 0.5)
    s = r.open_session(r.start_subject(), "s1", T0)
    rng = _CountingRng(3)
    _, plan = r.decide(s, StaticView(), 1, rng)
    assert plan.cue == "a" and rng.draws == draws
    assert plan.reward_armed == (p_a == 1.0 or (p_a > 0 and np.random.default_rng(3).random() < p_a))


def test_apply_limits_arms_on_the_given_draw():
    """apply_limits compares its u with the final probability, whatever u is."""
    from rigloop.rules.welfare import DEFAULTS, Offer, apply_limits

    kw = dict(session_min=1.0, unrewarded_in_row=0, ul_session=0.0, ul_today=2000.0, rewarded={"a": 3.0},
              rescue_ul=3.0)
    for u, p, armed in [(0.2, 0.6, True), (0.6, 0.6, False), (1.0, 1.0, False), (-1.0, 0.0, True)]:
        offer, _, _ = apply_limits(DEFAULTS, Offer("a", p, 3.0, False, False), u, **kw)
        assert offer.reward_armed is armed
