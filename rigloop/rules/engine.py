"""The rule engine: open a session, fold in a finished trial, decide the next one.

All three are pure functions of their arguments and return new values:

* ``open_session`` resets the session counters and rolls the day's water tally;
* ``observe`` folds one finished trial into counters, runs, choice history,
  staircase, SPRT and water tallies;
* ``decide`` checks the session-end criteria, then stage moves, then the block's
  end; then the next-cue policy draws the cue, one uniform draw arms the reward
  against the reward policy's probability (drawn only when that probability is
  strictly between 0 and 1), and the welfare limits have the last word.
"""

from __future__ import annotations

import datetime as _dt
import math
from collections.abc import Mapping
from dataclasses import dataclass
from types import MappingProxyType
from typing import Any

import numpy as np

from ..core.derived import derived
from ..core.quick_init import quick_init
from ..core.performance import dprime as _dprime
from ..core.performance import sequential_bounds, sequential_step
from .expr import Env, cheap_first, evaluate, fmt
from .model import Block, Spec, Sprt, Stage
from .policies import choose_cue, reward_prob, staircase_step
from .state import ScheduleState
from .welfare import lab_day, limit_values


@quick_init
@dataclass(frozen=True, slots=True)
class Plan:
    """A decision without its address: the ``rigloop.trial.Decision`` fields other than
    subject, session, trial and valve_ms."""

    cue: str | None
    reward_prob: float
    reward_ul: float
    reward_armed: bool
    block: str
    stage: str
    end_session: bool = False
    difficulty: float | None = None
    reasons: tuple[str, ...] = ()
    overrides: tuple[str, ...] = ()
    warnings: tuple[str, ...] = ()

    def as_kwargs(self) -> dict[str, Any]:
        return {name: getattr(self, name) for name in self.__dataclass_fields__}




# --------------------------------------------------------------------------- expression env


_COUNTERS = frozenset({
    "trials_in_block", "trials_in_stage", "trials_in_session", "blocks_in_stage", "sessions_in_stage",
    "correct_in_block", "ul_session", "ul_today", "misses_in_row", "unrewarded_in_row", "hits",
    "misses", "false_alarms", "correct_rejections", "right_bias", "sprt_llr",
})


# A step forward of the clock longer than this between one reading and the next (the open,
# a trial's end, the next trial's start) is a clock mismatch, not a pause: it exceeds the
# longest session any rule file may allow (welfare hard limit, 180 min). It is flagged in
# the next decision and not counted toward session minutes.
CLOCK_JUMP_S = 3 * 3600.0


def session_minutes(s: ScheduleState) -> float:
    """Minutes from the session's clock start to its latest reading (jumps left out)."""
    return max(0.0, s.last_wall - s.session_start) / 60.0


def clock_words(s: ScheduleState) -> str:
    """The clock readings behind ``session_min``, for the reason a session ended on time."""
    return (f"session clock: {fmt(session_minutes(s))} min from {_iso(s.session_start)} to {_iso(s.last_wall)} "
            f"(the latest trial's start + duration)")


def _iso(wall_time: float) -> str:
    return _dt.datetime.fromtimestamp(float(wall_time), tz=_dt.timezone.utc).isoformat(timespec="seconds")


def _clock_jump(sched: ScheduleState, event, end: float) -> dict[str, Any]:
    """The schedule changes for a trial that starts more than ``CLOCK_JUMP_S`` after the
    session's latest reading: the session clock moves with it (the jump is not counted)
    and a note for the next decision says so."""
    wall = float(event.wall_time)
    elapsed = max(0.0, sched.last_wall - sched.session_start)
    note = (f"clock: trial {event.trial}'s wall_time {_iso(wall)} is {fmt((wall - sched.last_wall) / 3600.0)} h "
            f"after the session's last clock reading {_iso(sched.last_wall)}; the jump is not counted toward "
            f"session_min (more than {fmt(CLOCK_JUMP_S / 3600.0)} h cannot be a pause within a session). Check the "
            f"rig's clock, and send the rig's wall_time with open")
    return {"session_start": wall - elapsed, "last_wall": end, "notes": (*sched.notes, note)}


class ScheduleEnv(Env):
    """Answers expression names from the schedule state and functions from the view.

    ``cue`` is what the placeholder ``cue`` means (per-cue policy parameters).
    """

    __slots__ = ("sched", "view", "block", "cue")

    def __init__(self, sched: ScheduleState, view, block: Block | None, cue: str | None = None):
        self.sched, self.view, self.block, self.cue = sched, view, block, cue

    def name(self, name: str) -> float | bool:
        s = self.sched
        if name in _COUNTERS:
            return float(getattr(s, name))
        if name == "session_min":
            return session_minutes(s)
        if name in ("dprime", "bias_c"):
            if s.hits + s.misses == 0 or s.false_alarms + s.correct_rejections == 0:
                return math.nan
            d, c = _dprime(s.hits, s.misses, s.false_alarms, s.correct_rejections, correction="loglinear")
            return float(d if name == "dprime" else c)
        if name == "sprt_accept":
            return s.sprt_verdict == "accept_h1"
        if name == "sprt_reject":
            return s.sprt_verdict == "accept_h0"
        if name == "difficulty":
            return math.nan if s.stair_level is None else float(s.stair_level)
        if name == "reversals":
            return float(s.stair_reversals)
        if name == "side_bias":
            return float(self.view.side_bias())
        raise KeyError(name)  # pragma: no cover - the checker admits only known names

    def call(self, func: str, args) -> float:
        cue = self.cue if args[0] == "cue" else args[0]
        v = self.view
        if func == "value":
            return float(v.value_mean(cue))
        if func == "sd":
            return float(v.value_sd(cue))
        if func == "p_value_above":
            return float(v.prob_value_above(cue, float(args[1])))
        if func == "p_correct":
            return float(v.p_correct(cue))
        if func == "p_above_chance":
            return float(v.prob_above_chance(cue))
        if func == "p_model_based":
            x = float(args[0])
            return float(v.p_model_based(x)) if 0.0 <= x < 1.0 else math.nan
        if func in ("p_lower", "p_upper"):
            level = _level(args, 1)
            if level is None:
                return math.nan
            lo, hi = v.p_interval(cue, level)
            return float(lo if func == "p_lower" else hi)
        return _behaviour_call(v, func, cue, args, self.cue)

    def compare_call(self, func: str, args: list, op: str, c: float) -> bool | None:
        """``dprime_lower/upper(a, b[, level]) <op> c`` from the view's
        ``dprime_part_compared`` (mostly without the quantile search), and
        ``p_discriminates(a, b[, margin]) <op> c`` from its ``p_discriminates_compared``
        (mostly without the quadrature): the same answer as comparing ``call``'s value, where
        the view offers them."""
        if func == "p_discriminates":
            compared = getattr(self.view, "p_discriminates_compared", None)
            if compared is None:
                return None
            margin = float(args[2]) if len(args) > 2 else 0.0
            if not 0.0 <= margin < 1.0:
                return False  # the value is NaN (see _behaviour_call), and NaN compares false
        else:
            compared = getattr(self.view, "dprime_part_compared", None)
            if compared is None or func not in ("dprime_lower", "dprime_upper"):
                return None
            level = _level(args, 2)
            if level is None:
                return False  # as above
        cue = self.cue if args[0] == "cue" else args[0]
        other = self.cue if args[1] == "cue" else args[1]
        if func == "p_discriminates":
            return compared(cue, other, margin, op, c)
        return compared(cue, other, level, _DPRIME_ENTRY[func], op, c)


# which entry of d' and its interval each function reads
_DPRIME_ENTRY = {"dprime_of": "d", "dprime_lower": "lower", "dprime_upper": "upper"}


def _level(args, k: int) -> float | None:
    """The credible level in ``args[k]`` (0.95 when left out), or None outside (0, 1):
    the function's value is then NaN."""
    level = float(args[k]) if len(args) > k else 0.95
    return level if 0.0 < level < 1.0 else None


def _behaviour_call(v, func: str, cue: str, args, placeholder: str | None) -> float:
    """The behaviour functions (``p_respond``, ``p_discriminates``, ``dprime_of``, ...)."""
    if func in ("p_respond", "p_right"):
        return float(v.p_behaviour(cue))
    if func in ("p_respond_lower", "p_respond_upper", "p_right_lower", "p_right_upper"):
        level = _level(args, 1)
        if level is None:
            return math.nan
        lo, hi = v.behaviour_interval(cue, level)
        return float(lo if func.endswith("_lower") else hi)
    other = placeholder if args[1] == "cue" else args[1]
    if func == "p_discriminates":
        margin = float(args[2]) if len(args) > 2 else 0.0
        if not 0.0 <= margin < 1.0:
            return math.nan
        return float(v.p_discriminates(cue, other, margin))
    if func in _DPRIME_ENTRY:
        level = _level(args, 2)
        if level is None:
            return math.nan
        which = _DPRIME_ENTRY[func]
        part = getattr(v, "dprime_part", None)
        if part is not None:  # only the entry asked for: one quantile search, not two
            return float(part(cue, other, level, which))
        d, lo, hi = v.dprime_between(cue, other, level)
        return float(d if which == "d" else lo if which == "lower" else hi)
    raise KeyError(func)  # pragma: no cover - the checker admits only known functions


# --------------------------------------------------------------------------- state moves


def _block_reset(block: Block) -> dict[str, Any]:
    return {
        "block": block.name, "trials_in_block": 0, "correct_in_block": 0, "hits": 0, "misses": 0,
        "false_alarms": 0, "correct_rejections": 0,
        "stair_level": block.staircase.start if block.staircase else None,
        "stair_correct_run": 0, "stair_wrong_run": 0, "stair_last_dir": 0, "stair_reversals": 0,
        "sprt_llr": 0.0, "sprt_verdict": "continue", "queue": (),
    }


def enter_block(spec: Spec, sched: ScheduleState, stage: Stage, block: str) -> ScheduleState:
    return sched.evolve(**_block_reset(stage.blocks[block]))


def enter_stage(spec: Spec, sched: ScheduleState, stage: str, sessions: int = 1) -> ScheduleState:
    st = spec.stages[stage]
    sched = sched.evolve(stage=stage, trials_in_stage=0, blocks_in_stage=0, sessions_in_stage=sessions)
    return enter_block(spec, sched, st, st.first_block)


def start_subject(spec: Spec) -> ScheduleState:
    """The schedule of a subject that has never trained: the first stage's first block."""
    return enter_stage(spec, ScheduleState(stage=spec.first_stage, block=""), spec.first_stage, sessions=0)


def utc_day(wall_time: float) -> str:
    """The UTC date of ``wall_time`` (the lab's day when the rule file names none)."""
    return _dt.datetime.fromtimestamp(float(wall_time), tz=_dt.timezone.utc).date().isoformat()


def open_session(spec: Spec, sched: ScheduleState, session: str, wall_time: float) -> ScheduleState:
    """A new session: session counters and runs reset; stage and block kept (or the
    stage's first block, when the stage says ``new_session = "first_block"``); the
    day's water tally restarts when the lab's day (``[welfare] timezone`` and
    ``day_starts``, default UTC from 00:00) differs from the last session's."""
    notes: list[str] = list(sched.notes)
    if sched.stage not in spec.stages:
        notes.append(f"stage '{sched.stage}' is not in rule file '{spec.name}'; starting at '{spec.first_stage}'")
        sched = enter_stage(spec, sched, spec.first_stage, sessions=0)
    stage = spec.stages[sched.stage]
    if sched.block not in stage.blocks:
        notes.append(f"block '{sched.block}' is not in stage '{stage.name}'; starting at '{stage.first_block}'")
        sched = enter_block(spec, sched, stage, stage.first_block)
    elif stage.new_session == "first_block" and sched.block != stage.first_block:
        sched = enter_block(spec, sched, stage, stage.first_block)
    day = lab_day(wall_time, spec.welfare)
    return sched.evolve(
        session=session, session_start=float(wall_time), last_wall=float(wall_time), session_ended=False,
        trials_in_session=0, ul_session=0.0, misses_in_row=0, unrewarded_in_row=0,
        sessions_in_stage=sched.sessions_in_stage + 1, queue=(), last_cue=None, run_len=0,
        last_armed=None, day=day, ul_today=sched.ul_today if day == sched.day else 0.0, notes=tuple(notes),
    )


def trial_cue(spec: Spec, block: Block | None, cue_ids) -> str | None:
    """The cue a trial is scored under: the first of the block's cues it showed, else
    the first declared cue it showed."""
    if block is not None:
        for c in block.contingency:  # the block's cues, in order
            if c in cue_ids:
                return c
    for c in cue_ids:
        if c in spec.cues:
            return c
    return None


def observe(spec: Spec, sched: ScheduleState, event) -> ScheduleState:
    """Fold one finished trial (a ``TrialEvent``) into the schedule."""
    stage = spec.stages.get(sched.stage)
    block = stage.blocks.get(sched.block) if stage else None
    shown = []  # event.cue_ids, by a plain loop (cheaper than a generator's tuple)
    for c in event.cues:
        shown.append(c.cue)
    cue = trial_cue(spec, block, shown)
    role = spec.cues[cue].role if cue else "plain"
    if role == "go_nogo":
        role = "go" if block is not None and cue in block.contingency and block.contingency[cue].rewarded else "nogo"
    result = event.response.result
    correct, incorrect = result == "correct", result == "incorrect"
    # the new state's fields, written into a copy of this one's (ScheduleState._evolved's dict)
    ch: dict[str, Any] = sched.__dict__.copy()
    ch["trials_total"] = sched.trials_total + 1
    ch["trials_in_session"] = sched.trials_in_session + 1
    ch["trials_in_stage"] = sched.trials_in_stage + 1
    ch["trials_in_block"] = sched.trials_in_block + 1
    ch["correct_in_block"] = sched.correct_in_block + int(correct)
    # go/no-go counts, and the no-response run (a correct no-go trial leaves it as it was)
    misses_in_row = sched.misses_in_row
    if role == "go":
        ch["hits" if correct else "misses"] = getattr(sched, "hits" if correct else "misses") + 1
        misses_in_row = 0 if correct else misses_in_row + 1
    elif role == "nogo":
        if incorrect:
            ch["false_alarms"] = sched.false_alarms + 1
            misses_in_row = 0
        else:
            ch["correct_rejections"] = sched.correct_rejections + 1
    else:
        misses_in_row = 0 if (correct or incorrect) else misses_in_row + 1
    ch["misses_in_row"] = misses_in_row
    ul = float(event.outcome.reward_ul)
    ch["unrewarded_in_row"] = 0 if ul > 0 else sched.unrewarded_in_row + 1
    ch["ul_session"] = sched.ul_session + ul
    ch["ul_today"] = sched.ul_today + ul
    end = float(event.wall_time) + float(event.duration or 0.0)
    if event.wall_time - sched.last_wall > CLOCK_JUMP_S:
        ch.update(_clock_jump(sched, event, end))
    else:
        ch["last_wall"] = max(sched.last_wall, end)
    if block is not None and block.staircase is not None and (correct or incorrect):
        ch.update(staircase_step(block.staircase, sched, correct))
    if block is not None and block.sprt is not None and (correct or incorrect):
        t = block.sprt
        verdict = sched.sprt_verdict
        if verdict != "accept_h1" and (t.cond == "all" or t.cond == cue):
            # a pass stays until the block changes; after Wald's "accept_h0" the test starts again at 0
            up, down, upper, lower = _sequential_bounds(t)
            ch["sprt_llr"], ch["sprt_verdict"] = sequential_step(
                t.test, sched.sprt_llr if verdict == "continue" else 0.0, correct, up, down, upper, lower)
    side = event.response.value
    if side in ("left", "right"):
        window = block.next_cue.window if block is not None and block.next_cue.kind in ("counter_bias", "anti_bias") else 10
        # b <- b + (x - b) / window, x = 1 for a right choice
        ch["right_bias"] = sched.right_bias + ((1.0 if side == "right" else 0.0) - sched.right_bias) / window
        ch["n_choices"] = sched.n_choices + 1
    return ScheduleState._of_fields(ch)


# --------------------------------------------------------------------------- decide


def decide(spec: Spec, sched: ScheduleState, view, next_trial: int,
           rng: np.random.Generator) -> tuple[ScheduleState, Plan]:
    """The next trial's plan, and the schedule after any block/stage move it made."""
    reasons: list[str] = []
    warnings: list[str] = list(sched.notes)
    if sched.notes:
        sched = sched.evolve(notes=())
    if sched.stage not in spec.stages or sched.block not in spec.stages[sched.stage].blocks:
        warnings.append(f"stage/block '{sched.stage}'/'{sched.block}' not in the rule file; starting over")
        sched = enter_stage(spec, sched, spec.first_stage, sessions=max(1, sched.sessions_in_stage))
    if sched.session_ended:
        return sched, Plan(None, 0.0, 0.0, False, sched.block, sched.stage, True,
                           reasons=("session already ended",), warnings=tuple(warnings))

    end = False
    env = ScheduleEnv(sched, view, spec.stages[sched.stage].blocks[sched.block])
    end_tests, rescue_ul = _per_file(spec)
    for crit, holds in end_tests:
        if holds(env):  # explain_if, its test made ready
            hit, seen = evaluate(crit.when, env)
            if hit:
                end = True
                clock = f"; {clock_words(sched)}" if "session_min" in crit.when.names_used() else ""
                reasons.append(f"session ends ({crit.name}): {'; '.join(seen)}{clock}")
                break

    if not end:
        sched = _moves(spec, sched, env, reasons)

    stage = spec.stages[sched.stage]
    block = stage.blocks[sched.block]
    cue, p = None, 0.0
    changes: dict[str, Any] = {}
    if not end:
        # the cue's changes (queue, run, last cue) are applied with the arming below: no
        # name a rule expression or limit reads depends on them
        cue, changes, why_cue = choose_cue(block, sched, view, rng, spec.cues)
        reasons.append(why_cue)
        p, why_p, pw = reward_prob(block.reward, block, cue, lambda c: ScheduleEnv(sched, view, block, c))
        reasons.append(why_p)
        warnings.extend(pw)
    ul = block.contingency[cue].ul if cue is not None else 0.0
    ended = end
    cue, p, ul, armed, end, overrides, wwarn = limit_values(
        spec.welfare, cue, p, ul, end, _uniform_below(rng), session_minutes(sched), sched.unrewarded_in_row,
        sched.ul_session, sched.ul_today, _rewarded(block), rescue_ul,
    )
    warnings.extend(wwarn)
    if end and not ended and session_minutes(sched) >= spec.welfare.max_session_min:
        reasons.append(clock_words(sched))  # which clock reading ended it
    difficulty = None
    if block.staircase is not None and not end:
        st = block.staircase
        difficulty = float(sched.stair_level if sched.stair_level is not None else st.start)
        reasons.append(f"difficulty {st.parameter} = {fmt(difficulty)} (staircase {st.up}-up-{st.down}-down, "
                       f"{sched.stair_reversals} reversals)")
    changes["last_armed"] = armed
    changes["session_ended"] = end
    sched = sched._evolved(changes)
    plan = Plan(cue, float(p), float(ul), bool(armed), sched.block, sched.stage, end, difficulty, tuple(reasons),
                 tuple(overrides), tuple(warnings))
    return sched, plan


def _uniform_below(rng: np.random.Generator):
    """``below(p)``: is the trial's uniform draw u in [0, 1) below p?

    u is the decision's last draw, so it is made only when p lies strictly inside
    (0, 1); for p >= 1 the answer is yes and for p <= 0 (or NaN) no, whatever u is,
    and no other draw of the trial depends on whether u was made.
    """

    def below(p: float) -> bool:
        if p >= 1.0:
            return True
        if not p > 0.0:
            return False
        return float(rng.random()) < p

    return below


def _moves(spec: Spec, sched: ScheduleState, env: ScheduleEnv, reasons: list[str]) -> ScheduleState:
    """At most one move per decision: step back, else advance, else the block's end.

    ``env`` reads ``sched`` and its block."""
    stage = spec.stages[sched.stage]
    block = env.block
    for move, verb, holds in _move_tests(stage):
        if not holds(env):  # explain_if, its test made ready
            continue
        hit, seen = evaluate(move.when, env)
        if hit:
            reasons.append(f"stage '{stage.name}' {verb} to '{move.to}': {'; '.join(seen)} "
                           f"after {sched.trials_in_stage} trials in the stage")
            return enter_stage(spec, sched, move.to)
    end = block.end
    n = sched.trials_in_block
    if end is None or n < end.min_trials or n == 0:
        return sched
    why = None
    if end.max_trials is not None and n >= end.max_trials:
        why = f"block '{block.name}' ended: {n} trials reached max_trials {end.max_trials}"
    elif end.when is not None and cheap_first(end.when)(env):
        hit, seen = evaluate(end.when, env)
        if hit:
            why = f"block '{block.name}' ended: {'; '.join(seen)} after {n} trials"
    if why is None:
        return sched
    reasons.append(f"{why} -> block '{end.then}'")
    sched = enter_block(spec, sched, stage, end.then)
    return sched.evolve(blocks_in_stage=sched.blocks_in_stage + 1)


def _per_file(spec: Spec) -> tuple[tuple, float]:
    """(the session-end tests, the rescue volume): what ``decide`` reads of the file itself on
    every trial, in one lookup."""
    return derived(spec, "decide_parts", lambda sp: (_session_end_tests(sp), sp.welfare.rescue_ul or _largest_ul(sp)))


def _session_end_tests(spec: Spec) -> tuple:
    """(criterion, its compiled test, model-free operands first) for each session-end criterion, in order."""
    return derived(spec, "session_end", lambda sp: tuple((c, cheap_first(c.when)) for c in sp.session_end))


def _move_tests(stage: Stage) -> tuple:
    """(move, verb, its compiled test, model-free operands first) for the stage's step back, then its advance."""
    return derived(stage, "moves", lambda st: tuple(
        (m, verb, cheap_first(m.when)) for m, verb in ((st.step_back, "steps back"), (st.advance, "advances"))
        if m is not None))


def _sequential_bounds(t: Sprt) -> tuple[float, float, float, float]:
    """(up, down, upper, lower) of a block's sequential criterion: its log-LR steps and
    thresholds, computed once per rule file (no log() per trial)."""
    return derived(t, "sequential_bounds", lambda x: sequential_bounds(
        x.test, x.p0, x.p1, x.alpha, x.beta, x.horizon))


def _largest_ul(spec: Spec) -> float:
    """The largest reward volume anywhere in the file (the default rescue volume)."""
    return derived(spec, "largest_ul", lambda sp: max(
        (k.ul for s in sp.stages.values() for b in s.blocks.values() for k in b.contingency.values()), default=0.0))


def _rewarded(block: Block) -> Mapping[str, float]:
    """The volume of each cue the block rewards (shared and read-only: the limits read it)."""
    return derived(block, "rewarded_ul",
                    lambda b: MappingProxyType({c: b.contingency[c].ul for c in b.rewarded_cues()}))
