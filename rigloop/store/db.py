"""The store's one SQLite connection: opening a file with its checks and pragmas, durable
writes, reads, and stopping after a failed write.

Durability: every write returns only after its transaction is committed with
``PRAGMA synchronous=FULL`` in WAL mode, i.e. after the WAL has been fsync'd.

Any SQLite error while writing (a full disk, an I/O error from fsync) is fatal for this
connection: the transaction is rolled back, the database refuses further use, and the
error says so. Reopen the file (recovery replays from it); never retry the failed commit
on the same connection (a retried fsync can succeed without the data reaching disk).

Integrity: opening checks the file header, the application id and the schema version,
which is cheap at any size. The full ``PRAGMA integrity_check`` reads the whole file
(seconds per GB), so it is not run at open; ``Store.check()`` runs it where it is wanted.

One ``Database`` may be shared between threads: each call takes an internal lock. WAL
mode lets other processes read (e.g. an export) while the daemon writes; only one
process should write.
"""

from __future__ import annotations

import os
import sqlite3
import threading
from collections.abc import Callable, Sequence
from typing import Any, TypeVar

from ..errors import RigloopError, SchemaTooNew, StoreError
from . import schema
from .checkpoint import BACKSTOP_PAGES, Checkpointer, presize_wal

T = TypeVar("T")
_SQLITE_MAGIC = b"SQLite format 3\x00"


class Database:
    """One checked, prepared SQLite connection to a store file; ``Database(path)`` opens
    or creates it. With ``background_checkpoint`` a second connection on its own thread
    checkpoints the WAL, so no commit waits for one, and the WAL is pre-sized so commits
    overwrite it rather than grow it (``checkpoint.py``; the daemon's)."""

    def __init__(self, path: str | os.PathLike, *, create: bool = True, background_checkpoint: bool = False):
        self.path = os.fspath(path)
        self.conn: sqlite3.Connection | None = None
        self.checkpointer: Checkpointer | None = None
        self.presize_error: str | None = None  # why the WAL could not be pre-sized, if it could not
        self._lock = threading.RLock()
        self._broken: str | None = None
        exists = os.path.exists(self.path)
        if not exists and not create:
            raise StoreError(f"{self.path}: no store there (create=False)")
        folder = os.path.dirname(os.path.abspath(self.path))
        if not exists and not os.path.isdir(folder):
            raise StoreError(f"{self.path}: cannot create the store, directory {folder} does not exist")
        if exists:
            _check_header(self.path)
        try:
            self.conn = sqlite3.connect(self.path, isolation_level=None, check_same_thread=False)
        except sqlite3.Error as err:
            raise StoreError(f"{self.path}: cannot open the store ({err})") from None
        try:
            self._setup()
            if background_checkpoint:
                try:
                    self.conn.execute(f"PRAGMA wal_autocheckpoint = {BACKSTOP_PAGES}")
                    self.presize_error = presize_wal(self.conn, self.path)
                    self.checkpointer = Checkpointer(self.path)
                except sqlite3.Error as err:
                    raise StoreError(f"{self.path}: cannot start the checkpoint connection ({err})") from None
        except BaseException:
            self.conn.close()
            self.conn = None
            raise

    # -- opening ------------------------------------------------------------

    def _setup(self) -> None:
        """Check what the file is, set the pragmas, create or migrate the tables."""
        c = self.conn
        try:
            version = schema.version(c)
            app_id = c.execute("PRAGMA application_id").fetchone()[0]
            tables = schema.tables(c)
        except sqlite3.DatabaseError as err:
            raise StoreError(f"{self.path}: not a readable rigloop store; the file is damaged or not SQLite ({err})") from None
        if tables and app_id != schema.APPLICATION_ID:
            raise StoreError(f"{self.path}: an SQLite database, but not a rigloop store (it has other tables)")
        if version > schema.SCHEMA_VERSION:
            raise SchemaTooNew(
                f"{self.path}: written with store schema version {version}, but this rigloop reads versions up to "
                f"{schema.SCHEMA_VERSION}; upgrade rigloop to open it (the file was not changed)"
            )
        try:
            self._pragmas()
            if version == 0:
                if tables:
                    raise StoreError(f"{self.path}: a rigloop store without a schema version; the file is damaged")
                _upgrade(c, 0, schema.create)
            else:
                if version < schema.SCHEMA_VERSION:
                    # one transaction: a crash leaves the old file as it was
                    _upgrade(c, 1, schema.migrate_v1)
                    _upgrade(c, 2, schema.migrate_v2)
                    tables = schema.tables(c)
                missing = schema.TABLES - tables
                if missing:
                    raise StoreError(f"{self.path}: the store lacks tables {', '.join(sorted(missing))}; the file is damaged")
        except sqlite3.DatabaseError as err:
            raise StoreError(f"{self.path}: cannot prepare the store ({err})") from None

    def _pragmas(self) -> None:
        """WAL journal, a durable commit, foreign keys, a wait for other writers."""
        c = self.conn
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

    def close(self) -> None:
        """Close the connection (idempotent). Committed data is already durable."""
        with self._lock:
            if self.checkpointer is not None:
                self.checkpointer.close()  # first: the writer's close then checkpoints what is left
                self.checkpointer = None
            if self.conn is not None:
                self.conn.close()
                self.conn = None

    # -- use ------------------------------------------------------------------

    def _open_conn(self) -> sqlite3.Connection:
        """The connection, unless the database stopped after a failed write or was closed."""
        if self._broken is not None:
            raise StoreError(f"{self.path}: the store stopped after a failed write ({self._broken}); reopen it")
        if self.conn is None:
            raise StoreError(f"{self.path}: the store is closed")
        return self.conn

    def write(self, work: Callable[[sqlite3.Connection], T], *, alone: bool = False) -> T:
        """Run ``work(conn)`` in one BEGIN IMMEDIATE … COMMIT transaction.

        With ``alone``, ``work`` changes the file with one statement at most, which SQLite
        runs as a transaction of its own (autocommit): the same atomic, fsync'd commit,
        two statements cheaper. Rigloop errors raised by ``work`` roll back and
        propagate; an SQLite error rolls back and marks the database broken (see module
        docstring)."""
        with self._lock:
            c = self._open_conn()
            if not alone:
                try:
                    c.execute("BEGIN IMMEDIATE")
                except sqlite3.Error as err:
                    raise StoreError(f"{self.path}: cannot start a write ({err})") from None
            try:
                result = work(c)
                if not alone:
                    c.execute("COMMIT")
                if self.checkpointer is not None:
                    self.checkpointer.nudge()
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

    def query(self, work: Callable[[sqlite3.Connection], T]) -> T:
        """Run ``work(conn)``, which only reads, under the lock; an SQLite error -> StoreError."""
        with self._lock:
            c = self._open_conn()
            try:
                return work(c)
            except sqlite3.Error as err:
                raise StoreError(f"{self.path}: read failed ({err})") from None

    def read(self, sql: str, params: Sequence[Any] = ()) -> list[tuple]:
        """All rows of one query."""
        return self.query(lambda c: c.execute(sql, params).fetchall())


def _upgrade(c: sqlite3.Connection, found: int, work: Callable[[sqlite3.Connection], None]) -> None:
    """Run ``work(c)`` in one write transaction if the file is still at schema version
    ``found``: another process may have done it while we waited for the write lock."""
    c.execute("BEGIN IMMEDIATE")
    try:
        if schema.version(c) == found:
            work(c)
        c.execute("COMMIT")
    except BaseException:
        _rollback(c)
        raise


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
    """Roll back the open transaction, if any; a failing rollback adds nothing to the error at hand."""
    try:
        if c.in_transaction:
            c.execute("ROLLBACK")
    except sqlite3.Error:
        pass
