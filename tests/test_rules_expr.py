"""The rule expression language: checked parsing, clear errors, a safe interpreter."""

import builtins
import math
import zlib

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from rigloop.rules import expr as X

CTX = X.Context(("tone_hi", "tone_lo"))


class ProbeEnv(X.Env):
    """Answers every name and function with fixed numbers."""

    def name(self, name):
        spec = X.NAMES[name]
        return True if spec.type == X.BOOL else 3.0

    def call(self, func, args):
        return 0.75


def errors(text, ctx=CTX, expect=X.BOOL):
    with pytest.raises(X.ExprError) as info:
        X.parse(text, ctx, expect)
    return info.value


def test_unknown_function_message_is_pinned():
    """An unknown function names the key path, shows the expression, a caret under the
    fault and the allowed functions."""
    err = errors("vlaue(tone_hi) > 0.6")
    assert err.render("stages.acquisition.blocks.a1.end.when") == [
        "stages.acquisition.blocks.a1.end.when: unknown function 'vlaue'\n"
        "      vlaue(tone_hi) > 0.6\n"
        "      ^^^^^\n"
        "    allowed functions: value, sd, p_value_above, p_correct, p_lower, p_upper, p_above_chance, "
        "p_respond, p_respond_lower, p_respond_upper, p_right, p_right_lower, p_right_upper, p_discriminates, "
        "dprime_of, dprime_lower, dprime_upper, p_model_based, min, max, abs"
    ]


def test_out_of_range_constant_message_is_pinned():
    """Comparing a probability with a constant outside [0, 1] is an error at the constant."""
    err = errors("p_correct(all) >= 1.5")
    assert err.render("k") == [
        "k: out-of-range constant 1.5: p_correct(all) is a probability in [0, 1]\n"
        "      p_correct(all) >= 1.5\n"
        "                        ^^^"
    ]


def test_unknown_cue_lists_allowed_cues():
    """A cue id the file does not declare is named, with the declared ones."""
    err = errors("value(tone_mid) > 0")
    assert err.problems[0].message == "unknown cue 'tone_mid'"
    assert err.problems[0].hint == "allowed cues: tone_hi, tone_lo"
    assert (err.problems[0].col, err.problems[0].end) == (6, 14)


def test_all_problems_in_one_expression_are_reported():
    """Two faults in one expression give two problems, each with its own caret."""
    err = errors("foo(1) > 0 or bar > 2")
    assert [p.message for p in err.problems] == ["unknown function 'foo'", "unknown name 'bar'"]
    assert [p.col for p in err.problems] == [0, 14]


@pytest.mark.parametrize(
    "text, message",
    [
        ("sd(tone_hi, 3) > 1", "sd() takes 1 argument (cue), got 2"),
        ("p_lower(all, 0.95, 1) > 0.5", "p_lower() takes 1 or 2 arguments (cond, [level]), got 3"),
        ("p_lower(all, 1.5) > 0.5", "out-of-range constant 1.5: a credible level is in (0, 1), e.g. 0.95"),
        ("trials_in_block", "must be a condition (true/false), but this gives a number; compare it, e.g. '... >= 0.9'"),
        ("sprt_accept + 1 > 0", "'+' needs numbers, but this is a condition (true/false)"),
        ("not trials_in_block", "'not' needs a condition (true/false), but this is a number"),
        ("tone_hi > 0", "'tone_hi' is a cue, not a number; use it inside a function, e.g. value(tone_hi)"),
        ("value > 0", "'value' is a function; call it, e.g. value(...)"),
        ("trials_in_block >= -1", "out-of-range constant -1: trials_in_block is in [0, inf]"),
        ("value(1) > 0", "value() needs a cue id here"),
        ("value(tone_hi) > 'a'", "a string can only name a cue inside a function call, e.g. value(\"tone_hi\")"),
        ("misses_in_row >= 1e12", "out-of-range constant 1e12 (numbers must be within ±1e+09)"),
    ],
)
def test_type_and_arity_errors(text, message):
    """Wrong arity, wrong type and out-of-range constants each give a clear message."""
    assert errors(text).problems[0].message == message


@pytest.mark.parametrize(
    "text, message",
    [
        ("__import__('os').system('true')", "attribute access (a.b) not allowed in rule expressions"),
        ("value.__class__ > 0", "attribute access (a.b) not allowed in rule expressions"),
        ("misses_in_row[0] > 1", "subscripts (a[b]) not allowed in rule expressions"),
        ("(lambda: 1)() > 0", "lambda not allowed in rule expressions"),
        ("(1)(2) > 0", "only the listed functions can be called"),
        ("[x for x in misses] == 1", "comprehensions not allowed in rule expressions"),
        ("eval('1') > 0", "unknown function 'eval'"),
        ("open('f') > 0", "unknown function 'open'"),
        ("2 ** 1000 > 1", "an exponent must be a number constant between -8 and 8"),
        ("2 ** misses_in_row > 1", "an exponent must be a number constant between -8 and 8"),
        ("(1 if true else 2) > 0", "conditional expressions (a if b else c) not allowed in rule expressions"),
        ("(x := 1) > 0", "assignment (:=) not allowed in rule expressions"),
        ("f'{misses}' == 1", "f-strings not allowed in rule expressions"),
        ("max(*[1, 2]) > 0", "starred arguments not allowed in rule expressions"),
        ("max(a=1) > 0", "max() takes no keyword arguments"),
        ("misses_in_row in (1, 2)", "'in', 'not in', 'is' and 'is not' are not allowed; "
                                    "compare numbers with < <= > >= == !="),
        ("misses_in_row & 1", "bitwise and matrix operators are not allowed (use + - * / % **)"),
        ("1 +", "is not a valid expression (invalid syntax)"),
        ("misses_in_row >= 1\nor true", "contains a control character '\\n'; an expression is one printable line"),
        ("", "is an empty expression"),
    ],
)
def test_python_features_are_rejected(text, message):
    """Nothing beyond the whitelist reaches Python: each attempt is a named rejection."""
    assert errors(text).problems[0].message == message


def test_deep_nesting_and_length_are_bounded():
    """Nesting beyond MAX_DEPTH and text beyond MAX_LENGTH are errors, not crashes."""
    deep = "not " * (X.MAX_DEPTH + 2) + "true"
    assert "nested too deeply" in errors(deep).problems[0].message
    long = " + ".join(["misses_in_row"] * 40) + " > 1"
    assert errors(long).problems[0].message.startswith("is too long")


def test_evaluation_reports_the_numbers_seen():
    """Evaluation returns the value and one phrase per comparison with its numbers."""
    e = X.parse("p_value_above(tone_hi, 0.6) >= 0.95 and trials_in_block >= 40", CTX)

    class Env(X.Env):
        def name(self, n):
            return 84.0

        def call(self, f, a):
            return 0.9731

    value, seen = X.evaluate(e, Env())
    assert value is True
    assert seen == ["p_value_above(tone_hi, 0.6) = 0.973 >= 0.95", "trials_in_block = 84 >= 40"]


def test_arithmetic_never_raises():
    """Division by zero gives NaN (so comparisons are false); overflow gives inf."""
    env = ProbeEnv()
    assert X.evaluate(X.parse("misses_in_row / 0 > 1", CTX), env)[0] is False
    assert X.evaluate(X.parse("misses_in_row / 0 <= 1", CTX), env)[0] is False
    big = X.parse("(1e9 * 1e9 * 1e9 * 1e9 * 1e9) ** 8 > 1", CTX)  # 1e360 overflows
    assert X.evaluate(big, env)[0] is True
    assert math.isnan(X._arith("**", -8.0, 0.5))


# --------------------------------------------------------------------------- fuzz

TOKENS = [
    "value", "sd", "p_value_above", "p_correct", "p_lower", "min", "max", "abs", "tone_hi", "all", "cue",
    "misses_in_row", "trials_in_block", "sprt_accept", "true", "false", "__import__", "os", "eval", "x",
    "(", ")", "[", "]", "{", "}", ",", ".", ":", ";", "=", "==", ">=", "<", "!=", "+", "-", "*", "/", "**",
    "%", "@", "&", "|", "~", "and", "or", "not", "if", "else", "lambda", "for", "in", "is", ":=", "0", "1",
    "0.5", "9", "1e308", "1j", "'a'", "\"tone_hi\"", "f'", "\\", "\n", "\x00", " ", "...", "yield", "await",
]

ALLOWED_NODES = (X.Const, X.CueRef, X.Name, X.Call, X.Unary, X.Binary, X.BoolOp, X.Compare)


def _walk(node):
    yield node
    for child in getattr(node, "args", ()) or ():
        yield from _walk(child)
    for attr in ("operand", "left", "right"):
        if hasattr(node, attr):
            yield from _walk(getattr(node, attr))
    for attr in ("values", "operands"):
        for child in getattr(node, attr, ()) or ():
            yield from _walk(child)


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.one_of(st.lists(st.sampled_from(TOKENS), max_size=30).map(" ".join), st.text(max_size=60)))
def test_fuzz_no_input_reaches_python(monkeypatch_text):
    """Any text either parses into the checked tree, or is rejected with ExprError
    naming a problem; with eval/exec disabled nothing changes; a parsed expression
    evaluates without raising."""
    text = monkeypatch_text

    def forbidden(*a, **k):
        raise AssertionError("eval/exec reached")

    saved = builtins.eval, builtins.exec
    builtins.eval, builtins.exec = forbidden, forbidden
    try:
        for expect in (X.BOOL, X.NUM):
            try:
                e = X.parse(text, X.Context(("tone_hi", "tone_lo"), cue_var=True), expect)
            except X.ExprError as err:
                assert err.problems and all(p.message for p in err.problems)
                assert all(0 <= p.col < max(len(text), 1) + 1 for p in err.problems)
                continue
            assert all(isinstance(n, ALLOWED_NODES) for n in _walk(e.tree))
            value, _ = X.evaluate(e, ProbeEnv())
            assert isinstance(value, (bool, float))
    finally:
        builtins.eval, builtins.exec = saved


# Random well-formed expressions: the checker accepts them and evaluation never raises.
_num_leaf = st.sampled_from(["misses_in_row", "value(tone_hi)", "sd(cue)", "p_correct(all)", "0.5", "3", "-2"])


def _num(children):
    return st.one_of(
        st.tuples(children, st.sampled_from(["+", "-", "*", "/", "%"]), children).map(lambda t: f"({t[0]} {t[1]} {t[2]})"),
        st.tuples(children, st.sampled_from(["2", "-1", "0.5"])).map(lambda t: f"({t[0]}) ** {t[1]}"),
        st.lists(children, min_size=2, max_size=3).map(lambda xs: f"max({', '.join(xs)})"),
    )


_nums = st.recursive(_num_leaf, _num, max_leaves=8)


@settings(max_examples=200, deadline=None)
@given(_nums, st.sampled_from([">", ">=", "<", "==", "!="]), _nums)
def test_fuzz_well_formed_expressions_evaluate(a, op, b):
    """Generated arithmetic comparisons parse and evaluate to a boolean."""
    text = f"{a} {op} {b}"
    if len(text) > X.MAX_LENGTH:
        return
    try:
        e = X.parse(text, X.Context(("tone_hi",), cue_var=True))
    except X.ExprError as err:  # e.g. misses_in_row > -2: a constant outside a counter's range
        assert all(p.message.startswith(("out-of-range constant", "is nested too deeply")) for p in err.problems)
        return
    value, seen = X.evaluate(e, ProbeEnv())
    assert isinstance(value, bool) and seen


class _VariedEnv(X.Env):
    """Different numbers per name and call (NaN and inf among them); records its calls."""

    VALUES = (0.0, 3.0, -1.5, math.nan, math.inf, 0.75, 40.0)

    def __init__(self, seed):
        self.seed, self.calls = seed, []

    def _pick(self, key):
        return self.VALUES[(zlib.crc32(repr(key).encode()) + self.seed) % len(self.VALUES)]

    def name(self, name):
        self.calls.append(name)
        return self.seed % 2 == 0 if X.NAMES[name].type == X.BOOL else self._pick(name)

    def call(self, func, args):
        self.calls.append((func, tuple(args)))
        return self._pick((func, tuple(args)))


_conds = st.recursive(
    st.one_of(
        st.tuples(_num_leaf, st.sampled_from([">", "<=", "==", "!="]), st.sampled_from(["0.5", "-2"])).map(" ".join),
        st.tuples(_nums, st.sampled_from([">", ">=", "<", "<=", "==", "!="]), _nums).map(" ".join),
        st.tuples(_nums, st.sampled_from(["<", "<="]), _nums, st.sampled_from(["<", "<="]), _nums).map(" ".join),
        st.sampled_from(["sprt_accept", "not sprt_reject", "true", "sprt_accept == false"]),
    ),
    lambda c: st.one_of(
        st.tuples(c, st.sampled_from(["and", "or"]), c).map(lambda t: f"({t[0]} {t[1]} {t[2]})"),
        c.map(lambda x: f"not ({x})"),
    ),
    max_leaves=4,
)


def _outcome(run):
    try:
        return run()
    except Exception as err:  # compare what is raised, too
        return (type(err), str(err))


@pytest.mark.filterwarnings("ignore::hypothesis.errors.HypothesisWarning")  # the strategy's long repr
@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(_conds)
def test_compiled_evaluation_equals_the_interpreter(text):
    """The compiled test of a criterion makes the same env calls in the same order and gives
    the same value (type included) as the interpreter that explains it."""
    if len(text) > X.MAX_LENGTH:
        return
    try:
        e = X.parse(text, X.Context(("tone_hi",), cue_var=True))
    except X.ExprError:
        return
    for seed in range(2 * len(_VariedEnv.VALUES)):
        a, b = _VariedEnv(seed), _VariedEnv(seed)
        fast = _outcome(lambda: X.evaluate(e, a, explain=False)[0])
        slow = _outcome(lambda: X._Eval(e, b, None).run(e.tree))
        assert type(fast) is type(slow) and (fast == slow or (fast != fast and slow != slow)), seed
        assert a.calls == b.calls


@pytest.mark.filterwarnings("ignore::hypothesis.errors.HypothesisWarning")  # the strategy's long repr
@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(_conds)
def test_cheap_first_gives_the_interpreters_value(text):
    """cheap_first (model-free operands of and/or first) gives the interpreter's value, type
    included; it may make fewer model calls, never other ones."""
    if len(text) > X.MAX_LENGTH:
        return
    try:
        e = X.parse(text, X.Context(("tone_hi",), cue_var=True))
    except X.ExprError:
        return
    for seed in range(2 * len(_VariedEnv.VALUES)):
        a, b = _VariedEnv(seed), _VariedEnv(seed)
        fast = _outcome(lambda: X.cheap_first(e)(a))
        slow = _outcome(lambda: X._Eval(e, b, None).run(e.tree))
        assert type(fast) is type(slow) and (fast == slow or (fast != fast and slow != slow)), seed
        assert set(a.calls) <= set(_all_calls(e, seed))


def _all_calls(e, seed):
    """Every env call of e's tree, each operand evaluated (no short circuit)."""
    env = _VariedEnv(seed)
    for node in _walk(e.tree):
        if isinstance(node, (X.Call, X.Name)):
            try:
                X._Eval(e, env, None).run(node)
            except Exception:
                pass
    return env.calls


def _walk(n):
    import dataclasses

    yield n
    for f in dataclasses.fields(n):
        v = getattr(n, f.name)
        for x in (v if isinstance(v, tuple) else (v,)):
            if isinstance(x, X.Node):
                yield from _walk(x)


def test_cheap_first_skips_the_model_when_a_counter_decides():
    """A criterion that asks a model first and a counter second asks the model only once the
    counter holds; its explanation keeps the file's order."""
    e = X.parse("p_respond(tone_hi) >= 0.5 and trials_in_stage >= 80", X.Context(("tone_hi",)))

    class Counting(X.Env):
        def __init__(self, trials):
            self.trials, self.calls = trials, []

        def name(self, name):
            return float(self.trials)

        def call(self, func, args):
            self.calls.append(func)
            return 0.9

    early, late = Counting(10), Counting(90)
    assert X.cheap_first(e)(early) is False and early.calls == []
    assert X.cheap_first(e)(late) is True and late.calls == ["p_respond"]
    value, seen = X.evaluate(e, Counting(90))
    assert value is True and seen[0].startswith("p_respond(tone_hi)")


def test_remainder_of_an_infinity_is_nan_not_an_error():
    """Runtime arithmetic never raises: inf % 2 (math.fmod's domain error) gives NaN, and NaN
    compares false, so a criterion reading an infinite quantity simply does not hold."""
    from rigloop.rules.expr import _arith

    assert math.isnan(_arith("%", math.inf, 2.0)) and math.isnan(_arith("%", -math.inf, 2.0))
    assert math.isnan(_arith("%", 1.0, math.nan)) and _arith("%", 7.0, 3.0) == 1.0
