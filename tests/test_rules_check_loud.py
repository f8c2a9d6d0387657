"""`rigloop check` fails loudly: deprecated names warn, impossible criteria are caught, and one
mistake is reported as the cause of its knock-ons instead of as many unrelated problems."""

from __future__ import annotations

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
    """The old name loads into the very same spec, and `rigloop check` says to rename it."""
    old = load_rules(TWO_CHOICE.replace("POLICY", "anti_bias"))
    new = load_rules(TWO_CHOICE.replace("POLICY", "counter_bias"))
    assert old.spec.stages == new.spec.stages
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
