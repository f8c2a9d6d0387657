"""Loading rule files and rig profiles: every problem at once, with key paths."""

import hashlib
import json
from pathlib import Path

import pytest

from rigloop.errors import BadArgument, RuleError
from rigloop.rules import (
    RigProfile,
    ScheduleState,
    example_names,
    load_example,
    load_profile,
    load_rules,
    load_rules_file,
)
from rigloop.rules.profile import parse_profile

ROOT = Path(__file__).resolve().parents[1]

BASE = """
name = "t"
reward_unit_ul = 4.0
[learner]
model = "kalman_filter"
[features]
kind = "identity"
[cues]
tone_hi = "go_nogo"
tone_lo = "go_nogo"
[stages.s1]
advance = { when = "trials_in_stage >= 10" }
[stages.s1.blocks.b1]
contingency.tone_hi = { p = 1.0, ul = 4.0 }
contingency.tone_lo = { p = 0.0, ul = 0.0 }
end = { when = "p_value_above(tone_hi, 0.6) >= 0.95", min_trials = 20, then = "b2" }
[stages.s1.blocks.b2]
contingency.tone_hi = { p = 0.0, ul = 0.0 }
contingency.tone_lo = { p = 1.0, ul = 4.0 }
[stages.s2.blocks.only]
contingency.tone_hi = { p = 1.0, ul = 4.0 }
contingency.tone_lo = { p = 0.0, ul = 0.0 }
"""


def problems(text):
    with pytest.raises(RuleError) as info:
        load_rules(text, source="t.toml")
    return info.value.problems


def test_examples_all_validate_and_are_named():
    """Every shipped example loads; names are the scenarios."""
    assert example_names() == ["gonogo_shaping", "tone_reversal", "two_choice_staircase", "two_step",
                             "two_step_devaluation"]
    for name in example_names():
        rules = load_example(name)
        assert rules.name == name
        assert rules.sha256 == hashlib.sha256(rules.text.encode()).hexdigest()
        assert rules.describe().startswith(f"rule file '{name}'")


def test_examples_fit_their_rig_profiles():
    """Each example runs on its intended rig type with no problems."""
    pairs = {"tone_reversal": "lickspout_hf", "gonogo_shaping": "lever_gonogo",
             "two_choice_staircase": "nosepoke_2port"}
    for rules_name, profile_name in pairs.items():
        assert load_example(rules_name).check_profile(load_profile(profile_name)) == []


def test_examples_match_learners_and_features():
    """The examples pair learners and features as the learners need."""
    tone = load_example("tone_reversal")
    assert (tone.learner.name, tone.features.kind, tone.features.dt, tone.features.n_bins) == (
        "kalman_td", "serial_compound", 0.5, 4)
    assert set(tone.learner.params) == {"gamma", "diffusion", "noise", "prior_var"}
    assert (load_example("gonogo_shaping").learner.name, load_example("gonogo_shaping").features.kind) == (
        "kalman_filter", "identity")
    assert load_example("two_choice_staircase").learner.params == {"alpha": 0.15}


def test_contract_attributes():
    """Rules exposes the contract: cues in declaration order, unit, performance, welfare."""
    r = load_rules(BASE)
    assert r.cues == ("tone_hi", "tone_lo")
    assert r.reward_unit_ul == 4.0
    assert (r.performance.chance, r.performance.sigma2) == (0.5, 0.05)
    assert r.learner.params == {"diffusion": 0.01, "noise": 1.0, "prior_var": 1.0}
    assert r.welfare.max_unrewarded_run == 8
    assert r.text == BASE


def test_profiles_all_validate():
    """The shipped rig profiles load, and valve_ms inverts the least-squares line."""
    names = sorted(p.stem for p in (ROOT / "rig_profiles").glob("*.toml"))
    assert names == ["lever_gonogo", "lickspout_hf", "nosepoke_2port", "nosepoke_3port_twostage"]
    for name in names:
        prof = load_profile(ROOT / "rig_profiles" / f"{name}.toml")
        assert isinstance(prof, RigProfile)
        lo, hi = prof.ul_range
        for ul in (lo, (lo + hi) / 2, hi):
            assert prof.ul_for_ms(prof.valve_ms(ul)) == pytest.approx(ul, rel=1e-12)


def test_valve_fit_matches_numpy_polyfit():
    """The calibration line equals numpy.polyfit's degree-1 least squares (reference library)."""
    import numpy as np

    prof = load_profile("lickspout_hf")
    x, y = np.array(prof.points).T
    slope, intercept = np.polyfit(x, y, 1)
    assert (prof.slope, prof.intercept) == pytest.approx((slope, intercept), rel=1e-12)


def test_valve_outside_calibration_is_an_error():
    """No extrapolation: a volume outside the calibrated range names the range."""
    prof = load_profile("lickspout_hf")
    assert prof.valve_ms(0) == 0.0
    with pytest.raises(BadArgument, match=r"^'reward_ul' must be a volume within the valve calibration of "
                                          r"rig profile 'lickspout_hf' \(1.1 to 7.9 µL\) \(got 20.0\)$"):
        prof.valve_ms(20.0)


def test_profile_problems_reported_together():
    """A bad profile lists all its faults."""
    text = """
name = "x"
kind = "k"
cues = ["a", "a"]
responses = []
colour = "red"
[serial]
port = "/dev/ttyS0"
baud = 12345
[valve]
points = [[10, 1.0], [20, 5.0], [30, 3.0]]
"""
    with pytest.raises(RuleError) as info:
        parse_profile(text, "x.toml")
    got = info.value.problems
    assert "colour: unknown key (allowed: name, kind, description, cues, responses, sides, serial, valve)" in got
    assert "cues: names a value twice" in got
    assert "responses: list at least one" in got
    assert "serial.baud: must be a standard rate such as 9600 or 115200 (got 12345)" in got
    assert any(p.startswith("valve.points[") and "off the fitted line" in p for p in got)


def test_unknown_profile_name_lists_profiles():
    with pytest.raises(RuleError, match="no rig profile named 'nope'"):
        load_profile("nope")


def test_all_problems_reported_at_once():
    """Several faults anywhere in the file come back together, each with its key path."""
    text = BASE.replace('kind = "identity"', 'kind = "identity"\nbins = 3').replace(
        'p_value_above(tone_hi, 0.6) >= 0.95', 'vlaue(tone_hi) > 0.6').replace(
        'contingency.tone_lo = { p = 1.0, ul = 4.0 }', 'contingency.tone_mid = { p = 1.0, ul = 40.0 }')
    got = problems(text)
    assert got[0] == "features.bins: unknown key (allowed: kind)"
    assert got[1] == (
        "stages.s1.blocks.b1.end.when: unknown function 'vlaue'\n"
        "      vlaue(tone_hi) > 0.6\n"
        "      ^^^^^\n"
        "    allowed functions: value, sd, p_value_above, p_correct, p_lower, p_upper, p_above_chance, p_respond, p_respond_lower, "
        "p_respond_upper, p_right, p_right_lower, p_right_upper, p_discriminates, dprime_of, dprime_lower, "
        "dprime_upper, p_model_based, min, max, abs"
    )
    assert got[2] == "stages.s1.blocks.b2.contingency.tone_mid: unknown cue 'tone_mid' (declared cues: tone_hi, tone_lo)"
    assert len(got) == 3


def test_rule_error_message_lists_problems():
    """The RuleError's text names the source and counts the problems."""
    with pytest.raises(RuleError, match=r"^t.toml: 1 problem in rule file:\n  - name: is missing$"):
        load_rules(BASE.replace('name = "t"\n', ""), source="t.toml")


def test_unreachable_block():
    """A block no end leads to, and that is not first, is unreachable."""
    text = BASE.replace('then = "b2"', 'then = "b1"')
    assert problems(text) == [
        "stages.s1.blocks.b2: unreachable block: it is not the stage's first block ('b1') and no block's end leads to it"
    ]


def test_stage_without_exit():
    """Every stage but the last needs an advance criterion."""
    text = BASE.replace('advance = { when = "trials_in_stage >= 10" }\n', "")
    got = problems(text)
    assert got[0] == ("stages.s1: stage has no exit: add [stages.s1.advance] with a 'when' criterion "
                      "(only the last stage may run without one)")
    assert "stages.s2: unreachable stage: no advance or step_back leads to it from 's1'" in got


def test_learner_feature_mismatch():
    """Timed features with a reward learner, and identity with a value learner, are errors."""
    got = problems(BASE.replace('kind = "identity"', 'kind = "presence"'))
    assert got == ["features.kind: 'presence' features are timed; learner 'kalman_filter' learns one reward per "
                   "trial and needs kind = \"identity\""]
    got = problems(BASE.replace('model = "kalman_filter"', 'model = "td"'))
    assert got[0].startswith("features.kind: 'identity' features give one row per trial; learner 'td'")


def test_learner_parameter_ranges():
    got = problems(BASE.replace('model = "kalman_filter"', 'model = "kalman_filter"\nnoise = -1\nalpha = 0.1'))
    assert "learner.alpha: unknown key (allowed: model, values, diffusion, noise, prior_var)" in got
    assert "learner.noise: must be a number in (0, 100] (got -1)" in got


def test_welfare_loosening_must_be_explicit_and_within_hard_limits():
    """Stricter limits pass; looser ones need 'relax'; nothing passes the hard limits."""
    assert load_rules(BASE + "[welfare]\nmax_unrewarded_run = 4\n").welfare.max_unrewarded_run == 4
    assert problems(BASE + "[welfare]\nmax_session_min = 90\n") == [
        "welfare.max_session_min: 90 is looser than the default 60; add \"max_session_min\" to welfare.relax "
        "to loosen it on purpose (hard limit: <= 180)"
    ]
    ok = load_rules(BASE + "[welfare]\nmax_session_min = 90\nrelax = [\"max_session_min\"]\n")
    assert ok.welfare.max_session_min == 90
    assert problems(BASE + "[welfare]\nmax_session_min = 300\nrelax = [\"max_session_min\"]\n") == [
        "welfare.max_session_min: 300 passes the hard limit (must be <= 180)"
    ]
    assert problems(BASE + "[welfare]\nmin_reward_prob = 0.05\nrelax = [\"min_reward_prob\"]\n") == [
        "welfare.min_reward_prob: 0.05 passes the hard limit (must be >= 0.1)"
    ]


def test_reward_above_welfare_cap():
    got = problems(BASE.replace("{ p = 1.0, ul = 4.0 }\ncontingency.tone_lo = { p = 0.0, ul = 0.0 }\nend",
                                "{ p = 1.0, ul = 25.0 }\ncontingency.tone_lo = { p = 0.0, ul = 0.0 }\nend"))
    assert got == ["stages.s1.blocks.b1.contingency.tone_hi.ul: 25 µL is above the welfare limit "
                   "max_reward_ul = 10 µL"]


def test_block_specific_names():
    """SPRT and staircase names in a block end need the block to have them."""
    got = problems(BASE.replace('p_value_above(tone_hi, 0.6) >= 0.95', 'sprt_accept'))
    assert got[0].startswith("stages.s1.blocks.b1.end.when: 'sprt_accept' needs an SPRT: add "
                             "[stages.s1.blocks.b1.sprt] with p0 and p1")


def test_policy_validation():
    """Policies check their cues: balanced needs two, anti-bias needs sides."""
    one = BASE.replace("contingency.tone_lo = { p = 0.0, ul = 0.0 }\nend", "next_cue = { policy = \"balanced\" }\nend")
    assert "stages.s1.blocks.b1.next_cue.policy: 'balanced' needs at least two cues in the block; use 'sequence'" \
        in problems(one)
    ab = BASE.replace("end = {", "next_cue = { policy = \"counter_bias\" }\nend = {", 1)
    assert "stages.s1.blocks.b1.next_cue.policy: 'counter_bias' needs cues with role = \"left\" and role = " \
           "\"right\" in the block" in problems(ab)


def test_no_water_anywhere_is_an_error():
    text = BASE.replace("p = 1.0, ul = 4.0", "p = 0.0, ul = 0.0")
    assert problems(text) == ["stages: no block rewards any cue; a water-restricted animal must be able to earn water"]


def test_bad_toml_and_reserved_cue_names():
    assert problems("name = ")[0].startswith("not valid TOML:")
    got = problems(BASE.replace('tone_lo = "go_nogo"', 'tone_lo = "go_nogo"\nall = "plain"'))
    assert "cues.all: 'all' is a name of the expression language; choose another cue id" in got


def test_load_rules_file_and_check_command(tmp_path, capsys):
    """rigloop check validates a file or an example name: exit 0 with a plan, 1 with problems."""
    from rigloop.cli import main

    good = tmp_path / "good.toml"
    good.write_text(BASE, encoding="utf-8")
    assert load_rules_file(good).source == str(good)
    assert main(["check", str(good)]) == 0
    out = capsys.readouterr().out
    assert "stage 1 's1' (first): starts in block 'b1'" in out
    assert "ok: rule file is valid" in out
    bad = tmp_path / "bad.toml"
    bad.write_text(BASE.replace("0.95", "1.95"), encoding="utf-8")
    assert main(["check", str(bad)]) == 1
    err = capsys.readouterr().err
    assert "out-of-range constant 1.95: p_value_above(tone_hi, 0.6) is a probability in [0, 1]" in err
    assert main(["check", "tone_reversal", "--profile", "lickspout_hf"]) == 0
    assert "4 µL -> valve open" in capsys.readouterr().out
    assert main(["check", "tone_reversal", "--profile", "nosepoke_2port"]) == 1
    assert "cannot present this cue" in capsys.readouterr().err


def test_schedule_state_round_trip():
    """ScheduleState survives to_dict -> JSON -> from_dict exactly."""
    r = load_example("tone_reversal")
    s = r.open_session(r.start_subject(), "s1", 1.7e9)
    s = ScheduleState.from_dict(json.loads(json.dumps(s.to_dict())))
    assert ScheduleState.from_dict(s.to_dict()) == s
    with pytest.raises(BadArgument):
        ScheduleState.from_dict({**s.to_dict(), "colour": 1})
