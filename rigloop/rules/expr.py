"""The rule-file expression language: parse, check, evaluate. Never eval/exec.

A criterion such as ``p_value_above(tone_hi, 0.6) >= 0.95 and trials_in_block >= 40``
is parsed by :func:`ast.parse` (mode ``eval``) only as a tokeniser; the Python tree is
walked once, every node is checked against a whitelist and converted into this
module's own small node types, and the result is type-checked against a fixed table
of names and functions. Evaluation is a tiny interpreter over that checked tree; the
unexplained test of a criterion, run on every trial, uses the same tree turned once
into nested Python closures (still no eval/exec).

Grammar (Python syntax, a strict subset):
  numbers, ``true``/``false``, ``+ - * / %``, ``**`` with a constant exponent,
  comparisons (chains allowed), ``and``/``or``/``not``, parentheses, and calls of the
  functions in :data:`FUNCTIONS`. Cue ids appear as bare identifiers (``tone_hi``) or
  strings (``"tone_hi"``); ``all`` means every condition.

Runtime arithmetic never raises: a division by zero gives NaN, an overflow gives
infinity, and every comparison involving NaN is false.
"""

from __future__ import annotations

import ast
import math
import operator
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field

NUM = "number"
BOOL = "true/false"

MAX_LENGTH = 400  # characters per expression
MAX_DEPTH = 24  # nesting depth of the checked tree
MAX_EXPONENT = 8  # |e| for a ** e
MAX_CONSTANT = 1e9  # |c| for any numeric constant
MAX_ARGS = 8

INF = math.inf


# --------------------------------------------------------------------------- vocabulary


@dataclass(frozen=True, slots=True)
class NameSpec:
    """A name the expressions can read: its type, range and meaning."""

    type: str
    lo: float
    hi: float
    doc: str


@dataclass(frozen=True, slots=True)
class FuncSpec:
    """A function: argument kinds (``cue``, ``cond``, ``number``), how many are optional."""

    args: tuple[str, ...]
    optional: int
    returns: str
    lo: float
    hi: float
    doc: str
    variadic: bool = False


_P = (0.0, 1.0)

NAMES: dict[str, NameSpec] = {
    "trials_in_block": NameSpec(NUM, 0, INF, "trials finished in the current block"),
    "trials_in_stage": NameSpec(NUM, 0, INF, "trials finished in the current stage"),
    "trials_in_session": NameSpec(NUM, 0, INF, "trials finished in this session"),
    "blocks_in_stage": NameSpec(NUM, 0, INF, "blocks completed in the current stage"),
    "sessions_in_stage": NameSpec(NUM, 0, INF, "sessions begun in the current stage (this one included)"),
    "correct_in_block": NameSpec(NUM, 0, INF, "correct trials in the current block"),
    "session_min": NameSpec(NUM, 0, INF, "minutes since the session opened (to the end of the last trial)"),
    "ul_session": NameSpec(NUM, 0, INF, "µL delivered this session"),
    "ul_today": NameSpec(NUM, 0, INF, "µL delivered today (UTC day), all sessions"),
    "misses_in_row": NameSpec(NUM, 0, INF, "trials in a row without a response (omissions, go-cue misses)"),
    "unrewarded_in_row": NameSpec(NUM, 0, INF, "trials in a row without reward"),
    "hits": NameSpec(NUM, 0, INF, "go-cue trials answered, this block"),
    "misses": NameSpec(NUM, 0, INF, "go-cue trials not answered, this block"),
    "false_alarms": NameSpec(NUM, 0, INF, "no-go-cue trials answered, this block"),
    "correct_rejections": NameSpec(NUM, 0, INF, "no-go-cue trials withheld, this block"),
    "dprime": NameSpec(NUM, -INF, INF, "d' this block from hits and false alarms (log-linear correction)"),
    "bias_c": NameSpec(NUM, -INF, INF, "response criterion c this block (log-linear correction)"),
    "sprt_accept": NameSpec(BOOL, 0, 1, "the block's sequential test passed: 'performing at p1' (stays until "
                                        "the block changes)"),
    "sprt_reject": NameSpec(BOOL, 0, 1, "the block's Wald test just accepted 'performing at p0' (it restarts on "
                                        "the next trial it counts; never true for cusum and power_one)"),
    "sprt_llr": NameSpec(NUM, -INF, INF, "the block's sequential statistic (CUSUM value, or log-likelihood ratio)"),
    "difficulty": NameSpec(NUM, -INF, INF, "the block's staircase level"),
    "reversals": NameSpec(NUM, 0, INF, "reversals of the block's staircase"),
    "right_bias": NameSpec(NUM, 0, 1, "recent fraction of 'right' choices (two-choice tasks)"),
    "side_bias": NameSpec(NUM, -0.5, 0.5, "mean over two-choice cues of the estimated P(right | cue), minus 0.5 "
                                          "(> 0: the animal leans right)"),
    "true": NameSpec(BOOL, 0, 1, "the constant true"),
    "false": NameSpec(BOOL, 0, 1, "the constant false"),
}

FUNCTIONS: dict[str, FuncSpec] = {
    "value": FuncSpec(("cue",), 0, NUM, -INF, INF, "posterior mean value of a cue at its onset"),
    "sd": FuncSpec(("cue",), 0, NUM, 0, INF, "posterior sd of a cue's value (0 for point learners)"),
    "p_value_above": FuncSpec(("cue", "number"), 0, NUM, *_P, "P(value of a cue > threshold)"),
    "p_correct": FuncSpec(("cond",), 0, NUM, *_P, "estimated P(correct) for a cue, or all"),
    "p_lower": FuncSpec(("cond", "level"), 1, NUM, *_P, "lower end of the two-sided credible interval (level 0.95)"),
    "p_upper": FuncSpec(("cond", "level"), 1, NUM, *_P, "upper end of the two-sided credible interval (level 0.95)"),
    "p_above_chance": FuncSpec(("cond",), 0, NUM, *_P, "P(response probability > chance)"),
    # the animal's own behaviour per cue (rigloop.behaviour): what it does, not what the task pays
    "p_respond": FuncSpec(("rcue",), 0, NUM, *_P, "estimated P(the animal responds to a go/no-go cue) on its next trial"),
    "p_respond_lower": FuncSpec(("rcue", "level"), 1, NUM, *_P,
                                "lower end of the two-sided credible interval of p_respond (level 0.95)"),
    "p_respond_upper": FuncSpec(("rcue", "level"), 1, NUM, *_P,
                                "upper end of the two-sided credible interval of p_respond (level 0.95)"),
    "p_right": FuncSpec(("ccue",), 0, NUM, *_P, "estimated P(the animal chooses right | a two-choice cue)"),
    "p_right_lower": FuncSpec(("ccue", "level"), 1, NUM, *_P,
                              "lower end of the two-sided credible interval of p_right (level 0.95)"),
    "p_right_upper": FuncSpec(("ccue", "level"), 1, NUM, *_P,
                              "upper end of the two-sided credible interval of p_right (level 0.95)"),
    "p_discriminates": FuncSpec(("bcue", "bcue", "margin"), 1, NUM, *_P,
                                "posterior probability that the animal responds to the first cue more often than to "
                                "the second by more than margin (default 0): it tells them apart"),
    "dprime_of": FuncSpec(("bcue", "bcue"), 0, NUM, -INF, INF,
                          "behavioural d' of the first cue (go, or right) against the second, from the estimates"),
    "dprime_lower": FuncSpec(("bcue", "bcue", "level"), 1, NUM, -INF, INF,
                             "lower end of the two-sided credible interval of dprime_of (level 0.95)"),
    "dprime_upper": FuncSpec(("bcue", "bcue", "level"), 1, NUM, -INF, INF,
                             "upper end of the two-sided credible interval of dprime_of (level 0.95)"),
    "min": FuncSpec(("number", "number"), 0, NUM, -INF, INF, "smallest of its numbers", variadic=True),
    "max": FuncSpec(("number", "number"), 0, NUM, -INF, INF, "largest of its numbers", variadic=True),
    "abs": FuncSpec(("number",), 0, NUM, 0, INF, "absolute value"),
}

# Python node types we name in errors, so a rejection says what was tried.
_FORBIDDEN = {
    ast.Attribute: "attribute access (a.b)",
    ast.Subscript: "subscripts (a[b])",
    ast.Lambda: "lambda",
    ast.ListComp: "comprehensions",
    ast.SetComp: "comprehensions",
    ast.DictComp: "comprehensions",
    ast.GeneratorExp: "comprehensions",
    ast.IfExp: "conditional expressions (a if b else c)",
    ast.List: "lists",
    ast.Tuple: "tuples",
    ast.Dict: "dicts",
    ast.Set: "sets",
    ast.JoinedStr: "f-strings",
    ast.FormattedValue: "f-strings",
    ast.NamedExpr: "assignment (:=)",
    ast.Starred: "starred arguments",
    ast.Await: "await",
    ast.Yield: "yield",
    ast.YieldFrom: "yield",
    ast.Slice: "slices",
}

_BINOPS = {ast.Add: "+", ast.Sub: "-", ast.Mult: "*", ast.Div: "/", ast.Mod: "%", ast.Pow: "**"}
_CMPOPS = {ast.Eq: "==", ast.NotEq: "!=", ast.Lt: "<", ast.LtE: "<=", ast.Gt: ">", ast.GtE: ">="}


# --------------------------------------------------------------------------- checked tree


@dataclass(frozen=True, slots=True)
class Node:
    """Base of the checked tree; ``col``/``end`` locate it in ``Expr.text``."""

    col: int
    end: int


@dataclass(frozen=True, slots=True)
class Const(Node):
    value: float | bool


@dataclass(frozen=True, slots=True)
class CueRef(Node):
    """A cue id (or ``all``, or the per-cue placeholder ``cue``) passed to a function."""

    cue: str


@dataclass(frozen=True, slots=True)
class Name(Node):
    name: str


@dataclass(frozen=True, slots=True)
class Call(Node):
    func: str
    args: tuple[Node, ...]


@dataclass(frozen=True, slots=True)
class Unary(Node):
    op: str  # '-', '+', 'not'
    operand: Node


@dataclass(frozen=True, slots=True)
class Binary(Node):
    op: str
    left: Node
    right: Node


@dataclass(frozen=True, slots=True)
class BoolOp(Node):
    op: str  # 'and' | 'or'
    values: tuple[Node, ...]


@dataclass(frozen=True, slots=True)
class Compare(Node):
    ops: tuple[str, ...]
    operands: tuple[Node, ...]


@dataclass(frozen=True, slots=True)
class Expr:
    """A checked expression: its source text, tree and result type."""

    text: str
    tree: Node
    type: str

    def source(self, node: Node) -> str:
        return self.text[node.col : node.end]

    def names_used(self) -> set[str]:
        out: set[str] = set()
        stack = [self.tree]
        while stack:
            node = stack.pop()
            if isinstance(node, Name):
                out.add(node.name)
            elif isinstance(node, Call):
                out.add(node.func + "()")
                stack.extend(node.args)
            elif isinstance(node, Unary):
                stack.append(node.operand)
            elif isinstance(node, Binary):
                stack += [node.left, node.right]
            elif isinstance(node, (BoolOp,)):
                stack.extend(node.values)
            elif isinstance(node, Compare):
                stack.extend(node.operands)
        return out


# --------------------------------------------------------------------------- problems


@dataclass(frozen=True, slots=True)
class Problem:
    """One fault in one expression: message, location, and what is allowed there."""

    message: str
    col: int
    end: int
    hint: str = ""

    def render(self, path: str, text: str) -> str:
        """The multi-line message: key path, the expression, a caret under the fault."""
        width = max(1, self.end - self.col)
        lines = [f"{path}: {self.message}", f"      {text}", "      " + " " * self.col + "^" * width]
        if self.hint:
            lines.append(f"    {self.hint}")
        return "\n".join(lines)


@dataclass(frozen=True)
class Context:
    """What an expression at one place in the file may name.

    ``cues``: cue ids of the file. ``cue_var``: the per-cue placeholder ``cue`` is
    allowed (policy parameters evaluated for the cue being offered). ``unavailable``:
    names that exist but mean nothing here, with the reason.
    """

    cues: tuple[str, ...]
    cue_var: bool = False
    unavailable: Mapping[str, str] = field(default_factory=dict)
    choice_cues: frozenset[str] = frozenset()  # two-choice cues (roles left/right); the rest respond or not


def allowed_hint(kind: str = "all") -> str:
    funcs = "allowed functions: " + ", ".join(FUNCTIONS)
    names = "allowed names: " + ", ".join(NAMES)
    if kind == "functions":
        return funcs
    if kind == "names":
        return names
    return funcs + "\n    " + names


class ExprError(ValueError):
    """Raised by :func:`parse` with every problem found in one expression."""

    def __init__(self, text: str, problems: list[Problem]):
        self.text = text
        self.problems = problems
        super().__init__("; ".join(p.message for p in problems))

    def render(self, path: str) -> list[str]:
        return [p.render(path, self.text) for p in self.problems]


# --------------------------------------------------------------------------- parse + check


def parse(text: str, ctx: Context, expect: str = BOOL) -> Expr:
    """Parse and check ``text``; raise :class:`ExprError` listing every fault.

    ``expect`` is the type the whole expression must have (``BOOL`` for criteria,
    ``NUM`` for policy parameters).
    """
    if not isinstance(text, str):
        raise ExprError(repr(text), [Problem(f"must be an expression in a string (got {type(text).__name__})", 0, 1)])
    if not text.strip():
        raise ExprError(text, [Problem("is an empty expression", 0, 1)])
    if len(text) > MAX_LENGTH:
        raise ExprError(text[:60] + "...", [Problem(f"is too long ({len(text)} characters; at most {MAX_LENGTH})", 0, 1)])
    for i, ch in enumerate(text):
        if not ch.isprintable():
            return _raise_one(text, f"contains a control character {ch!r}; an expression is one printable line", i, i + 1)
    try:
        tree = ast.parse(text, mode="eval")
    except SyntaxError as err:
        col = max(0, (err.offset or 1) - 1) if (err.lineno or 1) == 1 else 0
        col = min(col, max(0, len(text) - 1))
        return _raise_one(text, f"is not a valid expression ({err.msg})", col, col + 1)
    except (ValueError, RecursionError, MemoryError) as err:  # null bytes, pathological input
        return _raise_one(text, f"is not a valid expression ({type(err).__name__})", 0, 1)
    checker = _Checker(text, ctx)
    node, typ = checker.convert(tree.body, 0)
    if not checker.problems and node is not None and typ != expect:
        if expect == BOOL:
            msg = "must be a condition (true/false), but this gives a number; compare it, e.g. '... >= 0.9'"
        else:
            msg = "must give a number, but this is a condition (true/false)"
        checker.problems.append(Problem(msg, 0, len(text)))
    if checker.problems:
        raise ExprError(text, checker.problems)
    return Expr(text, node, typ)


def _raise_one(text: str, msg: str, col: int, end: int, hint: str = ""):
    raise ExprError(text, [Problem(msg, col, end, hint)])


def _span(n: ast.AST, text: str) -> tuple[int, int]:
    col = getattr(n, "col_offset", 0) or 0
    end = getattr(n, "end_col_offset", None)
    if getattr(n, "end_lineno", 1) != getattr(n, "lineno", 1) or end is None:
        end = len(text)
    return col, max(end, col + 1)


class _Checker:
    """Walks a Python ast once: whitelist, convert, and type-check; collects problems."""

    def __init__(self, text: str, ctx: Context):
        self.text = text
        self.ctx = ctx
        self.problems: list[Problem] = []

    def fail(self, n: ast.AST, msg: str, hint: str = "") -> tuple[None, str | None]:
        col, end = _span(n, self.text)
        self.problems.append(Problem(msg, col, end, hint))
        return None, None

    def convert(self, n: ast.AST, depth: int) -> tuple[Node | None, str | None]:
        if depth > MAX_DEPTH:
            return self.fail(n, f"is nested too deeply (more than {MAX_DEPTH} levels)")
        col, end = _span(n, self.text)
        for kind, what in _FORBIDDEN.items():
            if isinstance(n, kind):
                return self.fail(n, f"{what} not allowed in rule expressions")
        if isinstance(n, ast.Constant):
            return self._const(n, n.value, col, end)
        if isinstance(n, ast.Name):
            return self._name(n, col, end)
        if isinstance(n, ast.UnaryOp):
            if isinstance(n.op, ast.USub) and isinstance(n.operand, ast.Constant) and _is_number(n.operand.value):
                return self._const(n, -n.operand.value, col, end)
            sub, typ = self.convert(n.operand, depth + 1)
            if isinstance(n.op, ast.Not):
                if typ == NUM:
                    return self.fail(n.operand, "'not' needs a condition (true/false), but this is a number")
                return (Unary(col, end, "not", sub) if sub else None), BOOL
            if isinstance(n.op, (ast.USub, ast.UAdd)):
                if typ == BOOL:
                    return self.fail(n.operand, "a sign needs a number, but this is a condition (true/false)")
                return (Unary(col, end, "-" if isinstance(n.op, ast.USub) else "+", sub) if sub else None), NUM
            return self.fail(n, "bitwise operators are not allowed; use 'not'")
        if isinstance(n, ast.BinOp):
            return self._binop(n, depth, col, end)
        if isinstance(n, ast.BoolOp):
            op = "and" if isinstance(n.op, ast.And) else "or"
            values, ok = [], True
            for v in n.values:
                sub, typ = self.convert(v, depth + 1)
                if typ == NUM:
                    self.fail(v, f"'{op}' joins conditions (true/false), but this is a number")
                    ok = False
                values.append(sub)
                ok = ok and sub is not None
            return (BoolOp(col, end, op, tuple(values)) if ok else None), BOOL
        if isinstance(n, ast.Compare):
            return self._compare(n, depth, col, end)
        if isinstance(n, ast.Call):
            return self._call(n, depth, col, end)
        return self.fail(n, f"'{self.text[col:end]}' is not allowed in rule expressions", allowed_hint())

    def _const(self, n, value, col, end):
        if isinstance(value, bool):
            return Const(col, end, value), BOOL
        if _is_number(value):
            v = float(value)
            if not math.isfinite(v) or abs(v) > MAX_CONSTANT:
                return self.fail(n, f"out-of-range constant {self.text[col:end]} (numbers must be within ±{MAX_CONSTANT:g})")
            return Const(col, end, v), NUM
        if isinstance(value, str):
            return self.fail(n, "a string can only name a cue inside a function call, e.g. value(\"tone_hi\")")
        return self.fail(n, f"constant {self.text[col:end]} is not allowed (numbers and true/false only)")

    def _name(self, n: ast.Name, col, end):
        name = n.id
        if name in self.ctx.unavailable:
            return self.fail(n, f"'{name}' {self.ctx.unavailable[name]}")
        if name in NAMES:
            spec = NAMES[name]
            if name in ("true", "false"):
                return Const(col, end, name == "true"), BOOL
            return Name(col, end, name), spec.type
        if name in self.ctx.cues or name == "all" or (name == "cue" and self.ctx.cue_var):
            return self.fail(n, f"'{name}' is a cue, not a number; use it inside a function, e.g. value({name})",
                             allowed_hint("functions"))
        if name in FUNCTIONS:
            return self.fail(n, f"'{name}' is a function; call it, e.g. {name}(...)")
        return self.fail(n, f"unknown name '{name}'", allowed_hint())

    def _binop(self, n: ast.BinOp, depth, col, end):
        op = _BINOPS.get(type(n.op))
        if op is None:
            return self.fail(n, "bitwise and matrix operators are not allowed (use + - * / % **)")
        left, lt = self.convert(n.left, depth + 1)
        if op == "**":
            exp = n.right
            value = None
            if isinstance(exp, ast.Constant) and _is_number(exp.value):
                value = exp.value
            elif (isinstance(exp, ast.UnaryOp) and isinstance(exp.op, ast.USub)
                  and isinstance(exp.operand, ast.Constant) and _is_number(exp.operand.value)):
                value = -exp.operand.value
            if value is None or not math.isfinite(float(value)) or abs(value) > MAX_EXPONENT:
                return self.fail(exp, f"an exponent must be a number constant between -{MAX_EXPONENT} and {MAX_EXPONENT}")
            rc, re_ = _span(exp, self.text)
            right, rt = Const(rc, re_, float(value)), NUM
        else:
            right, rt = self.convert(n.right, depth + 1)
        for side, typ in ((n.left, lt), (n.right, rt)):
            if typ == BOOL:
                self.fail(side, f"'{op}' needs numbers, but this is a condition (true/false)")
                return None, NUM
        if left is None or right is None:
            return None, NUM
        return Binary(col, end, op, left, right), NUM

    def _compare(self, n: ast.Compare, depth, col, end):
        ops = []
        for o in n.ops:
            sym = _CMPOPS.get(type(o))
            if sym is None:
                return self.fail(n, "'in', 'not in', 'is' and 'is not' are not allowed; compare numbers with < <= > >= == !=")
            ops.append(sym)
        raw = [n.left, *n.comparators]
        operands, types = [], []
        for r in raw:
            sub, typ = self.convert(r, depth + 1)
            operands.append(sub)
            types.append(typ)
        if None in operands:
            return None, BOOL
        for i, sym in enumerate(ops):
            a, b = types[i], types[i + 1]
            if a == BOOL and b == BOOL and sym in ("==", "!="):
                continue
            if a != NUM or b != NUM:
                bad = raw[i] if a != NUM else raw[i + 1]
                self.fail(bad, f"'{sym}' compares numbers, but this is a condition (true/false)")
                return None, BOOL
            self._range(operands[i], operands[i + 1], raw[i + 1])
            self._range(operands[i + 1], operands[i], raw[i])
        return Compare(col, end, tuple(ops), tuple(operands)), BOOL

    def _range(self, quantity: Node, const: Node, const_raw: ast.AST) -> None:
        """A constant outside the range of the quantity it is compared with is an error."""
        if not isinstance(const, Const) or isinstance(const.value, bool):
            return
        if isinstance(quantity, Name):
            spec = NAMES[quantity.name]
            lo, hi, what = spec.lo, spec.hi, quantity.name
        elif isinstance(quantity, Call):
            spec = FUNCTIONS[quantity.func]
            lo, hi, what = spec.lo, spec.hi, self.text[quantity.col : quantity.end]
        else:
            return
        if not lo <= const.value <= hi:
            rng = "a probability in [0, 1]" if (lo, hi) == _P else f"in [{_fmt_bound(lo)}, {_fmt_bound(hi)}]"
            self.fail(const_raw, f"out-of-range constant {self.text[const.col:const.end]}: {what} is {rng}")

    def _call(self, n: ast.Call, depth, col, end):
        if not isinstance(n.func, ast.Name):
            what = next((w for k, w in _FORBIDDEN.items() if isinstance(n.func, k)), None)
            if what is not None:
                return self.fail(n.func, f"{what} not allowed in rule expressions")
            return self.fail(n.func, "only the listed functions can be called", allowed_hint("functions"))
        fname = n.func.id
        spec = FUNCTIONS.get(fname)
        if spec is None:
            return self.fail(n.func, f"unknown function '{fname}'", allowed_hint("functions"))
        for a in n.args:
            if isinstance(a, ast.Starred):
                return self.fail(a, "starred arguments not allowed in rule expressions")
        if n.keywords:
            return self.fail(n.keywords[0].value, f"{fname}() takes no keyword arguments")
        nargs = len(n.args)
        if spec.variadic:
            if not 2 <= nargs <= MAX_ARGS:
                return self.fail(n, f"{fname}() takes 2 to {MAX_ARGS} numbers (got {nargs})")
            kinds = ["number"] * nargs
        else:
            most, least = len(spec.args), len(spec.args) - spec.optional
            if not least <= nargs <= most:
                want = f"{least}" if least == most else f"{least} or {most}"
                sig = ", ".join(spec.args[:least]) + (", [" + ", ".join(spec.args[least:]) + "]" if spec.optional else "")
                return self.fail(n, f"{fname}() takes {want} argument{'s' if most != 1 else ''} ({sig}), got {nargs}")
            kinds = list(spec.args[:nargs])
        args: list[Node | None] = []
        for a, kind in zip(n.args, kinds):
            args.append(self._arg(fname, a, kind, depth))
        if any(a is None for a in args):
            return None, spec.returns
        pair = [a.cue for a, kind in zip(args, kinds) if kind == "bcue" and a.cue != "cue"]
        if len(pair) == 2:
            if pair[0] == pair[1]:
                return self.fail(n, f"{fname}() compares two different cues (got {pair[0]} twice)")
            if (pair[0] in self.ctx.choice_cues) != (pair[1] in self.ctx.choice_cues):
                return self.fail(n, f"{fname}() compares two cues of one kind: {pair[0]} and {pair[1]} are one "
                                    "two-choice and one go/no-go cue")
        return Call(col, end, fname, tuple(args)), spec.returns

    def _arg(self, fname: str, a: ast.AST, kind: str, depth: int) -> Node | None:
        col, end = _span(a, self.text)
        if kind in _CUE_KINDS:
            return self._behaviour_cue(fname, a, kind, col, end)
        if kind in ("cue", "cond"):
            cue = a.id if isinstance(a, ast.Name) else a.value if isinstance(a, ast.Constant) and isinstance(a.value, str) else None
            if cue is None:
                self.fail(a, f"{fname}() needs a cue id here" + (" or all" if kind == "cond" else ""))
                return None
            ok = cue in self.ctx.cues or (kind == "cond" and cue == "all") or (cue == "cue" and self.ctx.cue_var)
            if not ok:
                allowed = list(self.ctx.cues) + (["all"] if kind == "cond" else []) + (["cue"] if self.ctx.cue_var else [])
                self.fail(a, f"unknown cue '{cue}'", "allowed cues: " + (", ".join(allowed) or "(none declared)"))
                return None
            return CueRef(col, end, cue)
        node, typ = self.convert(a, depth + 1)
        if typ == BOOL:
            self.fail(a, f"{fname}() needs a number here, but this is a condition (true/false)")
            return None
        if kind == "level" and isinstance(node, Const) and not 0.0 < node.value < 1.0:
            self.fail(a, f"out-of-range constant {self.text[col:end]}: a credible level is in (0, 1), e.g. 0.95")
            return None
        if kind == "margin" and isinstance(node, Const) and not 0.0 <= node.value < 1.0:
            self.fail(a, f"out-of-range constant {self.text[col:end]}: a margin between response probabilities "
                         "is in [0, 1), e.g. 0.3")
            return None
        return node

    def _behaviour_cue(self, fname: str, a: ast.AST, kind: str, col: int, end: int) -> Node | None:
        """A cue argument of a behaviour function: a go/no-go cue (``rcue``), a two-choice
        cue (``ccue``), or either (``bcue``; a call's two cues must then be of one kind)."""
        cue = a.id if isinstance(a, ast.Name) else a.value if isinstance(a, ast.Constant) and isinstance(a.value, str) else None
        if cue is None:
            self.fail(a, f"{fname}() needs a cue id here")
            return None
        if cue == "cue" and self.ctx.cue_var:
            return CueRef(col, end, cue)
        if cue not in self.ctx.cues:
            allowed = list(self.ctx.cues) + (["cue"] if self.ctx.cue_var else [])
            self.fail(a, f"unknown cue '{cue}'", "allowed cues: " + (", ".join(allowed) or "(none declared)"))
            return None
        choice = cue in self.ctx.choice_cues
        if kind == "rcue" and choice:
            self.fail(a, f"'{cue}' is a two-choice cue: the animal chooses a side, it does not respond or withhold; "
                         f"use p_right({cue})")
            return None
        if kind == "ccue" and not choice:
            self.fail(a, f"'{cue}' is not a two-choice cue (role left or right); use p_respond({cue})")
            return None
        return CueRef(col, end, cue)


_CUE_KINDS = ("rcue", "ccue", "bcue")  # the cue arguments of the behaviour functions


def _is_number(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool)


def _fmt_bound(x: float) -> str:
    return "inf" if x == INF else "-inf" if x == -INF else fmt(x)


# --------------------------------------------------------------------------- evaluation


class Env:
    """What evaluation reads. Subclasses answer names and functions."""

    __slots__ = ()

    def name(self, name: str) -> float | bool:  # pragma: no cover - interface
        raise NotImplementedError

    def call(self, func: str, args: Sequence[float | str]) -> float:  # pragma: no cover - interface
        raise NotImplementedError


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


def explain_if(expr: Expr, env: Env) -> tuple[bool, list[str]]:
    """(True, what it saw) when a criterion holds, else (False, []): cheap when it fails."""
    if not _evaluator(expr)(env):
        return False, []
    return evaluate(expr, env)


class _Eval:
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
        if n.func == "min":
            return min(args)
        if n.func == "max":
            return max(args)
        if n.func == "abs":
            return abs(args[0])
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
# _Eval without phrases; _Eval stays the one path that explains.

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
    func = n.func
    if all(isinstance(a, CueRef | Const) for a in n.args):
        # cue ids and constants only: the same list every time (a new one per call)
        fixed = tuple(a.cue if isinstance(a, CueRef) else float(a.value) for a in n.args)
        if func not in ("min", "max", "abs"):
            return lambda env: float(env.call(func, list(fixed)))

        def args_of(env) -> list:
            return list(fixed)
    else:

        def args_of(env) -> list:
            return [cue if run is None else float(run(env)) for cue, run in parts]

    if func == "min":
        return lambda env: min(args_of(env))
    if func == "max":
        return lambda env: max(args_of(env))
    if func == "abs":
        return lambda env: abs(args_of(env)[0])
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
            if n.ops[0] != "!=":
                # NaN compares false by itself under these operators
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
            return math.fmod(a, b) if b != 0 else math.nan
        if op == "**":
            if a == 0 and b < 0:
                return math.nan
            r = a**b
            return r if isinstance(r, float) else math.nan  # a negative base with a fractional power
    except OverflowError:
        return math.inf
    raise ValueError(op)  # pragma: no cover


_COMPARE = {"==": operator.eq, "!=": operator.ne, "<": operator.lt, "<=": operator.le, ">": operator.gt,
            ">=": operator.ge}


def _cmp(op: str, a, b) -> bool:
    if isinstance(a, float) and math.isnan(a) or isinstance(b, float) and math.isnan(b):
        return False
    return _COMPARE[op](a, b)


def fmt(x) -> str:
    """A number as a reason shows it: integers plain, others to 3 decimals (or 3 significant)."""
    if isinstance(x, bool):
        return "true" if x else "false"
    x = float(x)
    if math.isnan(x):
        return "nan"
    if math.isinf(x):
        return "inf" if x > 0 else "-inf"
    if x == int(x) and abs(x) < 1e12:
        return str(int(x))
    if abs(x) >= 0.001:
        return f"{x:.3f}".rstrip("0").rstrip(".")
    return f"{x:.3g}"


def constant(expr: Expr) -> float | None:
    """The value of an expression that is a bare number, else None."""
    return float(expr.tree.value) if isinstance(expr.tree, Const) and not isinstance(expr.tree.value, bool) else None


Lookup = Callable[[str], float]
