"""Parse and check an expression: whitelist the Python tree, convert it into the checked
tree, type-check it against the vocabulary, and report every fault at once.

:func:`ast.parse` (mode ``eval``) serves only as a tokeniser; every Python node is
checked against a whitelist and converted into the nodes of :mod:`.tree`, so nothing of
the text is ever run. A fault is a :class:`Problem` with its place in the text; all of
one expression's problems come back together in an :class:`ExprError`.
"""

from __future__ import annotations

import ast
import math
from collections.abc import Mapping
from dataclasses import dataclass, field

from .show import fmt
from .tree import Binary, BoolOp, Call, Compare, Const, CueRef, Expr, Name, Node, Unary
from .vocab import (
    _P,
    BOOL,
    FUNCTIONS,
    INF,
    MAX_ARGS,
    MAX_CONSTANT,
    MAX_DEPTH,
    MAX_EXPONENT,
    MAX_LENGTH,
    NAMES,
    NUM,
    allowed_hint,
)

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


# --------------------------------------------------------------------------- problems


@dataclass(frozen=True, slots=True)
class Problem:
    """One fault in one expression: message, location, and what is allowed there."""

    message: str
    col: int
    end: int
    hint: str = ""
    cue: str = ""  # the unknown cue id this problem is about, if it is one

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
            cue = self._known_cue(fname, a, with_all=kind == "cond")
            return None if cue is None else CueRef(col, end, cue)
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
        cue = self._known_cue(fname, a, with_all=False)
        if cue is None:
            return None
        if cue == "cue" and self.ctx.cue_var:
            return CueRef(col, end, cue)
        choice = cue in self.ctx.choice_cues
        if kind == "rcue" and choice:
            self.fail(a, f"'{cue}' is a two-choice cue: the animal chooses a side, it does not respond or withhold; "
                         f"use p_right({cue})")
            return None
        if kind == "ccue" and not choice:
            self.fail(a, f"'{cue}' is not a two-choice cue (role left or right); use p_respond({cue})")
            return None
        return CueRef(col, end, cue)

    def _known_cue(self, fname: str, a: ast.AST, with_all: bool) -> str | None:
        """The cue id an argument names (an identifier or a string) when this place allows it
        (a declared cue, ``all`` where ``with_all``, ``cue`` where the context has it);
        else None, with the problem recorded."""
        if isinstance(a, ast.Name):
            cue = a.id
        elif isinstance(a, ast.Constant) and isinstance(a.value, str):
            cue = a.value
        else:
            self.fail(a, f"{fname}() needs a cue id here" + (" or all" if with_all else ""))
            return None
        if cue in self.ctx.cues or (with_all and cue == "all") or (cue == "cue" and self.ctx.cue_var):
            return cue
        allowed = list(self.ctx.cues) + (["all"] if with_all else []) + (["cue"] if self.ctx.cue_var else [])
        col, end = _span(a, self.text)
        self.problems.append(Problem(f"unknown cue '{cue}'", col, end,
                                     "allowed cues: " + (", ".join(allowed) or "(none declared)"), cue=cue))
        return None


_CUE_KINDS = ("rcue", "ccue", "bcue")  # the cue arguments of the behaviour functions


def _is_number(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool)


def _fmt_bound(x: float) -> str:
    return "inf" if x == INF else "-inf" if x == -INF else fmt(x)

