"""What the animal did and what it got, read from a finished trial for its models.

The behaviour estimate reads the animal's response; the learner reads its rewards and
punishments and, for action values, the action it took on each cue.
"""

from __future__ import annotations

from . import behaviour as B
from .derived import derived
from .learner_setup import action_cue
from .trial import TrialEvent


def _actions_table(rules) -> dict[str, tuple[str, ...]] | None:
    """cue -> its actions when the learner holds action values, else None (made once per rule file)."""
    return derived(rules, "actions", lambda r: {c: r.spec.actions_of(c) for c in r.cues}
                   if r.learner.values == "cue_action" else None)


def _scored(event: TrialEvent) -> bool | None:
    """True/False for a scored response; None for omitted or unscored trials.

    Omissions are left out of the learning curve (common practice for choice tasks);
    they count towards disengagement in the schedule instead.
    """
    result = event.response.result
    if result == "correct":
        return True
    if result == "incorrect":
        return False
    return None


def _is_go(spec, schedule, cue: str) -> bool | None:
    """Whether the current block rewards ``cue`` (None: the cue is not in the block)."""
    stage = spec.stages.get(schedule.stage)
    block = stage.blocks.get(schedule.block) if stage is not None else None
    if block is None or cue not in block.contingency:
        return None
    return block.contingency[cue].rewarded


def _action_cues(event: TrialEvent, kind: str, did: bool | None) -> list[tuple[str, float, float]]:
    """The trial's cues as the action-value learner's columns: ``cue:action`` for the
    action the animal took; none when it took none that was observed (an omission)."""
    if did is None:
        return []
    if kind == B.RIGHT:
        action = "right" if did else "left"
    else:
        action = "respond" if did else "withhold"
    return [(action_cue(c.cue, action), c.onset, c.offset) for c in event.cues]


def _punishments(spec, event: TrialEvent) -> list[tuple[float, float]]:
    """The trial's punishment as a learner outcome ``(time, value in reward units)``.

    A named punishment, or a timeout (``timeout_s`` > 0 with none named), counts once at
    its time: ``punishment_time``, else the response's latency, else the last cue's end.
    """
    out = event.outcome
    kind = out.punishment
    if kind is None:
        if not out.timeout_s > 0.0:
            return []
        kind = "timeout"
    value = spec.outcomes.value_of(kind)
    if value == 0.0:
        return []
    t = out.punishment_time
    if t is None:
        t = event.response.latency
    if t is None:
        t = max((c.offset for c in event.cues), default=0.0)
    return [(min(t, event.duration), value)]
