"""The vocabulary of rule expressions: the names and functions they may read, their types,
ranges and meanings, and the size limits of an expression.

One table serves the checker (types, ranges, arities), the engine (what to answer) and
``rigloop check`` (what each name means).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

NUM = "number"
BOOL = "true/false"

MAX_LENGTH = 400  # characters per expression
MAX_DEPTH = 24  # nesting depth of the checked tree
MAX_EXPONENT = 8  # |e| for a ** e
MAX_CONSTANT = 1e9  # |c| for any numeric constant
MAX_ARGS = 8

INF = math.inf


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
    "ul_today": NameSpec(NUM, 0, INF, "µL delivered today (the lab's day: [welfare] timezone and day_starts), all sessions"),
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
    "p_model_based": FuncSpec(("number",), 0, NUM, *_P,
                              "posterior probability, from the animal's own first-stage choices, that its weight "
                              "w on the task's model exceeds the number (two_step learner; w = 0: repeats what paid, "
                              "w = 1: plans through the transitions)"),
    "min": FuncSpec(("number", "number"), 0, NUM, -INF, INF, "smallest of its numbers", variadic=True),
    "max": FuncSpec(("number", "number"), 0, NUM, -INF, INF, "largest of its numbers", variadic=True),
    "abs": FuncSpec(("number",), 0, NUM, 0, INF, "absolute value"),
}


def allowed_hint(kind: str = "all") -> str:
    funcs = "allowed functions: " + ", ".join(FUNCTIONS)
    names = "allowed names: " + ", ".join(NAMES)
    if kind == "functions":
        return funcs
    if kind == "names":
        return names
    return funcs + "\n    " + names
