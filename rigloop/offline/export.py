"""CSV and JSONL export of a store's trials, decisions and per-trial model quantities.

Floats are written with ``repr`` so they read back exactly; None is an empty cell.
"""

from __future__ import annotations

import csv
import io
import json
import tempfile
from collections.abc import Callable, Iterable
from typing import Any, TextIO

from ..core.names import check_name
from ..errors import BadArgument
from ..replay import stored_sessions

_TRIAL_HEAD = ["subject", "session", "trial", "rig", "wall_time", "duration"]
_TRIAL_TAIL = ["reward_ul", "reward_time", "punishment", "punishment_time", "timeout_s",
               "response_kind", "response_value", "response_result", "response_latency"]
_DECISION_COLUMNS = ["subject", "session", "trial", "next_trial", "cue", "reward_prob", "reward_ul", "reward_armed",
                     "block", "stage", "end_session", "difficulty", "valve_ms", "reasons", "overrides", "warnings"]
WHATS = ("trials", "decisions", "quantities")
FORMATS = ("csv", "jsonl")


def export(store, what: str, fmt: str, out: TextIO, subject: str | None = None, session: str | None = None,
           progress: Callable[[int, int], None] | None = None) -> int:
    """Write the store's ``what`` rows (trials | decisions | quantities) to ``out`` as
    ``fmt`` (csv | jsonl); returns the number of rows written.

    JSONL: one ``Store.rows`` object per line. CSV: trials flatten their cues to
    ``cue1, cue1_onset, cue1_offset, cue2, …`` (as many slots as the widest trial) and
    their extra fields to ``extra_<name>``; quantities get one column per name (the
    union of names, sorted); decisions' reason lists are JSON arrays in their cells.
    Floats are written with ``repr`` so they read back exactly; None is an empty cell.
    ``progress(done, total)`` is called as rows are read from the store (every
    ``PROGRESS_EVERY`` rows and at the end; total: the trials in scope, one row each).
    """
    if what not in WHATS:
        raise BadArgument("what", f"one of {', '.join(WHATS)}", what)
    if fmt not in FORMATS:
        raise BadArgument("fmt", f"one of {', '.join(FORMATS)}", fmt)
    _check_scope(store, subject, session)
    rows = store.rows(what, subject=subject, session=session)
    if progress is not None:
        rows = _counted(rows, progress, rows_in_scope(store, subject, session))
    if fmt == "jsonl":
        return _write_jsonl(out, rows)
    if what == "decisions":
        return _write_csv(out, _DECISION_COLUMNS, (_decision_cells(r) for r in rows))
    return _write_wide_csv(out, what, rows)


PROGRESS_EVERY = 1000  # rows between progress calls (a call per row would cost more than the row)


def rows_in_scope(store, subject: str | None, session: str | None) -> int:
    """Trials stored in the scope (every ``what`` has one row per trial): the progress total."""
    infos = store.sessions(subject) if subject is not None else store.sessions()
    return sum(store.last_trial(i.subject, i.session) for i in infos if session is None or i.session == session)


def _counted(rows: Iterable[dict[str, Any]], progress: Callable[[int, int], None], total: int):
    """``rows`` unchanged, calling ``progress`` as they pass."""
    progress(0, total)
    n = 0
    for row in rows:
        yield row
        n += 1
        if n % PROGRESS_EVERY == 0:
            progress(n, max(total, n))
    progress(n, max(total, n))


def _check_scope(store, subject: str | None, session: str | None) -> None:
    """A named subject or session must be stored: a typo gets the known names, not an empty file."""
    if subject is not None:
        stored_sessions(store, subject, session)
    elif session is not None:
        check_name("session", "a stored session", session, dict.fromkeys(i.session for i in store.sessions()))


def _write_jsonl(out: TextIO, rows: Iterable[dict[str, Any]]) -> int:
    """One ``Store.rows`` object per line."""
    n = 0
    for row in rows:
        out.write(json.dumps(row, separators=(",", ":"), ensure_ascii=False, allow_nan=False) + "\n")
        n += 1
    return n


def _write_wide_csv(out: TextIO, what: str, rows: Iterable[dict[str, Any]]) -> int:
    """Trials or quantities as CSV, whose columns are known only after every row is read."""
    # Two passes need the same rows even while a daemon writes: spool the first pass.
    with tempfile.TemporaryFile("w+", encoding="utf-8") as spool:
        max_cues, max_steps, names = 0, 0, set()
        for row in rows:
            if what == "trials":
                max_cues = max(max_cues, len(row["cues"]))
                max_steps = max(max_steps, len(row.get("steps", ())))
                names.update(row["extra"])
            else:
                names.update(k for k in row if k not in ("subject", "session", "trial"))
            spool.write(json.dumps(row, separators=(",", ":"), allow_nan=False) + "\n")
        spool.seek(0)
        spooled = (json.loads(line) for line in spool)
        if what == "trials":
            cue_cols = [c for i in range(1, max_cues + 1) for c in (f"cue{i}", f"cue{i}_onset", f"cue{i}_offset")]
            extra_cols = [f"extra_{n}" for n in sorted(names)]
            step_cols = [f"step{i}_{k}" for i in range(1, max_steps + 1) for k in _STEP_KEYS]
            columns = _TRIAL_HEAD + cue_cols + _TRIAL_TAIL + extra_cols + step_cols
            return _write_csv(out, columns, (_trial_cells(r) for r in spooled))
        columns = ["subject", "session", "trial", *sorted(names)]
        return _write_csv(out, columns, spooled)


def _trial_cells(row: dict[str, Any]) -> dict[str, Any]:
    cells = {k: row[k] for k in _TRIAL_HEAD + _TRIAL_TAIL}
    for i, (cue, onset, offset) in enumerate(row["cues"], start=1):
        cells[f"cue{i}"], cells[f"cue{i}_onset"], cells[f"cue{i}_offset"] = cue, onset, offset
    for name, value in row["extra"].items():
        cells[f"extra_{name}"] = value
    for i, s in enumerate(row.get("steps", ()), start=1):  # multi-step trials: step1_state, ...
        for k in _STEP_KEYS:
            cells[f"step{i}_{k}"] = s[k]
    return cells


_STEP_KEYS = ("state", "action", "time", "reward_ul")


def _decision_cells(row: dict[str, Any]) -> dict[str, Any]:
    cells = dict(row)
    for name in ("reasons", "overrides", "warnings"):
        cells[name] = json.dumps(row[name], ensure_ascii=False)
    return cells


def _cell(value: Any) -> str:
    if value is None:
        return ""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        return repr(value)
    return str(value)


def _write_csv(out: TextIO, columns: list[str], rows: Iterable[dict[str, Any]]) -> int:
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow(columns)
    n = 0
    for row in rows:
        writer.writerow([_cell(row.get(c)) for c in columns])
        n += 1
    return n


def export_text(store, what: str, fmt: str, **kw: Any) -> str:
    """``export`` into a string (for small exports and tests)."""
    buf = io.StringIO()
    export(store, what, fmt, buf, **kw)
    return buf.getvalue()
