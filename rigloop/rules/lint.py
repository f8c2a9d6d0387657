"""Warnings about a rule file that loads but may not do what its author means.

A criterion that claims to follow learning must rest on the animal's own responses.
The learner's quantities (``value``, ``sd``, ``p_value_above``) follow the task's
payouts: an unrewarded cue's value falls whether or not the animal stops responding to
it, so a criterion built on them alone passes for an animal that learned nothing.
"""

from __future__ import annotations

from .expr import FUNCTIONS, NAMES, Expr
from .model import Spec

LEARNER_QUANTITIES = frozenset({"value()", "sd()", "p_value_above()"})
# what the animal did: behaviour estimates, learning curves, response counts, sequential tests
BEHAVIOUR_QUANTITIES = frozenset({
    "p_respond()", "p_respond_lower()", "p_respond_upper()", "p_right()", "p_right_lower()", "p_right_upper()",
    "p_discriminates()", "dprime_of()", "dprime_lower()", "dprime_upper()", "p_correct()", "p_lower()",
    "p_upper()", "p_above_chance()", "side_bias", "dprime", "bias_c", "sprt_accept", "sprt_reject", "sprt_llr",
    "hits", "misses", "false_alarms", "correct_rejections", "correct_in_block", "right_bias", "difficulty",
    "reversals", "p_model_based()",
})


def rests_on_learner_only(expr: Expr) -> bool:
    """True when ``expr`` reads learner quantities and nothing of the animal's behaviour."""
    used = expr.names_used()
    return bool(used & LEARNER_QUANTITIES) and not used & BEHAVIOUR_QUANTITIES


def warnings(spec: Spec) -> list[str]:
    """The loader's notes (deprecated names), then one line per stage or block criterion
    that rests on learner quantities alone."""
    out = list(spec.notes)
    for st in spec.stages.values():
        for move, key in ((st.advance, "advance"), (st.step_back, "step_back")):
            if move is not None and rests_on_learner_only(move.when):
                out.append(_line(f"stages.{st.name}.{key}.when", move.when))
        for b in st.blocks.values():
            if b.end is not None and b.end.when is not None and rests_on_learner_only(b.end.when):
                out.append(_line(f"stages.{st.name}.blocks.{b.name}.end.when", b.end.when))
    if spec.learner.name != "two_step":
        for expr in _expressions(spec):
            if "p_model_based()" in expr.names_used():
                out.append(f"'{expr.text}': p_model_based() reads the two_step learner's posterior over w; with "
                           f"learner '{spec.learner.name}' it is never known (NaN), so this is never true. "
                           "Use [learner] model = \"two_step\" and report each trial's steps")
                break
    return out


def _line(path: str, expr: Expr) -> str:
    return (f"{path}: '{expr.text}' rests only on the learner's values, which follow the task's payouts, "
            "not the animal: an animal that learned nothing can pass it. Use what the animal does, e.g. "
            "p_discriminates(go_cue, nogo_cue, 0.3) >= 0.95, p_respond_lower(cue), dprime_lower(go_cue, nogo_cue)")


def _expressions(spec: Spec):
    for st in spec.stages.values():
        for move in (st.advance, st.step_back):
            if move is not None:
                yield move.when
        for b in st.blocks.values():
            if b.end is not None and b.end.when is not None:
                yield b.end.when
            if b.reward.certainty is not None:
                yield b.reward.certainty
    for e in spec.session_end:
        yield e.when


def glossary(spec: Spec) -> list[str]:
    """What each function and name the file's expressions read means, one line each."""
    used: set[str] = set()
    for expr in _expressions(spec):
        used |= expr.names_used()
    lines = []
    for name in sorted(used):
        if name.endswith("()") and name[:-2] in FUNCTIONS:
            lines.append(f"{name[:-2]}(): {FUNCTIONS[name[:-2]].doc}")
        elif name in NAMES and name not in ("true", "false"):
            lines.append(f"{name}: {NAMES[name].doc}")
    return lines
