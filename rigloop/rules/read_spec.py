"""Parsed TOML -> the rule file's spec: the top-level keys, each section by its reader, the
session's end criteria, and the checks across sections.

Sections are read in a fixed order and every reader records on one :class:`Reader`, so a
file's problems come back together and always in the same order.
"""

from __future__ import annotations

from .feasible import check_criteria
from .model import SessionEnd, Spec, Stage
from .read_cues import cue_context, read_cues
from .read_model import (
    read_behaviour,
    read_features,
    read_learner,
    read_outcomes,
    read_performance,
    read_response_model,
)
from .read_stages import check_graph, read_stages
from .reader import Reader
from .welfare import parse_limits

TOP_KEYS = ["name", "description", "reward_unit_ul", "first_stage", "learner", "features", "performance",
            "behaviour", "outcomes", "response_model", "cues", "stages", "session_end", "welfare"]


def parse_spec(data: dict) -> tuple[Spec | None, list[str]]:
    """Build the spec from parsed TOML; return (spec or None, problems)."""
    r = Reader()
    r.keys(data, TOP_KEYS, "")
    name = r.text(data, "name", "name", required=True) or "unnamed"
    description = r.text(data, "description", "description", "") or ""
    unit = r.num(data, "reward_unit_ul", "reward_unit_ul", 1.0, lo=0, lo_open=True, hi=1000, required=True)
    learner = read_learner(r, data)
    features = read_features(r, data, learner)
    performance = read_performance(r, data)
    behaviour, outcomes, response = read_behaviour(r, data), read_outcomes(r, data), read_response_model(r, data)
    cues = read_cues(r, data)
    welfare, wp = parse_limits(data.get("welfare"), "welfare")
    r.problems.extend(wp)
    stages = read_stages(r, data, cues, welfare)
    first_stage = _first_stage(r, data, stages)
    session_end = read_session_end(r, data, cues)
    check_graph(r, stages, first_stage)
    check_criteria(r, stages, session_end)
    if stages and not any(b.rewarded_cues() for s in stages.values() for b in s.blocks.values()):
        lost = next((path for thing, path in r.dropped.items() if thing.startswith("cue:")), None)
        r.add("stages", "no block rewards any cue; a water-restricted animal must be able to earn water", follows=lost)
    if r.problems:
        return None, r.report()
    spec = Spec(
        name=name, description=description, reward_unit_ul=unit, learner=learner, features=features,
        performance=performance, cues=cues, stages=stages, first_stage=first_stage,
        session_end=tuple(session_end), welfare=welfare, behaviour=behaviour, outcomes=outcomes, response=response,
        notes=tuple(r.notes),
    )
    return spec, []


def _first_stage(r: Reader, data: dict, stages: dict[str, Stage]) -> str:
    """The stage a new subject starts in: the one named, else the first in the file."""
    first_stage = r.text(data, "first_stage", "first_stage")
    if first_stage is None:
        return next(iter(stages), "")
    if first_stage not in stages:
        r.add("first_stage", f"no stage named {first_stage!r} (stages: {', '.join(stages)})")
    return first_stage


def read_session_end(r: Reader, data: dict, cues) -> list[SessionEnd]:
    """[session_end]: named criteria, any of which ends the session."""
    t = r.table(data, "session_end", "session_end") or {}
    ctx = cue_context(cues)
    out = []
    for name, v in t.items():
        path = f"session_end.{name}"
        e = r.expr({name: v}, name, path, ctx)
        if e is not None:
            out.append(SessionEnd(name, e))
    return out
