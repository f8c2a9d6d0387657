"""Whether a rule file's decisions can run without its learner, and why not when they cannot.

A decision reads the learner only through a few doors: the expression functions
``value()``, ``sd()``, ``p_value_above()`` and ``p_model_based()``, the next-cue policy
``uncertain`` (it picks the cue with the most uncertain value), and a two_step learner
(its posterior is the decision's subject). A rule file that opens none of them decides
from the animal's behaviour, its learning curves and the schedule alone, so a simulation
that stores nothing need not run the learner at all: the decisions come out the same,
bit for bit (``tests/test_lockstep.py`` holds that on every shipped example it admits).

The check walks every expression of the parsed file (any field of the spec that holds
one), so a new kind of criterion is covered without a change here. ``reads_curves`` says
the same of the learning curves (the sequential tests keep their own counts in the schedule).
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping

from ...rules.expr import Expr

# the expression functions whose value comes from the learner (rules/engine.Env.call, core/view.ModelView)
LEARNER_FUNCTIONS = frozenset({"value()", "sd()", "p_value_above()", "p_model_based()"})
LEARNER_POLICIES = frozenset({"uncertain"})  # next-cue policies that read the learner's values
# the expression functions that read the learning curves (rules/engine.Env.call); nothing else does
CURVE_FUNCTIONS = frozenset({"p_correct()", "p_above_chance()", "p_lower()", "p_upper()"})


def expressions(spec) -> list[Expr]:
    """Every expression held anywhere in ``spec`` (stages, blocks, reward policies, session ends)."""
    out: list[Expr] = []
    seen: set[int] = set()
    stack = [spec]
    while stack:
        node = stack.pop()
        if isinstance(node, Expr):
            out.append(node)
        elif id(node) in seen or isinstance(node, (str, bytes, int, float, bool)) or node is None:
            continue
        elif dataclasses.is_dataclass(node) and not isinstance(node, type):
            seen.add(id(node))
            stack.extend(getattr(node, f.name) for f in dataclasses.fields(node))
        elif isinstance(node, Mapping):
            seen.add(id(node))
            stack.extend(node.values())
        elif isinstance(node, (list, tuple, frozenset, set)):
            seen.add(id(node))
            stack.extend(node)
    return out


def _policies(spec):
    for stage in spec.stages.values():
        for block in stage.blocks.values():
            yield f"stages.{stage.name}.blocks.{block.name}", block.next_cue.kind


def learner_free(rules) -> tuple[bool, str]:
    """(True, "") when no decision of ``rules`` reads its learner; else (False, what does)."""
    spec = rules.spec
    if spec.learner.name == "two_step":
        return False, "the two_step learner's posterior is part of its decisions"
    for where, kind in _policies(spec):
        if kind in LEARNER_POLICIES:
            return False, f"{where}.next_cue policy {kind!r} reads the learner's values"
    for expr in expressions(spec):
        read = sorted(expr.names_used() & LEARNER_FUNCTIONS)
        if read:
            return False, f"'{expr.text}' reads the learner ({', '.join(read)})"
    return True, ""


def reads_curves(rules) -> bool:
    """Whether any decision of ``rules`` reads the learning curves (else a decisions-only run may skip them:
    they feed the stored quantities p_correct / p_lo95 / p_hi95 and those expression functions only)."""
    return any(expr.names_used() & CURVE_FUNCTIONS for expr in expressions(rules.spec))
