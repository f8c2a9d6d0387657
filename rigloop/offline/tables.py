"""Trial tables: CSV import through a column mapping, and CSV/JSONL export from the store.

Import is all or nothing: ``parse_csv`` returns every event it could build *and* every
problem it found (row numbers as a spreadsheet shows them, the header being row 1); the
caller stores nothing unless the problem list is empty (``read_events`` does that check).

The column mapping is a TOML file. Each field is a column name, or a table:

    { column = "name" }                      the cell, converted to the field's type
    { value = 4.0 }                          the same constant on every row
    { column = "name", map = { "1" = "correct", "0" = "incorrect", "" = "omitted" } }
                                             the cell looked up in a map; every cell must
                                             be a key; "" as a map value means "none"

Cells are stripped of surrounding spaces; a blank cell in an optional field means none.
See ``tests/data/import_map.toml`` for a worked example with every section:

    [csv]       delimiter (default ","), encoding (default "utf-8-sig")
    [trial]     subject, session, trial, rig (required); wall_time, duration
                wall_time takes format = "epoch" (default) or "iso", and timezone = "Area/City"
                for ISO times written without an offset
    [[cue]]     one table per cue slot: cue, onset, offset; a blank cue cell leaves the slot empty
    [outcome]   reward_ul (µL), or rewarded (true/false, 1/0, yes/no) with volume_ul =
                <constant µL>; reward_time, punishment, punishment_time, timeout_s
    [response]  kind, value, result, latency
    [extra]     name = source; a source may add type = "auto" | "float" | "int" | "str" | "bool"
"""

from __future__ import annotations

import codecs
import csv
import io
import json
import math
import os
import re
import tempfile
import tomllib
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from datetime import datetime, timezone
from typing import Any, TextIO
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

from ..core.trial import (
    PUNISHMENTS,
    RESPONSE_RESULTS,
    CuePresentation,
    Outcome,
    Response,
    TrialEvent,
)
from ..errors import BadArgument, BadEvent, RigloopError, RuleError

_MAX_PROBLEMS_SHOWN = 20


class MappingError(RuleError):
    """A column mapping is invalid; ``problems`` lists every fault with its key path."""

    def __init__(self, problems: list[str], source: str | None = None):
        super().__init__(problems, source)
        head = f"{source}: " if source else ""
        n = len(self.problems)
        lines = "\n".join(f"  - {p}" for p in self.problems)
        self.args = (f"{head}{n} problem{'s' if n != 1 else ''} in column mapping:\n{lines}",)


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


# --------------------------------------------------------------------------- cell conversion


class _CellError(ValueError):
    """A cell (or constant) that cannot become its field's value; the text is the reason."""


_INT_RE = re.compile(r"^[+-]?\d+$")
_TRUE = {"1", "true", "t", "yes", "y"}
_FALSE = {"0", "false", "f", "no", "n", ""}


def _to_str(v: Any) -> str | None:
    if isinstance(v, bool) or not isinstance(v, (str, int, float)):
        raise _CellError(f"{v!r} is not text")
    text = str(v).strip()
    return text or None


def _to_float(v: Any) -> float | None:
    if isinstance(v, bool):
        raise _CellError(f"{v!r} is not a number")
    if isinstance(v, (int, float)):
        x = float(v)
    else:
        text = str(v).strip()
        if not text:
            return None
        try:
            x = float(text)
        except ValueError:
            raise _CellError(f"{text!r} is not a number") from None
    if not math.isfinite(x):
        raise _CellError(f"{v!r} is not a finite number")
    return x


def _to_int(v: Any) -> int | None:
    if isinstance(v, int) and not isinstance(v, bool):
        return v
    x = _to_float(v)
    if x is None:
        return None
    if x != int(x):
        raise _CellError(f"{v!r} is not a whole number")
    return int(x)


def _to_bool(v: Any) -> bool | None:
    if isinstance(v, bool):
        return v
    if isinstance(v, int) and v in (0, 1):
        return bool(v)
    text = str(v).strip().lower()
    if text in _TRUE:
        return True
    if text in _FALSE:
        return False if text else None
    raise _CellError(f"{v!r} is not true/false, 1/0 or yes/no")


def _to_auto(v: Any) -> float | int | str | None:
    """A number when the cell reads as one (whole numbers stay int), else text."""
    if isinstance(v, bool):
        return v
    if isinstance(v, (int, float)):
        return _to_float(v) if isinstance(v, float) else v
    text = str(v).strip()
    if not text:
        return None
    if _INT_RE.match(text):
        return int(text)
    try:
        x = float(text)
    except ValueError:
        return text
    return x if math.isfinite(x) else text


_CONVERTERS = {"str": _to_str, "float": _to_float, "int": _to_int, "bool": _to_bool, "auto": _to_auto}


def _epoch_or_iso(fmt: str, tz: str | None):
    zone = ZoneInfo(tz) if tz else None

    def convert(v: Any) -> float | None:
        if fmt == "epoch":
            return _to_float(v)
        text = _to_str(v)
        if text is None:
            return None
        try:
            moment = datetime.fromisoformat(text)
        except ValueError:
            raise _CellError(f"{text!r} is not an ISO-8601 time") from None
        if moment.tzinfo is None:
            if zone is None:
                raise _CellError(f"{text!r} has no UTC offset; add one or set timezone in the mapping")
            moment = moment.replace(tzinfo=zone)
        return moment.astimezone(timezone.utc).timestamp()

    return convert


# --------------------------------------------------------------------------- mapping


@dataclass(frozen=True, slots=True)
class Source:
    """Where a field's value comes from: a ``column`` (optionally through ``map``) or a
    constant ``value``. ``path`` is the mapping key, for messages."""

    path: str
    column: str | None
    value: Any
    map: Mapping[str, Any] | None
    convert: Any  # cell -> value; raises _CellError

    def read(self, row: Mapping[str, str]) -> Any:
        if self.column is None:
            return self.value
        cell = row.get(self.column, "").strip()
        if self.map is not None:
            if cell not in self.map:
                keys = ", ".join(repr(k) for k in self.map)
                raise _CellError(f"{cell!r} is not in the map for {self.path} (allowed: {keys})")
            return self.map[cell]
        return self.convert(cell)


@dataclass(frozen=True, slots=True)
class CueSlot:
    cue: Source
    onset: Source
    offset: Source


@dataclass(frozen=True, slots=True)
class ColumnMap:
    """A validated column mapping (see the module docstring); built by ``load_mapping``."""

    subject: Source
    session: Source
    trial: Source
    rig: Source
    wall_time: Source | None
    duration: Source | None
    cues: tuple[CueSlot, ...]
    reward_ul: Source | None
    reward_given: Source | None
    volume_ul: float | None
    reward_time: Source | None
    punishment: Source | None
    punishment_time: Source | None
    timeout_s: Source | None
    kind: Source | None
    value: Source | None
    result: Source | None
    latency: Source | None
    extra: tuple[tuple[str, Source], ...]
    delimiter: str = ","
    encoding: str = "utf-8-sig"
    source: str | None = None

    def sources(self) -> list[Source]:
        out = [self.subject, self.session, self.trial, self.rig, self.wall_time, self.duration,
               self.reward_ul, self.reward_given, self.reward_time, self.punishment, self.punishment_time,
               self.timeout_s, self.kind, self.value, self.result, self.latency]
        for slot in self.cues:
            out += [slot.cue, slot.onset, slot.offset]
        out += [s for _, s in self.extra]
        return [s for s in out if s is not None]

    def columns(self) -> list[str]:
        """The CSV columns the mapping reads, in mapping order, each once."""
        return list(dict.fromkeys(s.column for s in self.sources() if s.column is not None))


_SECTIONS = {"csv", "trial", "cue", "outcome", "response", "extra"}
_TRIAL_KEYS = {"subject": "str", "session": "str", "trial": "int", "rig": "str", "wall_time": "time",
               "duration": "float"}
_OUTCOME_KEYS = {"reward_ul": "float", "rewarded": "bool", "volume_ul": None, "reward_time": "float",
                 "punishment": "str", "punishment_time": "float", "timeout_s": "float"}
_RESPONSE_KEYS = {"kind": "str", "value": "auto", "result": "str", "latency": "float"}
_CUE_KEYS = {"cue": "str", "onset": "float", "offset": "float"}
_CHOICES = {"response.result": RESPONSE_RESULTS, "outcome.punishment": PUNISHMENTS}


class _Loader:
    def __init__(self, source: str | None):
        self.source = source
        self.problems: list[str] = []

    def table(self, data: Any, path: str, allowed: Iterable[str]) -> dict[str, Any]:
        if not isinstance(data, dict):
            self.problems.append(f"{path} must be a table (got {type(data).__name__})")
            return {}
        allowed = list(allowed)
        for key in data:
            if key not in allowed:
                self.problems.append(f"{path}.{key} is not a known key (known: {', '.join(allowed)})")
        return {k: v for k, v in data.items() if k in allowed}

    def spec(self, spec: Any, path: str, kind: str, *, extra_keys: Iterable[str] = ()) -> Source | None:
        """Turn a field's mapping entry into a Source; problems are recorded, None returned."""
        if isinstance(spec, str):
            spec = {"column": spec}
        if not isinstance(spec, dict):
            self.problems.append(f"{path} must be a column name or a table with column or value "
                                 f"(got {type(spec).__name__})")
            return None
        extra_keys = list(extra_keys)
        allowed = ["column", "value", "map", *extra_keys]
        for key in spec:
            if key not in allowed:
                self.problems.append(f"{path}.{key} is not a known key (known: {', '.join(allowed)})")
        ok = len(self.problems)
        if ("column" in spec) == ("value" in spec):
            self.problems.append(f"{path} needs exactly one of column or value")
            return None
        column = spec.get("column")
        if column is not None and (not isinstance(column, str) or not column.strip()):
            self.problems.append(f"{path}.column must be a non-empty column name (got {column!r})")
            return None
        if kind == "time":
            fmt = spec.get("format", "epoch")
            tz = spec.get("timezone")
            if fmt not in ("epoch", "iso"):
                self.problems.append(f"{path}.format must be epoch or iso (got {fmt!r})")
                return None
            if tz is not None:
                try:
                    if not isinstance(tz, str):
                        raise ZoneInfoNotFoundError(tz)
                    ZoneInfo(tz)
                except (ZoneInfoNotFoundError, ValueError):
                    self.problems.append(f"{path}.timezone must be a time zone name such as 'Europe/Lisbon' (got {tz!r})")
                    return None
            convert = _epoch_or_iso(fmt, tz)
        else:
            if kind == "extra":
                kind = spec.get("type", "auto")
                if kind not in _CONVERTERS:
                    self.problems.append(f"{path}.type must be one of {', '.join(_CONVERTERS)} (got {kind!r})")
                    return None
            convert = _CONVERTERS[kind]
        choices = _CHOICES.get(path)

        def check(v: Any, where: str) -> Any:
            try:
                out = None if v == "" else convert(v)  # "" in a map means none
            except _CellError as err:
                self.problems.append(f"{where}: {err}")
                return None
            if choices is not None and out is not None and out not in choices:
                self.problems.append(f"{where}: {out!r} is not one of {', '.join(choices)}")
            return out

        value, mapping = None, None
        if "value" in spec:
            if "map" in spec:
                self.problems.append(f"{path}.map needs a column (a constant value has nothing to map)")
            value = check(spec["value"], f"{path}.value")
        if "map" in spec and column is not None:
            raw = spec["map"]
            if not isinstance(raw, dict) or not raw:
                self.problems.append(f"{path}.map must be a non-empty table of cell text = value")
            else:
                mapping = {str(k).strip(): check(v, f"{path}.map[{k!r}]") for k, v in raw.items()}
        if len(self.problems) > ok:
            return None
        return Source(path, column.strip() if column else None, value, mapping, convert)


def load_mapping(path_or_text: str | os.PathLike) -> ColumnMap:
    """Read and validate a column mapping from a TOML file path or TOML text.

    Raises MappingError (a RuleError) listing every problem found, with key paths."""
    source: str | None = None
    if isinstance(path_or_text, os.PathLike) or (
            isinstance(path_or_text, str) and "\n" not in path_or_text and "=" not in path_or_text):
        source = os.fspath(path_or_text)
        try:
            with open(source, "rb") as f:
                text = f.read().decode("utf-8")
        except OSError as err:
            raise MappingError([f"cannot read the mapping file ({err.strerror or err})"], source) from None
        except UnicodeDecodeError as err:
            raise MappingError([f"the mapping file is not UTF-8 text ({err.reason} at byte {err.start})"], source) from None
    elif isinstance(path_or_text, str):
        text = path_or_text
    else:
        raise BadArgument("path_or_text", "a mapping file path or TOML text", path_or_text)
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise MappingError([f"not valid TOML: {err}"], source) from None
    return _build(data, source)


def _build(data: dict[str, Any], source: str | None) -> ColumnMap:
    ld = _Loader(source)
    for key in data:
        if key not in _SECTIONS:
            ld.problems.append(f"{key} is not a known section (known: {', '.join(sorted(_SECTIONS))})")

    csv_opts = ld.table(data.get("csv", {}), "csv", ["delimiter", "encoding"])
    delimiter = csv_opts.get("delimiter", ",")
    if not isinstance(delimiter, str) or len(delimiter) != 1 or delimiter in "\"\r\n":
        ld.problems.append(f"csv.delimiter must be one character other than a quote or newline (got {delimiter!r})")
    encoding = csv_opts.get("encoding", "utf-8-sig")
    try:
        codecs.lookup(encoding)
    except (LookupError, TypeError):
        ld.problems.append(f"csv.encoding must be a text encoding such as 'utf-8' (got {encoding!r})")

    trial = ld.table(data.get("trial", {}), "trial", _TRIAL_KEYS)
    fields: dict[str, Source | None] = {}
    for key, kind in _TRIAL_KEYS.items():
        if key in trial:
            fields[key] = ld.spec(trial[key], f"trial.{key}", kind,
                                  extra_keys=("format", "timezone") if kind == "time" else ())
        elif key in ("subject", "session", "trial", "rig"):
            ld.problems.append(f"trial.{key} is required (a column name or {{ value = ... }})")

    cues = []
    raw_cues = data.get("cue", [])
    if not isinstance(raw_cues, list):
        ld.problems.append("cue must be an array of tables ([[cue]] sections)")
        raw_cues = []
    for i, raw in enumerate(raw_cues, start=1):
        slot = ld.table(raw, f"cue[{i}]", _CUE_KEYS)
        parts = {}
        for key, kind in _CUE_KEYS.items():
            if key not in slot:
                ld.problems.append(f"cue[{i}].{key} is required")
            else:
                parts[key] = ld.spec(slot[key], f"cue[{i}].{key}", kind)
        if all(parts.get(k) is not None for k in _CUE_KEYS):
            cues.append(CueSlot(parts["cue"], parts["onset"], parts["offset"]))

    outcome = ld.table(data.get("outcome", {}), "outcome", _OUTCOME_KEYS)
    rw: dict[str, Source | None] = {}
    for key, kind in _OUTCOME_KEYS.items():
        if key in outcome and kind is not None:
            rw[key] = ld.spec(outcome[key], f"outcome.{key}", kind)
    volume = outcome.get("volume_ul")
    if "reward_ul" in outcome and "rewarded" in outcome:
        ld.problems.append("outcome needs reward_ul or rewarded (with volume_ul), not both")
    if "rewarded" in outcome:
        if isinstance(volume, bool) or not isinstance(volume, (int, float)) or not math.isfinite(volume) or volume <= 0:
            ld.problems.append(f"outcome.volume_ul must be a number of µL > 0 when outcome.rewarded is used "
                               f"(got {volume!r})")
        else:
            volume = float(volume)
    elif volume is not None:
        ld.problems.append("outcome.volume_ul goes with outcome.rewarded (use outcome.reward_ul for a volume per row)")

    response = ld.table(data.get("response", {}), "response", _RESPONSE_KEYS)
    rs = {key: ld.spec(response[key], f"response.{key}", kind) for key, kind in _RESPONSE_KEYS.items() if key in response}

    extra = []
    raw_extra = data.get("extra", {})
    if not isinstance(raw_extra, dict):
        ld.problems.append(f"extra must be a table of name = source (got {type(raw_extra).__name__})")
        raw_extra = {}
    for name, spec in raw_extra.items():
        if not name or name != name.strip() or not name.isprintable() or len(name) > 64:
            ld.problems.append(f"extra.{name}: a name must be printable, without surrounding spaces, "
                               "at most 64 characters")
            continue
        src = ld.spec(spec, f"extra.{name}", "extra", extra_keys=("type",))
        if src is not None:
            extra.append((name, src))

    if ld.problems:
        raise MappingError(ld.problems, source)
    mapping = ColumnMap(
        subject=fields["subject"], session=fields["session"], trial=fields["trial"], rig=fields["rig"],
        wall_time=fields.get("wall_time"), duration=fields.get("duration"), cues=tuple(cues),
        reward_ul=rw.get("reward_ul"), reward_given=rw.get("rewarded"),
        volume_ul=volume if "rewarded" in outcome else None, reward_time=rw.get("reward_time"),
        punishment=rw.get("punishment"), punishment_time=rw.get("punishment_time"),
        timeout_s=rw.get("timeout_s"), kind=rs.get("kind"), value=rs.get("value"), result=rs.get("result"),
        latency=rs.get("latency"), extra=tuple(extra), delimiter=delimiter, encoding=encoding, source=source,
    )
    return mapping


# --------------------------------------------------------------------------- import


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
                    raise _CellError(f"is blank, but cue {cue!r} needs its {part} time")
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
        current = None
        return TrialEvent(subject, rig, session, trial, tuple(cues), outcome, response, duration, wall_time, extra), None
    except _CellError as err:
        column = current.column if current is not None else None
        return None, RowProblem(row_no, column, str(err))
    except BadEvent as err:
        return None, RowProblem(row_no, _column_of(err.field, m, field_columns), str(err))


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


# --------------------------------------------------------------------------- export

_TRIAL_HEAD = ["subject", "session", "trial", "rig", "wall_time", "duration"]
_TRIAL_TAIL = ["reward_ul", "reward_time", "punishment", "punishment_time", "timeout_s",
               "response_kind", "response_value", "response_result", "response_latency"]
_DECISION_COLUMNS = ["subject", "session", "trial", "next_trial", "cue", "reward_prob", "reward_ul", "reward_armed",
                     "block", "stage", "end_session", "difficulty", "valve_ms", "reasons", "overrides", "warnings"]
WHATS = ("trials", "decisions", "quantities")
FORMATS = ("csv", "jsonl")


def export(store, what: str, fmt: str, out: TextIO, subject: str | None = None, session: str | None = None) -> int:
    """Write the store's ``what`` rows (trials | decisions | quantities) to ``out`` as
    ``fmt`` (csv | jsonl); returns the number of rows written.

    JSONL: one ``Store.rows`` object per line. CSV: trials flatten their cues to
    ``cue1, cue1_onset, cue1_offset, cue2, …`` (as many slots as the widest trial) and
    their extra fields to ``extra_<name>``; quantities get one column per name (the
    union of names, sorted); decisions' reason lists are JSON arrays in their cells.
    Floats are written with ``repr`` so they read back exactly; None is an empty cell.
    """
    if what not in WHATS:
        raise BadArgument("what", f"one of {', '.join(WHATS)}", what)
    if fmt not in FORMATS:
        raise BadArgument("fmt", f"one of {', '.join(FORMATS)}", fmt)
    rows = store.rows(what, subject=subject, session=session)
    if fmt == "jsonl":
        n = 0
        for row in rows:
            out.write(json.dumps(row, separators=(",", ":"), ensure_ascii=False, allow_nan=False) + "\n")
            n += 1
        return n
    if what == "decisions":
        return _write_csv(out, _DECISION_COLUMNS, (_decision_cells(r) for r in rows))
    # Two passes need the same rows even while a daemon writes: spool the first pass.
    with tempfile.TemporaryFile("w+", encoding="utf-8") as spool:
        max_cues, names = 0, set()
        for row in rows:
            if what == "trials":
                max_cues = max(max_cues, len(row["cues"]))
                names.update(row["extra"])
            else:
                names.update(k for k in row if k not in ("subject", "session", "trial"))
            spool.write(json.dumps(row, separators=(",", ":"), allow_nan=False) + "\n")
        spool.seek(0)
        spooled = (json.loads(line) for line in spool)
        if what == "trials":
            cue_cols = [c for i in range(1, max_cues + 1) for c in (f"cue{i}", f"cue{i}_onset", f"cue{i}_offset")]
            extra_cols = [f"extra_{n}" for n in sorted(names)]
            columns = _TRIAL_HEAD + cue_cols + _TRIAL_TAIL + extra_cols
            return _write_csv(out, columns, (_trial_cells(r) for r in spooled))
        columns = ["subject", "session", "trial", *sorted(names)]
        return _write_csv(out, columns, spooled)


def _trial_cells(row: dict[str, Any]) -> dict[str, Any]:
    cells = {k: row[k] for k in _TRIAL_HEAD + _TRIAL_TAIL}
    for i, (cue, onset, offset) in enumerate(row["cues"], start=1):
        cells[f"cue{i}"], cells[f"cue{i}_onset"], cells[f"cue{i}_offset"] = cue, onset, offset
    for name, value in row["extra"].items():
        cells[f"extra_{name}"] = value
    return cells


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
