"""Welfare limits: applied after every policy, on every decision.

Defaults are conservative and follow common practice for water-restricted mice
(methods.md §7: about 1 mL a day, Guo et al. 2014 PLoS One 9:e88678). They are
rigloop's limits, not a protocol: the lab's approved animal-care protocol and its
veterinary staff govern, and a rule file should encode what they say.

A rule file may make any limit stricter freely. Making one looser than the default
must be explicit (the limit is listed in ``welfare.relax``) and stays within the hard
bounds below, which no rule file can pass.
"""

from __future__ import annotations

import datetime as _dt
import functools
import math
import zoneinfo
from collections.abc import Callable, Mapping
from dataclasses import dataclass, fields
from typing import Any

from .expr import fmt


@dataclass(frozen=True, slots=True)
class WelfareLimits:
    """The limits one rule file runs under.

    min_reward_prob: floor on the reward probability of a cue the block rewards.
    max_unrewarded_run: after this many unrewarded trials in a row the next trial
        offers a rewarded cue with its reward armed.
    max_session_min: the session ends at this length (minutes).
    daily_min_ml: the water an animal should earn in a day (mL); a warning is raised
        when the session is on track to fall short, and at its end if it did.
    max_reward_ul: no single reward is larger (µL).
    planned_session_min: the session length the water projection assumes (minutes;
        default: max_session_min).
    warn_after_min: no projection warning before this many minutes (the rate is noise).
    rescue_ul: volume used when a limit must pay and the block rewards no cue (µL;
        default: the largest reward volume in the file).
    relax: names of limits deliberately set looser than the default.
    timezone, day_starts: the lab's day, over which "water today" (``ul_today``) adds
        up: it starts at ``day_starts`` ("HH:MM") local time in ``timezone`` (an IANA
        name). Default UTC from 00:00, never the machine's zone, so replay decides alike
        on every machine.
    """

    min_reward_prob: float = 0.5
    max_unrewarded_run: int = 8
    max_session_min: float = 60.0
    daily_min_ml: float = 1.0
    max_reward_ul: float = 10.0
    planned_session_min: float | None = None
    warn_after_min: float = 5.0
    rescue_ul: float | None = None
    relax: tuple[str, ...] = ()
    timezone: str = "UTC"
    day_starts: str = "00:00"

    @property
    def planned_min(self) -> float:
        return self.planned_session_min if self.planned_session_min is not None else self.max_session_min


DEFAULTS = WelfareLimits()

# name -> (direction in which the value is stricter, hard bound no file may pass)
LIMITS: dict[str, tuple[str, float]] = {
    "min_reward_prob": ("higher", 0.1),
    "max_unrewarded_run": ("lower", 50),
    "max_session_min": ("lower", 180.0),
    "daily_min_ml": ("higher", 0.5),
    "max_reward_ul": ("lower", 100.0),
}

_KINDS = {
    "min_reward_prob": ("probability", float),
    "max_unrewarded_run": ("whole number >= 1", int),
    "max_session_min": ("number of minutes > 0", float),
    "daily_min_ml": ("number of mL > 0", float),
    "max_reward_ul": ("number of µL > 0", float),
    "planned_session_min": ("number of minutes > 0", float),
    "warn_after_min": ("number of minutes >= 0", float),
    "rescue_ul": ("number of µL > 0", float),
}


def parse_limits(table: Any, path: str = "welfare") -> tuple[WelfareLimits, list[str]]:
    """Build limits from a ``[welfare]`` table; return (limits, problems)."""
    problems: list[str] = []
    if table is None:
        return DEFAULTS, problems
    if not isinstance(table, dict):
        return DEFAULTS, [f"{path}: must be a table"]
    known = [f.name for f in fields(WelfareLimits)]
    for key in table:
        if key not in known:
            problems.append(f"{path}.{key}: unknown key (allowed: {', '.join(known)})")
    relax = table.get("relax", [])
    if not isinstance(relax, list) or not all(isinstance(r, str) for r in relax):
        problems.append(f"{path}.relax: must be a list of limit names (got {relax!r})")
        relax = []
    for r in relax:
        if r not in LIMITS:
            problems.append(f"{path}.relax: '{r}' is not a limit (limits: {', '.join(LIMITS)})")
    values: dict[str, Any] = {"relax": tuple(relax)}
    for key, (what, typ) in _KINDS.items():
        if key not in table:
            continue
        v = table[key]
        ok = not isinstance(v, bool) and isinstance(v, (int, float)) and math.isfinite(v)
        if typ is int:
            ok = ok and float(v) == int(v) and v >= 1
        elif key == "min_reward_prob":
            ok = ok and 0 <= v <= 1
        elif key == "warn_after_min":
            ok = ok and v >= 0
        else:
            ok = ok and v > 0
        if not ok:
            problems.append(f"{path}.{key}: must be a {what} (got {v!r})")
            continue
        values[key] = int(v) if typ is int else float(v)
    for key, (stricter, hard) in LIMITS.items():
        if key not in values:
            continue
        v, default = values[key], getattr(DEFAULTS, key)
        looser = v < default if stricter == "higher" else v > default
        beyond = v < hard if stricter == "higher" else v > hard
        bound = ">=" if stricter == "higher" else "<="
        if beyond:
            problems.append(f"{path}.{key}: {fmt(v)} passes the hard limit (must be {bound} {fmt(hard)})")
        elif looser and key not in relax:
            problems.append(
                f"{path}.{key}: {fmt(v)} is looser than the default {fmt(default)}; "
                f"add \"{key}\" to {path}.relax to loosen it on purpose (hard limit: {bound} {fmt(hard)})"
            )
    values.update(_day_keys(table, path, problems))
    limits = WelfareLimits(**values)
    if limits.planned_session_min is not None and limits.planned_session_min > limits.max_session_min:
        problems.append(
            f"{path}.planned_session_min: {fmt(limits.planned_session_min)} is longer than "
            f"max_session_min {fmt(limits.max_session_min)}"
        )
    return limits, problems


def _day_keys(table: dict, path: str, problems: list[str]) -> dict[str, str]:
    """``timezone`` and ``day_starts`` of a ``[welfare]`` table, checked (problems recorded)."""
    out: dict[str, str] = {}
    tz = table.get("timezone")
    if tz is not None:
        if isinstance(tz, str) and (tz == "UTC" or _zone(tz) is not None):
            out["timezone"] = tz
        else:
            problems.append(f"{path}.timezone: must be a time zone name such as \"Europe/Berlin\" or \"UTC\" "
                            f"(got {tz!r}; the machine's time zone database has no such zone)")
    start = table.get("day_starts")
    if start is not None:
        if isinstance(start, str) and _minutes(start) is not None:
            out["day_starts"] = start
        else:
            problems.append(f"{path}.day_starts: must be a local time \"HH:MM\" from \"00:00\" to \"23:59\", "
                            f"the start of the lab's day for water today (got {start!r})")
    return out


def _minutes(hh_mm: str) -> int | None:
    """``"06:30"`` -> 390; None when it is not a time of day HH:MM."""
    hh, colon, mm = hh_mm.partition(":")
    if not (colon and len(hh) == 2 and len(mm) == 2 and hh.isdigit() and mm.isdigit()):
        return None
    h, m = int(hh), int(mm)
    return h * 60 + m if h < 24 and m < 60 else None


@functools.lru_cache(maxsize=16)
def _zone(name: str) -> _dt.tzinfo | None:
    try:
        return zoneinfo.ZoneInfo(name)
    except (zoneinfo.ZoneInfoNotFoundError, ValueError):
        return None


def lab_day(wall_time: float, limits: WelfareLimits) -> str:
    """The lab's day (ISO date of the day's start) that ``wall_time`` falls in: the local
    date in ``limits.timezone`` of the moment ``limits.day_starts`` earlier."""
    if limits.timezone == "UTC" and limits.day_starts == "00:00":
        return _dt.datetime.fromtimestamp(float(wall_time), tz=_dt.timezone.utc).date().isoformat()
    zone = _dt.timezone.utc if limits.timezone == "UTC" else _zone(limits.timezone)
    local = _dt.datetime.fromtimestamp(float(wall_time), tz=zone)
    return (local - _dt.timedelta(minutes=_minutes(limits.day_starts) or 0)).date().isoformat()


@dataclass(frozen=True, slots=True)
class Offer:
    """What the policies chose for one trial, before and after the limits."""

    cue: str | None
    reward_prob: float
    reward_ul: float
    reward_armed: bool
    end_session: bool


def apply_limits(
    limits: WelfareLimits,
    offer: Offer,
    u: float,
    *,
    session_min: float,
    unrewarded_in_row: int,
    ul_session: float,
    ul_today: float,
    rewarded: dict[str, float],
    rescue_ul: float,
) -> tuple[Offer, list[str], list[str]]:
    """Apply every limit to a policy's offer; return (offer, overrides, warnings).

    ``u`` is the trial's uniform draw: the reward is armed when u < final probability,
    so raising the probability never needs a new draw. ``rewarded`` maps each cue the
    block rewards to its contingency volume.
    """
    cue, p, ul, armed, end, overrides, warnings = limit_values(
        limits, offer.cue, offer.reward_prob, offer.reward_ul, offer.end_session, lambda p: u < p, session_min,
        unrewarded_in_row, ul_session, ul_today, rewarded, rescue_ul,
    )
    return Offer(cue, p, ul, armed, end), overrides, warnings


def limit_values(
    limits: WelfareLimits,
    cue: str | None,
    p: float,
    ul: float,
    end: bool,
    below: Callable[[float], bool],
    session_min: float,
    unrewarded_in_row: int,
    ul_session: float,
    ul_today: float,
    rewarded: Mapping[str, float],
    rescue_ul: float,
) -> tuple[str | None, float, float, bool, bool, list[str], list[str]]:
    """:func:`apply_limits` over plain values, for the engine (no Offer built or read):
    returns (cue, p, ul, armed, end, overrides, warnings). ``below(p)`` answers "is the
    trial's uniform draw below p?"; it is called at most once, when no limit forced the
    reward, so the engine makes the draw only when the answer depends on it.
    ``rewarded`` is only read."""
    overrides: list[str] = []
    forced = False

    if session_min >= limits.max_session_min and not end:
        end = True
        overrides.append(
            f"welfare: session length {fmt(session_min)} min reached the limit "
            f"({fmt(limits.max_session_min)} min) -> session ends"
        )
    if not end:
        if unrewarded_in_row >= limits.max_unrewarded_run:
            if cue not in rewarded:
                if rewarded:
                    new = max(rewarded, key=lambda c: (rewarded[c], -list(rewarded).index(c)))
                    overrides.append(
                        f"welfare: {unrewarded_in_row} unrewarded trials in a row "
                        f"(limit {limits.max_unrewarded_run}) -> cue {new} instead of {cue}, reward armed"
                    )
                    cue, ul = new, rewarded[new]
                else:
                    ul = rescue_ul
                    overrides.append(
                        f"welfare: {unrewarded_in_row} unrewarded trials in a row "
                        f"(limit {limits.max_unrewarded_run}) and the block rewards no cue -> "
                        f"{fmt(ul)} µL armed on {cue}"
                    )
            else:
                overrides.append(
                    f"welfare: {unrewarded_in_row} unrewarded trials in a row "
                    f"(limit {limits.max_unrewarded_run}) -> reward armed"
                )
            p, forced = 1.0, True
        elif cue in rewarded and p < limits.min_reward_prob:
            overrides.append(
                f"welfare: reward probability {fmt(p)} for {cue} is below the floor "
                f"{fmt(limits.min_reward_prob)} -> {fmt(limits.min_reward_prob)}"
            )
            p = limits.min_reward_prob
        if ul > limits.max_reward_ul:
            overrides.append(f"welfare: reward {fmt(ul)} µL exceeds the limit -> {fmt(limits.max_reward_ul)} µL")
            ul = limits.max_reward_ul
    armed = (forced or below(p)) and ul > 0 and not end
    if end:
        cue, p, ul, armed = None, 0.0, 0.0, False

    warnings = water_warnings(limits, session_min, ul_session, ul_today, end)
    return cue, p, ul, armed, end, overrides, warnings


def water_warnings(limits: WelfareLimits, session_min: float, ul_session: float, ul_today: float, ended: bool) -> list[str]:
    """The daily-water warning.

    Projection: today's total so far plus the session's rate so far (µL/min) times the
    planned minutes left. It starts after ``warn_after_min`` minutes; at the session's
    end it becomes the shortfall to give as a supplement.
    """
    need = limits.daily_min_ml * 1000.0
    if ul_today >= need:
        return []
    if ended:
        return [
            f"welfare: {fmt(ul_today / 1000)} mL today is below the daily minimum "
            f"{fmt(limits.daily_min_ml)} mL -> supplement {fmt((need - ul_today) / 1000)} mL after the session"
        ]
    if session_min < limits.warn_after_min or session_min <= 0:
        return []
    left = max(0.0, limits.planned_min - session_min)
    # projected = today so far + (session µL / session minutes) * planned minutes left
    projected = ul_today + ul_session / session_min * left
    if projected >= need:
        return []
    return [
        f"welfare: on track for {fmt(projected / 1000)} mL today "
        f"({fmt(ul_today / 1000)} mL so far, {fmt(ul_session / session_min)} µL/min over the "
        f"{fmt(left)} planned minutes left) < daily minimum {fmt(limits.daily_min_ml)} mL"
    ]
