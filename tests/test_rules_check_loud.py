"""`rigloop check` fails loudly: deprecated names warn, impossible criteria are caught, and one
mistake is reported as the cause of its knock-ons instead of as many unrelated problems."""

from __future__ import annotations

import dataclasses

import pytest

from rigloop.errors import RuleError
from rigloop.rules import load_example, load_rules
from rigloop.rules.lint import warnings
from rigloop.rules.plan import describe

TWO_CHOICE = """
name = "brackenfield two-choice"
reward_unit_ul = 4.0
[learner]
model = "kalman_filter"
[features]
kind = "identity"
[cues]
light_left = "left"
light_right = "right"
[stages.s1.blocks.b1]
contingency.light_left = { p = 1.0, ul = 4.0 }
contingency.light_right = { p = 1.0, ul = 4.0 }
next_cue = { policy = "POLICY", window = 12, max_p = 0.75 }
end = { max_trials = 50 }
"""


def problems(text: str) -> list[str]:
    with pytest.raises(RuleError) as info:
        load_rules(text)
    return info.value.problems


# --------------------------------------------------------------------------- item 16: policy names


def test_counter_bias_loads_and_check_words_name_it():
    rules = load_rules(TWO_CHOICE.replace("POLICY", "counter_bias"))
    nc = rules.spec.stages["s1"].blocks["b1"].next_cue
    assert (nc.window, nc.max_p) == (12, 0.75)
    assert warnings(rules.spec) == []
    assert "next cue: counter-bias: favour the side chosen less over about the last 12 choices" in describe(rules)


def test_anti_bias_is_a_deprecated_alias_with_a_check_warning():
    """The old name loads into the same policy (only its tag differs: a file that says
    anti_bias keeps the reason word "anti-bias", so its stored sessions replay word for
    word), and `rigloop check` says to rename it."""
    old = load_rules(TWO_CHOICE.replace("POLICY", "anti_bias"))
    new = load_rules(TWO_CHOICE.replace("POLICY", "counter_bias"))
    a, b = old.spec.stages["s1"].blocks["b1"].next_cue, new.spec.stages["s1"].blocks["b1"].next_cue
    assert (a.kind, b.kind) == ("anti_bias", "counter_bias")
    assert dataclasses.replace(a, kind="counter_bias") == b
    note = ("stages.s1.blocks.b1.next_cue.policy: 'anti_bias' is the old name of the policy 'counter_bias' and "
            "will stop loading in the next release; write policy = \"counter_bias\" (it behaves the same)")
    assert warnings(old.spec) == [note]
    assert f"warnings:\n  - {note}" in describe(old)


def test_unknown_policy_lists_only_the_current_names():
    msg = "stages.s1.blocks.b1.next_cue.policy: must be one of sequence, balanced, weighted, uncertain, " \
          "counter_bias (got 'uncertainty')"
    assert msg in problems(TWO_CHOICE.replace("POLICY", "uncertainty"))


def test_shipped_two_choice_example_uses_counter_bias():
    rules = load_example("two_choice_staircase")
    assert 'policy = "counter_bias"' in rules.text and "anti_bias" not in rules.text
    assert warnings(rules.spec) == []


# --------------------------------------------------------------------------- item 14: one mistake, one cause

GO_NOGO = """
name = "brackenfield go/no-go"
reward_unit_ul = 4.0
[learner]
model = "kalman_filter"
[features]
kind = "identity"
[cues]
tone_hi = "go"
tone_lo = "nogo"
[stages.shaping]
advance = { when = "p_respond(tone_hi) >= 0.8 and trials_in_stage >= 40", to = "discrimination" }
[stages.shaping.blocks.b1]
contingency.tone_hi = { p = 1.0, ul = 4.0 }
end = { max_trials = 50 }
[stages.discrimination]
[stages.discrimination.blocks.d1]
contingency.tone_hi = { p = 1.0, ul = 4.0 }
contingency.tone_lo = { p = 0.0, ul = 0.0 }
end = { when = "p_discriminates(tone_hi, tone_lo, 0.3) >= 0.95", max_trials = 400 }
[session_end]
quiet = "p_respond(tone_hi) < 0.05 and trials_in_session >= 100"
"""


def test_load_check_baseline_is_valid():
    load_rules(GO_NOGO)


def test_undeclared_cue_is_the_root_and_every_use_follows_from_it():
    """A cue missing from [cues]: its first contingency mention is the first problem; the
    expressions and later contingencies naming it are marked as following from it."""
    text = GO_NOGO.replace('tone_hi = "go"\n', "")
    got = problems(text)
    root = "stages.shaping.blocks.b1.contingency.tone_hi"
    assert got[0] == f"{root}: unknown cue 'tone_hi' (declared cues: tone_lo)"
    assert [p for p in got if "(follows from" not in p] == [got[0]]
    knock = got[1:]
    assert len(knock) == 7  # sequence, 2 criteria, a contingency, session end, the stage it cut off, no water
    assert all(p.split("\n")[0].endswith(f"(follows from {root})") for p in knock)
    assert any(p.startswith("session_end.quiet: unknown cue 'tone_hi' (follows from") for p in knock)
    assert any(p.startswith("stages.discrimination.blocks.d1.contingency.tone_hi: unknown cue") for p in knock)
    assert knock[-1] == f"stages: no block rewards any cue; a water-restricted animal must be able to earn water " \
                        f"(follows from {root})"


def test_refused_cue_declaration_is_the_root_of_its_uses():
    """A cue id that is a word of the language is refused once; its uses follow from that."""
    text = GO_NOGO.replace("tone_lo", "dprime")
    got = problems(text)
    assert got[0] == "cues.dprime: 'dprime' is a name of the expression language; choose another cue id"
    assert all("(follows from cues.dprime)" in p.split("\n")[0] for p in got[1:])
    assert len(got) == 3  # the contingency and the block end's expression


def test_misspelled_stage_name_makes_no_separate_unreachable_stage_problem():
    text = GO_NOGO.replace('to = "discrimination"', 'to = "discrimnation"')
    assert problems(text) == [
        "stages.shaping.advance.to: no stage named 'discrimnation' (stages: shaping, discrimination)",
        "stages.discrimination: unreachable stage: no advance or step_back leads to it from 'shaping' "
        "(follows from stages.shaping.advance.to)",
    ]


def test_a_broken_advance_criterion_is_the_cause_of_the_unreachable_stage():
    text = GO_NOGO.replace("p_respond(tone_hi) >= 0.8 and", "p_respond(tone_hi) >= 0.8 and and")
    got = problems(text)
    assert got[0].startswith("stages.shaping.advance.when: is not a valid expression")
    assert got[1] == ("stages.discrimination: unreachable stage: no advance or step_back leads to it from 'shaping' "
                      "(follows from stages.shaping.advance.when)")


def test_misspelled_block_then_is_the_cause_of_the_unreachable_block():
    text = GO_NOGO.replace("end = { max_trials = 50 }",
                           'end = { max_trials = 50, then = "b22" }\n[stages.shaping.blocks.b2]\n'
                           'contingency.tone_hi = { p = 1.0, ul = 4.0 }\nend = { max_trials = 50 }')
    assert problems(text) == [
        "stages.shaping.blocks.b1.end.then: no block named 'b22' in this stage (blocks: b1, b2)",
        "stages.shaping.blocks.b2: unreachable block: it is not the stage's first block ('b1') and no block's end "
        "leads to it (follows from stages.shaping.blocks.b1.end.then)",
    ]


def test_an_unrelated_unreachable_stage_is_still_its_own_problem():
    text = GO_NOGO.replace('advance = { when = "p_respond(tone_hi) >= 0.8 and trials_in_stage >= 40", '
                           'to = "discrimination" }', 'advance = { when = "trials_in_stage >= 40", to = "shaping" }')
    assert "stages.discrimination: unreachable stage: no advance or step_back leads to it from 'shaping'" \
        in problems(text)


# --------------------------------------------------------------------------- item 9: impossible criteria


def with_end(when: str, bounds: str = "max_trials = 400") -> str:
    return GO_NOGO.replace('end = { when = "p_discriminates(tone_hi, tone_lo, 0.3) >= 0.95", max_trials = 400 }',
                           f'end = {{ when = "{when}", {bounds} }}')


D1 = "stages.discrimination.blocks.d1.end.when"


def test_a_probability_above_one_can_never_be_true():
    """1.0 is inside [0, 1], so the constant check lets it by; '> 1.0' leaves no value at all."""
    assert problems(with_end("p_respond(tone_hi) > 1.0")) == [
        f"{D1}: can never be true: 'p_respond(tone_hi) > 1.0' needs p_respond(tone_hi) > 1, but "
        "p_respond(tone_hi) is a probability in [0, 1]"]
    assert problems(with_end("0 > p_lower(all)"))[0].startswith(f"{D1}: can never be true: '0 > p_lower(all)' "
                                                                 "needs p_lower(all) < 0")


def test_a_probability_only_at_exactly_one_is_a_loud_warning():
    """'>= 1.0' can hold only at exactly 1, which a posterior estimate never reaches: a check warning."""
    rules = load_rules(with_end("p_respond(tone_hi) >= 1.0"))
    assert warnings(rules.spec)[0] == (
        f"{D1}: 'p_respond(tone_hi) >= 1.0' holds only when p_respond(tone_hi) is exactly 1, which an estimate "
        "from the animal's trials does not reach; use a bound inside (0, 1), e.g. >= 0.95")
    assert f"warnings:\n  - {D1}: 'p_respond(tone_hi) >= 1.0' holds only" in describe(rules)


def test_contradictory_bounds_can_never_be_true():
    assert problems(with_end("p_respond(tone_lo) > 0.8 and p_respond(tone_lo) < 0.2")) == [
        f"{D1}: can never be true: 'p_respond(tone_lo) > 0.8 and p_respond(tone_lo) < 0.2' contradict each other: "
        "no value of p_respond(tone_lo) meets them all"]
    got = problems(with_end("dprime_lower(tone_hi, tone_lo) > 2 and dprime_lower(tone_hi, tone_lo) <= 1.5"))
    assert got[0].startswith(f"{D1}: can never be true:") and "contradict each other" in got[0]


def test_an_interval_whose_lower_end_must_exceed_its_upper_end_can_never_be_true():
    assert problems(with_end("dprime_lower(tone_hi, tone_lo) > dprime_upper(tone_hi, tone_lo)")) == [
        f"{D1}: can never be true: 'dprime_lower(tone_hi, tone_lo) > dprime_upper(tone_hi, tone_lo)' asks the lower "
        "end of a credible interval to exceed its upper end; the lower end is never above the upper one"]
    assert problems(with_end("p_upper(all) < p_lower(all) and trials_in_block > 5"))[0].startswith(
        f"{D1}: can never be true: 'p_upper(all) < p_lower(all)' asks the lower end")
    # at any two levels: a central interval's lower end is below the median, its upper end above
    assert "asks the lower end" in problems(with_end("p_lower(all, 0.5) > p_upper(all, 0.99)"))[0]
    load_rules(with_end("p_respond_lower(tone_hi) > p_respond_upper(tone_lo)"))  # two cues: two intervals


def test_a_trial_count_beyond_max_trials_can_never_be_true():
    assert problems(with_end("trials_in_block >= 100", "max_trials = 50")) == [
        f"{D1}: can never be true: 'trials_in_block >= 100' needs trials_in_block >= 100, but trials_in_block is "
        "in [0, 50] here (max_trials = 50 ends the block)"]
    assert problems(with_end("hits > 60", "max_trials = 50"))[0].startswith(f"{D1}: can never be true: 'hits > 60'")


def test_a_trial_count_below_min_trials_can_never_be_true():
    got = problems(with_end("trials_in_block < 10", "min_trials = 20, max_trials = 400"))
    assert got == [f"{D1}: can never be true: 'trials_in_block < 10' needs trials_in_block < 10, but trials_in_block "
                   "is in [20, 400] here (the block's end is tested from min_trials = 20 to max_trials = 400)"]


def test_or_is_impossible_only_when_every_side_is():
    load_rules(with_end("p_respond(tone_hi) > 1.0 or trials_in_block >= 30"))
    got = problems(with_end("p_respond(tone_hi) > 1.0 or p_respond(tone_lo) < 0"))
    assert got[0].startswith(f"{D1}: can never be true:") and "; " in got[0]


def test_possible_criteria_are_not_flagged():
    for when in ("p_respond(tone_hi) > 0.8 and p_respond(tone_lo) < 0.2", "0.2 < p_respond(tone_lo) < 0.8",
                 "trials_in_block >= 400", "p_respond(tone_hi) <= 1.0", "not (p_respond(tone_hi) > 1.0)"):
        rules = load_rules(with_end(when))
        assert warnings(rules.spec) == [], when


def test_a_criterion_on_a_cue_its_stage_never_shows_warns():
    """The shaping stage shows only tone_hi: an advance on tone_lo's behaviour waits on nothing it does."""
    text = GO_NOGO.replace('when = "p_respond(tone_hi) >= 0.8 and', 'when = "p_respond(tone_lo) <= 0.2 and')
    rules = load_rules(text)
    assert warnings(rules.spec) == [
        "stages.shaping.advance.when: reads the animal's estimate for cue 'tone_lo', but no block of stage 'shaping' "
        "shows it: the estimate cannot move while this is tested, so it waits on what earlier trials left; add the "
        "cue to the contingency or test a cue shown here"]
    assert "warnings:\n  - stages.shaping.advance.when: reads the animal's estimate for cue 'tone_lo'" \
        in describe(rules)
