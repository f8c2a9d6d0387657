"""The durable store: one SQLite file holding sessions, trials (each with its decision and
model quantities), and snapshots.

Durability contract: every write method returns only after its transaction is committed
with ``PRAGMA synchronous=FULL`` in WAL mode, i.e. after the WAL has been fsync'd. The
caller replies to a rig **only after** ``commit_trial`` / ``commit_batch`` returns; a rig
that got no reply retries, and the retry is answered from what is stored
(``CommitResult.duplicate``), so nothing is counted twice.

Any SQLite error while writing (a full disk, an I/O error from fsync) is fatal for this
``Store`` object: the transaction is rolled back, the store refuses further use, and the
error says so. Reopen the file (recovery replays from it); never retry the failed commit
on the same connection (a retried fsync can succeed without the data reaching disk).

Integrity: opening checks the file header, the application id and the schema version,
which is cheap at any size. The full ``PRAGMA integrity_check`` reads the whole file
(seconds per GB), so it is not run at open; call ``Store.check()`` where it is wanted.

One row of ``trials`` holds a trial's event, the decision it produced and its model
quantities, each as canonical JSON text (sorted keys, no spaces, floats as ``repr`` so they
round-trip exactly), plus key columns for queries; the views ``decisions`` and
``quantities`` show them as tables of their own. One row per trial keeps a commit to one
table page and one index page in the usual case, so a durable commit writes little to
the WAL. A store written by schema version 1 (three tables) is migrated when opened.

One ``Store`` may be shared between threads: each call takes an internal lock, and the
iterators read in pages, so no cursor stays open across a ``yield``. WAL mode lets other
processes read (e.g. an export) while the daemon writes; only one process should write.
"""

from __future__ import annotations

import hashlib
import json
import math
import numbers
import os
import sqlite3
import threading
import time
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

from ..core.trial import Decision, TrialEvent
from ..errors import BadArgument, ConflictingTrial, RigloopError, SchemaTooNew, StoreError

SCHEMA_VERSION = 2
# PRAGMA application_id marks the file as a rigloop store: "RGLP" as a 32-bit integer.
APPLICATION_ID = 0x52474C50
_SQLITE_MAGIC = b"SQLite format 3\x00"
_PAGE = 1000  # rows per page in the iterators
_RESERVED_QUANTITY_NAMES = frozenset({"subject", "session", "trial", "seq"})

_SCHEMA_TRIALS = """
CREATE TABLE trials (
    id           INTEGER PRIMARY KEY,        -- storage order
    subject      TEXT NOT NULL,
    session      TEXT NOT NULL,
    trial        INTEGER NOT NULL,
    rig          TEXT NOT NULL,
    wall_time    REAL NOT NULL,
    first_cue    TEXT,
    reward_ul    REAL NOT NULL,
    result       TEXT,
    event        TEXT NOT NULL,              -- canonical JSON of TrialEvent.to_dict()
    next_trial   INTEGER NOT NULL,           -- the decision this trial produced: Decision.trial
    cue          TEXT,
    block        TEXT NOT NULL,
    stage        TEXT NOT NULL,
    reward_armed INTEGER NOT NULL,
    end_session  INTEGER NOT NULL,
    decision     TEXT NOT NULL,              -- canonical JSON of Decision.to_dict()
    quantities   TEXT NOT NULL,              -- canonical JSON object name -> float | null
    UNIQUE (subject, session, trial),
    FOREIGN KEY (subject, session) REFERENCES sessions(subject, session)
);
"""
_SCHEMA_VIEWS = """
CREATE VIEW decisions AS
    SELECT subject, session, trial, next_trial, cue, block, stage, reward_armed, end_session, decision
    FROM trials;
CREATE VIEW quantities AS
    SELECT subject, session, trial, quantities AS data FROM trials;
"""
_SCHEMA = ("""
CREATE TABLE subjects (
    name        TEXT PRIMARY KEY,
    first_seen  REAL NOT NULL,
    ord         INTEGER NOT NULL UNIQUE
);
CREATE TABLE sessions (
    id           INTEGER PRIMARY KEY,
    subject      TEXT NOT NULL REFERENCES subjects(name),
    session      TEXT NOT NULL,
    seq          INTEGER NOT NULL,           -- open order within the subject, from 1
    rig          TEXT NOT NULL,
    rules_name   TEXT NOT NULL,
    rules_text   TEXT NOT NULL,
    rules_sha256 TEXT NOT NULL,
    seed         INTEGER NOT NULL,
    opened_at    REAL NOT NULL,
    closed_at    REAL,
    profile      TEXT,
    meta         TEXT NOT NULL,              -- canonical JSON object
    UNIQUE (subject, session),
    UNIQUE (subject, seq)
);
""" + _SCHEMA_TRIALS + _SCHEMA_VIEWS + """
CREATE TABLE snapshots (
    id          INTEGER PRIMARY KEY,
    subject     TEXT NOT NULL,
    session     TEXT NOT NULL,
    trial       INTEGER NOT NULL,           -- state after this trial (0: before the first)
    created     REAL NOT NULL,
    blob        BLOB NOT NULL,
    sha256      TEXT NOT NULL,
    UNIQUE (subject, session, trial),
    FOREIGN KEY (subject, session) REFERENCES sessions(subject, session)
);
""")


# --------------------------------------------------------------------------- values


_CANONICAL = json.JSONEncoder(sort_keys=True, separators=(",", ":"), allow_nan=False)


def canonical_json(data: Any) -> str:
    """The one text form of stored JSON: sorted keys, no spaces, exact floats, no NaN.

    (One shared encoder: ``json.dumps`` with these options builds a new one per call.)"""
    return _CANONICAL.encode(data)


def rules_digest(text: str) -> str:
    """sha256 hex digest of a rule file's UTF-8 text, as stored in ``SessionInfo``."""
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


@dataclass(frozen=True, slots=True)
class SessionInfo:
    """One session as the store keeps it: who, where, which rule file (text and digest),
    the seed behind its per-trial randomness, and when it opened and closed (s, epoch).

    ``SessionInfo.new(...)`` computes ``rules_sha256`` from ``rules_text``.
    """

    subject: str
    session: str
    rig: str
    rules_name: str
    rules_text: str
    rules_sha256: str
    seed: int
    opened_at: float
    profile: str | None = None
    meta: Mapping[str, Any] = field(default_factory=dict)
    closed_at: float | None = None

    def __post_init__(self) -> None:
        for name in ("subject", "session", "rig", "rules_name"):
            value = getattr(self, name)
            if not isinstance(value, str) or not value or value != value.strip() or not value.isprintable():
                raise BadArgument(name, "a non-empty printable string without surrounding spaces", value)
        if not isinstance(self.rules_text, str):
            raise BadArgument("rules_text", "the rule file's text (a string)", self.rules_text)
        if self.rules_sha256 != rules_digest(self.rules_text):
            raise BadArgument("rules_sha256", "the sha256 hex digest of rules_text", self.rules_sha256)
        if isinstance(self.seed, bool) or not isinstance(self.seed, int) or not 0 <= self.seed < 2**63:
            raise BadArgument("seed", "a whole number in [0, 2**63)", self.seed)
        for name in ("opened_at", "closed_at"):
            value = getattr(self, name)
            if value is None and name == "closed_at":
                continue
            if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
                raise BadArgument(name, "a finite number of seconds since the epoch", value)
            object.__setattr__(self, name, float(value))
        if self.profile is not None and (not isinstance(self.profile, str) or not self.profile):
            raise BadArgument("profile", "a non-empty string or None", self.profile)
        if not isinstance(self.meta, Mapping):
            raise BadArgument("meta", "a map of JSON values", self.meta)
        try:
            meta = json.loads(canonical_json(dict(self.meta)))
        except (TypeError, ValueError) as err:
            raise BadArgument("meta", f"a map of JSON values ({err})", self.meta) from None
        object.__setattr__(self, "meta", meta)

    @classmethod
    def new(
        cls,
        subject: str,
        session: str,
        rig: str,
        rules_name: str,
        rules_text: str,
        seed: int,
        opened_at: float,
        profile: str | None = None,
        meta: Mapping[str, Any] | None = None,
    ) -> SessionInfo:
        return cls(subject, session, rig, rules_name, rules_text, rules_digest(rules_text), seed, opened_at,
                   profile, dict(meta or {}))


@dataclass(frozen=True, slots=True)
class CommitResult:
    """What a commit did. ``decision`` is the stored decision (the new one, or on a
    duplicate the one stored first, which the rig must get again). In a batch, an item
    that could not be stored has ``decision=None`` and the reason in ``error``."""

    decision: Decision | None
    duplicate: bool
    error: RigloopError | None = None

    @property
    def ok(self) -> bool:
        return self.error is None


@dataclass(frozen=True, slots=True)
class Snapshot:
    """A stored subject-state blob: the state after ``trial`` of ``session``.
    ``ok`` is False when the blob no longer matches its stored sha256 (damage)."""

    subject: str
    session: str
    trial: int
    blob: bytes
    sha256: str
    ok: bool
    created: float = 0.0


BatchItem = tuple[TrialEvent, Decision, Mapping[str, "float | None"], "bytes | None"]


# --------------------------------------------------------------------------- store


class Store:
    """The SQLite store. ``Store(path)`` opens or creates it; use as a context manager."""

    def __init__(self, path: str | os.PathLike, *, create: bool = True):
        self.path = os.fspath(path)
        self._lock = threading.RLock()
        self._broken: str | None = None
        self._conn: sqlite3.Connection | None = None
        self._known_sessions: set[tuple[str, str]] = set()
        exists = os.path.exists(self.path)
        if not exists and not create:
            raise StoreError(f"{self.path}: no store there (create=False)")
        folder = os.path.dirname(os.path.abspath(self.path))
        if not exists and not os.path.isdir(folder):
            raise StoreError(f"{self.path}: cannot create the store, directory {folder} does not exist")
        if exists:
            _check_header(self.path)
        try:
            self._conn = sqlite3.connect(self.path, isolation_level=None, check_same_thread=False)
        except sqlite3.Error as err:
            raise StoreError(f"{self.path}: cannot open the store ({err})") from None
        try:
            self._setup()
        except BaseException:
            self._conn.close()
            self._conn = None
            raise

    # -- opening ------------------------------------------------------------

    def _setup(self) -> None:
        c = self._conn
        try:
            version = c.execute("PRAGMA user_version").fetchone()[0]
            app_id = c.execute("PRAGMA application_id").fetchone()[0]
            tables = {r[0] for r in c.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
        except sqlite3.DatabaseError as err:
            raise StoreError(f"{self.path}: not a readable rigloop store; the file is damaged or not SQLite ({err})") from None
        if tables and app_id != APPLICATION_ID:
            raise StoreError(f"{self.path}: an SQLite database, but not a rigloop store (it has other tables)")
        if version > SCHEMA_VERSION:
            raise SchemaTooNew(
                f"{self.path}: written with store schema version {version}, but this rigloop reads versions up to "
                f"{SCHEMA_VERSION}; upgrade rigloop to open it (the file was not changed)"
            )
        try:
            c.execute("PRAGMA busy_timeout = 10000")
            mode = c.execute("PRAGMA journal_mode = WAL").fetchone()[0]
            if mode.lower() != "wal":
                raise StoreError(f"{self.path}: cannot switch to WAL journal mode (got {mode!r}); use a local file")
            # synchronous=FULL: in WAL mode the WAL is fsync'd on every commit (see module docstring).
            c.execute("PRAGMA synchronous = FULL")
            # fullfsync matters on macOS only (F_FULLFSYNC); a no-op elsewhere.
            c.execute("PRAGMA fullfsync = ON")
            c.execute("PRAGMA checkpoint_fullfsync = ON")
            c.execute("PRAGMA foreign_keys = ON")
            if version == 0:
                if tables:
                    raise StoreError(f"{self.path}: a rigloop store without a schema version; the file is damaged")
                self._create_schema()
            else:
                if version < SCHEMA_VERSION:
                    self._migrate(version)
                    tables = {r[0] for r in c.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
                missing = {"subjects", "sessions", "trials", "snapshots"} - tables
                if missing:
                    raise StoreError(f"{self.path}: the store lacks tables {', '.join(sorted(missing))}; the file is damaged")
        except sqlite3.DatabaseError as err:
            raise StoreError(f"{self.path}: cannot prepare the store ({err})") from None

    def _create_schema(self) -> None:
        c = self._conn
        c.execute("BEGIN IMMEDIATE")
        try:
            # Another process may have created it while we waited for the write lock.
            if c.execute("PRAGMA user_version").fetchone()[0] == 0:
                _execute_all(c, _SCHEMA)
                c.execute(f"PRAGMA application_id = {APPLICATION_ID}")
                c.execute(f"PRAGMA user_version = {SCHEMA_VERSION}")
            c.execute("COMMIT")
        except BaseException:
            c.execute("ROLLBACK")
            raise

    def _migrate(self, version: int) -> None:
        """Bring a store written by an older schema up to ``SCHEMA_VERSION``, in one
        transaction (a crash leaves the old file as it was)."""
        c = self._conn
        c.execute("BEGIN IMMEDIATE")
        try:
            if c.execute("PRAGMA user_version").fetchone()[0] == 1:  # not already done by another process
                _migrate_v1(c)
                c.execute("PRAGMA user_version = 2")
            c.execute("COMMIT")
        except BaseException:
            _rollback(c)
            raise

    def close(self) -> None:
        """Close the connection (idempotent). Committed data is already durable."""
        with self._lock:
            if self._conn is not None:
                self._conn.close()
                self._conn = None

    def __enter__(self) -> Store:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def __repr__(self) -> str:
        return f"Store({self.path!r})"

    # -- plumbing -------------------------------------------------------------

    def _db(self) -> sqlite3.Connection:
        if self._broken is not None:
            raise StoreError(f"{self.path}: the store stopped after a failed write ({self._broken}); reopen it")
        if self._conn is None:
            raise StoreError(f"{self.path}: the store is closed")
        return self._conn

    def _write(self, work, *, alone: bool = False):
        """Run ``work(conn)`` in one BEGIN IMMEDIATE … COMMIT transaction.

        With ``alone``, ``work`` changes the file with one statement at most, which SQLite
        runs as a transaction of its own (autocommit): the same atomic, fsync'd commit,
        two statements cheaper. Rigloop errors raised by ``work`` roll back and
        propagate; an SQLite error rolls back and marks the store broken (see module
        docstring)."""
        with self._lock:
            c = self._db()
            if not alone:
                try:
                    c.execute("BEGIN IMMEDIATE")
                except sqlite3.Error as err:
                    raise StoreError(f"{self.path}: cannot start a write ({err})") from None
            try:
                result = work(c)
                if not alone:
                    c.execute("COMMIT")
                return result
            except RigloopError:
                _rollback(c)
                raise
            except sqlite3.Error as err:
                _rollback(c)
                self._broken = f"{type(err).__name__}: {err}"
                raise StoreError(
                    f"{self.path}: write failed and was rolled back ({err}); nothing from this call is stored or "
                    "may be acknowledged; the store must be reopened"
                ) from err
            except BaseException:
                _rollback(c)
                raise

    def _read(self, sql: str, params: Sequence[Any] = ()) -> list[tuple]:
        with self._lock:
            c = self._db()
            try:
                return c.execute(sql, params).fetchall()
            except sqlite3.Error as err:
                raise StoreError(f"{self.path}: read failed ({err})") from None

    def check(self) -> list[str]:
        """Run ``PRAGMA integrity_check`` (reads the whole file); [] means healthy."""
        rows = self._read("PRAGMA integrity_check")
        found = [r[0] for r in rows]
        return [] if found == ["ok"] else found

    # -- sessions -------------------------------------------------------------

    def open_session(self, info: SessionInfo) -> SessionInfo:
        """Record a session (and its subject). Re-opening it with the same rule file
        returns the stored ``SessionInfo`` unchanged; with another rule file -> StoreError."""
        if not isinstance(info, SessionInfo):
            raise BadArgument("info", "a SessionInfo", info)

        return self._write(lambda c: self._open_in(c, info))

    def _open_in(self, c: sqlite3.Connection, info: SessionInfo) -> SessionInfo:
        stored = self._session_in(c, info.subject, info.session)
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
        return self._session_in(c, info.subject, info.session)

    def import_sessions(self, sessions: Sequence[tuple[SessionInfo, Sequence[BatchItem]]]) -> int:
        """Store whole new sessions, with all their trials, in ONE transaction.

        For importing trial tables: either everything lands or nothing does. A session
        that is already stored, or any item that cannot be stored, raises StoreError and
        rolls the whole import back. Returns the number of trials written."""
        prepared = [(info, [_prepare(*item) for item in items]) for info, items in sessions]

        def work(c: sqlite3.Connection) -> int:
            n = 0
            for info, items in prepared:
                if self._session_in(c, info.subject, info.session) is not None:
                    raise StoreError(f"session {info.session!r} of subject {info.subject!r} is already stored; "
                                     "an import adds new sessions only (nothing was imported)")
                self._open_in(c, info)
                for p in items:
                    self._commit_one(c, p)
                    n += 1
            return n

        try:
            return self._write(work)
        except BaseException:
            # rolled back: forget the sessions _commit_one learned inside the transaction
            self._known_sessions -= {(info.subject, info.session) for info, _ in prepared}
            raise


    _SESSION_COLS = ("subject, session, rig, rules_name, rules_text, rules_sha256, seed, opened_at, profile, meta, "
                     "closed_at")

    @staticmethod
    def _session_from(row: tuple) -> SessionInfo:
        subject, session, rig, name, text, sha, seed, opened, profile, meta, closed = row
        return SessionInfo(subject, session, rig, name, text, sha, seed, opened, profile, json.loads(meta), closed)

    def _session_in(self, c: sqlite3.Connection, subject: str, session: str) -> SessionInfo | None:
        row = c.execute(f"SELECT {self._SESSION_COLS} FROM sessions WHERE subject = ? AND session = ?",
                        (subject, session)).fetchone()
        return None if row is None else self._session_from(row)

    def session(self, subject: str, session: str) -> SessionInfo | None:
        rows = self._read(f"SELECT {self._SESSION_COLS} FROM sessions WHERE subject = ? AND session = ?",
                          (subject, session))
        return self._session_from(rows[0]) if rows else None

    def sessions(self, subject: str | None = None) -> list[SessionInfo]:
        """Sessions in open order (per subject by ``seq``; across subjects by open order)."""
        if subject is None:
            rows = self._read(f"SELECT {self._SESSION_COLS} FROM sessions ORDER BY id")
        else:
            rows = self._read(f"SELECT {self._SESSION_COLS} FROM sessions WHERE subject = ? ORDER BY seq", (subject,))
        return [self._session_from(r) for r in rows]

    def subjects(self) -> list[str]:
        """Subject names in the order they were first seen."""
        return [r[0] for r in self._read("SELECT name FROM subjects ORDER BY ord")]

    def close_session(self, subject: str, session: str, closed_at: float) -> SessionInfo:
        """Mark a session closed. The first close wins; closing again changes nothing."""
        if isinstance(closed_at, bool) or not isinstance(closed_at, (int, float)) or not math.isfinite(closed_at):
            raise BadArgument("closed_at", "a finite number of seconds since the epoch", closed_at)

        def work(c: sqlite3.Connection) -> SessionInfo:
            c.execute("UPDATE sessions SET closed_at = ? WHERE subject = ? AND session = ? AND closed_at IS NULL",
                      (float(closed_at), subject, session))
            stored = self._session_in(c, subject, session)
            if stored is None:
                raise StoreError(f"cannot close session {session!r} of subject {subject!r}: it was never opened")
            return stored

        return self._write(work)

    # -- trials -----------------------------------------------------------------

    def last_trial(self, subject: str, session: str) -> int:
        """The highest stored trial number of the session (0 if none)."""
        rows = self._read("SELECT MAX(trial) FROM trials WHERE subject = ? AND session = ?", (subject, session))
        return rows[0][0] or 0

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
        prepared = _prepare(event, decision, quantities, snapshot)
        # without a snapshot the trial is one INSERT, a transaction of its own
        return self._write(lambda c: self._commit_one(c, prepared), alone=snapshot is None)

    def commit_batch(self, items: Sequence[BatchItem]) -> list[CommitResult]:
        """Group commit: store many trials in one transaction (one fsync).

        Each item has the semantics of ``commit_trial``; an item that cannot be stored
        (conflict, unknown session, bad arguments) gets ``CommitResult(None, False, error)``
        and does not affect the others. Later items see earlier ones (a repeat inside the
        batch is a duplicate)."""
        prepared: list[_Prepared | RigloopError] = []
        for item in items:
            try:
                prepared.append(_prepare(*item))
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
        alone = len(prepared) == 1 and isinstance(prepared[0], _Prepared) and prepared[0].snapshot is None
        return self._write(work, alone=alone)

    def _commit_one(self, c: sqlite3.Connection, p: _Prepared) -> CommitResult:
        """Write one prepared trial inside the caller's transaction.

        Invariant that commit_batch relies on (no savepoint per item): a RigloopError is
        raised only before this item changed anything; once the trial row is inserted,
        only SQLite errors can follow, and those abort the whole transaction. The one
        row holds the trial, its decision and its quantities, so no item is ever partial."""
        ev = p.event
        key = (ev.subject, ev.session, ev.trial)
        if (ev.subject, ev.session) not in self._known_sessions:
            if c.execute("SELECT 1 FROM sessions WHERE subject = ? AND session = ?", key[:2]).fetchone() is None:
                raise StoreError(f"session {ev.session!r} of subject {ev.subject!r} was never opened; "
                                 "open_session() comes before its trials")
            self._known_sessions.add(key[:2])  # sessions are never deleted, so this stays true
        first_cue = ev.cues[0].cue if ev.cues else None
        d = p.decision
        inserted = c.execute(
            "INSERT INTO trials (subject, session, trial, rig, wall_time, first_cue, reward_ul, result, event, "
            "next_trial, cue, block, stage, reward_armed, end_session, decision, quantities) "
            "VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?) ON CONFLICT DO NOTHING",
            (*key, ev.rig, ev.wall_time, first_cue, ev.outcome.reward_ul, ev.response.result, p.event_text,
             d.trial, d.cue, d.block, d.stage, int(d.reward_armed), int(d.end_session), p.decision_text,
             p.quantities_text),
        ).rowcount
        if inserted != 1:  # the key is taken: a retry (same event) or a conflict
            stored_event, stored_decision = c.execute(
                "SELECT event, decision FROM trials WHERE subject = ? AND session = ? AND trial = ?", key).fetchone()
            if stored_event != p.event_text and TrialEvent.from_dict(json.loads(stored_event)) != ev:
                raise ConflictingTrial(*key)
            return CommitResult(Decision.from_dict(json.loads(stored_decision)), True)
        if p.snapshot is not None:
            self._put_snapshot(c, *key, p.snapshot)
        return CommitResult(d, False)

    def lookup(self, subject: str, session: str, trial: int) -> tuple[TrialEvent, Decision] | None:
        """The stored event and decision for a key, or None (check before stepping a retry)."""
        rows = self._read("SELECT event, decision FROM trials WHERE subject = ? AND session = ? AND trial = ?",
                          (subject, session, trial))
        if not rows:
            return None
        event, decision = rows[0]
        return TrialEvent.from_dict(json.loads(event)), Decision.from_dict(json.loads(decision))

    # -- iteration ----------------------------------------------------------------

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
            sessions = [s[0] for s in self._read("SELECT session FROM sessions WHERE subject = ? ORDER BY seq", (subj,))]
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
                    rows = self._read(sql, (subj, sess, last))
                    for trial, value in rows:
                        yield subj, sess, trial, value
                    if len(rows) < _PAGE:
                        break
                    last = rows[-1][0]

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
            for subj, sess, trial, text in self._pages("event", subject, session):
                yield _flat_trial(json.loads(text))
        elif what == "decisions":
            for subj, sess, trial, text in self._pages("decision", subject, session):
                d = json.loads(text)
                row = {"subject": subj, "session": sess, "trial": trial, "next_trial": d.pop("trial")}
                d.pop("subject")
                d.pop("session")
                row.update(d)
                yield row
        elif what == "quantities":
            for subj, sess, trial, text in self._pages("quantities", subject, session):
                yield {"subject": subj, "session": sess, "trial": trial, **json.loads(text)}
        else:
            raise BadArgument("what", "one of trials, decisions, quantities", what)

    # -- snapshots ----------------------------------------------------------------

    def save_snapshot(self, subject: str, session: str, trial: int, blob: bytes) -> None:
        """Store the subject's state after ``trial`` (0: before the session's first trial),
        in its own transaction. Saving the same position again replaces the blob."""
        blob = _blob(blob)
        if isinstance(trial, bool) or not isinstance(trial, int) or trial < 0:
            raise BadArgument("trial", "a whole number >= 0", trial)

        def work(c: sqlite3.Connection) -> None:
            if c.execute("SELECT 1 FROM sessions WHERE subject = ? AND session = ?", (subject, session)).fetchone() is None:
                raise StoreError(f"session {session!r} of subject {subject!r} was never opened; cannot snapshot it")
            self._put_snapshot(c, subject, session, trial, blob)

        self._write(work)

    @staticmethod
    def _put_snapshot(c: sqlite3.Connection, subject: str, session: str, trial: int, blob: bytes) -> None:
        c.execute(
            "INSERT INTO snapshots (subject, session, trial, created, blob, sha256) VALUES (?, ?, ?, ?, ?, ?) "
            "ON CONFLICT (subject, session, trial) DO UPDATE SET created = excluded.created, blob = excluded.blob, "
            "sha256 = excluded.sha256",
            (subject, session, trial, time.time(), blob, hashlib.sha256(blob).hexdigest()),
        )

    def snapshots(self, subject: str) -> Iterator[Snapshot]:
        """The subject's snapshots, newest position first (latest session, then latest
        trial). ``ok`` is False for a blob that fails its sha256; recovery skips those."""
        ids = self._read(
            "SELECT n.id FROM snapshots n JOIN sessions s ON s.subject = n.subject AND s.session = n.session "
            "WHERE n.subject = ? ORDER BY s.seq DESC, n.trial DESC",
            (subject,),
        )
        for (ident,) in ids:  # one blob in memory at a time
            rows = self._read("SELECT subject, session, trial, blob, sha256, created FROM snapshots WHERE id = ?",
                              (ident,))
            if rows:
                subj, sess, trial, blob, sha, created = rows[0]
                blob = bytes(blob)
                yield Snapshot(subj, sess, trial, blob, sha, hashlib.sha256(blob).hexdigest() == sha, created)

    # -- statistics -----------------------------------------------------------------

    def statistics(self) -> dict[str, Any]:
        """Row counts, file and WAL sizes in bytes, schema and SQLite versions."""
        counts = {}
        for table in ("subjects", "sessions", "trials", "snapshots"):
            counts[table] = self._read(f"SELECT COUNT(*) FROM {table}")[0][0]
        counts["decisions"] = counts["quantities"] = counts["trials"]  # one row holds all three

        def size(p: str) -> int:
            try:
                return os.path.getsize(p)
            except OSError:
                return 0

        return {
            "path": self.path,
            **counts,
            "file_bytes": size(self.path),
            "wal_bytes": size(self.path + "-wal"),
            "schema_version": SCHEMA_VERSION,
            "sqlite_version": sqlite3.sqlite_version,
        }


# --------------------------------------------------------------------------- helpers


@dataclass(frozen=True, slots=True)
class _Prepared:
    event: TrialEvent
    decision: Decision
    event_text: str
    decision_text: str
    quantities_text: str
    snapshot: bytes | None


def _prepare(event: TrialEvent, decision: Decision, quantities: Mapping[str, float | None],
             snapshot: bytes | None = None) -> _Prepared:
    """Check one commit's arguments and encode them (outside the transaction)."""
    if not isinstance(event, TrialEvent):
        raise BadArgument("event", "a TrialEvent", event)
    if not isinstance(decision, Decision):
        raise BadArgument("decision", "a Decision", decision)
    if (decision.subject, decision.session) != (event.subject, event.session):
        raise BadArgument("decision", f"for subject {event.subject!r}, session {event.session!r} like its event",
                          f"subject {decision.subject!r}, session {decision.session!r}")
    return _Prepared(
        event,
        decision,
        canonical_json(event.to_dict()),
        canonical_json(decision.to_dict()),
        canonical_json(_quantities(quantities)),
        None if snapshot is None else _blob(snapshot),
    )


def _quantities(quantities: Mapping[str, float | None]) -> dict[str, float | None]:
    if not isinstance(quantities, Mapping):
        raise BadArgument("quantities", "a map of names to numbers or None", quantities)
    out: dict[str, float | None] = {}
    for name, value in quantities.items():
        if not isinstance(name, str) or not name or not name.isprintable() or name in _RESERVED_QUANTITY_NAMES:
            raise BadArgument("quantities", "names that are non-empty printable strings other than "
                              "subject, session, trial, seq", name)
        if type(value) is float and math.isfinite(value):  # the common case, without the ABC check below
            out[name] = value
        elif value is None:
            out[name] = None
        elif isinstance(value, bool) or not isinstance(value, numbers.Real) or not math.isfinite(value):
            # numbers.Real admits numpy scalars (float32, int64) as well as int and float
            raise BadArgument(f"quantities[{name!r}]", "a finite number or None (None for undefined)", value)
        else:
            out[name] = float(value)
    return out


def _blob(blob: Any) -> bytes:
    if not isinstance(blob, (bytes, bytearray, memoryview)):
        raise BadArgument("snapshot", "bytes", type(blob).__name__)
    return bytes(blob)


def _flat_trial(e: dict[str, Any]) -> dict[str, Any]:
    o, r = e["outcome"], e["response"]
    return {
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


def _migrate_v1(c: sqlite3.Connection) -> None:
    """Schema 1 -> 2: the three tables trials, decisions and quantities (one row each per
    trial) become one row per trial, in storage order; ``decisions`` and ``quantities``
    become views of it."""
    c.execute("ALTER TABLE trials RENAME TO trials_v1")  # decisions' and quantities' keys follow
    _execute_all(c, _SCHEMA_TRIALS)
    c.execute(
        "INSERT INTO trials (subject, session, trial, rig, wall_time, first_cue, reward_ul, result, event, "
        "next_trial, cue, block, stage, reward_armed, end_session, decision, quantities) "
        "SELECT t.subject, t.session, t.trial, t.rig, t.wall_time, t.first_cue, t.reward_ul, t.result, t.event, "
        "d.next_trial, d.cue, d.block, d.stage, d.reward_armed, d.end_session, d.decision, q.data "
        "FROM trials_v1 t JOIN decisions d USING (subject, session, trial) "
        "JOIN quantities q USING (subject, session, trial) "
        "JOIN sessions s ON s.subject = t.subject AND s.session = t.session ORDER BY s.id, t.trial"
    )
    for table in ("quantities", "decisions", "trials_v1"):
        c.execute(f"DROP TABLE {table}")
    _execute_all(c, _SCHEMA_VIEWS)


def _execute_all(c: sqlite3.Connection, script: str) -> None:
    """Each statement of ``script`` (``executescript`` would commit the transaction)."""
    for statement in script.split(";"):
        if statement.strip():
            c.execute(statement)


def _check_header(path: str) -> None:
    """Refuse a file that is not SQLite before SQLite touches it."""
    try:
        with open(path, "rb") as f:
            head = f.read(len(_SQLITE_MAGIC))
    except OSError as err:
        raise StoreError(f"{path}: cannot read the store ({err.strerror or err})") from None
    if head and head != _SQLITE_MAGIC:
        raise StoreError(f"{path}: not a rigloop store (the file is not an SQLite database); check the path")


def _rollback(c: sqlite3.Connection) -> None:
    try:
        if c.in_transaction:
            c.execute("ROLLBACK")
    except sqlite3.Error:
        pass
