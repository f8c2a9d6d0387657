"""Read-only queries of the store: sessions, trials, decisions, the flat rows of an
export, snapshots, water (rewards on the rig, supplements) and statistics (``Reader``, the read half of ``Store``), and the few
lookups that a write also makes inside its own transaction.

The iterators read in pages, so no cursor stays open across a ``yield``: a ``Store``
shared between threads is never held by a slow consumer, and each page is one range of
the (subject, session, trial) index.
"""

from __future__ import annotations

import hashlib
import json
import os
import sqlite3
from collections.abc import Iterator
from dataclasses import dataclass
from typing import Any

from ..core.trial import Decision, TrialEvent
from ..errors import BadArgument, StoreError
from .db import Database
from .records import SessionInfo, Snapshot
from .schema import SCHEMA_VERSION

_PAGE = 1000  # rows per page in the iterators
_SESSION_COLS = ("subject, session, rig, rules_name, rules_text, rules_sha256, seed, opened_at, profile, meta, "
                 "closed_at")




@dataclass(frozen=True)
class Supplement:
    """Water given off the rig: ``volume_ul`` µL to ``subject``, counted toward lab day
    ``day`` (YYYY-MM-DD), entered at ``recorded_at`` (Unix seconds) with a free ``note``."""

    subject: str
    day: str
    volume_ul: float
    recorded_at: float
    note: str


# --------------------------------------------------------------------------- lookups on a connection


def session_in(c: sqlite3.Connection, subject: str, session: str) -> SessionInfo | None:
    """The stored session, or None."""
    row = c.execute(f"SELECT {_SESSION_COLS} FROM sessions WHERE subject = ? AND session = ?",
                    (subject, session)).fetchone()
    return None if row is None else _session_from(row)


def session_known(c: sqlite3.Connection, subject: str, session: str) -> bool:
    """Whether the session was ever opened."""
    return c.execute("SELECT 1 FROM sessions WHERE subject = ? AND session = ?",
                     (subject, session)).fetchone() is not None


def stored_texts(c: sqlite3.Connection, key: tuple[str, str, int]) -> tuple[str, str] | None:
    """The stored event and decision texts of ``(subject, session, trial)``, or None."""
    return c.execute("SELECT event, decision FROM trials WHERE subject = ? AND session = ? AND trial = ?",
                     key).fetchone()


def _session_from(row: tuple) -> SessionInfo:
    subject, session, rig, name, text, sha, seed, opened, profile, meta, closed = row
    return SessionInfo(subject, session, rig, name, text, sha, seed, opened, profile, json.loads(meta), closed)


# --------------------------------------------------------------------------- reader


class Reader:
    """The read-only queries of one store file, over its ``Database``."""

    def __init__(self, database: Database):
        self._database = database
        self.path = database.path

    def check(self) -> list[str]:
        """Run ``PRAGMA integrity_check`` (reads the whole file); [] means healthy."""
        rows = self._database.read("PRAGMA integrity_check")
        found = [r[0] for r in rows]
        return [] if found == ["ok"] else found

    # -- sessions -------------------------------------------------------------

    def session(self, subject: str, session: str) -> SessionInfo | None:
        """The stored session, or None."""
        return self._database.query(lambda c: session_in(c, subject, session))

    def sessions(self, subject: str | None = None) -> list[SessionInfo]:
        """Sessions in open order (per subject by ``seq``; across subjects by open order)."""
        if subject is None:
            rows = self._database.read(f"SELECT {_SESSION_COLS} FROM sessions ORDER BY id")
        else:
            rows = self._database.read(f"SELECT {_SESSION_COLS} FROM sessions WHERE subject = ? ORDER BY seq",
                                       (subject,))
        return [_session_from(r) for r in rows]

    def subjects(self) -> list[str]:
        """Subject names in the order they were first seen."""
        return [r[0] for r in self._database.read("SELECT name FROM subjects ORDER BY ord")]

    # -- trials -----------------------------------------------------------------

    def last_trial(self, subject: str, session: str) -> int:
        """The highest stored trial number of the session (0 if none)."""
        rows = self._database.read("SELECT MAX(trial) FROM trials WHERE subject = ? AND session = ?",
                                   (subject, session))
        return rows[0][0] or 0

    def lookup(self, subject: str, session: str, trial: int) -> tuple[TrialEvent, Decision] | None:
        """The stored event and decision for a key, or None (check before stepping a retry)."""
        found = self._database.query(lambda c: stored_texts(c, (subject, session, trial)))
        if found is None:
            return None
        event, decision = found
        return TrialEvent.from_dict(json.loads(event)), Decision.from_dict(json.loads(decision))

    def trials(self, subject: str, session: str | None = None,
               after: tuple[str, int] | None = None) -> Iterator[TrialEvent]:
        """The subject's trials in session open order, then trial order; ``after=(session,
        trial)`` starts strictly after that position (e.g. the trial of a snapshot)."""
        for *_, text in self._pages("event", subject, session, after):
            yield TrialEvent.from_dict(json.loads(text))

    def decisions(self, subject: str, session: str | None = None,
                  after: tuple[str, int] | None = None) -> Iterator[Decision]:
        """The decisions made after each of the subject's trials, in the same order as ``trials``."""
        for *_, text in self._pages("decision", subject, session, after):
            yield Decision.from_dict(json.loads(text))

    def rows(self, what: str, subject: str | None = None, session: str | None = None) -> Iterator[dict[str, Any]]:
        """Flat dicts for export, each with ``subject``, ``session``, ``trial`` first.

        trials: the event's fields flattened (``reward_ul``, ``response_kind``, …), with
          ``cues`` as a list of ``[cue, onset, offset]`` and ``extra`` as a dict.
        decisions: ``trial`` is the trial that produced it, ``next_trial`` the one it is for;
          then the Decision fields (``reasons``, ``overrides``, ``warnings`` as lists).
        quantities: one key per stored quantity name.
        """
        if what == "trials":
            for *_, text in self._pages("event", subject, session):
                yield _flat_trial(json.loads(text))
        elif what == "decisions":
            for subj, sess, trial, text in self._pages("decision", subject, session):
                yield _flat_decision(subj, sess, trial, json.loads(text))
        elif what == "quantities":
            for subj, sess, trial, text in self._pages("quantities", subject, session):
                yield {"subject": subj, "session": sess, "trial": trial, **json.loads(text)}
        else:
            raise BadArgument("what", "one of trials, decisions, quantities", what)

    def _pages(self, column: str, subject: str | None, session: str | None,
               after: tuple[str, int] | None = None) -> Iterator[tuple[str, str, int, Any]]:
        """``(subject, session, trial, column)`` of ``trials`` in (subject first seen,
        session seq, trial) order. Reads a page at a time along the (subject, session,
        trial) index, so no cursor stays open between yields and each page is an index range."""
        if after is not None and subject is None:
            raise BadArgument("after", "used together with a subject", after)
        if subject is None:
            subjects = self.subjects()
        else:
            subjects = [subject]
        sql = (f"SELECT trial, {column} FROM trials WHERE subject = ? AND session = ? AND trial > ? "
               f"ORDER BY trial LIMIT {_PAGE}")
        for subj in subjects:
            sessions = [s[0] for s in self._database.read("SELECT session FROM sessions WHERE subject = ? ORDER BY seq",
                                                          (subj,))]
            skip_to, first_trial = 0, 0
            if after is not None:
                a_session, a_trial = after
                if a_session not in sessions:
                    raise StoreError(f"session {a_session!r} of subject {subj!r} is not in the store")
                skip_to, first_trial = sessions.index(a_session), int(a_trial)
            for i, sess in enumerate(sessions):
                if i < skip_to or (session is not None and sess != session):
                    continue
                last = first_trial if i == skip_to else 0
                while True:
                    rows = self._database.read(sql, (subj, sess, last))
                    for trial, value in rows:
                        yield subj, sess, trial, value
                    if len(rows) < _PAGE:
                        break
                    last = rows[-1][0]

    # -- snapshots and statistics -------------------------------------------------

    def snapshots(self, subject: str) -> Iterator[Snapshot]:
        """The subject's snapshots, newest position first (latest session, then latest
        trial). ``ok`` is False for a blob that fails its sha256; recovery skips those."""
        ids = self._database.read(
            "SELECT n.id FROM snapshots n JOIN sessions s ON s.subject = n.subject AND s.session = n.session "
            "WHERE n.subject = ? ORDER BY s.seq DESC, n.trial DESC",
            (subject,),
        )
        for (ident,) in ids:  # one blob in memory at a time
            rows = self._database.read("SELECT subject, session, trial, blob, sha256, created FROM snapshots "
                                       "WHERE id = ?", (ident,))
            if rows:
                subj, sess, trial, blob, sha, created = rows[0]
                blob = bytes(blob)
                yield Snapshot(subj, sess, trial, blob, sha, hashlib.sha256(blob).hexdigest() == sha, created)

    # -- water --------------------------------------------------------------------

    def rewards(self, subject: str, session: str) -> list[tuple[float, float]]:
        """``(wall_time, reward_ul)`` of each of the session's rewarded trials, in trial order:
        the water the animal earned on the rig."""
        return self._database.read("SELECT wall_time, reward_ul FROM trials WHERE subject = ? AND session = ? "
                                   "AND reward_ul > 0 ORDER BY trial", (subject, session))

    def supplements(self, subject: str | None = None) -> list[Supplement]:
        """The water given off the rig (all subjects, or one), by subject, day and entry order."""
        sql = "SELECT subject, day, volume_ul, recorded_at, note FROM supplements"
        if subject is None:
            rows = self._database.read(sql + " ORDER BY subject, day, id")
        else:
            rows = self._database.read(sql + " WHERE subject = ? ORDER BY day, id", (subject,))
        return [Supplement(*r) for r in rows]

    def statistics(self) -> dict[str, Any]:
        """Row counts, file and WAL sizes in bytes, schema and SQLite versions."""
        counts = {}
        for table in ("subjects", "sessions", "trials", "snapshots", "supplements"):
            counts[table] = self._database.read(f"SELECT COUNT(*) FROM {table}")[0][0]
        counts["decisions"] = counts["quantities"] = counts["trials"]  # one row holds all three
        return {
            "path": self.path,
            **counts,
            "file_bytes": _size(self.path),
            "wal_bytes": _size(self.path + "-wal"),
            "schema_version": SCHEMA_VERSION,
            "sqlite_version": sqlite3.sqlite_version,
        }


# --------------------------------------------------------------------------- export rows


def _flat_trial(e: dict[str, Any]) -> dict[str, Any]:
    """A stored event as one flat export row (outcome and response fields side by side)."""
    o, r = e["outcome"], e["response"]
    row = {
        "subject": e["subject"],
        "session": e["session"],
        "trial": e["trial"],
        "rig": e["rig"],
        "wall_time": e["wall_time"],
        "duration": e["duration"],
        "cues": e["cues"],
        "reward_ul": o["reward_ul"],
        "reward_time": o["reward_time"],
        "punishment": o["punishment"],
        "punishment_time": o["punishment_time"],
        "timeout_s": o["timeout_s"],
        "response_kind": r["kind"],
        "response_value": r["value"],
        "response_result": r["result"],
        "response_latency": r["latency"],
        "extra": e["extra"],
    }
    if e.get("steps"):  # multi-step trials only, so one-step exports stay as they were
        row["steps"] = e["steps"]
    return row


def _flat_decision(subject: str, session: str, trial: int, d: dict[str, Any]) -> dict[str, Any]:
    """A stored decision as one export row: keyed by the trial that produced it."""
    row = {"subject": subject, "session": session, "trial": trial, "next_trial": d.pop("trial")}
    d.pop("subject")
    d.pop("session")
    row.update(d)
    return row


def _size(path: str) -> int:
    """A file's size in bytes, 0 if it is not there."""
    try:
        return os.path.getsize(path)
    except OSError:
        return 0
