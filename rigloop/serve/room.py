"""The room: one plain row per subject, read from the store at start and kept current
from the daemon's observer messages. ``rigloop web`` and ``rigloop watch`` both show it.

A row: ``subject, rig, session, closed, rules, trial, stage, block, ul_today, day,
values {cue: {mean, sd}}, p_correct {p, lo, hi}, behaviour {cue: [[trial, p, lo, hi], ...]}``
(the animal's own P(respond) or P(right) per cue with its 95% band, newest ``POINTS``
trials) and ``decision`` (the newest decision: cue, reward, every reason, warnings,
overrides). Water today is summed over the UTC day of the subject's newest trial.
"""

from __future__ import annotations

import re
import threading
from collections import deque
from collections.abc import Callable, Iterable, Iterator, Mapping
from typing import Any

POINTS = 60  # trials per sparkline
DAY_S = 86400.0
_BAND = re.compile(r"^p_(respond|right)\[(.+)\]$")


def behaviour_points(q: Mapping[str, Any]) -> dict[str, tuple[float, float, float]]:
    """``{cue: (p, lo, hi)}`` from one trial's quantities (the animal's own estimate)."""
    out = {}
    for key, p in q.items():
        m = _BAND.match(key)
        if m is None or p is None:
            continue
        kind, cue = m.groups()
        lo, hi = q.get(f"p_{kind}_lo95[{cue}]"), q.get(f"p_{kind}_hi95[{cue}]")
        if lo is not None and hi is not None:
            out[cue] = (float(p), float(lo), float(hi))
    return out


def model_summary(q: Mapping[str, Any]) -> dict[str, Any]:
    """``values`` and ``p_correct`` (as the watch table shows them) from one trial's quantities."""
    out: dict[str, Any] = {}
    values = {key[6:-1]: {"mean": v, "sd": q.get(f"sd[{key[6:-1]}]")}
              for key, v in q.items() if key.startswith("value[") and key.endswith("]")}
    if values:
        out["values"] = values
    if q.get("p_correct") is not None:
        out["p_correct"] = {"p": q["p_correct"], "lo": q.get("p_lo95"), "hi": q.get("p_hi95")}
    return out


def decision_view(d: Mapping[str, Any]) -> dict[str, Any]:
    """The parts of a decision the room shows (every reason, not only the first)."""
    return {"trial": d.get("next_trial", d.get("trial")), "cue": d.get("cue"), "reward_prob": d.get("reward_prob"),
            "reward_ul": d.get("reward_ul"), "end_session": bool(d.get("end_session")),
            "reasons": list(d.get("reasons") or []), "warnings": list(d.get("warnings") or []),
            "overrides": list(d.get("overrides") or [])}


def subject_row(store: Any, subject: str) -> dict[str, Any] | None:
    """One subject's row from the store (read only), or None when it has no session."""
    sessions = store.sessions(subject)
    if not sessions:
        return None
    info = sessions[-1]
    row: dict[str, Any] = {"subject": subject, "rig": info.rig, "session": info.session,
                           "closed": info.closed_at is not None, "rules": info.rules_name, "trial": 0,
                           "behaviour": {}}
    first = (info.meta or {}).get("first_decision")
    last_d = None
    for last_d in store.rows("decisions", subject, info.session):
        pass
    d = last_d or first
    if d:
        row.update(stage=d.get("stage"), block=d.get("block"), decision=decision_view(d))
    points: dict[str, deque] = {}
    last_q: Mapping[str, Any] = {}
    for q in store.rows("quantities", subject, info.session):
        last_q = q
        for cue, band in behaviour_points(q).items():
            points.setdefault(cue, deque(maxlen=POINTS)).append([q["trial"], *band])
    row["behaviour"] = {cue: list(v) for cue, v in points.items()}
    row.update(model_summary(last_q))
    if last_q:
        row["trial"] = last_q["trial"]
    row.update(_water_today(store, subject, sessions))
    return row


def _limits(info) -> Any | None:
    """The welfare limits of a stored session's own rule file (None if it no longer loads)."""
    from ..errors import RigloopError
    from ..rules import load_rules

    try:
        return load_rules(info.rules_text, source=f"session {info.session}").spec.welfare
    except RigloopError:
        return None


def _water_today(store: Any, subject: str, sessions: list) -> dict[str, Any]:
    """µL delivered on the lab's day of the subject's newest trial (the day the rule file's
    ``[welfare] timezone`` and ``day_starts`` set; UTC by default), over every session that
    day, and that rule file's daily minimum in µL."""
    from ..rules.welfare import lab_day

    limits = _limits(sessions[-1])
    newest = None
    for t in store.rows("trials", subject, sessions[-1].session):
        newest = t["wall_time"]
    minimum = None if limits is None else float(limits.daily_min_ml) * 1000.0
    if newest is None:
        return {"ul_today": 0.0, "day": None, "daily_min_ul": minimum}
    start = newest - newest % DAY_S
    day = None if limits is None else lab_day(newest, limits)
    total = 0.0
    for info in sessions:
        if info.closed_at is not None and info.closed_at < start - DAY_S:
            continue  # closed before the day could have begun, in any time zone
        for t in store.rows("trials", subject, info.session):
            w = t["wall_time"] or 0.0
            same = lab_day(w, limits) == day if limits is not None else start <= w < start + DAY_S
            if same:
                total += t["reward_ul"] or 0.0
    return {"ul_today": total, "day": day if day is not None else start, "daily_min_ul": minimum}


def rows_from_store(store: Any) -> dict[str, dict[str, Any]]:
    """Every subject in the store with a session: ``{subject: row}``."""
    out = {}
    for subject in store.subjects():
        row = subject_row(store, subject)
        if row is not None:
            out[subject] = row
    return out


class Room:
    """The rows, a version counter per row, and a lock (fed from one thread, read from others)."""

    def __init__(self, rows: Mapping[str, dict[str, Any]] | None = None):
        self.lock = threading.Lock()
        self.rows: dict[str, dict[str, Any]] = {}
        self.versions: dict[str, int] = {}
        self.version = 0
        self.updates = 0
        for subject, row in (rows or {}).items():
            self._put(subject, row)

    def _put(self, subject: str, row: dict[str, Any]) -> None:
        self.version += 1
        self.rows[subject] = row
        self.versions[subject] = self.version

    def snapshot(self) -> dict[str, dict[str, Any]]:
        """A copy of every row, for a page or a table."""
        with self.lock:
            return {s: dict(r) for s, r in self.rows.items()}

    def changed_since(self, version: int) -> tuple[int, list[dict[str, Any]]]:
        """The rows changed after ``version``, and the newest version."""
        with self.lock:
            return self.version, [dict(self.rows[s]) for s, v in self.versions.items() if v > version]

    def feed(self, msg: Mapping[str, Any]) -> str | None:
        """Fold one observer message into its subject's row; returns the subject, or None."""
        subject = msg.get("subject")
        if not isinstance(subject, str):
            return None
        with self.lock:
            row = dict(self.rows.get(subject) or {"subject": subject, "trial": 0, "behaviour": {}})
            _fold(row, msg)
            self._put(subject, row)
            self.updates += 1
        return subject


def _fold(row: dict[str, Any], msg: Mapping[str, Any]) -> None:
    """One message into a row (a copy the caller owns)."""
    kind = msg.get("type")
    if msg.get("rig"):
        row["rig"] = msg["rig"]
    if msg.get("session"):
        if msg.get("session") != row.get("session"):
            row["behaviour"] = {}
        row["session"] = msg["session"]
    row["closed"] = kind == "session_closed"
    s = msg.get("summary") or {}
    for key in ("stage", "block", "ul_today"):
        if s.get(key) is not None:
            row[key] = s[key]
    for key in ("values", "p_correct"):
        if s.get(key):
            row[key] = s[key]
    if isinstance(msg.get("decision"), Mapping):
        row["decision"] = decision_view(msg["decision"])
        row["stage"] = msg["decision"].get("stage", row.get("stage"))
        row["block"] = msg["decision"].get("block", row.get("block"))
    update = msg.get("update")
    if kind == "trial" and isinstance(update, Mapping):
        row["trial"] = msg.get("trial", row.get("trial"))
        behaviour = {c: list(v) for c, v in (row.get("behaviour") or {}).items()}
        for cue, band in behaviour_points(update.get("quantities") or {}).items():
            behaviour[cue] = (behaviour.get(cue, []) + [[msg.get("trial"), *band]])[-POINTS:]
        row["behaviour"] = behaviour


def feed_all(room: Room, messages: Iterable[Mapping[str, Any]]) -> None:
    """Fold several messages (tests, replays of a stream)."""
    for m in messages:
        room.feed(m)


def observer_messages(sub, keep_going: Callable[[], bool]) -> Iterator[dict | None]:
    """The stream's messages read from ``sub`` (a ``SubLink``) while ``keep_going()`` holds:
    each decoded map, or None after 200 ms without one (so a reader can look at its clock).
    A frame that is not a msgpack map is skipped. What ``watch`` and the room page read."""
    import msgpack

    while keep_going():
        got = sub.recv(200)
        if got is None:
            yield None
            continue
        try:
            msg = msgpack.unpackb(got[1], raw=False)
        except Exception:  # a malformed frame on the stream: skip it
            continue
        if isinstance(msg, dict):
            yield msg
