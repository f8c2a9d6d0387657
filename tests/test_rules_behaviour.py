"""Rule files that read the animal's own behaviour: the checker's cue kinds and ranges, the
functions' values through the engine's decide, and the loader's new tables."""

import numpy as np
import pytest

from rigloop.core import behaviour as B
from rigloop.errors import RuleError
from rigloop.rules import StaticView, load_rules
from rigloop.rules import expr as X

T0 = 1.7e9
CUES = ("tone_hi", "tone_lo", "light_left", "light_right")
CHOICE = frozenset({"light_left", "light_right"})
CTX = X.Context(CUES, choice_cues=CHOICE)
POLICY_CTX = X.Context(CUES, cue_var=True, choice_cues=CHOICE)


def errors(text, ctx=CTX, expect=X.BOOL):
    with pytest.raises(X.ExprError) as info:
        X.parse(text, ctx, expect)
    return info.value


def message(text, ctx=CTX, expect=X.BOOL):
    (problem,) = errors(text, ctx, expect).problems
    return problem.message


# --------------------------------------------------------------------------- the checker


def test_p_respond_on_a_two_choice_cue_says_to_use_p_right():
    err = errors("p_respond(light_left) >= 0.8")
    assert err.render("stages.s1.advance.when") == [
        "stages.s1.advance.when: 'light_left' is a two-choice cue: the animal chooses a side, it does not respond "
        "or withhold; use p_right(light_left)\n"
        "      p_respond(light_left) >= 0.8\n"
        "                ^^^^^^^^^^"
    ]


def test_p_right_on_a_go_nogo_cue_says_to_use_p_respond():
    err = errors('p_right("tone_hi") < 0.2')
    assert err.render("session_end.biased") == [
        "session_end.biased: 'tone_hi' is not a two-choice cue (role left or right); use p_respond(tone_hi)\n"
        '      p_right("tone_hi") < 0.2\n'
        "              ^^^^^^^^^"
    ]


@pytest.mark.parametrize("func", ["p_respond_lower", "p_respond_upper"])
def test_respond_bounds_refuse_two_choice_cues(func):
    assert message(f"{func}(light_right, 0.9) > 0.5") == (
        "'light_right' is a two-choice cue: the animal chooses a side, it does not respond or withhold; "
        "use p_right(light_right)")


@pytest.mark.parametrize("func", ["p_right_lower", "p_right_upper"])
def test_right_bounds_refuse_go_nogo_cues(func):
    assert message(f"{func}(tone_lo) > 0.5") == \
        "'tone_lo' is not a two-choice cue (role left or right); use p_respond(tone_lo)"


@pytest.mark.parametrize("func", ["p_discriminates", "dprime_of", "dprime_lower", "dprime_upper"])
def test_two_cue_functions_need_two_different_cues(func):
    err = errors(f"{func}(tone_hi, tone_hi) > 0.5")
    assert [p.message for p in err.problems] == [f"{func}() compares two different cues (got tone_hi twice)"]
    assert (err.problems[0].col, err.problems[0].end) == (0, len(func) + 18)


@pytest.mark.parametrize("a, b", [("tone_hi", "light_left"), ("light_right", "tone_lo")])
@pytest.mark.parametrize("func", ["p_discriminates", "dprime_of", "dprime_upper"])
def test_two_cue_functions_need_cues_of_one_kind(func, a, b):
    assert message(f"{func}({a}, {b}) > 0.5") == (
        f"{func}() compares two cues of one kind: {a} and {b} are one two-choice and one go/no-go cue")


@pytest.mark.parametrize("text", [
    "p_discriminates(tone_hi, tone_lo) > 0.9", "p_discriminates(tone_hi, tone_lo, 0) > 0.9",
    "p_discriminates(light_right, light_left, 0.99) > 0.9", "dprime_of(light_right, light_left) > 1",
    "dprime_lower(tone_hi, tone_lo, 0.5) > 1", "p_respond_lower(tone_hi, 0.01) > 0.5",
    "p_right_upper(light_left, 0.999) < 0.5", "side_bias > -0.5 and side_bias <= 0.5",
    "dprime_of(tone_hi, tone_lo) > 5", "abs(side_bias) < 0.2",
])
def test_good_behaviour_expressions_check(text):
    assert X.parse(text, CTX).type == X.BOOL


@pytest.mark.parametrize("margin", ["1", "1.0", "-0.1", "2.5"])
def test_margin_outside_zero_to_one_is_an_error(margin):
    assert message(f"p_discriminates(tone_hi, tone_lo, {margin}) > 0.5") == (
        f"out-of-range constant {margin}: a margin between response probabilities is in [0, 1), e.g. 0.3")


@pytest.mark.parametrize("text, level", [
    ("p_respond_lower(tone_hi, 1.0) > 0.5", "1.0"), ("p_respond_upper(tone_hi, 0) < 0.5", "0"),
    ("p_right_lower(light_left, 1.5) > 0.5", "1.5"), ("p_right_upper(light_right, -0.2) < 0.5", "-0.2"),
    ("dprime_lower(tone_hi, tone_lo, 1) > 1", "1"), ("dprime_upper(light_right, light_left, 0.0) > 1", "0.0"),
])
def test_level_outside_open_unit_interval_is_an_error(text, level):
    assert message(text) == f"out-of-range constant {level}: a credible level is in (0, 1), e.g. 0.95"


def test_side_bias_is_a_number_in_minus_half_to_half():
    spec = X.NAMES["side_bias"]
    assert (spec.type, spec.lo, spec.hi) == (X.NUM, -0.5, 0.5)
    assert X.parse("side_bias", CTX, X.NUM).type == X.NUM
    assert message("side_bias > 0.6") == "out-of-range constant 0.6: side_bias is in [-0.5, 0.5]"
    assert message("side_bias < -0.75") == "out-of-range constant -0.75: side_bias is in [-0.5, 0.5]"
    assert message("side_bias") == ("must be a condition (true/false), but this gives a number; "
                                    "compare it, e.g. '... >= 0.9'")


def test_behaviour_results_are_probabilities_where_they_should_be():
    assert message("p_respond(tone_hi) > 1.2") == \
        "out-of-range constant 1.2: p_respond(tone_hi) is a probability in [0, 1]"
    assert message("p_discriminates(light_right, light_left) >= -0.1") == \
        "out-of-range constant -0.1: p_discriminates(light_right, light_left) is a probability in [0, 1]"


def test_the_cue_placeholder_is_accepted_by_every_behaviour_function():
    """Per-cue policy parameters name ``cue``; its kind is the offered cue's, known only then."""
    for text in ("p_respond_lower(cue)", "p_right(cue)", "p_discriminates(cue, tone_lo)", "dprime_of(light_left, cue)"):
        assert X.parse(text, POLICY_CTX, X.NUM).type == X.NUM
    assert message("p_respond(cue) > 0.5", CTX) == "unknown cue 'cue'"  # outside policy parameters


def test_unknown_cue_in_a_behaviour_function():
    err = errors("p_respond(tone_mid) > 0.5")
    assert err.problems[0].message == "unknown cue 'tone_mid'"
    assert err.problems[0].hint == "allowed cues: tone_hi, tone_lo, light_left, light_right"


# --------------------------------------------------------------------------- evaluation through decide


STATES = {"tone_hi": (1.8, 0.3), "tone_lo": (-1.2, 0.5), "light_left": (-0.9, 0.4), "light_right": (1.4, 0.6)}
VIEW = StaticView(behaviour=STATES, choice_cues=CHOICE)


def file_with(session_end="", advance=""):
    stage_1 = f'[stages.s1]\nadvance = {{ when = "{advance}" }}\n' if advance else ""
    stage_2 = "[stages.s2.blocks.only]\ncontingency.tone_hi = { p = 1.0, ul = 4.0 }\n" if advance else ""
    ends = f'[session_end]\nprobe = "{session_end}"\n' if session_end else ""
    return load_rules(f"""
name = "brackenfield_rules"
reward_unit_ul = 4.0
[learner]
model = "rescorla_wagner"
[features]
kind = "identity"
[cues]
tone_hi = "go"
tone_lo = "nogo"
light_left = "left"
light_right = "right"
{stage_1}
[stages.s1.blocks.b1]
contingency.tone_hi = {{ p = 1.0, ul = 4.0 }}
contingency.tone_lo = {{ p = 0.0, ul = 0.0 }}
contingency.light_left = {{ p = 1.0, ul = 4.0 }}
contingency.light_right = {{ p = 1.0, ul = 4.0 }}
{stage_2}
{ends}
""", source="brackenfield_rules.toml")


def decide(rules, view=VIEW):
    sched = rules.open_session(rules.start_subject(), "s1", T0)
    return rules.decide(sched, view, 1, np.random.default_rng(0))[1]


EXPECTED = {
    "p_respond(tone_hi)": B.logistic(1.8),
    "p_respond(tone_lo)": B.logistic(-1.2),
    "p_respond_lower(tone_hi)": B.band(1.8, 0.3, 0.95)[0],
    "p_respond_upper(tone_lo)": B.band(-1.2, 0.5, 0.95)[1],
    "p_respond_lower(tone_hi, 0.8)": B.band(1.8, 0.3, 0.8)[0],
    "p_right(light_left)": B.logistic(-0.9),
    "p_right_lower(light_right)": B.band(1.4, 0.6, 0.95)[0],
    "p_right_upper(light_left, 0.5)": B.band(-0.9, 0.4, 0.5)[1],
    "p_discriminates(tone_hi, tone_lo)": B.p_difference_above(1.8, 0.3, -1.2, 0.5),
    "p_discriminates(tone_hi, tone_lo, 0.3)": B.p_difference_above(1.8, 0.3, -1.2, 0.5, 0.3),
    "p_discriminates(light_right, light_left, 0.4)": B.p_difference_above(1.4, 0.6, -0.9, 0.4, 0.4),
    "dprime_of(tone_hi, tone_lo)": B.dprime_estimate(1.8, 0.3, -1.2, 0.5)[0],
    "dprime_lower(tone_hi, tone_lo)": B.dprime_estimate(1.8, 0.3, -1.2, 0.5)[1],
    "dprime_upper(light_right, light_left, 0.8)": B.dprime_estimate(1.4, 0.6, -0.9, 0.4, 0.8)[2],
    "side_bias": (B.logistic(-0.9) + B.logistic(1.4)) / 2 - 0.5,
}


def test_the_expected_numbers_are_not_trivial():
    assert all(0.0 < v < 1.0 for k, v in EXPECTED.items() if not k.startswith(("dprime", "side")))
    assert EXPECTED["dprime_lower(tone_hi, tone_lo)"] > 0.5 and 0.0 < EXPECTED["side_bias"] < 0.1


@pytest.mark.parametrize("quantity", list(EXPECTED))
def test_each_function_returns_what_behaviour_computes(quantity):
    """Through decide: a session-end criterion `q >= t` holds for t just below the number
    rigloop.behaviour computes from the view's states, and not for t just above it."""
    value = EXPECTED[quantity]
    for offset, ends in ((-1e-9, True), (1e-9, False)):
        plan = decide(file_with(f"{quantity} >= {value + offset!r}"))
        assert plan.end_session is ends, (quantity, value, plan.reasons)
        if ends:
            assert plan.reasons[0] == f"session ends (probe): {quantity} = {X.fmt(value)} >= {value + offset!r}"


class _CountingView(StaticView):
    """StaticView that counts what the engine asks of d' bounds and of p_discriminates."""

    def __init__(self, **kw):
        super().__init__(**kw)
        self.asked = {"compared": 0, "value": 0}

    def dprime_part_compared(self, *args):
        self.asked["compared"] += 1
        return super().dprime_part_compared(*args)

    def dprime_part(self, *args):
        self.asked["value"] += 1
        return super().dprime_part(*args)

    def p_discriminates_compared(self, *args):
        self.asked["compared"] += 1
        return super().p_discriminates_compared(*args)

    def p_discriminates(self, *args):
        self.asked["value"] += 1
        return super().p_discriminates(*args)


@pytest.mark.parametrize("quantity, op", [("dprime_lower(tone_hi, tone_lo)", ">="),
                                          ("dprime_upper(light_right, light_left, 0.8)", "<"),
                                          ("p_discriminates(tone_hi, tone_lo, 0.3)", ">="),
                                          ("p_discriminates(light_right, light_left, 0.4)", "<")])
@pytest.mark.parametrize("offset", [-0.5, -2e-3, 2e-3, 0.5])
def test_a_d_prime_bound_or_p_discriminates_against_a_constant_is_asked_as_a_comparison(quantity, op, offset):
    """The compiled test of ``dprime_lower(a, b) >= c`` or ``p_discriminates(a, b, m) >= c``
    asks the view for the comparison (dprime_part_compared, p_discriminates_compared: settled
    by closed-form bounds or one evaluation of D's distribution function where c is not close
    to the value), not for the value itself; the answer is the value's, and a criterion that
    holds is explained with the value, as before."""
    value = EXPECTED[quantity]
    view = _CountingView(behaviour=STATES, choice_cues=CHOICE)
    if quantity.startswith("p_"):
        offset *= 0.05  # a probability's threshold stays inside [0, 1] (the checker refuses others)
    c = value + offset
    plan = decide(file_with(f"{quantity} {op} {c!r}"), view)
    holds = value >= c if op == ">=" else value < c
    assert plan.end_session is holds
    assert view.asked["compared"] == 1
    assert view.asked["value"] == (1 if holds else 0)  # only to explain the criterion that holds
    if holds:
        assert plan.reasons[0] == f"session ends (probe): {quantity} = {X.fmt(value)} {op} {c!r}"


def test_a_reason_quotes_the_numbers():
    """Numbers by hand (scipy would agree): P(logistic(A) > logistic(B)) = Phi((1.4 + 0.9) / sqrt(0.6 + 0.4))
    = Phi(2.3) = 0.989; the lower 95% end for tone_hi is logistic(1.8 - 1.96 sqrt(0.3)) = 0.674;
    side_bias = (logistic(-0.9) + logistic(1.4)) / 2 - 0.5 = 0.046."""
    plan = decide(file_with(advance="p_discriminates(light_right, light_left) >= 0.95 and side_bias < 0.1 "
                                    "and p_respond_lower(tone_hi) >= 0.6"))
    assert plan.stage == "s2"
    assert plan.reasons[0] == (
        "stage 's1' advances to 's2': p_discriminates(light_right, light_left) = 0.989 >= 0.95; "
        "side_bias = 0.046 < 0.1; p_respond_lower(tone_hi) = 0.674 >= 0.6 after 0 trials in the stage")


def test_an_unseen_cue_reads_the_static_default():
    """StaticView gives a cue it has no numbers for the state N(0, 1): p = 1/2, the 95% band of
    logistic(+/-1.96)."""
    view = StaticView(choice_cues=CHOICE)
    assert decide(file_with("p_respond(tone_hi) == 0.5"), view).end_session
    lo = B.band(0.0, 1.0)[0]
    assert decide(file_with(f"p_right_lower(light_left) >= {lo - 1e-12!r}"), view).end_session
    assert not decide(file_with(f"p_right_lower(light_left) >= {lo + 1e-12!r}"), view).end_session
    assert decide(file_with("side_bias == 0"), StaticView()).end_session  # no two-choice cues at all


@pytest.mark.parametrize("quantity", [
    "p_discriminates(tone_hi, tone_lo, 0.5 + 0.5)", "p_discriminates(tone_hi, tone_lo, 0 - 0.2)",
    "p_respond_lower(tone_hi, 0.5 + 0.5)", "p_right_upper(light_left, 0.5 - 0.5)",
    "dprime_lower(tone_hi, tone_lo, 2 * 0.5)",
])
def test_a_computed_margin_or_level_out_of_range_gives_nan_and_holds_nothing(quantity):
    """The checker cannot see a computed argument; at run time it gives NaN, and every
    comparison with NaN is false (no exception)."""
    assert not decide(file_with(f"{quantity} >= 0")).end_session
    assert not decide(file_with(f"{quantity} < 1")).end_session


# --------------------------------------------------------------------------- the loader


BASE = """
name = "brackenfield_load"
reward_unit_ul = 4.0
[learner]
model = "rescorla_wagner"
{values}
[features]
kind = "identity"
{tables}
[cues]
tone_hi = "go"
tone_lo = "nogo"
[stages.s1.blocks.b1]
contingency.tone_hi = {{ p = 1.0, ul = 4.0 }}
contingency.tone_lo = {{ p = 0.0, ul = 0.0 }}
"""


def problems(tables="", values=""):
    with pytest.raises(RuleError) as info:
        load_rules(BASE.format(tables=tables, values=values), source="t.toml")
    return info.value.problems


@pytest.mark.parametrize("tables, values, expected", [
    ("[behaviour]\nsigma2 = 0", "", "behaviour.sigma2: must be a number in (0, 5] (got 0)"),
    ("[behaviour]\nprior_var = 30.0", "", "behaviour.prior_var: must be a number in (0, 25] (got 30.0)"),
    ("[behaviour]\nforget = 0.1", "", "behaviour.forget: unknown key (allowed: sigma2, prior_var)"),
    ("[outcomes]\ntimeout = 1", "", "outcomes.timeout: must be a number in [-10, 0] (got 1)"),
    ("[outcomes]\nshock = -1.0", "", "outcomes.shock: unknown key (allowed: timeout, airpuff, noise)"),
    ("[response_model]\nlapse = 1", "", "response_model.lapse: must be a number in [0, 1) (got 1)"),
    ("[response_model]\ndecay = 1.0", "", "response_model.decay: must be a number in [0, 1) (got 1.0)"),
    ("", 'values = "x"', "learner.values: must be one of cue, cue_action (got 'x')"),
])
def test_loader_problem_is_pinned_with_its_key_path(tables, values, expected):
    assert problems(tables, values) == [expected]


def test_every_problem_of_the_new_tables_is_reported_at_once():
    tables = "[behaviour]\nsigma2 = 0\n[outcomes]\ntimeout = 1\n[response_model]\nlapse = 1"
    assert problems(tables, 'values = "x"') == [
        "learner.values: must be one of cue, cue_action (got 'x')",
        "behaviour.sigma2: must be a number in (0, 5] (got 0)",
        "outcomes.timeout: must be a number in [-10, 0] (got 1)",
        "response_model.lapse: must be a number in [0, 1) (got 1)",
    ]


def test_the_new_tables_load_with_defaults_and_values():
    plain = load_rules(BASE.format(tables="", values=""))
    assert plain.learner.values == "cue"
    assert (plain.spec.outcomes.timeout, plain.spec.outcomes.airpuff, plain.spec.outcomes.noise) == (-0.5, -1.0, -0.25)
    assert plain.spec.response.theta is None and plain.spec.behaviour.prior_var == 2.0
    named = load_rules(BASE.format(
        tables="[behaviour]\nsigma2 = 0.3\nprior_var = 1.0\n[outcomes]\ntimeout = -1.0\n"
               "[response_model]\nbeta = 2.0\ntheta = 0.25\nlapse = 0.0",
        values='values = "cue_action"'))
    spec = named.spec
    assert named.learner.values == "cue_action"
    assert (spec.behaviour.sigma2, spec.behaviour.prior_var, spec.outcomes.timeout) == (0.3, 1.0, -1.0)
    assert (spec.response.beta, spec.response.theta, spec.response.lapse) == (2.0, 0.25, 0.0)
    assert spec.outcomes.value_of("timeout") == -1.0 and spec.actions_of("tone_hi") == ("respond", "withhold")
