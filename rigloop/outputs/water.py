"""The water ledger: per animal and lab day, the water earned on the rig, the supplements
given off it, their total against the daily minimum, and the days below it flagged.

A trial's lab day is ``rules.welfare.lab_day`` of its ``wall_time`` under its own session's
rule file (``[welfare] timezone`` and ``day_starts``), so the ledger adds up the same day
that "water today" did when the session ran. A day's minimum is the strictest
``daily_min_ml`` of that day's sessions; a day without a session (a weekend, say) takes the
subject's latest earlier session's (else its first session's), because the animal is still
on the protocol. A subject with no session has no known minimum and is never flagged.
Supplements count toward the lab day they were entered for. Every lab day from a
subject's first record to the ledger's last day appears, so a day with nothing recorded
shows as 0 mL. The lab's animal-care protocol and veterinary staff govern: this is a
record to check against, not advice.

``parse_volume`` reads a volume as typed ("0.4mL", "400uL", "400µL", "400" = µL).
"""

from __future__ import annotations

import csv
import datetime as _dt
import math
import re
import time
from collections.abc import Iterable
from dataclasses import dataclass
from typing import IO

from ..errors import BadArgument
from ..rules.load import load_rules
from ..rules.welfare import WelfareLimits, lab_day

MAX_ENTRY_ML = 10.0  # one supplement entry above this is refused as a slip (the store refuses it too)
CSV_COLUMNS = ("subject", "day", "sessions", "rewarded_trials", "earned_ml", "supplement_ml", "total_ml",
               "daily_min_ml", "below_min", "notes")
_VOLUME = re.compile(r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*(ml|ul|µl|μl)?\s*$", re.IGNORECASE)
_GRID_DAYS = 10  # day columns per block of the printed grid (fits 80 characters)


@dataclass(frozen=True)
class WaterDay:
    """One subject's lab day: what it earned on the rig and was given, against its minimum
    (``daily_min_ml`` None: no rule file says one)."""

    subject: str
    day: str
    sessions: tuple[str, ...]
    rewarded_trials: int
    earned_ul: float
    supplement_ul: float
    daily_min_ml: float | None
    notes: tuple[str, ...]

    @property
    def total_ul(self) -> float:
        return self.earned_ul + self.supplement_ul

    @property
    def below(self) -> bool:
        """True when the day's total is under its minimum."""
        return self.daily_min_ml is not None and self.total_ul < self.daily_min_ml * 1000.0


# --------------------------------------------------------------------------- volumes


def parse_volume(text: str) -> float:
    """A volume as typed, in µL: "0.4mL", "400uL", "400µL" or a bare number (µL). Refuses
    zero, negative, non-finite and more than MAX_ENTRY_ML in one entry."""
    found = _VOLUME.match(text) if isinstance(text, str) else None
    if not found:
        raise BadArgument("volume", 'a volume such as "0.4mL", "400uL", "400µL" or "400" (µL)', text)
    value = float(found.group(1))
    ul = value * 1000.0 if (found.group(2) or "ul").lower() == "ml" else value
    if not math.isfinite(ul) or ul <= 0:
        raise BadArgument("volume", "more than 0 (a supplement given)", text)
    if ul > MAX_ENTRY_ML * 1000.0:
        raise BadArgument("volume", f"at most {MAX_ENTRY_ML:g} mL in one entry (a larger amount is likely a slip "
                                    "of unit: 400 means 400 µL)", text)
    return ul


# --------------------------------------------------------------------------- the ledger


def session_limits(store) -> dict[tuple[str, str], tuple[float, WelfareLimits]]:
    """(subject, session) -> (opened_at, the welfare limits of its rule file), each rule
    file read once."""
    by_digest: dict[str, WelfareLimits] = {}
    out = {}
    for info in store.sessions():
        if info.rules_sha256 not in by_digest:
            by_digest[info.rules_sha256] = load_rules(info.rules_text, info.rules_name).welfare
        out[(info.subject, info.session)] = (info.opened_at, by_digest[info.rules_sha256])
    return out


def subject_limits(store, subject: str, limits=None) -> WelfareLimits | None:
    """The welfare limits of the subject's latest session (None: it has none)."""
    limits = session_limits(store) if limits is None else limits
    mine = sorted((opened, lim) for (subj, _), (opened, lim) in limits.items() if subj == subject)
    return mine[-1][1] if mine else None


def today(store, subject: str, now: float | None = None) -> str:
    """The lab day it is now for ``subject`` (its latest session's day; UTC without one)."""
    limits = subject_limits(store, subject) or WelfareLimits()
    return lab_day(time.time() if now is None else now, limits)


def ledger(store, subject: str | None = None, days: int | None = None, until: str | None = None) -> list[WaterDay]:
    """The ledger rows, by subject (first seen first) and day: the last ``days`` lab days up
    to ``until`` (default: the latest day with any record in the store)."""
    if until is not None and not _is_day(until):
        raise BadArgument("until", "a date YYYY-MM-DD", until)
    limits = session_limits(store)
    subjects = _subjects(store, subject)
    per = {s: _subject_days(store, s, limits) for s in subjects}
    last = until or max((d for rows in per.values() for d in rows), default=None)
    if last is None:
        return []
    first = None if days is None else _shift(last, -(days - 1))
    out = []
    for s in subjects:
        out.extend(_filled(s, per[s], first, last))
    return out


def _subjects(store, subject: str | None) -> list[str]:
    """The subjects to show: one, or all (rig first, then those with supplements only)."""
    if subject is not None:
        return [subject]
    names = store.subjects()
    return names + sorted({x.subject for x in store.supplements()} - set(names))


def _subject_days(store, subject: str, limits) -> dict[str, dict]:
    """day -> the subject's raw totals that day (sessions, rewards, supplements, minimum)."""
    days: dict[str, dict] = {}

    def at(day: str) -> dict:
        return days.setdefault(day, {"sessions": [], "trials": 0, "earned": 0.0, "supp": 0.0, "mins": [],
                                     "notes": []})

    for info in store.sessions(subject):
        lim = limits[(subject, info.session)][1]
        for wall_time, reward_ul in store.rewards(subject, info.session):
            row = at(lab_day(wall_time, lim))
            row["trials"] += 1
            row["earned"] += reward_ul
            if info.session not in row["sessions"]:
                row["sessions"].append(info.session)
                row["mins"].append(lim.daily_min_ml)
        opened = at(lab_day(info.opened_at, lim))  # a session that earned nothing still counts
        if info.session not in opened["sessions"]:
            opened["sessions"].append(info.session)
            opened["mins"].append(lim.daily_min_ml)
    for entry in store.supplements(subject):
        row = at(entry.day)
        row["supp"] += entry.volume_ul
        if entry.note:
            row["notes"].append(entry.note)
    return days


def _filled(subject: str, raw: dict[str, dict], first: str | None, last: str) -> list[WaterDay]:
    """Every lab day from the subject's first record (or ``first``) to ``last``; a day's
    minimum is its sessions' strictest, else the latest earlier one's, else the first one's."""
    if not raw:
        return []
    start = max(min(raw), first) if first else min(raw)
    known = sorted((d, max(r["mins"])) for d, r in raw.items() if r["mins"])
    out = []
    day = start
    while day <= last:
        r = raw.get(day)
        earlier = [m for d, m in known if d <= day]
        minimum = earlier[-1] if earlier else (known[0][1] if known else None)
        if r and r["mins"]:
            minimum = max(r["mins"])
        out.append(WaterDay(subject, day, tuple(r["sessions"]) if r else (), r["trials"] if r else 0,
                            r["earned"] if r else 0.0, r["supp"] if r else 0.0, minimum,
                            tuple(r["notes"]) if r else ()))
        day = _shift(day, 1)
    return out


def _is_day(text: object) -> bool:
    """True for a real date written YYYY-MM-DD."""
    try:
        return isinstance(text, str) and len(text) == 10 and _dt.date.fromisoformat(text).isoformat() == text
    except ValueError:
        return False


def _shift(day: str, n: int) -> str:
    """The date ``n`` days after ``day`` (YYYY-MM-DD)."""
    return (_dt.date.fromisoformat(day) + _dt.timedelta(days=n)).isoformat()


# --------------------------------------------------------------------------- out


def _ml(ul: float) -> str:
    return f"{ul / 1000.0:.3f}"


def write_csv(rows: Iterable[WaterDay], fh: IO[str]) -> int:
    """The ledger as CSV (volumes in mL to the µL, ``below_min`` yes/no); returns the row count."""
    w = csv.writer(fh, lineterminator="\n")
    w.writerow(CSV_COLUMNS)
    n = 0
    for r in rows:
        w.writerow([r.subject, r.day, ";".join(r.sessions), r.rewarded_trials, _ml(r.earned_ul),
                    _ml(r.supplement_ul), _ml(r.total_ul),
                    "" if r.daily_min_ml is None else f"{r.daily_min_ml:.3f}", "yes" if r.below else "no",
                    " | ".join(r.notes)])
        n += 1
    return n


def cohorts(store, rows: list[WaterDay]) -> dict[str, list[WaterDay]]:
    """Rows grouped by cohort: the rule file of each subject's latest session ("no
    sessions" for animals with supplements only), in first-seen order."""
    latest = {info.subject: info.rules_name for info in store.sessions()}  # open order: the last wins
    out: dict[str, list[WaterDay]] = {}
    for r in rows:
        out.setdefault(latest.get(r.subject, "no sessions"), []).append(r)
    return out


def page(cohort: str, rows: list[WaterDay]) -> str:
    """One printable page (plain text, 80 columns): a grid of daily totals in mL per
    subject, days below the minimum marked ``*``, then each such day spelt out."""
    days = sorted({r.day for r in rows})
    subjects = list(dict.fromkeys(r.subject for r in rows))
    cell = {(r.subject, r.day): r for r in rows}
    width = max([8, *map(len, subjects)])
    lines = [f"Water ledger, cohort {cohort}: lab days {days[0]} to {days[-1]}" if days else
             f"Water ledger, cohort {cohort}: nothing recorded",
             "Total water per day in mL (rig + supplements); * below the daily minimum.",
             "The lab's animal-care protocol and veterinary staff govern; check this record against it.", ""]
    for i in range(0, len(days), _GRID_DAYS):
        block = days[i:i + _GRID_DAYS]
        lines.append(" " * width + "".join(f"{d[5:]:>7}" for d in block))
        for s in subjects:
            lines.append(f"{s:<{width}}" + "".join(f"{_cell(cell.get((s, d))):>7}" for d in block))
        lines.append("")
    below = [r for r in rows if r.below]
    lines.append(f"Days below the daily minimum: {len(below)}" if below else "Days below the daily minimum: none")
    for r in below:
        lines.append(f"  {r.subject} {r.day}: {_ml(r.total_ul)} mL (rig {_ml(r.earned_ul)} + supplements "
                     f"{_ml(r.supplement_ul)}) < {r.daily_min_ml:.3f} mL")
    return "\n".join(lines) + "\n"


def _cell(r: WaterDay | None) -> str:
    """A grid cell: the day's total in mL, ``*`` if below; blank outside the subject's record."""
    if r is None:
        return ""
    return f"{r.total_ul / 1000.0:.2f}" + ("*" if r.below else " ")


def printable(store, rows: list[WaterDay]) -> str:
    """Every cohort's page, separated by form feeds (one page each when printed)."""
    return "\f".join(page(name, part) for name, part in cohorts(store, rows).items())
