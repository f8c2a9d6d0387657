"""ScheduleState: everything the rule schedule carries from trial to trial for one subject.

Plain data only (str, int, float, bool, None and tuples of str), so ``to_dict`` /
``from_dict`` round-trip exactly through msgpack or JSON. Treat it as immutable: the
engine returns new values made with ``dataclasses.replace``.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, fields
from typing import Any

from ..errors import BadArgument


@dataclass(frozen=True)  # no __slots__: evolve copies the instance dict in one step
class ScheduleState:
    """One subject's place in the curriculum and its counters.

    Counters ``*_in_block`` reset when a block starts, ``*_in_stage`` when a stage
    starts, ``*_session`` and the runs when a session opens, ``ul_today`` when the UTC
    day changes. ``stair_*`` is the block's staircase, ``sprt_*`` its SPRT; ``queue``
    is what is left of the current balanced mini-block; ``right_bias`` is the
    recent-choice estimate (fraction of 'right' choices, exponentially weighted).
    ``notes`` are warnings waiting for the next decision.
    """

    stage: str
    block: str
    session: str | None = None
    session_start: float = 0.0
    last_wall: float = 0.0
    day: str = ""
    session_ended: bool = False
    trials_total: int = 0
    trials_in_session: int = 0
    trials_in_stage: int = 0
    trials_in_block: int = 0
    blocks_in_stage: int = 0
    sessions_in_stage: int = 0
    correct_in_block: int = 0
    hits: int = 0
    misses: int = 0
    false_alarms: int = 0
    correct_rejections: int = 0
    misses_in_row: int = 0
    unrewarded_in_row: int = 0
    ul_session: float = 0.0
    ul_today: float = 0.0
    stair_level: float | None = None
    stair_correct_run: int = 0
    stair_wrong_run: int = 0
    stair_last_dir: int = 0
    stair_reversals: int = 0
    sprt_llr: float = 0.0
    sprt_verdict: str = "continue"
    queue: tuple[str, ...] = ()
    last_cue: str | None = None
    run_len: int = 0
    right_bias: float = 0.5
    n_choices: int = 0
    last_armed: bool | None = None
    notes: tuple[str, ...] = ()

    def evolve(self, **changes: Any) -> ScheduleState:
        """``dataclasses.replace`` without re-running ``__init__``: the engine calls it a
        few times per trial, and a 36-field init is most of a replace's cost."""
        if not changes.keys() <= _NAME_SET:
            raise TypeError(f"ScheduleState has no field(s) {', '.join(sorted(changes.keys() - _NAME_SET))}")
        return self._evolved(changes)

    def _evolved(self, changes: dict[str, Any]) -> ScheduleState:
        # 15.7x dataclasses.replace (tools/bench/step.py); test_fast_paths: the same value
        """:meth:`evolve` of changes the engine made itself, whose names it knows are fields.

        The new instance dict is a copy of this one (a copy of a whole dict is about
        twice as fast as inserting its fields one by one) with the changes written in."""
        fields_ = self.__dict__.copy()
        fields_.update(changes)
        return ScheduleState._of_fields(fields_)

    @staticmethod
    def _of_fields(fields_: dict[str, Any]) -> ScheduleState:
        """The state whose instance dict is ``fields_`` (every field, taken over as it is): for
        the engine, which writes a trial's changes into a copy of the old state's dict."""
        new = object.__new__(ScheduleState)
        object.__setattr__(new, "__dict__", fields_)
        return new

    def to_dict(self) -> dict[str, Any]:
        out: dict[str, Any] = {}
        for f in fields(self):
            v = getattr(self, f.name)
            out[f.name] = list(v) if isinstance(v, tuple) else v
        return out

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> ScheduleState:
        """Rebuild from ``to_dict`` output; unknown or missing keys are an error."""
        if not isinstance(data, Mapping):
            raise BadArgument("schedule state", "a map", type(data).__name__)
        names = [f.name for f in fields(cls)]
        unknown = sorted(set(data) - set(names))
        if unknown:
            raise BadArgument("schedule state", f"keys among {', '.join(names)}", unknown)
        if "stage" not in data or "block" not in data:
            raise BadArgument("schedule state", "a map with 'stage' and 'block'", sorted(data))
        kw = dict(data)
        for key in ("queue", "notes"):
            if key in kw:
                kw[key] = tuple(str(x) for x in kw[key])
        return cls(**kw)


_NAME_SET = frozenset(f.name for f in fields(ScheduleState))
