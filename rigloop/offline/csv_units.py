"""Units of an imported trial table: stated ones converted, wrong ones refused.

rigloop reads times within a trial in seconds, wall times in seconds since the Unix
epoch and reward volumes in µL. A lab's table may hold milliseconds or mL; read as
seconds and µL they would import without a word and the models would learn from a
trial a thousand times too long or a drop a thousand times too small. So:

* ``parse_units("time=ms,reward=mL")`` reads what the user states (``UNITS`` lists the
  names: ``time`` for every time within a trial, ``wall_time`` for epoch wall times,
  ``reward`` for ``outcome.reward_ul``);
* ``apply_units`` makes the mapping convert those columns as it reads them (constants in
  the mapping stay in the field's own unit, s or µL, as its keys say);
* ``check_units`` looks at the imported values (after any conversion) and names each
  column whose values are implausible in the unit rigloop reads, with the likely unit.

The plausibility bands are common practice for head-fixed and freely moving rodent
tasks, not a standard: a trial is seconds to a few minutes long, an animal answers in
well under a minute and faster than 5 ms never, a water drop is a fraction of a µL to
some tens of µL, and epoch seconds of this century are below 1e11 (epoch milliseconds
of any date after 1973 are above it).
"""

from __future__ import annotations

import statistics
from collections.abc import Iterable, Mapping
from dataclasses import replace
from typing import Any

from ..errors import BadArgument, RigloopError
from .csv_map import ColumnMap, CueSlot, Source

# name -> {unit: (multiply, divide)} to reach rigloop's unit (s, epoch s, µL)
UNITS: dict[str, dict[str, tuple[float, float]]] = {
    "time": {"s": (1.0, 1.0), "ms": (1.0, 1000.0)},
    "wall_time": {"s": (1.0, 1.0), "ms": (1.0, 1000.0)},
    "reward": {"µL": (1.0, 1.0), "uL": (1.0, 1.0), "mL": (1000.0, 1.0), "nL": (1.0, 1000.0)},
}
_BASE = {"time": "s", "wall_time": "s", "reward": "µL"}
_HELP = "name=unit pairs such as time=ms,reward=mL (time: s, ms; wall_time: s, ms; reward: µL or uL, mL, nL)"

# plausibility bands of a column's median (common practice, see the module docstring)
_TRIAL_MAX_S = 300.0         # trial length, or its last cue/reward/punishment time (s)
_TRIAL_MIN_S = 0.05          # trial length (s)
_LATENCY_MAX_S = 60.0        # response latency (s)
_LATENCY_MIN_S = 0.005       # response latency (s)
_REWARD_MIN_UL = 0.1         # one reward (µL)
_REWARD_MAX_UL = 500.0       # one reward (µL)
_EPOCH_MAX_S = 1e11          # wall time (s since the Unix epoch)


class UnitsRejected(RigloopError, ValueError):
    """Columns whose values look like another unit; ``problems`` names each (nothing imported)."""

    def __init__(self, problems: list[str], source: str | None = None, rows_refused: int = 0):
        self.problems = list(problems)
        self.source = source
        self.rows_refused = rows_refused
        head = f"{source}: " if source else ""
        lines = "\n".join(f"  - {p}" for p in self.problems)
        n = len(self.problems)
        tail = (f"\n(and {rows_refused} row{'s' if rows_refused != 1 else ''} refused, which may follow from the "
                f"units)" if rows_refused else "")
        super().__init__(f"{head}{n} unit problem{'s' if n != 1 else ''}; nothing was imported:\n{lines}{tail}")


def parse_units(text: str | None) -> dict[str, str]:
    """``"time=ms,reward=mL"`` -> ``{"time": "ms", "reward": "mL"}``; BadArgument names the fault."""
    if text is None or not text.strip():
        return {}
    out: dict[str, str] = {}
    for part in text.split(","):
        name, eq, unit = (s.strip() for s in part.partition("="))
        if not eq or name not in UNITS:
            raise BadArgument("--units", f"{_HELP}; {name!r} is not one of {', '.join(UNITS)}", text)
        if unit not in UNITS[name]:
            raise BadArgument("--units", f"{_HELP}; {name} takes {', '.join(UNITS[name])}", text)
        if name in out:
            raise BadArgument("--units", f"{_HELP}, each name once; {name} is given twice", text)
        out[name] = unit
    return out


def _scaled(src: Source | None, ratio: tuple[float, float]) -> Source | None:
    """``src`` converting its cells by ``ratio``; constants and mapped values are left as written."""
    if src is None or src.column is None or src.map is not None or ratio == (1.0, 1.0):
        return src
    convert, mul, div = src.convert, ratio[0], ratio[1]

    def scaled(cell: Any) -> Any:
        x = convert(cell)
        return None if x is None else x * mul / div

    return replace(src, convert=scaled)


_TIME_FIELDS = ("duration", "reward_time", "punishment_time", "timeout_s", "latency")


def apply_units(m: ColumnMap, units: Mapping[str, str]) -> ColumnMap:
    """The mapping with its columns read in the stated units (see ``UNITS``).

    A stated unit for something the mapping reads from no column is an error: the user
    believes a column exists that does not."""
    if not units:
        return m
    changes: dict[str, Any] = {}
    if "time" in units:
        ratio = UNITS["time"][units["time"]]
        sources = [getattr(m, f) for f in _TIME_FIELDS] + [s for c in m.cues for s in (c.onset, c.offset)]
        if not any(s is not None and s.column is not None for s in sources):
            raise BadArgument("--units", "time only when the mapping reads a time within the trial from a column",
                              f"time={units['time']}")
        changes.update({f: _scaled(getattr(m, f), ratio) for f in _TIME_FIELDS})
        changes["cues"] = tuple(CueSlot(c.cue, _scaled(c.onset, ratio), _scaled(c.offset, ratio)) for c in m.cues)
    if "wall_time" in units:
        if m.wall_time is None or m.wall_time.column is None or m.wall_format != "epoch":
            raise BadArgument("--units", "wall_time only when trial.wall_time is an epoch column (ISO times carry "
                                         "their own unit)", f"wall_time={units['wall_time']}")
        changes["wall_time"] = _scaled(m.wall_time, UNITS["wall_time"][units["wall_time"]])
    if "reward" in units:
        if m.reward_ul is None or m.reward_ul.column is None:
            raise BadArgument("--units", "reward only when outcome.reward_ul is a column (outcome.volume_ul is "
                                         "µL by its name)", f"reward={units['reward']}")
        changes["reward_ul"] = _scaled(m.reward_ul, UNITS["reward"][units["reward"]])
    return replace(m, **changes)


def _median(values: Iterable[float | None]) -> tuple[float, int] | None:
    xs = [float(v) for v in values if v is not None]
    return (statistics.median(xs), len(xs)) if xs else None


def _columns(sources: Iterable[Source | None]) -> list[str]:
    return list(dict.fromkeys(s.column for s in sources if s is not None and s.column is not None))


def _likely(raw: float, key: str, lo: float, hi: float) -> str | None:
    """The first unit of ``key`` in which a median ``raw`` (as written in the file) is plausible."""
    seen = set()
    for unit, (mul, div) in UNITS[key].items():
        if (mul, div) in seen:
            continue  # an alias (uL for µL)
        seen.add((mul, div))
        if lo <= raw * mul / div <= hi:
            return unit
    return None


def _problem(what: str, columns: list[str], key: str, likely: str, med: float, n: int,
             stated: Mapping[str, str]) -> str:
    """One sentence: the columns, the median seen, the likely unit and the way out."""
    cols = ", ".join(repr(c) for c in columns)
    noun = "column" if len(columns) == 1 else "columns"
    base = _BASE[key]
    rows = f"{n} row{'s' if n != 1 else ''}"
    if key in stated:
        fix = (f"drop {key}={stated[key]} from --units" if likely == base else f"give --units {key}={likely}")
        return (f"{what} ({noun} {cols}) look wrong after --units {key}={stated[key]}: median {med:.15g} {base} "
                f"over {rows}, as if the {noun} held {likely}; {fix}")
    return (f"{what} ({noun} {cols}) look like {likely}, not {base}: median {med:.15g} over {rows}; "
            f"give --units {key}={likely}, or fix the {noun}")


def check_units(events: Iterable[Any], m: ColumnMap, stated: Mapping[str, str] | None = None) -> list[str]:
    """Each column group whose imported values are implausible in rigloop's unit, as one
    sentence naming the columns, the median seen and the likely unit (empty: all plausible).

    Only values read from columns are judged (a mapping's constants are the mapping's), and
    only when some unit makes the median plausible: what no unit explains is left alone."""
    stated = stated or {}
    events = list(events)
    out: list[str] = []
    slots = [s for c in m.cues for s in (c.onset, c.offset)] + [m.reward_time, m.punishment_time]

    def check(what: str, sources: list, values: Iterable, lo: float, hi: float, key: str) -> None:
        columns = _columns(sources)
        seen = _median(values) if columns else None
        if seen is None or lo <= seen[0] <= hi:
            return
        med, n = seen
        mul, div = UNITS[key][stated.get(key, _BASE[key])]
        likely = _likely(med * div / mul, key, lo, hi)  # the median as the file wrote it, in each unit
        if likely is not None:
            out.append(_problem(what, columns, key, likely, med, n, stated))

    check("trial lengths (trial.duration)", [m.duration], (e.duration for e in events),
          _TRIAL_MIN_S, _TRIAL_MAX_S, "time")
    check("cue, reward and punishment times", slots, (_last_time(e) for e in events), 0.0, _TRIAL_MAX_S, "time")
    check("latencies (response.latency)", [m.latency], (e.response.latency for e in events),
          _LATENCY_MIN_S, _LATENCY_MAX_S, "time")
    check("rewards (outcome.reward_ul)", [m.reward_ul], (e.outcome.reward_ul or None for e in events),
          _REWARD_MIN_UL, _REWARD_MAX_UL, "reward")
    if m.wall_format == "epoch":
        check("wall times (trial.wall_time)", [m.wall_time], (e.wall_time or None for e in events),
              0.0, _EPOCH_MAX_S, "wall_time")
    return out


def _last_time(e: Any) -> float | None:
    """The latest cue, reward or punishment time of a trial (None when it has none)."""
    times = [c.offset for c in e.cues] + [e.outcome.reward_time, e.outcome.punishment_time]
    times = [t for t in times if t is not None]
    return max(times) if times else None
