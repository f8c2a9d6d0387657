"""Run a checked expression: the interpreter that explains, and the compiled form that tests.

:func:`evaluate` walks the checked tree with :class:`_Eval` and says what it saw, one
phrase per comparison or condition. The engine tests every criterion on every trial but
needs the words only for the one that holds, so each checked tree is also turned once
into nested Python closures (still no eval/exec) that give the same value with the same
env calls in the same order -- except that a d' bound or ``p_discriminates`` compared
with a constant is asked of the env as a comparison (``Env.compare_call``), which it may
answer without computing the value; :class:`_Eval` stays the readable reference of what they compute
(``tests/test_rules_expr.py`` holds the two equal on random expressions).

Runtime arithmetic never raises: a division by zero gives NaN, an overflow gives
infinity, and every comparison involving NaN is false.
"""

from __future__ import annotations

import dataclasses
import math
import operator
from collections.abc import Callable, Sequence

from .show import fmt
from .tree import Binary, BoolOp, Call, Compare, Const, CueRef, Expr, Name, Node, Unary
from .vocab import BOOL

# --------------------------------------------------------------------------- evaluation


class Env:
    """What evaluation reads. Subclasses answer names and functions."""

    __slots__ = ()

    def name(self, name: str) -> float | bool:  # pragma: no cover - interface
        raise NotImplementedError

    def call(self, func: str, args: Sequence[float | str]) -> float:  # pragma: no cover - interface
        raise NotImplementedError

    def compare_call(self, func: str, args: list, op: str, c: float) -> bool | None:
        """``call(func, args) <op> c`` (NaN false) when the env can answer that more cheaply
        than it can give the value, else None. Only the compiled test of a criterion asks
        (for the functions in ``COMPARED_CALLS``, a constant ``c``, op one of < <= > >=); an
        env answers only what comparing the value would answer."""
        return None


def evaluate(expr: Expr, env: Env, *, explain: bool = True) -> tuple[float | bool, list[str]]:
    """Evaluate a checked expression; return (value, what it saw).

    What it saw is one short phrase per comparison or condition evaluated, with the
    numbers: ``"p_value_above(tone_hi, 0.6) = 0.973 >= 0.95"``. With ``explain=False``
    no phrases are made (an empty list comes back): the engine tests every criterion on
    every trial but needs the words only for the one that fires, and evaluation is pure,
    so it evaluates that one again to explain it.
    """
    if not explain:
        return _evaluator(expr)(env), []
    seen: list[str] = []
    value = _Eval(expr, env, seen).run(expr.tree)
    if not seen and expr.type == BOOL:
        seen.append(f"{expr.text} = {fmt(value)}")
    return value, seen


def compiled(expr: Expr) -> Callable[[Env], float | bool]:
    """The test :func:`explain_if` runs first: a function of the env giving the value
    ``evaluate(expr, env, explain=False)`` gives (made once per expression)."""
    return _evaluator(expr)


def cheap_first(expr: Expr) -> Callable[[Env], float | bool]:
    """:func:`compiled` with the operands of every ``and`` / ``or`` reordered so that those
    reading no model (counters, constants, clock) run before those that ask the view: the
    same value, and a model's quadrature is skipped whenever a counter already decides
    (``dprime_lower(a, b) >= 1.0 and trials_in_stage >= 80`` computes no d' interval
    before trial 80). The order is the only change: every operand is pure and never
    raises (the checker admits known names only, arithmetic gives NaN or inf), so
    ``a and b`` and ``b and a`` agree. The engine's tests of criteria use it; their
    explanations still come from :func:`evaluate` in the file's order
    (``tests/test_rules_expr.py``: the same value as the interpreter on random expressions;
    gonogo_shaping's median step 1.8x faster, old and new code stepped trial by trial in
    one process)."""
    hit = _CHEAP.get(id(expr))
    if hit is not None and hit[0] is expr:
        return hit[1]
    run = _compile(_cheap_first_tree(expr.tree))
    if len(_CHEAP) >= _COMPILED_MAX:
        _CHEAP.clear()
    _CHEAP[id(expr)] = (expr, run)
    return run


_CHEAP: dict[int, tuple[Expr, Callable]] = {}  # id(expr) -> (expr, cheap_first's evaluator)


def _reads_models(n: Node) -> bool:
    """Whether evaluating ``n`` asks the view: a model function, or ``side_bias``."""
    if isinstance(n, Call):
        return n.func not in _OWN or any(_reads_models(a) for a in n.args)
    if isinstance(n, Name):
        return n.name == "side_bias"
    return any(_reads_models(c) for c in _children(n))


def _children(n: Node) -> list[Node]:
    out: list[Node] = []
    for f in dataclasses.fields(n):
        v = getattr(n, f.name)
        if isinstance(v, Node):
            out.append(v)
        elif isinstance(v, tuple):
            out.extend(x for x in v if isinstance(x, Node))
    return out


def _cheap_first_tree(n: Node) -> Node:
    """``n`` with each BoolOp's operands in a stable order: model-free ones first."""
    changes = {}
    for f in dataclasses.fields(n):
        v = getattr(n, f.name)
        if isinstance(v, Node):
            changes[f.name] = _cheap_first_tree(v)
        elif isinstance(v, tuple) and any(isinstance(x, Node) for x in v):
            changes[f.name] = tuple(_cheap_first_tree(x) if isinstance(x, Node) else x for x in v)
    if isinstance(n, BoolOp):
        changes["values"] = tuple(sorted(changes["values"], key=_reads_models))
    return dataclasses.replace(n, **changes) if changes else n


def explain_if(expr: Expr, env: Env) -> tuple[bool, list[str]]:
    """(True, what it saw) when a criterion holds, else (False, []): cheap when it fails."""
    if not _evaluator(expr)(env):
        return False, []
    return evaluate(expr, env)


def _abs_first(args: list) -> float:
    return abs(args[0])


# the functions the language computes itself (the env answers the rest), for both paths
_OWN: dict[str, Callable[[list], float]] = {"min": min, "max": max, "abs": _abs_first}


class _Eval:
    """The interpreter over the checked tree: the readable reference of the compiled closures,
    and the one path that records phrases (into ``seen``, unless it is None)."""

    def __init__(self, expr: Expr, env: Env, seen: list[str]):
        self.expr, self.env, self.seen = expr, env, seen

    def run(self, n: Node):
        if isinstance(n, Const):
            return n.value
        if isinstance(n, Name):
            return self.env.name(n.name)
        if isinstance(n, Call):
            return self._call(n)
        if isinstance(n, Unary):
            v = self.run(n.operand)
            return (not v) if n.op == "not" else (-v if n.op == "-" else +v)
        if isinstance(n, Binary):
            return _arith(n.op, float(self.run(n.left)), float(self.run(n.right)))
        if isinstance(n, BoolOp):
            if n.op == "and":
                for v in n.values:
                    r = self._cond(v)
                    if not r:
                        return False
                return True
            for v in n.values:
                if self._cond(v):
                    return True
            return False
        if isinstance(n, Compare):
            return self._compare(n)
        raise TypeError(f"not a checked node: {n!r}")  # pragma: no cover - the checker forbids it

    def _cond(self, n: Node) -> bool:
        r = bool(self.run(n))
        if self.seen is not None and isinstance(n, (Name, Call, Unary)):
            self.seen.append(f"{self.expr.source(n)} = {fmt(r)}")
        return r

    def _call(self, n: Call) -> float:
        args = [a.cue if isinstance(a, CueRef) else float(self.run(a)) for a in n.args]
        own = _OWN.get(n.func)
        if own is not None:
            return own(args)
        return float(self.env.call(n.func, args))

    def _compare(self, n: Compare) -> bool:
        values = [self.run(o) for o in n.operands]
        if self.seen is None:
            return all(_cmp(op, values[i], values[i + 1]) for i, op in enumerate(n.ops))
        parts = []
        for node, v in zip(n.operands, values):
            text = self.expr.source(node)
            parts.append(text if isinstance(node, Const) else f"{text} = {fmt(v)}")
        result = True
        for i, op in enumerate(n.ops):
            if not _cmp(op, values[i], values[i + 1]):
                result = False
                break
        phrase = parts[0]
        for op, part in zip(n.ops, parts[1:]):
            phrase += f" {op} {part}"
        self.seen.append(phrase)
        return result


# --------------------------------------------------------------------------- compiled evaluation
#
# Criteria are tested on every trial and explained only when one holds. For the test,
# each checked tree is turned once into nested closures (plain Python functions, no
# eval) that make the same env calls in the same order and return the same values as
# _Eval without phrases (a d' bound or p_discriminates against a constant first offers the
# env the whole comparison: Env.compare_call); _Eval stays the one path that explains.

_COMPILED: dict[int, tuple[Expr, Callable]] = {}  # id(expr) -> (expr, its evaluator)
_COMPILED_MAX = 1024


def _evaluator(expr: Expr) -> Callable[[Env], float | bool]:
    """The compiled form of ``expr``, made on first use and kept (bounded, by identity)."""
    hit = _COMPILED.get(id(expr))
    if hit is not None and hit[0] is expr:
        return hit[1]
    run = _compile(expr.tree)
    if len(_COMPILED) >= _COMPILED_MAX:
        _COMPILED.clear()
    _COMPILED[id(expr)] = (expr, run)  # holding expr keeps its id from being reused
    return run


def _compile(n: Node) -> Callable[[Env], float | bool]:
    """A function of the env that gives what ``_Eval.run(n)`` gives without phrases."""
    if isinstance(n, Const):
        value = n.value
        return lambda env: value
    if isinstance(n, Name):
        name = n.name
        return lambda env: env.name(name)
    if isinstance(n, Call):
        return _compile_call(n)
    if isinstance(n, Unary):
        operand = _compile(n.operand)
        if n.op == "not":
            return lambda env: not operand(env)
        if n.op == "-":
            return lambda env: -operand(env)
        return lambda env: +operand(env)
    if isinstance(n, Binary):
        left, right, op = _compile(n.left), _compile(n.right), n.op
        return lambda env: _arith(op, float(left(env)), float(right(env)))
    if isinstance(n, BoolOp):
        return _compile_boolop(n)
    if isinstance(n, Compare):
        return _compile_compare(n)
    raise TypeError(f"not a checked node: {n!r}")  # pragma: no cover - the checker forbids it


def _compile_call(n: Call) -> Callable[[Env], float]:
    # arguments: a cue id as is, anything else as a float, left to right
    parts = tuple((a.cue, None) if isinstance(a, CueRef) else (None, _compile(a)) for a in n.args)
    func, own = n.func, _OWN.get(n.func)
    if all(isinstance(a, CueRef | Const) for a in n.args):
        # cue ids and constants only: the same list every time (a new one per call)
        fixed = tuple(a.cue if isinstance(a, CueRef) else float(a.value) for a in n.args)
        if own is None:
            return lambda env: float(env.call(func, list(fixed)))

        def args_of(env) -> list:
            return list(fixed)
    else:

        def args_of(env) -> list:
            return [cue if run is None else float(run(env)) for cue, run in parts]

    if own is not None:
        return lambda env: own(args_of(env))
    return lambda env: float(env.call(func, args_of(env)))


def _compile_boolop(n: BoolOp) -> Callable[[Env], bool]:
    parts = tuple(_compile(v) for v in n.values)
    if n.op == "and":

        def all_hold(env) -> bool:
            for run in parts:
                if not run(env):
                    return False
            return True

        return all_hold

    def any_holds(env) -> bool:
        for run in parts:
            if run(env):
                return True
        return False

    return any_holds


def _compile_compare(n: Compare) -> Callable[[Env], bool]:
    if len(n.ops) == 1:
        # every operand is evaluated, then compared; NaN on either side is false
        left, right, compare = _compile(n.operands[0]), n.operands[1], _COMPARE[n.ops[0]]
        if isinstance(right, Const):
            b = right.value  # a checked constant: finite
            asked = _compared_call(n.operands[0], n.ops[0], b)
            if asked is not None:
                op, func, fixed = asked

                def compare_asked(env) -> bool:
                    got = env.compare_call(func, list(fixed), op, b)
                    return bool(compare(left(env), b)) if got is None else got

                return compare_asked
            if n.ops[0] != "!=":
                # NaN compares false by itself under these operators
                if isinstance(n.operands[0], Name):  # a counter or clock against a constant: one call fewer
                    name = n.operands[0].name
                    return lambda env: bool(compare(env.name(name), b))
                return lambda env: bool(compare(left(env), b))

            def compare_const(env) -> bool:
                a = left(env)
                if isinstance(a, float) and math.isnan(a):
                    return False
                return bool(compare(a, b))

            return compare_const
        right_run = _compile(right)

        def compare_two(env) -> bool:
            a, b = left(env), right_run(env)
            if isinstance(a, float) and math.isnan(a) or isinstance(b, float) and math.isnan(b):
                return False
            return bool(compare(a, b))

        return compare_two
    runs, ops = tuple(_compile(o) for o in n.operands), n.ops

    def compare_chain(env) -> bool:
        values = [run(env) for run in runs]
        return all(_cmp(op, values[i], values[i + 1]) for i, op in enumerate(ops))

    return compare_chain


def _compared_call(left: Node, op: str, b) -> tuple[str, str, tuple] | None:
    """(op, func, fixed args) when ``left <op> b`` may be asked of the env as a comparison
    (``Env.compare_call``): a call in ``COMPARED_CALLS`` of cue ids and constants only."""
    if (op in ("<", "<=", ">", ">=") and isinstance(left, Call) and left.func in COMPARED_CALLS
            and all(isinstance(a, CueRef | Const) for a in left.args)):
        return op, left.func, tuple(a.cue if isinstance(a, CueRef) else float(a.value) for a in left.args)
    return None


def _arith(op: str, a: float, b: float) -> float:
    try:
        if op == "+":
            return a + b
        if op == "-":
            return a - b
        if op == "*":
            return a * b
        if op == "/":
            return a / b if b != 0 else math.nan
        if op == "%":
            # fmod(inf, b) raises a domain error: the remainder of an infinity is undefined, NaN
            return math.fmod(a, b) if b != 0 and not math.isinf(a) and not math.isnan(b) else math.nan
        if op == "**":
            if a == 0 and b < 0:
                return math.nan
            r = a**b
            return r if isinstance(r, float) else math.nan  # a negative base with a fractional power
    except OverflowError:
        return math.inf
    raise ValueError(op)  # pragma: no cover


# functions whose comparison with a constant an env may answer without the value (settled
# by closed-form bounds, or a quantile by one evaluation of its distribution function:
# core.behaviour.dprime_part_compared and p_difference_compared)
COMPARED_CALLS = frozenset({"dprime_lower", "dprime_upper", "p_discriminates"})

_COMPARE = {"==": operator.eq, "!=": operator.ne, "<": operator.lt, "<=": operator.le, ">": operator.gt,
            ">=": operator.ge}


def _cmp(op: str, a, b) -> bool:
    if isinstance(a, float) and math.isnan(a) or isinstance(b, float) and math.isnan(b):
        return False
    return _COMPARE[op](a, b)



Lookup = Callable[[str], float]
