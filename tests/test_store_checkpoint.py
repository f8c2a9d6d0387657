"""WAL checkpoints on their own thread (store/checkpoint.py): commits go on while the
checkpointer copies frames, nothing committed is lost, and the writer's backstop and the
final close still run."""

from __future__ import annotations

import sqlite3

from rigloop.core.trial import CuePresentation, Decision, Outcome, Response, TrialEvent
from rigloop.store import SessionInfo, Store
from rigloop.store.checkpoint import BACKSTOP_PAGES


def _item(t: int):
    ev = TrialEvent("m1", "box1", "s1", t, (CuePresentation("tone", 0.5, 1.0),), Outcome(4.0 if t % 2 else 0.0,
                    1.2 if t % 2 else None), Response("licks", float(t % 5), "correct", 0.4), wall_time=1.9e9 + t)
    d = Decision("m1", "s1", t + 1, "tone", 0.8, 4.0, True, "b1", "pavlov", reasons=("a reason " * 20,))
    return ev, d, {"v": 0.01 * t, "u": None}, None


def test_background_checkpoints_keep_every_trial_and_leave_the_wal_bounded(tmp_path):
    path = tmp_path / "s.sqlite"
    store = Store(path, background_checkpoint=True)
    store.open_session(SessionInfo.new("m1", "s1", "box1", "r", "text", 1, 1.9e9))
    cp = store._database.checkpointer
    cp.every = 20  # small, so a short test sees several runs
    assert store._conn.execute("PRAGMA wal_autocheckpoint").fetchone()[0] == BACKSTOP_PAGES
    for t in range(1, 301):
        assert store.commit_trial(*_item(t)).ok
    assert cp.checkpoint()  # one more now, as the thread does: PASSIVE, the writer is not blocked
    busy, frames, done = cp.last
    assert busy == 0 and done == frames  # nothing else was writing: every frame is in the database file
    assert cp.runs >= 2 and cp.error is None
    # a reader that ignores the WAL sees what the checkpoints copied: the database file holds the trials
    store.close()
    assert not (tmp_path / "s.sqlite-wal").exists() or (tmp_path / "s.sqlite-wal").stat().st_size == 0
    with sqlite3.connect(path) as c:
        assert c.execute("SELECT COUNT(*), MAX(trial) FROM trials").fetchone() == (300, 300)
    with Store(path) as again:
        assert again.last_trial("m1", "s1") == 300
        assert again._database.checkpointer is None  # off unless asked for (the daemon asks)


def test_closing_stops_the_checkpoint_thread(tmp_path):
    store = Store(tmp_path / "s.sqlite", background_checkpoint=True)
    thread = store._database.checkpointer._thread
    store.close()
    assert not thread.is_alive()
    store.close()  # idempotent


def test_the_wal_is_presized_and_its_rolled_back_frames_never_come_back(tmp_path):
    """The pre-sized WAL (checkpoint.presize_wal) holds only frames of a rolled-back
    transaction: the file is at full size from the first commit, and what a crash leaves
    (here: a copy of the store and its WAL taken while open) recovers to exactly the
    committed trials, without the table that sized it. SQLite's recovery reads frames only
    up to the last commit frame with a valid checksum chain (sqlite.org/wal.html and
    fileformat2.html, "WAL file format")."""
    import shutil

    path = tmp_path / "s.sqlite"
    store = Store(path, background_checkpoint=True)
    wal = tmp_path / "s.sqlite-wal"
    page = store._conn.execute("PRAGMA page_size").fetchone()[0]
    assert wal.stat().st_size >= BACKSTOP_PAGES * page
    store.open_session(SessionInfo.new("m1", "s1", "box1", "r", "text", 1, 1.9e9))
    for t in range(1, 41):
        assert store.commit_trial(*_item(t)).ok
    crashed = tmp_path / "crashed"
    crashed.mkdir()
    shutil.copy(path, crashed / "s.sqlite")
    shutil.copy(wal, crashed / "s.sqlite-wal")
    store.close()
    with Store(crashed / "s.sqlite") as again:
        assert again.last_trial("m1", "s1") == 40
        assert "_presize_wal" not in {r[0] for r in again._conn.execute("SELECT name FROM sqlite_master")}
        assert again._conn.execute("PRAGMA integrity_check").fetchone()[0] == "ok"


def test_a_wal_that_cannot_be_presized_leaves_the_connection_as_it_was(tmp_path):
    """presize_wal says why it could not size the WAL (here: another connection holds the
    write lock) and leaves the connection usable with its own page cache size; the daemon
    then logs a warning and runs with a WAL that grows as commits need."""
    from rigloop.store.checkpoint import presize_wal

    path = str(tmp_path / "s.sqlite")
    Store(path).close()
    holder = sqlite3.connect(path, isolation_level=None)
    holder.execute("BEGIN IMMEDIATE")
    conn = sqlite3.connect(path, isolation_level=None)
    conn.execute("PRAGMA busy_timeout = 0")
    conn.execute("PRAGMA cache_size = -4000")
    try:
        why = presize_wal(conn, path)
        assert why is not None and "locked" in why
        assert conn.execute("PRAGMA cache_size").fetchone()[0] == -4000
        assert not conn.in_transaction
        holder.execute("ROLLBACK")
        assert presize_wal(conn, path) is None  # once the lock is free
        assert (tmp_path / "s.sqlite-wal").stat().st_size >= BACKSTOP_PAGES * 4096
    finally:
        conn.close()
        holder.close()
