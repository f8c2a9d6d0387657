"""WAL checkpoints off the commit path: a thread with its own connection copies committed
WAL frames into the database file while the writer goes on committing.

Why: with SQLite's default ``wal_autocheckpoint`` (1000 pages) the commit that crosses
the threshold runs the checkpoint itself -- it writes ~1000 pages to the database file
and fsyncs it before it returns, so one trial in a few hundred waits several ms for its
reply (``tools/bench/store.py`` prints the commit latency percentiles with and without).
A PASSIVE checkpoint on a second connection never blocks the writer (WAL mode: readers
and checkpointers do not block writers), and sqlite3 releases the GIL while SQLite works.

Durability is untouched: a trial is durable once the WAL holding it was fsync'd by its
commit (``synchronous=FULL``); a checkpoint only copies durable frames into the main file
(``synchronous=FULL``: WAL fsync'd before, database file fsync'd after, then the frames
are marked done), and a crash mid-checkpoint leaves the frames in the WAL for the next
open. The writer keeps ``wal_autocheckpoint`` as a backstop (``BACKSTOP_PAGES``), so the
WAL stays bounded and restarts from its beginning even under constant load.

``Checkpointer.nudge()`` is called by the writer after a commit; every ``every`` nudges
(or after ``idle_s`` with commits pending) the thread runs one PASSIVE checkpoint.
"""

from __future__ import annotations

import os
import sqlite3
import threading

# the writer's own checkpoint, kept as a backstop (SQLite's default is 1000 pages). It also
# restarts the WAL: while commits keep coming, a checkpoint on another connection never
# finds the WAL quiet enough for the writer to start it again from the top, so the file
# would grow (and appending costs an fdatasync more than overwriting: ~205 vs ~140 µs for
# 12 KB here). At 4000 pages (16 MiB) the backstop runs once every ~1600 one-trial commits
# and finds most frames already copied: a short checkpoint, then the WAL starts over.
BACKSTOP_PAGES = 4_000
# one background checkpoint per this many write transactions (~2.5 WAL pages a one-trial
# commit, so ~500 pages: about half SQLite's default threshold)
EVERY_COMMITS = 200
# ... or this long after a commit that is not yet checkpointed (an idle daemon tidies up)
IDLE_S = 2.0


def presize_wal(conn: sqlite3.Connection, path: str, pages: int = BACKSTOP_PAGES) -> str | None:
    """Grow the WAL file to ``pages`` pages once, at open, so commits overwrite it; None
    when done, else why not (e.g. a disk without 16 MiB to spare: the store then works as
    without it, its WAL growing as commits need).

    Why: a commit that appends to the WAL makes its fdatasync write the file's new size
    too; overwriting is cheaper (~200 vs ~110-150 µs for 4-12 KB here), and a WAL bounded
    by ``BACKSTOP_PAGES`` is written by appending for its first ~1,600 one-trial commits
    after every open -- for a small lab, every trial of the day. Pre-sizing cut their
    commit median 370 -> 230 µs (``tools/bench/latency.py --breakdown``, the old and new
    code in one sitting). It costs ~40 ms at open and a 16 MiB ``-wal`` file beside the
    store while it is open.

    How, with SQLite's own machinery: a transaction too big for a tiny page cache spills
    its pages into the WAL as uncommitted frames, then rolls back. Frames without a
    commit frame are never read, by this connection or by recovery after a crash (they
    are also outside the checksum chain of whatever is written over them), and the
    rollback leaves the file at its size (``journal_size_limit`` is unset). The fsync
    then makes the new size durable, so later fdatasyncs have no size to write."""
    (cache,) = conn.execute("PRAGMA cache_size").fetchone()
    (page,) = conn.execute("PRAGMA page_size").fetchone()
    conn.execute("PRAGMA cache_size = -256")  # 256 KiB: the blob's pages must spill
    try:
        conn.execute("BEGIN IMMEDIATE")
        try:
            conn.execute("CREATE TABLE _presize_wal (b BLOB)")
            # + 128 pages: the ~64 the cache keeps never reach the WAL
            conn.execute("INSERT INTO _presize_wal VALUES (zeroblob(?))", ((pages + 128) * page,))
        finally:
            conn.execute("ROLLBACK")
        wal = os.open(path + "-wal", os.O_RDWR)
        try:
            os.fsync(wal)
        finally:
            os.close(wal)
    except (sqlite3.Error, OSError) as err:
        return f"{type(err).__name__}: {err}"
    finally:
        conn.execute(f"PRAGMA cache_size = {int(cache)}")
    return None


class Checkpointer:
    """A daemon thread running ``PRAGMA wal_checkpoint(PASSIVE)`` on its own connection to
    ``path``; see the module docstring. ``close()`` stops it (the writer's close then does
    the final checkpoint)."""

    def __init__(self, path: str, *, every: int = EVERY_COMMITS, idle_s: float = IDLE_S):
        self.path = path
        self.every = every
        self.idle_s = idle_s
        self.runs = 0  # checkpoints run (for tests and status)
        self.last: tuple[int, int, int] | None = None  # (busy, WAL frames, frames checkpointed) of the last run
        self.error: str | None = None  # the last failure, if any (the writer's backstop covers it)
        self._pending = 0  # commits since the last checkpoint (writer thread; read racily, which is fine)
        self._wake = threading.Event()
        self._stop = False
        self._conn = sqlite3.connect(path, isolation_level=None, check_same_thread=False)
        self._conn.execute("PRAGMA busy_timeout = 1000")
        self._conn.execute("PRAGMA synchronous = FULL")
        self._conn.execute("PRAGMA checkpoint_fullfsync = ON")
        self._thread = threading.Thread(target=self._run, name="rigloop-checkpoint", daemon=True)
        self._thread.start()

    def nudge(self) -> None:
        """One more commit went into the WAL (writer thread, after its COMMIT returned)."""
        self._pending += 1
        if self._pending >= self.every:
            self._pending = 0
            self._wake.set()

    def _run(self) -> None:
        while True:
            woken = self._wake.wait(self.idle_s)
            self._wake.clear()
            if self._stop:
                return
            if not woken:
                if not self._pending:
                    continue
                self._pending = 0
            self.checkpoint()

    def checkpoint(self) -> bool:
        """One PASSIVE checkpoint now; False if SQLite refused it (the backstop covers that)."""
        try:
            row = self._conn.execute("PRAGMA wal_checkpoint(PASSIVE)").fetchall()[0]  # all: the statement ends
        except sqlite3.Error as err:  # e.g. a closing store; the writer's backstop still checkpoints
            self.error = f"{type(err).__name__}: {err}"
            return False
        self.runs += 1
        self.last = tuple(row)
        return True

    def close(self) -> None:
        """Stop the thread (after the checkpoint it may be running) and close its connection."""
        self._stop = True
        self._wake.set()
        self._thread.join()
        self._conn.close()
