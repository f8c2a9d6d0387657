"""A schedule judged against the simulated animal's truth.

A simulated trial carries what the animal really knew in its event's ``extra`` map
(``simulate.py``): ``true_p_respond[CUE]`` (lick tasks) or ``true_p_right[CUE]`` (choice
tasks) for every cue, and ``true_engaged``. Here those are read back and set against
the blocks and stages the schedule ran, to say how far the schedule's changes fell
behind (or ran ahead of) the animal.

Trials are numbered ``n`` = 1, 2, ... from the subject's first trial, across sessions.
A session is given as ``(first, events, decisions)`` as ``simulate_session`` returns
them (``first`` from ``begin_session``; ``decisions[i]`` made after ``events[i]``), so
event i ran under ``(first, *decisions)[i]``: its block and stage are that decision's.

**Discrimination** of a block: lick tasks compare the block's rewarded cues (reward p
and volume above 0) with its unrewarded ones, choice tasks its right-side cues with its
left-side ones (cue roles). On a trial it is ``min p(positive cues) - max p(negative
cues)`` of the true probabilities, whatever the animal's engagement. A block is judged
only when its contingency has cues on both sides of that comparison.

The animal **discriminates** in a block's direction from trial D: the first trial, from
the block's first trial on, that starts ``hold`` (default 10) consecutive trials whose
discrimination is >= ``margin`` (default 0.3). The search runs through the block and on
through the blocks that directly follow it with the same direction (a change of block
or stage that did not flip what is rewarded: the animal goes on learning the same
thing), never past a flip. The **lag** is (block's last trial) - D: positive, the
schedule kept the block that many trials after the animal had learned; negative, the
block ended that many trials before it had; no D at all, the block ended before the
animal discriminated (also counted as early).

**Trials to criterion** of a stage: the trial n at which the subject first left it (its
last trial in the stage), counted from the subject's first trial.

Pure: standard library and numpy only, no I/O.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from ..errors import BadArgument

MARGIN = 0.3
HOLD = 10
_RESPOND = "true_p_respond["
_RIGHT = "true_p_right["
_ENGAGED = "true_engaged"
_RUNNING = "still running when the trials ran out"


@dataclass(frozen=True, slots=True)
class TruthTrial:
    """One simulated trial with its schedule and the animal's truth.

    ``p`` maps each cue to its true p_respond (``kind`` "lick") or p_right ("choice");
    ``why`` are the reasons of the decision it ran under, ``after`` of the one made after it.
    """

    n: int
    session: str
    trial: int
    stage: str
    block: str
    kind: str
    engaged: bool
    p: Mapping[str, float]
    why: tuple[str, ...] = ()
    after: tuple[str, ...] = ()


@dataclass(frozen=True, slots=True)
class BlockTiming:
    """One run of trials in a block: where it lay, why it ended, and when the animal learned it.

    ``ended`` is False for a block still running when the trials ran out (its ``lag`` is
    None: the schedule has not ended it); ``judged`` is False for a block with nothing to
    tell apart (``discriminated`` and ``lag`` are None)."""

    stage: str
    block: str
    first: int
    last: int
    ended: bool
    ended_by: str
    judged: bool
    discriminated: int | None
    lag: int | None

    @property
    def early(self) -> bool:
        """The schedule ended the block before the animal discriminated in its direction."""
        return self.ended and self.judged and (self.discriminated is None or self.lag < 0)


@dataclass(frozen=True, slots=True)
class StageTiming:
    """One run of trials in a stage; ``to`` is the stage that followed (None: still in it)."""

    stage: str
    first: int
    last: int
    to: str | None
    ended_by: str


# --------------------------------------------------------------------------- reading the truth


def truth_of(extra: Mapping[str, object]) -> tuple[str | None, dict[str, float]]:
    """The task kind and per-cue true probabilities in an event's ``extra`` (None, {} if absent)."""
    kind, p = None, {}
    for key, value in extra.items():
        for prefix, k in ((_RESPOND, "lick"), (_RIGHT, "choice")):
            if key.startswith(prefix) and key.endswith("]"):
                kind = k
                p[key[len(prefix):-1]] = float(value)
    return kind, p


def _parts(session) -> tuple:
    """``(first, events, decisions)`` from a triple or anything with those attributes."""
    if hasattr(session, "events"):
        return session.first, session.events, session.decisions
    first, events, decisions = session
    return first, events, decisions


def truth_trials(sessions: Iterable, start: int = 1) -> list[TruthTrial]:
    """Every trial of ``sessions`` (in order, one subject) with its block, stage and truth."""
    out: list[TruthTrial] = []
    n = start
    for session in sessions:
        first, events, decisions = _parts(session)
        if len(decisions) != len(events):
            raise BadArgument("decisions", f"one decision after each of the session's {len(events)} events",
                              len(decisions))
        ran_under = [first, *decisions][:len(events)]
        for event, under, after in zip(events, ran_under, decisions, strict=True):
            kind, p = truth_of(event.extra)
            engaged = bool(event.extra.get(_ENGAGED, 1.0))
            out.append(TruthTrial(n, event.session, event.trial, under.stage, under.block, kind or "", engaged, p,
                                  tuple(under.reasons), tuple(after.reasons)))
            n += 1
    return out


# --------------------------------------------------------------------------- blocks


def block_direction(spec, stage: str, block: str, kind: str) -> tuple[tuple[str, ...], tuple[str, ...]] | None:
    """(positive cues, negative cues) a block asks the animal to tell apart, or None.

    Lick tasks: rewarded vs unrewarded cues of its contingency; choice tasks: its
    right-side vs left-side cues (``spec.cues[c].role``)."""
    st = spec.stages.get(stage)
    b = st.blocks.get(block) if st is not None else None
    if b is None:
        return None
    if kind == "choice":
        pos = tuple(c for c in b.contingency if c in spec.cues and spec.cues[c].role == "right")
        neg = tuple(c for c in b.contingency if c in spec.cues and spec.cues[c].role == "left")
    else:
        pos = tuple(c for c, k in b.contingency.items() if k.rewarded)
        neg = tuple(c for c, k in b.contingency.items() if not k.rewarded)
    return (pos, neg) if pos and neg else None


def discrimination(p: Mapping[str, float], direction: tuple[tuple[str, ...], tuple[str, ...]]) -> float | None:
    """min p over the positive cues minus max p over the negative ones; None if a cue is missing."""
    pos, neg = direction
    if len(pos) == 1 and len(neg) == 1:  # the usual pair, without the generators (the same value)
        a, b = p.get(pos[0]), p.get(neg[0])
        return None if a is None or b is None else a - b
    if any(c not in p for c in (*pos, *neg)):
        return None
    return min(p[c] for c in pos) - max(p[c] for c in neg)


def first_held(values: Sequence[float | None], margin: float = MARGIN, hold: int = HOLD) -> int | None:
    """Index of the first of ``hold`` consecutive values >= ``margin`` (None counts as below)."""
    if isinstance(hold, bool) or not isinstance(hold, int) or hold < 1:
        raise BadArgument("hold", "a whole number >= 1", hold)
    run = 0
    for i, v in enumerate(values):
        run = run + 1 if v is not None and v >= margin else 0
        if run == hold:
            return i - hold + 1
    return None


def _runs(trials: Sequence[TruthTrial], key) -> list[tuple[int, int]]:
    """(first index, last index) of each run of consecutive trials with equal ``key``."""
    out: list[tuple[int, int]] = []
    for i, t in enumerate(trials):
        if out and key(trials[out[-1][0]]) == key(t):
            out[-1] = (out[-1][0], i)
        else:
            out.append((i, i))
    return out


def _is_change(reason: str) -> bool:
    return (reason.startswith("block '") and "' ended" in reason) or (
        reason.startswith("stage '") and (" advances to " in reason or " steps back to " in reason))


def _end_reason(trials: Sequence[TruthTrial], last: int) -> str:
    """Why the run ending at index ``last`` ended: the schedule's reason, else the session's end."""
    t = trials[last]
    nxt = trials[last + 1] if last + 1 < len(trials) else None
    for reason in (*t.after, *(nxt.why if nxt is not None else ())):
        if _is_change(reason):
            return reason
    if nxt is not None and nxt.session != t.session:
        return "a new session started in another block"
    return ""


def block_timing(trials: Sequence[TruthTrial], spec, *, margin: float = MARGIN, hold: int = HOLD) -> list[BlockTiming]:
    """Each run of trials in one block (stage and block), with when the animal learned it."""
    runs = _runs(trials, lambda t: (t.stage, t.block))
    kind = next((t.kind for t in trials if t.kind), "lick")
    directions = [block_direction(spec, trials[a].stage, trials[a].block, kind) for a, _ in runs]
    out: list[BlockTiming] = []
    for k, (a, b) in enumerate(runs):
        ended = b + 1 < len(trials)
        d, lag = None, None
        direction = directions[k]
        if direction is not None:
            end = k
            while end + 1 < len(runs) and directions[end + 1] == direction:
                end += 1  # the schedule moved on but what is rewarded did not change
            span = trials[a:runs[end][1] + 1]
            i = first_held([discrimination(t.p, direction) for t in span], margin, hold)
            if i is not None:
                d = span[i].n
                lag = trials[b].n - d if ended else None
        out.append(BlockTiming(trials[a].stage, trials[a].block, trials[a].n, trials[b].n, ended,
                               _end_reason(trials, b) if ended else _RUNNING, direction is not None, d, lag))
    return out


# --------------------------------------------------------------------------- stages


def stage_timing(trials: Sequence[TruthTrial]) -> list[StageTiming]:
    """Each run of trials in one stage, and the stage that followed it."""
    out = []
    for a, b in _runs(trials, lambda t: t.stage):
        to = trials[b + 1].stage if b + 1 < len(trials) else None
        out.append(StageTiming(trials[a].stage, trials[a].n, trials[b].n, to,
                               _end_reason(trials, b) if to is not None else _RUNNING))
    return out


def trials_to_criterion(trials: Sequence[TruthTrial]) -> dict[str, int]:
    """Stage -> the trial n at which the subject first left it (stages never left are absent)."""
    out: dict[str, int] = {}
    for s in stage_timing(trials):
        if s.to is not None and s.stage not in out:
            out[s.stage] = s.last
    return out


# --------------------------------------------------------------------------- summaries


def lags(timings: Iterable[BlockTiming]) -> list[int]:
    """The lags of blocks that ended and in which the animal discriminated."""
    return [t.lag for t in timings if t.ended and t.lag is not None]


def ended_early(timings: Iterable[BlockTiming]) -> int:
    """How many blocks ended before the animal discriminated in their direction."""
    return sum(1 for t in timings if t.early)


def median_iqr(values: Sequence[float]) -> tuple[float, float, float] | None:
    """(median, first quartile, third quartile), numpy's linear percentiles; None if empty."""
    if not len(values):
        return None
    q1, med, q3 = np.percentile(np.asarray(values, dtype=float), [25.0, 50.0, 75.0])
    return float(med), float(q1), float(q3)
