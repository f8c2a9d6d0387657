"""The store as pandas DataFrames for analysis (``rigloop.open``), and their Parquet files.

``Frames(path)`` reads a store without changing it: ``subjects()``, ``sessions()``,
``trials()`` (one row per trial: the trial, the decision it produced, its quantities),
``decisions()``, ``quantities()`` and ``water()`` (µL earned on the rig per lab day).
The README's "Analysis in Python" table names every column, its unit and when it is
missing. ``write_parquet`` writes any of these frames with the same columns.

The only pandas and pyarrow imports in rigloop are here, inside functions, so that
``import rigloop`` stays light.
"""

from __future__ import annotations

import os
from collections.abc import Iterator
from typing import Any

from ..core.names import check_name
from ..errors import BadArgument, StoreError
from ..rules.load import load_rules
from ..rules.welfare import lab_day
from ..store import SessionInfo, Store

_TRIAL_FIELDS = ("rig", "wall_time", "duration", "cue", "cue_onset", "cue_offset", "cues", "cue_onsets",
                 "cue_offsets", "reward_ul", "reward_time", "punishment", "punishment_time", "timeout_s",
                 "response_kind", "response_value", "response_result", "response_latency")
# the decision that scheduled the trial (the previous one), then the one the trial produced
_RAN_UNDER = ("block", "stage", "difficulty")
_DECISION_FIELDS = ("next_trial", "next_cue", "next_reward_prob", "next_reward_ul", "next_reward_armed",
                    "next_block", "next_stage", "next_difficulty", "next_valve_ms", "end_session", "reasons",
                    "overrides", "warnings")
_KEY = ("subject", "session", "trial")
WHATS = ("trials", "decisions", "quantities")


def _pandas():
    """pandas, or a StoreError that says how to install it (the analysis extra)."""
    try:
        import pandas
    except ImportError:  # pragma: no cover - the test extra installs it
        raise StoreError("the DataFrame API needs pandas: pip install 'rigloop[analysis]'") from None
    return pandas


class Frames:
    """A store opened read-only for analysis; each method returns a new DataFrame."""

    def __init__(self, path: str | os.PathLike):
        self._store = Store(path, create=False)
        self.path = self._store.path
        self._limits: dict[str, Any] = {}  # rules sha256 -> WelfareLimits

    def close(self) -> None:
        """Close the store (idempotent)."""
        self._store.close()

    def __enter__(self) -> Frames:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def __repr__(self) -> str:
        return f"rigloop.open({self.path!r})"

    # -- scope ------------------------------------------------------------------

    def _subject(self, subject: str | None) -> str | None:
        """A named subject must be stored: a typo gets the known names, not an empty frame."""
        if subject is not None:
            check_name("subject", "a stored subject", subject, self._store.subjects())
        return subject

    def _scope(self, subject: str | None, session: str | None) -> None:
        """Check a subject and a session filter against what is stored."""
        self._subject(subject)
        if session is not None:
            known = dict.fromkeys(i.session for i in self._store.sessions(subject))
            check_name("session", "a stored session" + (f" of {subject!r}" if subject else ""), session, known)

    # -- frames -----------------------------------------------------------------

    def subjects(self):
        """One row per subject, in the order first seen: sessions stored, first and last opening (s, epoch)."""
        rows = []
        for name in self._store.subjects():
            infos = self._store.sessions(name)
            rows.append({"subject": name, "sessions": len(infos),
                         "first_opened_at": min((i.opened_at for i in infos), default=None),
                         "last_opened_at": max((i.opened_at for i in infos), default=None)})
        return _pandas().DataFrame(rows, columns=["subject", "sessions", "first_opened_at", "last_opened_at"])

    def sessions(self, subject: str | None = None):
        """One row per session in open order: rig, rule file (name, sha256), seed, times (s, epoch),
        the highest stored trial number."""
        self._subject(subject)
        columns = ["subject", "session", "rig", "rules_name", "rules_sha256", "seed", "opened_at", "closed_at",
                   "profile", "last_trial"]
        rows = [{"subject": i.subject, "session": i.session, "rig": i.rig, "rules_name": i.rules_name,
                 "rules_sha256": i.rules_sha256, "seed": i.seed, "opened_at": i.opened_at, "closed_at": i.closed_at,
                 "profile": i.profile, "last_trial": self._store.last_trial(i.subject, i.session)}
                for i in self._store.sessions(subject)]
        return _pandas().DataFrame(rows, columns=columns)

    def trials(self, subject: str | None = None, session: str | None = None):
        """One row per trial: the trial's fields, the block/stage/difficulty it ran under, the
        decision it produced (``next_*``, ``reasons`` as a list) and its quantities as columns."""
        self._scope(subject, session)
        rows = list(self._trial_rows(subject, session))
        names = _quantity_names(rows)
        extras = sorted({k for r in rows for k in r["extra"]})
        columns = [*_KEY, *_TRIAL_FIELDS, *(f"extra_{n}" for n in extras), *_RAN_UNDER, *_DECISION_FIELDS,
                   *(_quantity_column(n) for n in names)]
        flat = []
        for r in rows:
            row = {k: r[k] for k in (*_KEY, *_TRIAL_FIELDS, *_RAN_UNDER, *_DECISION_FIELDS)}
            for n in extras:
                row[f"extra_{n}"] = r["extra"].get(n)
            q = r["quantities"]
            for n in names:
                row[_quantity_column(n)] = q.get(n)
            flat.append(row)
        frame = _pandas().DataFrame(flat, columns=columns)
        return _as_floats(frame, [_quantity_column(n) for n in names])

    def decisions(self, subject: str | None = None, session: str | None = None):
        """One row per decision, keyed by the trial that produced it (``next_trial``: the one it is for)."""
        self._scope(subject, session)
        rows = list(self._store.rows("decisions", subject=subject, session=session))
        columns = list(rows[0]) if rows else [*_KEY, "next_trial"]
        return _pandas().DataFrame(rows, columns=columns)

    def quantities(self, subject: str | None = None, session: str | None = None):
        """One row per trial: ``subject, session, trial`` and one float column per stored quantity
        (NaN where the trial has none of it; see the README's table for why)."""
        self._scope(subject, session)
        rows = list(self._store.rows("quantities", subject=subject, session=session))
        names = sorted({k for r in rows for k in r if k not in _KEY})
        frame = _pandas().DataFrame(rows, columns=[*_KEY, *names])
        return _as_floats(frame, names)

    def water(self, subject: str, days: int | None = None):
        """µL earned on the rig per lab day (rewards of the stored trials), the daily minimum of
        the rule file of that day's last session, and whether the day fell short of it.

        A trial counts on the lab day of its ``wall_time`` under its session's rule-file limits
        (``[welfare] timezone`` and ``day_starts``). ``days``: keep only the most recent N lab
        days that have trials. Supplements given by hand are not in the store's trials."""
        if subject is None:
            raise BadArgument("subject", "a stored subject", subject)
        self._subject(subject)
        if days is not None and (isinstance(days, bool) or not isinstance(days, int) or days < 1):
            raise BadArgument("days", "a whole number of days >= 1 or None", days)
        ledger: dict[str, dict[str, Any]] = {}
        for info in self._store.sessions(subject):
            limits = self._welfare(info)
            for row in self._store.rows("trials", subject=subject, session=info.session):
                day = lab_day(row["wall_time"], limits)
                entry = ledger.setdefault(day, {"subject": subject, "day": day, "ul": 0.0, "trials": 0,
                                                "sessions": set()})
                entry["ul"] += float(row["reward_ul"])
                entry["trials"] += 1
                entry["sessions"].add(info.session)
                entry.update(daily_min_ul=limits.daily_min_ml * 1000.0, timezone=limits.timezone,
                             day_starts=limits.day_starts)
        rows = [ledger[d] for d in sorted(ledger)]
        if days is not None:
            rows = rows[-days:]
        for r in rows:
            r["sessions"] = len(r["sessions"])
            r["below_min"] = r["ul"] < r["daily_min_ul"]
        columns = ["subject", "day", "ul", "trials", "sessions", "daily_min_ul", "below_min", "timezone",
                   "day_starts"]
        return _pandas().DataFrame(rows, columns=columns)

    # -- helpers ----------------------------------------------------------------

    def _welfare(self, info: SessionInfo):
        """The welfare limits of the session's own rule file (loaded once per file)."""
        limits = self._limits.get(info.rules_sha256)
        if limits is None:
            rules = load_rules(info.rules_text, source=f"rule file {info.rules_name!r} of session {info.session!r}")
            limits = self._limits[info.rules_sha256] = rules.welfare
        return limits

    def _trial_rows(self, subject: str | None, session: str | None) -> Iterator[dict[str, Any]]:
        """The trials, decisions and quantities rows side by side (the store reads all three in one order)."""
        starts = {(i.subject, i.session): i.meta.get("first_decision") or {} for i in self._store.sessions(subject)}
        trials = self._store.rows("trials", subject=subject, session=session)
        decisions = self._store.rows("decisions", subject=subject, session=session)
        quantities = self._store.rows("quantities", subject=subject, session=session)
        previous: dict[tuple[str, str], dict[str, Any]] = {}
        for t, d, q in zip(trials, decisions, quantities, strict=True):
            key = tuple(t[k] for k in _KEY)
            if key != tuple(d[k] for k in _KEY) or key != tuple(q[k] for k in _KEY):
                raise StoreError(f"trial rows out of step at {key}: the store changed while it was read")
            ran = previous.get(key[:2], starts.get(key[:2], {}))
            previous[key[:2]] = d
            yield {**_trial_fields(t), **{k: ran.get(k) for k in _RAN_UNDER}, **_decision_fields(d),
                   "quantities": {k: v for k, v in q.items() if k not in _KEY}}


def _trial_fields(t: dict[str, Any]) -> dict[str, Any]:
    """A flat trial row with its cues split into parquet-friendly columns (first cue, and lists)."""
    cues = t["cues"]
    first = cues[0] if cues else (None, None, None)
    out = {k: t[k] for k in (*_KEY, "rig", "wall_time", "duration", "reward_ul", "reward_time", "punishment",
                             "punishment_time", "timeout_s", "response_kind", "response_value", "response_result",
                             "response_latency", "extra")}
    out.update(cue=first[0], cue_onset=first[1], cue_offset=first[2], cues=[c[0] for c in cues],
               cue_onsets=[float(c[1]) for c in cues], cue_offsets=[float(c[2]) for c in cues])
    return out


def _decision_fields(d: dict[str, Any]) -> dict[str, Any]:
    """The decision a trial produced, its fields named for the next trial they schedule."""
    return {"next_trial": d["next_trial"], "next_cue": d["cue"], "next_reward_prob": d["reward_prob"],
            "next_reward_ul": d["reward_ul"], "next_reward_armed": d["reward_armed"], "next_block": d["block"],
            "next_stage": d["stage"], "next_difficulty": d["difficulty"], "next_valve_ms": d["valve_ms"],
            "end_session": d["end_session"], "reasons": list(d["reasons"]), "overrides": list(d["overrides"]),
            "warnings": list(d["warnings"])}


_TAKEN = frozenset((*_KEY, *_TRIAL_FIELDS, *_RAN_UNDER, *_DECISION_FIELDS))


def _quantity_names(rows: list[dict[str, Any]]) -> list[str]:
    """Every quantity name of the rows, sorted."""
    return sorted({k for r in rows for k in r["quantities"]})


def _quantity_column(name: str) -> str:
    """A quantity's column in ``trials``: its own name, or ``quantity:NAME`` if a trial field has it."""
    return f"quantity:{name}" if name in _TAKEN or name.startswith("extra_") else name


def _as_floats(frame, columns: list[str]):
    """Quantity columns as float64 (None -> NaN), even when a column holds no number at all."""
    for c in columns:
        frame[c] = frame[c].astype("float64")
    return frame


def frame(db: Frames, what: str, subject: str | None = None, session: str | None = None):
    """``db.trials`` / ``db.decisions`` / ``db.quantities`` by name."""
    if what not in WHATS:
        raise BadArgument("what", f"one of {', '.join(WHATS)}", what)
    return getattr(db, what)(subject=subject, session=session)


def write_parquet(data, out: str | os.PathLike) -> int:
    """Write a frame to a Parquet file (pyarrow) with the frame's columns; returns its rows."""
    _pandas()
    try:
        import pyarrow  # noqa: F401  (pandas writes through it)
    except ImportError:  # pragma: no cover - the test extra installs it
        raise StoreError("Parquet needs pyarrow: pip install 'rigloop[analysis]'") from None
    data.to_parquet(out, engine="pyarrow", index=False)
    return len(data)


def export_parquet(path: str | os.PathLike, what: str, out: str | os.PathLike, subject: str | None = None,
                   session: str | None = None) -> int:
    """The store's ``what`` frame (trials | decisions | quantities) as a Parquet file; returns its rows."""
    with Frames(path) as db:
        return write_parquet(frame(db, what, subject, session), out)
