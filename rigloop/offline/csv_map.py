"""The column mapping of a CSV trial table: the TOML file, checked, as a ``ColumnMap``.

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
    [[step]]    one table per step slot of a multi-step trial, in the order of the steps: state,
                time (required), action, reward_ul (optional); a blank state cell ends the steps
    [outcome]   reward_ul (µL), or rewarded (true/false, 1/0, yes/no) with volume_ul =
                <constant µL>; reward_time, punishment, punishment_time, timeout_s
    [response]  kind, value, result, latency
    [extra]     name = source; a source may add type = "auto" | "float" | "int" | "str" | "bool"
"""

from __future__ import annotations

import codecs
import math
import os
import tomllib
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from typing import Any
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

from ..core.trial import PUNISHMENTS, RESPONSE_RESULTS
from ..errors import BadArgument, RuleError
from .csv_cells import CONVERTERS, CellError, epoch_or_iso


class MappingError(RuleError):
    """A column mapping is invalid; ``problems`` lists every fault with its key path."""

    def __init__(self, problems: list[str], source: str | None = None):
        super().__init__(problems, source)
        head = f"{source}: " if source else ""
        n = len(self.problems)
        lines = "\n".join(f"  - {p}" for p in self.problems)
        self.args = (f"{head}{n} problem{'s' if n != 1 else ''} in column mapping:\n{lines}",)


@dataclass(frozen=True, slots=True)
class Source:
    """Where a field's value comes from: a ``column`` (optionally through ``map``) or a
    constant ``value``. ``path`` is the mapping key, for messages."""

    path: str
    column: str | None
    value: Any
    map: Mapping[str, Any] | None
    convert: Any  # cell -> value; raises CellError

    def read(self, row: Mapping[str, str]) -> Any:
        if self.column is None:
            return self.value
        cell = row.get(self.column, "").strip()
        if self.map is not None:
            if cell not in self.map:
                keys = ", ".join(repr(k) for k in self.map)
                raise CellError(f"{cell!r} is not in the map for {self.path} (allowed: {keys})")
            return self.map[cell]
        return self.convert(cell)


@dataclass(frozen=True, slots=True)
class CueSlot:
    cue: Source
    onset: Source
    offset: Source


@dataclass(frozen=True, slots=True)
class StepSlot:
    state: Source
    time: Source
    action: Source | None = None
    reward_ul: Source | None = None


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
    wall_format: str = "epoch"  # trial.wall_time's format: "epoch" or "iso"
    steps: tuple[StepSlot, ...] = ()

    def sources(self) -> list[Source]:
        out = [self.subject, self.session, self.trial, self.rig, self.wall_time, self.duration,
               self.reward_ul, self.reward_given, self.reward_time, self.punishment, self.punishment_time,
               self.timeout_s, self.kind, self.value, self.result, self.latency]
        for slot in self.cues:
            out += [slot.cue, slot.onset, slot.offset]
        for step in self.steps:
            out += [step.state, step.time, step.action, step.reward_ul]
        out += [s for _, s in self.extra]
        return [s for s in out if s is not None]

    def columns(self) -> list[str]:
        """The CSV columns the mapping reads, in mapping order, each once."""
        return list(dict.fromkeys(s.column for s in self.sources() if s.column is not None))


_SECTIONS = {"csv", "trial", "cue", "step", "outcome", "response", "extra"}
_TRIAL_KEYS = {"subject": "str", "session": "str", "trial": "int", "rig": "str", "wall_time": "time",
               "duration": "float"}
_OUTCOME_KEYS = {"reward_ul": "float", "rewarded": "bool", "volume_ul": None, "reward_time": "float",
                 "punishment": "str", "punishment_time": "float", "timeout_s": "float"}
_RESPONSE_KEYS = {"kind": "str", "value": "auto", "result": "str", "latency": "float"}
_CUE_KEYS = {"cue": "str", "onset": "float", "offset": "float"}
_STEP_KEYS = {"state": "str", "time": "float", "action": "str", "reward_ul": "float"}
_CHOICES = {"response.result": RESPONSE_RESULTS, "outcome.punishment": PUNISHMENTS}


class _Loader:
    """Reads one mapping's entries, recording every problem instead of stopping at the first."""

    def __init__(self, source: str | None):
        self.source = source
        self.problems: list[str] = []

    def table(self, data: Any, path: str, allowed: Iterable[str]) -> dict[str, Any]:
        if not isinstance(data, dict):
            self.problems.append(f"{path} must be a table (got {type(data).__name__})")
            return {}
        allowed = list(allowed)
        self.unknown(data, path, allowed)
        return {k: v for k, v in data.items() if k in allowed}

    def unknown(self, data: dict[str, Any], path: str, allowed: list[str]) -> None:
        """Record each key of ``data`` that is not in ``allowed``."""
        for key in data:
            if key not in allowed:
                self.problems.append(f"{path}.{key} is not a known key (known: {', '.join(allowed)})")

    def spec(self, spec: Any, path: str, kind: str, *, extra_keys: Iterable[str] = ()) -> Source | None:
        """Turn a field's mapping entry into a Source; problems are recorded, None returned."""
        if isinstance(spec, str):
            spec = {"column": spec}
        if not isinstance(spec, dict):
            self.problems.append(f"{path} must be a column name or a table with column or value "
                                 f"(got {type(spec).__name__})")
            return None
        self.unknown(spec, path, ["column", "value", "map", *extra_keys])
        ok = len(self.problems)
        if ("column" in spec) == ("value" in spec):
            self.problems.append(f"{path} needs exactly one of column or value")
            return None
        column = spec.get("column")
        if column is not None and (not isinstance(column, str) or not column.strip()):
            self.problems.append(f"{path}.column must be a non-empty column name (got {column!r})")
            return None
        convert = self.converter(spec, path, kind)
        if convert is None:
            return None
        choices = _CHOICES.get(path)

        def check(v: Any, where: str) -> Any:
            try:
                out = None if v == "" else convert(v)  # "" in a map means none
            except CellError as err:
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

    def converter(self, spec: dict[str, Any], path: str, kind: str) -> Any:
        """The cell converter of a field of ``kind``, with a time's format and zone or an
        extra's type read from ``spec``; None (the problem recorded) when they are wrong."""
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
            return epoch_or_iso(fmt, tz)
        if kind == "extra":
            kind = spec.get("type", "auto")
            if kind not in CONVERTERS:
                self.problems.append(f"{path}.type must be one of {', '.join(CONVERTERS)} (got {kind!r})")
                return None
        return CONVERTERS[kind]


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
    """The mapping's sections, each checked in file-format order; every problem at once."""
    ld = _Loader(source)
    for key in data:
        if key not in _SECTIONS:
            ld.problems.append(f"{key} is not a known section (known: {', '.join(sorted(_SECTIONS))})")
    delimiter, encoding = _csv_section(ld, data)
    fields = _trial_section(ld, data)
    cues = _cue_section(ld, data)
    steps = _step_section(ld, data)
    rw, volume = _outcome_section(ld, data)
    rs = _response_section(ld, data)
    extra = _extra_section(ld, data)
    if ld.problems:
        raise MappingError(ld.problems, source)
    mapping = ColumnMap(
        subject=fields["subject"], session=fields["session"], trial=fields["trial"], rig=fields["rig"],
        wall_time=fields.get("wall_time"), duration=fields.get("duration"), cues=tuple(cues),
        reward_ul=rw.get("reward_ul"), reward_given=rw.get("rewarded"),
        volume_ul=volume, reward_time=rw.get("reward_time"),
        punishment=rw.get("punishment"), punishment_time=rw.get("punishment_time"),
        timeout_s=rw.get("timeout_s"), kind=rs.get("kind"), value=rs.get("value"), result=rs.get("result"),
        latency=rs.get("latency"), extra=tuple(extra), delimiter=delimiter, encoding=encoding, source=source,
        wall_format=_wall_format(data), steps=tuple(steps),
    )
    return mapping


def _wall_format(data: dict[str, Any]) -> str:
    """``trial.wall_time``'s format (already checked): "epoch" unless it says "iso"."""
    spec = data.get("trial", {}).get("wall_time")
    return spec.get("format", "epoch") if isinstance(spec, dict) else "epoch"


def _csv_section(ld: _Loader, data: dict[str, Any]) -> tuple[Any, Any]:
    """``[csv]``: the delimiter and the text encoding."""
    csv_opts = ld.table(data.get("csv", {}), "csv", ["delimiter", "encoding"])
    delimiter = csv_opts.get("delimiter", ",")
    if not isinstance(delimiter, str) or len(delimiter) != 1 or delimiter in "\"\r\n":
        ld.problems.append(f"csv.delimiter must be one character other than a quote or newline (got {delimiter!r})")
    encoding = csv_opts.get("encoding", "utf-8-sig")
    try:
        codecs.lookup(encoding)
    except (LookupError, TypeError):
        ld.problems.append(f"csv.encoding must be a text encoding such as 'utf-8' (got {encoding!r})")
    return delimiter, encoding


def _trial_section(ld: _Loader, data: dict[str, Any]) -> dict[str, Source | None]:
    """``[trial]``: the trial's keys (required) and its times."""
    trial = ld.table(data.get("trial", {}), "trial", _TRIAL_KEYS)
    fields: dict[str, Source | None] = {}
    for key, kind in _TRIAL_KEYS.items():
        if key in trial:
            fields[key] = ld.spec(trial[key], f"trial.{key}", kind,
                                  extra_keys=("format", "timezone") if kind == "time" else ())
        elif key in ("subject", "session", "trial", "rig"):
            ld.problems.append(f"trial.{key} is required (a column name or {{ value = ... }})")
    return fields


def _cue_section(ld: _Loader, data: dict[str, Any]) -> list[CueSlot]:
    """``[[cue]]``: one slot per table, each with its cue, onset and offset."""
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
    return cues


def _step_section(ld: _Loader, data: dict[str, Any]) -> list[StepSlot]:
    """``[[step]]``: one slot per step of a multi-step trial, in step order."""
    steps = []
    raw_steps = data.get("step", [])
    if not isinstance(raw_steps, list):
        ld.problems.append("step must be an array of tables ([[step]] sections)")
        raw_steps = []
    for i, raw in enumerate(raw_steps, start=1):
        slot = ld.table(raw, f"step[{i}]", _STEP_KEYS)
        parts = {}
        for key, kind in _STEP_KEYS.items():
            if key in slot:
                parts[key] = ld.spec(slot[key], f"step[{i}].{key}", kind)
            elif key in ("state", "time"):
                ld.problems.append(f"step[{i}].{key} is required")
        if parts.get("state") is not None and parts.get("time") is not None:
            steps.append(StepSlot(parts["state"], parts["time"], parts.get("action"), parts.get("reward_ul")))
    return steps


def _outcome_section(ld: _Loader, data: dict[str, Any]) -> tuple[dict[str, Source | None], float | None]:
    """``[outcome]``: its sources, and the constant volume that goes with ``rewarded``."""
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
    return rw, volume if "rewarded" in outcome else None


def _response_section(ld: _Loader, data: dict[str, Any]) -> dict[str, Source | None]:
    """``[response]``: kind, value, result and latency."""
    response = ld.table(data.get("response", {}), "response", _RESPONSE_KEYS)
    return {key: ld.spec(response[key], f"response.{key}", kind) for key, kind in _RESPONSE_KEYS.items() if key in response}


def _extra_section(ld: _Loader, data: dict[str, Any]) -> list[tuple[str, Source]]:
    """``[extra]``: named sources, in file order."""
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
    return extra
