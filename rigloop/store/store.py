"""``Store``: the writes of the durable store (sessions, trial commits, snapshots) over
the read-only queries of ``Reader``.

The caller replies to a rig **only after** ``commit_trial`` / ``commit_batch`` returns;
a rig that got no reply retries, and the retry is answered from what is stored
(``CommitResult.duplicate``), so nothing is counted twice. Every argument is checked and
encoded (``records.prepare``) before a transaction starts.

One ``Store`` may be shared between threads: each call takes the connection's lock.
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import json
import math
import os
import sqlite3
import time
from collections.abc import Mapping, Sequence

from ..core.trial import Decision, TrialEvent
from ..errors import BadArgument, ConflictingTrial, RigloopError, StoreError
from .db import Database
from .reading import Reader, Supplement, session_in, session_known, stored_texts
from .records import (
    BatchItem,
    CommitResult,
    Prepared,
    SessionInfo,
    blob_bytes,
    canonical_json,
    prepare,
    seconds,
)
from .schema import TRIAL_COLUMNS

# one supplement entry above this is refused as a slip (a mouse's whole daily ration is about
# 1-3 mL: recalled from memory, not a protocol)
MAX_SUPPLEMENT_UL = 10_000.0
_INSERT_TRIAL = (f"INSERT INTO trials ({TRIAL_COLUMNS}) "
                 "VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?) ON CONFLICT DO NOTHING")


class Store(Reader):
    """The SQLite store. ``Store(path)`` opens or creates it; use as a context manager.
    ``background_checkpoint=True`` (the daemon's) moves WAL checkpoints off the commits
    onto a thread of their own (``checkpoint.py``)."""

    def __init__(self, path: str | os.PathLike, *, create: bool = True, background_checkpoint: bool = False):
        super().__init__(Database(path, create=create, background_checkpoint=background_checkpoint))
        self._known_sessions: set[tuple[str, str]] = set()

    @property
    def presize_error(self) -> str | None:
        """Why the daemon's store could not pre-size its WAL (``checkpoint.presize_wal``), or None."""
        return self._database.presize_error

    @property
    def _conn(self) -> sqlite3.Connection | None:
        """The open connection (None once closed), for tests that look at the file directly."""
        return self._database.conn

    def close(self) -> None:
        """Close the connection (idempotent). Committed data is already durable."""
        self._database.close()

    def __enter__(self) -> Store:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def __repr__(self) -> str:
        return f"Store({self.path!r})"

    # -- sessions -------------------------------------------------------------

    def open_session(self, info: SessionInfo) -> SessionInfo:
        """Record a session (and its subject). Re-opening it with the same rule file
        returns the stored ``SessionInfo`` unchanged; with another rule file -> StoreError."""
        if not isinstance(info, SessionInfo):
            raise BadArgument("info", "a SessionInfo", info)

        return self._database.write(lambda c: self._open_in(c, info))

    def _open_in(self, c: sqlite3.Connection, info: SessionInfo) -> SessionInfo:
        stored = session_in(c, info.subject, info.session)
        if stored is not None:
            if stored.rules_sha256 != info.rules_sha256:
                raise StoreError(
                    f"session {info.session!r} of subject {info.subject!r} is already open with rule file "
                    f"{stored.rules_name!r} (sha256 {stored.rules_sha256[:12]}…); a session has one rule file, "
                    f"so {info.rules_name!r} (sha256 {info.rules_sha256[:12]}…) needs a new session id"
                )
            return stored
        c.execute(
            "INSERT OR IGNORE INTO subjects (name, first_seen, ord) "
            "VALUES (?, ?, (SELECT COALESCE(MAX(ord), 0) + 1 FROM subjects))",
            (info.subject, info.opened_at),
        )
        seq = c.execute("SELECT COALESCE(MAX(seq), 0) + 1 FROM sessions WHERE subject = ?", (info.subject,)).fetchone()[0]
        c.execute(
            "INSERT INTO sessions (subject, session, seq, rig, rules_name, rules_text, rules_sha256, seed, "
            "opened_at, closed_at, profile, meta) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, NULL, ?, ?)",
            (info.subject, info.session, seq, info.rig, info.rules_name, info.rules_text, info.rules_sha256,
             info.seed, info.opened_at, info.profile, canonical_json(dict(info.meta))),
        )
        return session_in(c, info.subject, info.session)

    def import_sessions(self, sessions: Sequence[tuple[SessionInfo, Sequence[BatchItem]]]) -> int:
        """Store whole new sessions, with all their trials, in ONE transaction.

        For importing trial tables: either everything lands or nothing does. A session
        that is already stored, or any item that cannot be stored, raises StoreError and
        rolls the whole import back. Returns the number of trials written."""
        prepared = [(info, [prepare(*item) for item in items]) for info, items in sessions]

        def work(c: sqlite3.Connection) -> int:
            n = 0
            for info, items in prepared:
                if session_in(c, info.subject, info.session) is not None:
                    raise StoreError(f"session {info.session!r} of subject {info.subject!r} is already stored; "
                                     "an import adds new sessions only (nothing was imported)")
                self._open_in(c, info)
                for p in items:
                    self._commit_one(c, p)
                    n += 1
            return n

        try:
            return self._database.write(work)
        except BaseException:
            # rolled back: forget the sessions _commit_one learned inside the transaction
            self._known_sessions -= {(info.subject, info.session) for info, _ in prepared}
            raise

    def close_session(self, subject: str, session: str, closed_at: float) -> SessionInfo:
        """Mark a session closed. The first close wins; closing again changes nothing."""
        closed_at = seconds("closed_at", closed_at)

        def work(c: sqlite3.Connection) -> SessionInfo:
            c.execute("UPDATE sessions SET closed_at = ? WHERE subject = ? AND session = ? AND closed_at IS NULL",
                      (closed_at, subject, session))
            stored = session_in(c, subject, session)
            if stored is None:
                raise StoreError(f"cannot close session {session!r} of subject {subject!r}: it was never opened")
            return stored

        return self._database.write(work)

    # -- trials -----------------------------------------------------------------

    def commit_trial(
        self,
        event: TrialEvent,
        decision: Decision,
        quantities: Mapping[str, float | None],
        snapshot: bytes | None = None,
    ) -> CommitResult:
        """Store a trial, the decision it produced and its model quantities (and optionally
        the subject's state snapshot after it) in one durable transaction.

        Same key and identical event: nothing is written; returns the stored decision with
        ``duplicate=True``. Same key, different event: ConflictingTrial, nothing changes.
        """
        prepared = prepare(event, decision, quantities, snapshot)
        # without a snapshot the trial is one INSERT, a transaction of its own
        return self._database.write(lambda c: self._commit_one(c, prepared), alone=snapshot is None)

    def commit_batch(self, items: Sequence[BatchItem]) -> list[CommitResult]:
        """Group commit: store many trials in one transaction (one fsync).

        Each item has the semantics of ``commit_trial``; an item that cannot be stored
        (conflict, unknown session, bad arguments) gets ``CommitResult(None, False, error)``
        and does not affect the others. Later items see earlier ones (a repeat inside the
        batch is a duplicate)."""
        prepared: list[Prepared | RigloopError] = []
        for item in items:
            try:
                prepared.append(prepare(*item))
            except RigloopError as err:
                prepared.append(err)
            except TypeError as err:
                prepared.append(BadArgument("item", "a tuple (event, decision, quantities, snapshot or None)",
                                            f"{type(item).__name__}: {err}"))

        def work(c: sqlite3.Connection) -> list[CommitResult]:
            out: list[CommitResult] = []
            for p in prepared:
                if isinstance(p, RigloopError):
                    out.append(CommitResult(None, False, p))
                    continue
                try:
                    out.append(self._commit_one(c, p))
                except RigloopError as err:  # raised before the item wrote anything (see _commit_one)
                    out.append(CommitResult(None, False, err))
            return out

        # one trial without a snapshot is one INSERT: a transaction of its own
        alone = len(prepared) == 1 and isinstance(prepared[0], Prepared) and prepared[0].snapshot is None
        return self._database.write(work, alone=alone)

    def _commit_one(self, c: sqlite3.Connection, p: Prepared) -> CommitResult:
        """Write one prepared trial inside the caller's transaction.

        Invariant that commit_batch relies on (no savepoint per item): a RigloopError is
        raised only before this item changed anything; once the trial row is inserted,
        only SQLite errors can follow, and those abort the whole transaction. The one
        row holds the trial, its decision and its quantities, so no item is ever partial."""
        ev = p.event
        key = (ev.subject, ev.session, ev.trial)
        if (ev.subject, ev.session) not in self._known_sessions:
            if not session_known(c, ev.subject, ev.session):
                raise StoreError(f"session {ev.session!r} of subject {ev.subject!r} was never opened; "
                                 "open_session() comes before its trials")
            self._known_sessions.add(key[:2])  # sessions are never deleted, so this stays true
        first_cue = ev.cues[0].cue if ev.cues else None
        d = p.decision
        inserted = c.execute(
            _INSERT_TRIAL,
            (*key, ev.rig, ev.wall_time, first_cue, ev.outcome.reward_ul, ev.response.result, p.event_text,
             d.trial, d.cue, d.block, d.stage, int(d.reward_armed), int(d.end_session), p.decision_text,
             p.quantities_text),
        ).rowcount
        if inserted != 1:  # the key is taken: a retry (same event) or a conflict
            stored_event, stored_decision = stored_texts(c, key)
            if stored_event != p.event_text and TrialEvent.from_dict(json.loads(stored_event)) != ev:
                raise ConflictingTrial(*key)
            return CommitResult(Decision.from_dict(json.loads(stored_decision)), True)
        if p.snapshot is not None:
            self._put_snapshot(c, *key, p.snapshot)
        return CommitResult(d, False)

    # -- water ------------------------------------------------------------------------

    def add_supplement(self, subject: str, day: str, volume_ul: float, note: str = "",
                       recorded_at: float | None = None) -> Supplement:
        """Record water given to ``subject`` off the rig, counted toward lab day ``day``
        (YYYY-MM-DD), in its own transaction; returns what was stored."""
        entry = Supplement(_subject_name(subject), _day_text(day), _supplement_ul(volume_ul),
                           time.time() if recorded_at is None else seconds("recorded_at", recorded_at),
                           _note_text(note))

        def work(c: sqlite3.Connection) -> None:
            c.execute("INSERT INTO supplements (subject, day, volume_ul, recorded_at, note) VALUES (?, ?, ?, ?, ?)",
                      (entry.subject, entry.day, entry.volume_ul, entry.recorded_at, entry.note))

        self._database.write(work)
        return entry

    # -- snapshots ----------------------------------------------------------------

    def save_snapshot(self, subject: str, session: str, trial: int, blob: bytes) -> None:
        """Store the subject's state after ``trial`` (0: before the session's first trial),
        in its own transaction. Saving the same position again replaces the blob."""
        blob = blob_bytes(blob)
        if isinstance(trial, bool) or not isinstance(trial, int) or trial < 0:
            raise BadArgument("trial", "a whole number >= 0", trial)

        def work(c: sqlite3.Connection) -> None:
            if not session_known(c, subject, session):
                raise StoreError(f"session {session!r} of subject {subject!r} was never opened; cannot snapshot it")
            self._put_snapshot(c, subject, session, trial, blob)

        self._database.write(work)

    @staticmethod
    def _put_snapshot(c: sqlite3.Connection, subject: str, session: str, trial: int, blob: bytes) -> None:
        c.execute(
            "INSERT INTO snapshots (subject, session, trial, created, blob, sha256) VALUES (?, ?, ?, ?, ?, ?) "
            "ON CONFLICT (subject, session, trial) DO UPDATE SET created = excluded.created, blob = excluded.blob, "
            "sha256 = excluded.sha256",
            (subject, session, trial, time.time(), blob, hashlib.sha256(blob).hexdigest()),
        )


def _subject_name(subject: object) -> str:
    """A supplement's subject: a non-empty name."""
    if not isinstance(subject, str) or not subject.strip():
        raise BadArgument("subject", "a non-empty name", subject)
    return subject


def _day_text(day: object) -> str:
    """A lab day as YYYY-MM-DD."""
    if isinstance(day, str) and len(day) == 10:
        try:
            return _dt.date.fromisoformat(day).isoformat()
        except ValueError:
            pass
    raise BadArgument("day", "a date YYYY-MM-DD", day)


def _supplement_ul(volume: object) -> float:
    """A supplement's volume in µL: a number > 0 and at most MAX_SUPPLEMENT_UL."""
    if isinstance(volume, bool) or not isinstance(volume, (int, float)) or not math.isfinite(volume) or volume <= 0:
        raise BadArgument("volume_ul", "a volume in µL > 0", volume)
    if volume > MAX_SUPPLEMENT_UL:
        raise BadArgument("volume_ul", f"at most {MAX_SUPPLEMENT_UL / 1000:g} mL ({MAX_SUPPLEMENT_UL:g} µL) in one "
                                       "entry; record a larger amount as several entries if it is really meant",
                          volume)
    return float(volume)


def _note_text(note: object) -> str:
    """A supplement's note: text (may be empty)."""
    if not isinstance(note, str):
        raise BadArgument("note", "text", note)
    return note
