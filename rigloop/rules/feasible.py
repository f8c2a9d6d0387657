"""Criteria that can never hold, and criteria that wait on a cue their stage never shows.

A criterion is read as a set of bounds on the quantities it compares with numbers
(``p_respond(tone_hi) > 0.8 and trials_in_block < 30``). The bounds joined by ``and`` on
one quantity are intersected, with each other and with the range the quantity can take
here (a probability in [0, 1]; ``trials_in_block`` at most the block's ``max_trials``);
``or`` holds when any side can. When nothing is left the criterion can never be true: a
problem, since the block or stage it ends would wait for ever on it. Only what is proven
counts; ``not`` and arithmetic are taken to be able to hold.

Two weaker findings are warnings: a probability that can meet its bound only at exactly
0 or 1 (a posterior estimate does not get there), and a behaviour or learning-curve
criterion on a cue that none of its stage's (or its block's) trials show, whose estimate
therefore cannot move while the criterion is tested.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from .expr import FUNCTIONS, NAMES, Expr, fmt
from .expr.tree import BoolOp, Call, Compare, Const, CueRef, Name, Node
from .model import Stage
from .reader import Reader

# counts of the current block's trials: none can exceed the trials the block runs
BLOCK_COUNTS = ("trials_in_block", "correct_in_block", "hits", "misses", "false_alarms", "correct_rejections")
# functions whose estimate of a cue moves only on that cue's own trials
PER_CUE_ESTIMATES = frozenset({
    "p_respond", "p_respond_lower", "p_respond_upper", "p_right", "p_right_lower", "p_right_upper",
    "p_discriminates", "dprime_of", "dprime_lower", "dprime_upper", "p_correct", "p_lower", "p_upper",
    "p_above_chance",
})
_FLIP = {"<": ">", "<=": ">=", ">": "<", ">=": "<=", "==": "==", "!=": "!="}
# the two ends of one credible interval: the lower end is never above the upper one
_INTERVAL_ENDS = {f"{q}_lower": f"{q}_upper" for q in ("p", "p_respond", "p_right", "dprime")}


@dataclass(frozen=True, slots=True)
class Span:
    """An interval of numbers; ``lo_in``/``hi_in`` say whether the ends belong to it."""

    lo: float = -math.inf
    hi: float = math.inf
    lo_in: bool = True
    hi_in: bool = True

    def empty(self) -> bool:
        return self.lo > self.hi or (self.lo == self.hi and not (self.lo_in and self.hi_in))

    def meet(self, other: Span) -> Span:
        """The numbers in both spans."""
        lo, lo_in = max((self.lo, not self.lo_in), (other.lo, not other.lo_in))
        hi, hi_in = min((self.hi, self.hi_in), (other.hi, other.hi_in))
        return Span(lo, hi, not lo_in, hi_in)

    def text(self) -> str:
        if self.lo == -math.inf:
            return f"{'<=' if self.hi_in else '<'} {fmt(self.hi)}"
        if self.hi == math.inf:
            return f"{'>=' if self.lo_in else '>'} {fmt(self.lo)}"
        return f"in {'[' if self.lo_in else '('}{fmt(self.lo)}, {fmt(self.hi)}{']' if self.hi_in else ')'}"


@dataclass(frozen=True, slots=True)
class Where:
    """The range each quantity can take where a criterion is tested, and why (for messages)."""

    ranges: dict[str, tuple[Span, str]]


def _bound(op: str, c: float) -> Span | None:
    """The numbers x with ``x op c``; None for ``!=`` (which excludes one point only)."""
    return {"<": Span(hi=c, hi_in=False), "<=": Span(hi=c), ">": Span(lo=c, lo_in=False), ">=": Span(lo=c),
            "==": Span(c, c)}.get(op)


def _key(node: Node) -> str | None:
    """A name for the quantity a node reads (a name, or a call on cues and constants), else None."""
    if isinstance(node, Name) and NAMES[node.name].type != "true/false":
        return node.name
    if isinstance(node, Call) and node.func in FUNCTIONS:
        parts = []
        for a in node.args:
            if isinstance(a, CueRef):
                parts.append(a.cue)
            elif isinstance(a, Const):
                parts.append(repr(a.value))
            else:
                return None
        return f"{node.func}({', '.join(parts)})"
    return None


def _range(node: Node, where: Where) -> tuple[Span, str]:
    """What the quantity can be here, and those words for a message, from the place's
    limits or the vocabulary."""
    name = node.name if isinstance(node, Name) else node.func
    if name in where.ranges:
        span, why = where.ranges[name]
        return span, f"{span.text()} here ({why})"
    spec = NAMES[name] if isinstance(node, Name) else FUNCTIONS[name]
    span = Span(spec.lo, spec.hi)
    return span, ("a probability " if (spec.lo, spec.hi) == (0.0, 1.0) else "always ") + span.text()


def _atoms(node: Compare) -> list[tuple[Node, str, Span]]:
    """The bounds one comparison (chained or not) puts on quantities: (quantity node, key, span)."""
    out = []
    for i, op in enumerate(node.ops):
        a, b = node.operands[i], node.operands[i + 1]
        if isinstance(b, Const) and not isinstance(b.value, bool):
            q, o, c = a, op, float(b.value)
        elif isinstance(a, Const) and not isinstance(a.value, bool):
            q, o, c = b, _FLIP[op], float(a.value)
        else:
            continue
        key, span = _key(q), _bound(o, c)
        if key is not None and span is not None:
            out.append((q, key, span))
    return out


def never(expr: Expr, where: Where) -> str | None:
    """Why ``expr`` can never be true here, or None when it may."""
    return _never(expr, expr.tree, where)


def _never(expr: Expr, node: Node, where: Where) -> str | None:
    if isinstance(node, BoolOp) and node.op == "or":
        whys = [_never(expr, v, where) for v in node.values]
        return None if None in whys else "; ".join(whys)
    if isinstance(node, BoolOp):  # and
        parts = [v for v in node.values if not isinstance(v, Compare)]
        for v in parts:
            why = _never(expr, v, where)
            if why is not None:
                return why
        return _conjunction(expr, [v for v in node.values if isinstance(v, Compare)], where)
    if isinstance(node, Compare):
        return _conjunction(expr, [node], where)
    return None


def _ends_crossed(expr: Expr, node: Compare) -> str | None:
    """Why a comparison asking a credible interval's lower end to exceed its upper end (the
    same cues) can never hold, else None. Levels do not matter: a central interval's lower
    end is below the median at every level, its upper end above."""
    for i, op in enumerate(node.ops):
        a, b = node.operands[i], node.operands[i + 1]
        if op in ("<", "<="):
            a, b, op = b, a, _FLIP[op]
        if op != ">" or not (isinstance(a, Call) and isinstance(b, Call)) or _INTERVAL_ENDS.get(a.func) != b.func:
            continue
        if _cues_of(a) == _cues_of(b):
            return (f"'{expr.source(node)}' asks the lower end of a credible interval to exceed its upper end; "
                    "the lower end is never above the upper one")
    return None


def _cues_of(call: Call) -> tuple[str, ...]:
    return tuple(a.cue for a in call.args if isinstance(a, CueRef))


def _conjunction(expr: Expr, compares: list[Compare], where: Where) -> str | None:
    """Intersect the bounds ``and``-ed comparisons put on each quantity; the first empty one says why."""
    need: dict[str, tuple[Node, Span, list[str]]] = {}
    for cmp_ in compares:
        crossed = _ends_crossed(expr, cmp_)
        if crossed is not None:
            return crossed
        for q, key, span in _atoms(cmp_):
            node, have, texts = need.get(key, (q, Span(), []))
            texts = texts if expr.source(cmp_) in texts else [*texts, expr.source(cmp_)]
            need[key] = (node, have.meet(span), texts)
    for key, (q, span, texts) in need.items():
        shown = expr.source(q)
        if span.empty():
            return f"'{' and '.join(texts)}' contradict each other: no value of {shown} meets them all"
        rng, words = _range(q, where)
        if span.meet(rng).empty():
            return f"'{' and '.join(texts)}' needs {shown} {span.text()}, but {shown} is {words}"
    return None


def edge_only(expr: Expr) -> str | None:
    """A probability the criterion needs at exactly 0 or 1 (``p_respond(c) >= 1``), else None."""
    stack: list[Node] = [expr.tree]
    while stack:
        node = stack.pop()
        if isinstance(node, BoolOp):
            stack.extend(node.values)
        elif isinstance(node, Compare):
            for q, _key_, span in _atoms(node):
                spec = FUNCTIONS.get(q.func) if isinstance(q, Call) else None
                if spec is None or (spec.lo, spec.hi) != (0.0, 1.0):
                    continue
                met = span.meet(Span(0.0, 1.0))
                if not met.empty() and met.lo == met.hi:
                    return (f"'{expr.source(node)}' holds only when {expr.source(q)} is exactly {fmt(met.lo)}, "
                            "which an estimate from the animal's trials does not reach; use a bound inside (0, 1), "
                            "e.g. >= 0.95")
    return None


def cues_read(expr: Expr) -> list[str]:
    """The cues whose own trials move the estimates ``expr`` reads (in order of appearance)."""
    out: list[str] = []
    stack: list[Node] = [expr.tree]
    while stack:
        node = stack.pop()
        if isinstance(node, Call):
            if node.func in PER_CUE_ESTIMATES:
                out += [a.cue for a in node.args if isinstance(a, CueRef) and a.cue not in ("all", "cue")]
            stack.extend(node.args)
        elif isinstance(node, BoolOp):
            stack.extend(node.values)
        elif isinstance(node, Compare):
            stack.extend(node.operands)
        elif hasattr(node, "operand"):
            stack.append(node.operand)
        elif hasattr(node, "left"):
            stack += [node.left, node.right]
    return list(dict.fromkeys(sorted(out)))


# --------------------------------------------------------------------------- the file's criteria


def check_criteria(r: Reader, stages: dict[str, Stage], session_end) -> None:
    """Record a problem for each criterion that can never be true, a note for the weaker findings."""
    anywhere = Where({})
    for st in stages.values():
        shown = {c for b in st.blocks.values() for c in b.contingency}
        for move, key in ((st.advance, "advance"), (st.step_back, "step_back")):
            if move is not None:
                _one(r, f"stages.{st.name}.{key}.when", move.when, anywhere, shown, f"no block of stage '{st.name}'")
        for b in st.blocks.values():
            if b.end is not None and b.end.when is not None:
                _one(r, f"stages.{st.name}.blocks.{b.name}.end.when", b.end.when, _in_block(b), set(b.contingency),
                     f"block '{b.name}'")
    for e in session_end:
        _one(r, f"session_end.{e.name}", e.when, anywhere, None, "")


def _one(r: Reader, path: str, expr: Expr, where: Where, shown: set[str] | None, who: str) -> None:
    why = never(expr, where)
    if why is not None:
        r.add(path, f"can never be true: {why}")
        return
    edge = edge_only(expr)
    if edge is not None:
        r.note(path, edge)
    for cue in cues_read(expr) if shown is not None else ():
        if cue not in shown:
            r.note(path, f"reads the animal's estimate for cue '{cue}', but {who} shows it: the estimate cannot "
                         "move while this is tested, so it waits on what earlier trials left; add the cue to the "
                         "contingency or test a cue shown here")


def _in_block(block) -> Where:
    """What a block's end criterion sees: counts within the block's trial bounds, the
    staircase level within its range."""
    end = block.end
    ranges: dict[str, tuple[Span, str]] = {}
    if end.max_trials is not None:
        for name in BLOCK_COUNTS:
            ranges[name] = (Span(0.0, float(end.max_trials)), f"max_trials = {end.max_trials} ends the block")
    if end.min_trials:  # the criterion is first tested after min_trials trials
        hi = math.inf if end.max_trials is None else float(end.max_trials)
        ranges["trials_in_block"] = (Span(float(end.min_trials), hi), f"the block's end is tested from min_trials = "
                                     f"{end.min_trials}" + ("" if end.max_trials is None else
                                                            f" to max_trials = {end.max_trials}"))
    if block.staircase is not None:
        sc = block.staircase
        ranges["difficulty"] = (Span(sc.lo, sc.hi), "the staircase's min and max")
    return Where(ranges)
