"""Decision policies: the next cue, the reward probability, the difficulty staircase.

Each function is pure: it reads the schedule state, the subject view and the trial's
generator, and returns its choice, the state fields it changes, and a reason with the
numbers it used. Generator draws happen in a fixed order for a given state, so a
decision depends only on (state, view, rules, seed).
"""

from __future__ import annotations

import math
from types import MappingProxyType
from typing import Any

import numpy as np

from ..core.derived import derived
from .expr import evaluate, fmt
from .model import Block, CueSpec, NextCue, RewardPolicy, Staircase
from .state import ScheduleState

# --------------------------------------------------------------------------- next cue

# the two-choice policy under its name and its old one (kept for files stored with it): the reason word
COUNTER_BIAS = {"counter_bias": "counter-bias", "anti_bias": "anti-bias"}


def run_ok(order: list[str], last: str | None, run: int, max_run: int) -> bool:
    """True when ``order`` following ``run`` repeats of ``last`` never repeats a cue more
    than ``max_run`` times in a row."""
    for c in order:
        run = run + 1 if c == last else 1
        last = c
        if run > max_run:
            return False
    return True


def mini_block(cues: tuple[str, ...], repeats: int, max_run: int, last: str | None, run: int,
               rng: np.random.Generator, attempts: int = 200) -> list[str]:
    """A shuffled mini-block with each cue ``repeats`` times and runs <= ``max_run``,
    counting the run carried over from the previous mini-block.

    Rejection sampling over uniform permutations; if that keeps failing (only when
    max_run is tight), an interleaved order that starts with a cue other than ``last``,
    whose runs are 1.
    """
    items = [c for c in cues for _ in range(repeats)]
    for _ in range(attempts):
        order = [items[i] for i in rng.permutation(len(items))]
        if run_ok(order, last, run, max_run):
            return order
    k = len(cues)
    start = next((i for i, c in enumerate(cues) if c != last), 0)
    rotated = cues[start:] + cues[:start]
    return [rotated[i % k] for i in range(k * repeats)]


def choose_cue(block: Block, sched: ScheduleState, view, rng: np.random.Generator,
               cues: dict[str, CueSpec]) -> tuple[str, dict[str, Any], str]:
    """The next cue for ``block``: (cue, changed state fields, reason)."""
    pol: NextCue = block.next_cue
    changes: dict[str, Any] = {}
    in_block = block.contingency  # the block's cues, in order, as keys
    if pol.kind == "sequence":
        i = sched.trials_in_block % len(pol.sequence)
        cue = pol.sequence[i]
        why = f"cue {cue}: fixed sequence, position {i + 1} of {len(pol.sequence)}"
    elif pol.kind == "balanced":
        queue = []
        for c in sched.queue:
            if c in in_block:
                queue.append(c)
        if not queue:
            queue = mini_block(block.cues, pol.repeats, pol.max_run, sched.last_cue, sched.run_len, rng)
        cue = queue.pop(0)
        changes["queue"] = tuple(queue)
        why = (f"cue {cue}: balanced mini-block of {len(in_block) * pol.repeats} "
               f"(max run {pol.max_run}), {len(queue)} left")
    elif pol.kind == "weighted":
        names, p, cum = derived(pol, "weighted", _weighted)
        u = rng.random()
        i = min(int(np.searchsorted(cum, u, side="right")), len(names) - 1)
        while p[i] == 0:  # u landed on a zero-width edge
            i -= 1
        cue = names[i]
        why = f"cue {cue}: weighted random (p = {fmt(p[i])})"
    elif pol.kind == "uncertain":
        bcues = block.cues
        sds = np.array([view.value_sd(c) for c in bcues], dtype=float)
        sds = np.where(np.isfinite(sds), sds, -np.inf)
        best = np.flatnonzero(sds >= sds.max() - 1e-12)
        i = int(best[rng.integers(len(best))]) if len(best) > 1 else int(best[0])
        cue = bcues[i]
        others = ", ".join(f"{c} {fmt(s)}" for c, s in zip(bcues, sds) if c != cue)
        why = f"cue {cue}: most uncertain value (sd {fmt(sds[i])}; {others})"
    elif pol.kind in COUNTER_BIAS:
        b = sched.right_bias
        # favour the under-chosen side: P(right-correct cue) = 1 - recent P(choose right)
        p_right = min(max(1.0 - b, 1.0 - pol.max_p), pol.max_p)
        side = "right" if rng.random() < p_right else "left"
        pool = []
        for c in in_block:
            if cues[c].role == side:
                pool.append(c)
        cue = pool[int(rng.integers(len(pool)))] if len(pool) > 1 else pool[0]
        why = (f"cue {cue}: {COUNTER_BIAS[pol.kind]}, recent right choices {fmt(b)} "
               f"-> P(right-side cue) = {fmt(p_right)}")
    else:  # pragma: no cover - the loader admits only the kinds above
        raise ValueError(pol.kind)
    changes["run_len"] = sched.run_len + 1 if cue == sched.last_cue else 1
    changes["last_cue"] = cue
    return cue, changes, why


def _weighted(pol: NextCue) -> tuple[tuple[str, ...], np.ndarray, np.ndarray]:
    """A weighted policy's cues, probabilities p = w / sum(w) and their running sum
    (arrays read-only), made once per policy."""
    names = tuple(c for c, _ in pol.weights)
    w = np.array([x for _, x in pol.weights], dtype=float)
    p = w / w.sum()
    cum = np.cumsum(p)
    p.setflags(write=False)
    cum.setflags(write=False)
    return names, p, cum


# --------------------------------------------------------------------------- reward probability


def reward_prob(policy: RewardPolicy, block: Block, cue: str, env_for_cue) -> tuple[float, str, list[str]]:
    """The policy's reward probability for ``cue``: (p, reason, warnings).

    thinning: p = floor + (p_block - floor)(1 - certainty), certainty clipped to
    [0, 1]; a cue whose block probability is at or below the floor keeps it.
    """
    k = block.contingency[cue]
    if policy.kind == "fixed" or not k.rewarded:
        return k.p, _fixed_reason(block, cue), []
    warnings: list[str] = []
    value, _ = evaluate(policy.certainty, env_for_cue(cue), explain=False)
    c = float(value)
    if not math.isfinite(c):
        warnings.append(f"thinning certainty '{policy.certainty.text}' gave {fmt(c)} for {cue}; treated as 0")
        c = 0.0
    c = min(max(c, 0.0), 1.0)
    if k.p <= policy.floor:
        return k.p, f"reward p = {fmt(k.p)} for {cue}: at or below the thinning floor {fmt(policy.floor)}", warnings
    # p = floor + (p_block - floor) * (1 - certainty)
    p = policy.floor + (k.p - policy.floor) * (1.0 - c)
    why = (f"reward p = {fmt(p)} for {cue}: thinning from {fmt(k.p)} toward floor {fmt(policy.floor)}, "
           f"certainty {policy.certainty.text} = {fmt(c)}")
    return p, why, warnings


def _fixed_reason(block: Block, cue: str) -> str:
    """The reason of a fixed probability (made once per block and cue)."""
    return derived(block, "fixed_reasons", lambda b: MappingProxyType(
        {c: f"reward p = {fmt(k.p)} for {c}: fixed by block '{b.name}'" for c, k in b.contingency.items()}))[cue]


# --------------------------------------------------------------------------- staircase


def staircase_step(st: Staircase, sched: ScheduleState, correct: bool) -> dict[str, Any]:
    """Fold one scored trial into the staircase; return the changed state fields.

    Transformed up-down rule (Levitt 1971): after ``down`` correct in a row the level
    moves ``step_harder`` toward harder; after ``up`` errors in a row it moves
    ``step_easier`` toward easier; each move resets the runs. A move against the
    previous one is a reversal.
    """
    level = st.start if sched.stair_level is None else sched.stair_level
    cr, wr = sched.stair_correct_run, sched.stair_wrong_run
    direction = 0
    if correct:
        cr, wr = cr + 1, 0
        if cr >= st.down:
            direction, cr = +1, 0
    else:
        cr, wr = 0, wr + 1
        if wr >= st.up:
            direction, wr = -1, 0
    last, reversals = sched.stair_last_dir, sched.stair_reversals
    if direction:
        sign = -1.0 if st.harder == "lower" else 1.0  # the sign of a move toward harder
        step = st.step_harder if direction > 0 else -st.step_easier
        level = min(max(level + sign * step, st.lo), st.hi)
        if last and direction != last:
            reversals += 1
        last = direction
    return {"stair_level": level, "stair_correct_run": cr, "stair_wrong_run": wr,
            "stair_last_dir": last, "stair_reversals": reversals}

