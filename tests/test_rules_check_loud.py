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
