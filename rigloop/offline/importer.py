"""Import trial tables (years of a lab's CSV files) as stored sessions.

Each imported session is run through ``begin_session`` and ``step`` under the rule
file given, exactly as if the trials had arrived live, so the store afterwards holds
decisions and per-trial model quantities that replay reproduces. All or nothing: a
bad cell, a column that looks like another unit (ms for s, mL for µL: ``csv_units``), a
trial that does not fit its session, or a session already stored rejects the whole file
and stores nothing.
"""

from __future__ import annotations

import os
from dataclasses import dataclass

from ..core.step import begin_session, session_seed, step
from ..core.subject import new_subject
from ..errors import BadEvent, RigloopError
from ..replay import recover
from ..store import SessionInfo
from .csv_units import UnitsRejected, apply_units, check_units, parse_units
from .tables import CsvRejected, group_events, load_mapping, parse_csv


class ImportRejected(RigloopError, ValueError):
    """The trials do not fit their sessions; ``problems`` lists each (nothing was stored)."""

    def __init__(self, problems: list[str], source: str):
        self.problems = problems
        shown = "\n".join(f"  - {p}" for p in problems[:20])
        more = f"\n  ... and {len(problems) - 20} more" if len(problems) > 20 else ""
        super().__init__(f"{source}: {len(problems)} trial(s) rejected, nothing imported:\n{shown}{more}")


@dataclass(frozen=True)
class ImportReport:
    subjects: int
    sessions: int
    trials: int

    def summary(self, source: str) -> str:
        return (f"imported {self.trials:,} trials in {self.sessions:,} sessions of {self.subjects:,} subjects "
                f"from {source}")


def import_csv(store, csv_path, mapping_path, rules, *, progress=None, units=None) -> ImportReport:
    """Read ``csv_path`` through the column mapping, step every trial under ``rules``,
    and store all sessions in one transaction.

    ``units`` states the table's units (``{"time": "ms", "reward": "mL"}`` or the text
    ``"time=ms,reward=mL"``; see ``csv_units``) and converts them. Raises CsvRejected,
    UnitsRejected (a column looks like another unit) or ImportRejected."""
    if units is not None and not isinstance(units, str):
        units = ",".join(f"{k}={v}" for k, v in units.items())
    stated = parse_units(units)
    mapping = apply_units(load_mapping(mapping_path), stated)
    events, bad_rows = parse_csv(csv_path, mapping)
    wrong = check_units(events, mapping, stated)  # first: a wrong unit also breaks rows
    if wrong:
        raise UnitsRejected(wrong, str(csv_path), rows_refused=len({p.row for p in bad_rows}))
    if bad_rows:
        raise CsvRejected(bad_rows, os.fspath(csv_path))
    groups = group_events(events)
    total = sum(len(v) for v in groups.values())
    states: dict[str, object] = {}
    sessions, problems = [], []
    done = 0
    for (subject, session), events in groups.items():
        state = states.get(subject)
        if state is None:
            state = recover(store, subject) or new_subject(subject, rules)
        seed = session_seed(subject, session)
        opened = events[0].wall_time
        state, first = begin_session(state, rules, session=session, rig=events[0].rig, wall_time=opened, seed=seed)
        items = []
        for event in events:
            try:
                state, decision, update = step(state, event, rules)
            except BadEvent as err:
                problems.append(f"subject {subject!r}, session {session!r}, trial {event.trial}: {err}")
                break
            items.append((event, decision, update.quantities, None))
            done += 1
            if progress is not None:
                progress(done, total)
        if items:  # a snapshot at the end of each imported session speeds later recovery
            last = items[-1]
            items[-1] = (last[0], last[1], last[2], state.to_bytes())
        states[subject] = state
        info = SessionInfo.new(subject, session, events[0].rig, rules.name, rules.text, seed, opened,
                               meta={"first_decision": first.to_dict(), "imported_from": str(csv_path)})
        sessions.append((info, items))
    if problems:
        raise ImportRejected(problems, str(csv_path))
    n = store.import_sessions(sessions)
    return ImportReport(subjects=len(states), sessions=len(sessions), trials=n)
