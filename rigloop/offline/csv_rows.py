"""CSV rows -> TrialEvents through a column mapping, all or nothing.

Import is all or nothing: ``parse_csv`` returns every event it could build *and* every
problem it found (row numbers as a spreadsheet shows them, the header being row 1); the
caller stores nothing unless the problem list is empty (``read_events`` does that check).
Trial numbers must run on by one within each session, in file order.
"""

from __future__ import annotations

import csv
import os
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from typing import Any, TextIO

from ..core.trial import CuePresentation, Outcome, Response, TrialEvent, TrialStep
from ..errors import BadEvent, RigloopError
from .csv_cells import CellError
from .csv_map import ColumnMap, Source

_MAX_PROBLEMS_SHOWN = 20


@dataclass(frozen=True, slots=True)
class RowProblem:
    """One fault in a CSV file: ``row`` counts as a spreadsheet does (header = 1),
    ``column`` is the CSV column (None when the fault is not in one cell)."""

    row: int
    column: str | None
    reason: str

    def __str__(self) -> str:
        where = f"row {self.row}" + (f", column {self.column!r}" if self.column is not None else "")
        return f"{where}: {self.reason}"


class CsvRejected(RigloopError, ValueError):
    """A CSV file had problems, so none of it was imported. ``problems``: RowProblems."""

    def __init__(self, problems: list[RowProblem], source: str | None = None):
        self.problems = list(problems)
        self.source = source
        n = len(self.problems)
        shown = "\n".join(f"  - {p}" for p in self.problems[:_MAX_PROBLEMS_SHOWN])
        more = f"\n  … and {n - _MAX_PROBLEMS_SHOWN} more" if n > _MAX_PROBLEMS_SHOWN else ""
        head = f"{source}: " if source else ""
        super().__init__(f"{head}{n} problem{'s' if n != 1 else ''}; nothing was imported:\n{shown}{more}")



def parse_csv(path: str | os.PathLike | TextIO, mapping: ColumnMap) -> tuple[list[TrialEvent], list[RowProblem]]:
    """Read a CSV file through ``mapping``: ``(events, problems)``, events in file order.

    Every row is checked (cells, the TrialEvent rules, repeated keys, and trial numbers
    that must run on by one within each session in file order); the caller imports
    nothing unless ``problems`` is empty. Blank rows are skipped but counted."""
    if isinstance(path, (str, os.PathLike)):
        try:
            with open(path, encoding=mapping.encoding, newline="") as f:
                return _parse(f, mapping)
        except OSError as err:
            return [], [RowProblem(0, None, f"cannot read the file ({err.strerror or err})")]
    return _parse(path, mapping)


def _parse(stream: TextIO, m: ColumnMap) -> tuple[list[TrialEvent], list[RowProblem]]:
    problems: list[RowProblem] = []
    events: list[TrialEvent] = []
    reader = csv.reader(stream, delimiter=m.delimiter)
    row_no = 1
    try:
        header = next(reader, None)
        if header is None:
            return [], [RowProblem(1, None, "the file is empty (a header row is required)")]
        header = [h.strip() for h in header]
        seen: set[str] = set()
        for name in header:
            if name and name in seen:
                problems.append(RowProblem(1, name, "appears twice in the header"))
            seen.add(name)
        for col in m.columns():
            if col not in seen:
                problems.append(RowProblem(1, col, f"is named in the mapping but not in the header "
                                                   f"(header: {', '.join(header)})"))
        if problems:
            return [], problems
        first_row: dict[tuple[str, str, int], int] = {}
        last_trial: dict[tuple[str, str], int] = {}
        for cells in reader:
            row_no += 1
            if not any(c.strip() for c in cells):
                continue
            if len(cells) != len(header):
                problems.append(RowProblem(row_no, None, f"has {len(cells)} cells, the header has {len(header)}"))
                continue
            row = dict(zip(header, cells))
            event, problem = _event(row, row_no, m)
            if problem is not None:
                problems.append(problem)
                continue
            key, group = event.key, (event.subject, event.session)
            if key in first_row:
                problems.append(RowProblem(row_no, m.trial.column, f"repeats trial {event.trial} of session "
                                           f"{event.session!r} for subject {event.subject!r} from row {first_row[key]}"))
                continue
            first_row[key] = row_no
            before = last_trial.get(group)
            if before is not None and event.trial != before + 1:
                problems.append(RowProblem(row_no, m.trial.column, f"trial {event.trial} follows trial {before} of session "
                                           f"{event.session!r} for subject {event.subject!r}; a session's trials must "
                                           "run on by one in file order"))
            last_trial[group] = event.trial
            events.append(event)
    except UnicodeDecodeError as err:
        problems.append(RowProblem(row_no + 1, None, f"is not {m.encoding} text ({err.reason})"))
    except csv.Error as err:
        problems.append(RowProblem(row_no + 1, None, f"is not readable CSV ({err})"))
    return events, problems


def _event(row: Mapping[str, str], row_no: int, m: ColumnMap) -> tuple[TrialEvent | None, RowProblem | None]:
    """One row -> TrialEvent, or the first problem found (naming its column)."""
    current: Source | None = None
    field_columns: dict[str, str | None] = {}

    def get(src: Source | None, default: Any = None) -> Any:
        nonlocal current
        if src is None:
            return default
        current = src
        value = src.read(row)
        return default if value is None else value

    try:
        subject = get(m.subject)
        session = get(m.session)
        trial = get(m.trial)
        rig = get(m.rig)
        for name, src in (("subject", m.subject), ("session", m.session), ("trial", m.trial), ("rig", m.rig)):
            field_columns[name] = src.column
        cues = []
        for slot in m.cues:
            cue = get(slot.cue)
            if cue is None:
                continue
            onset, offset = get(slot.onset), get(slot.offset)
            for part, src, value in (("onset", slot.onset, onset), ("offset", slot.offset, offset)):
                field_columns[f"cues[{cue}].{part}"] = src.column
                if value is None:
                    current = src
                    raise CellError(f"is blank, but cue {cue!r} needs its {part} time")
            field_columns["cues"] = slot.cue.column
            cues.append(CuePresentation(cue, onset, offset))
        if m.reward_given is not None:
            reward_ul = m.volume_ul if get(m.reward_given, False) else 0.0
            field_columns["outcome.reward_ul"] = m.reward_given.column
        else:
            reward_ul = get(m.reward_ul, 0.0)
            field_columns["outcome.reward_ul"] = m.reward_ul.column if m.reward_ul else None
        outcome = Outcome(
            reward_ul=reward_ul,
            reward_time=get(m.reward_time),
            punishment=get(m.punishment),
            punishment_time=get(m.punishment_time),
            timeout_s=get(m.timeout_s, 0.0),
        )
        response = Response(kind=get(m.kind, "none"), value=get(m.value), result=get(m.result), latency=get(m.latency))
        extra = {name: get(src) for name, src in m.extra}
        wall_time = get(m.wall_time, 0.0)
        duration = get(m.duration)
        steps = _steps(m, get, field_columns)
        current = None
        return TrialEvent(subject, rig, session, trial, tuple(cues), outcome, response, duration, wall_time, extra,
                          steps), None
    except CellError as err:
        column = current.column if current is not None else None
        return None, RowProblem(row_no, column, str(err))
    except BadEvent as err:
        return None, RowProblem(row_no, _column_of(err.field, m, field_columns), str(err))


def _steps(m: ColumnMap, get, field_columns: dict[str, str | None]) -> tuple[TrialStep, ...]:
    """The row's steps, slot by slot, up to the first blank state cell."""
    steps = []
    for i, slot in enumerate(m.steps):
        state = get(slot.state)
        if state is None:
            break
        fields = {"state": slot.state, "time": slot.time, "action": slot.action, "reward_ul": slot.reward_ul}
        for part, src in fields.items():
            field_columns[f"steps[{i}].{part}"] = src.column if src is not None else None
        time = get(slot.time)
        if time is None:
            raise BadEvent(f"steps[{i}].time", f"is blank, but step {state!r} needs its time", None)
        steps.append(TrialStep(state, get(slot.action), time, get(slot.reward_ul, 0.0), i))
    field_columns["steps"] = m.steps[0].state.column if m.steps else None
    return tuple(steps)


def _column_of(field: str, m: ColumnMap, known: Mapping[str, str | None]) -> str | None:
    """The CSV column behind a TrialEvent field named in a BadEvent, if there is one."""
    if field in known:
        return known[field]
    simple = {
        "outcome.reward_time": m.reward_time, "outcome.punishment": m.punishment,
        "outcome.punishment_time": m.punishment_time, "outcome.timeout_s": m.timeout_s,
        "response.kind": m.kind, "response.value": m.value, "response.result": m.result,
        "response.latency": m.latency, "wall_time": m.wall_time, "duration": m.duration,
        "subject": m.subject, "session": m.session, "trial": m.trial, "rig": m.rig,
    }
    for name, src in m.extra:
        simple[f"extra.{name}"] = src
    src = simple.get(field)
    return src.column if src is not None else None


def group_events(events: Iterable[TrialEvent]) -> dict[tuple[str, str], list[TrialEvent]]:
    """Events grouped by (subject, session), groups and events in file order."""
    groups: dict[tuple[str, str], list[TrialEvent]] = {}
    for e in events:
        groups.setdefault((e.subject, e.session), []).append(e)
    return groups


def read_events(path: str | os.PathLike, mapping: ColumnMap) -> dict[tuple[str, str], list[TrialEvent]]:
    """``parse_csv`` then ``group_events``; raises CsvRejected if any row has a problem."""
    events, problems = parse_csv(path, mapping)
    if problems:
        raise CsvRejected(problems, os.fspath(path))
    return group_events(events)
