"""The SQLite store: exact round trips, idempotent retries, conflicts, group commit,
snapshots with damage detection, and clear refusals of files it cannot use."""

from __future__ import annotations

import hashlib
import sqlite3
import tempfile
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from strategies_store import decisions, events, quantity_maps

from rigloop.core.trial import CuePresentation, Decision, Outcome, Response, TrialEvent
from rigloop.errors import BadArgument, ConflictingTrial, SchemaTooNew, StoreError
from rigloop.store import SCHEMA_VERSION, CommitResult, SessionInfo, Store, canonical_json


def info(subject="m01", session="s1", rules="[learner]\nkind = 'rw'\n", opened_at=100.0, **kw):
    return SessionInfo.new(subject, session, "box1", "train.toml", rules, 42, opened_at, **kw)


def event(trial, subject="m01", session="s1", reward=4.0, **kw):
    return TrialEvent(
        subject=subject, rig="box1", session=session, trial=trial,
        cues=(CuePresentation("tone_hi", 0.0, 1.0),),
        outcome=Outcome(reward_ul=reward, reward_time=1.0 if reward else None),
        response=Response(kind="licks", value=3, result="correct", latency=0.4),
        wall_time=1.7e9 + trial, **kw,
    )


def decision(trial, subject="m01", session="s1", cue=None):
    return Decision(subject, session, trial + 1, cue or ("tone_hi" if trial % 2 else "tone_lo"), 0.8, 4.0,
                    True, "b1", "shaping", reasons=("block b1 continues",))


@pytest.fixture
def store(tmp_path):
    with Store(tmp_path / "rig.db") as s:
        s.open_session(info())
        yield s


# --------------------------------------------------------------------------- round trip


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(data=st.data())
def test_every_field_round_trips(data):
    """An event, its decision and its quantities come back exactly (floats bit for bit)
    through commit_trial, lookup, trials, decisions and rows."""
    ev = data.draw(events())
    dec = data.draw(decisions(ev.subject, ev.session, ev.trial + 1))
    q = data.draw(quantity_maps)
    with tempfile.TemporaryDirectory() as d, Store(Path(d) / "rt.db") as s:
        s.open_session(info(ev.subject, ev.session))
        result = s.commit_trial(ev, dec, q, snapshot=b"state")
        assert result == CommitResult(dec, False)
        assert s.lookup(*ev.key) == (ev, dec)
        assert list(s.trials(ev.subject)) == [ev]
        assert list(s.decisions(ev.subject)) == [dec]
        [row] = s.rows("quantities")
        assert row == {"subject": ev.subject, "session": ev.session, "trial": ev.trial,
                       **{k: (None if v is None else float(v)) for k, v in q.items()}}
        [trow] = s.rows("trials")
        assert (trow["subject"], trow["session"], trow["trial"]) == ev.key
        assert trow["cues"] == [[c.cue, c.onset, c.offset] for c in ev.cues]
        stored_text = sqlite3.connect(Path(d) / "rt.db").execute("SELECT event FROM trials").fetchone()[0]
        assert stored_text == canonical_json(ev.to_dict())


def test_sessions_keep_open_order_and_reopen_returns_stored(tmp_path):
    """Sessions list in open order; re-opening with the same rule file returns the first
    record (its opened_at and seed), a different rule file is refused."""
    with Store(tmp_path / "a.db") as s:
        first = s.open_session(info(session="s2", opened_at=10.0, meta={"room": "B"}))
        s.open_session(info(session="s1", opened_at=20.0))
        s.open_session(info(subject="m02", session="s1", opened_at=30.0))
        again = s.open_session(SessionInfo.new("m01", "s2", "box9", "train.toml", "[learner]\nkind = 'rw'\n", 7, 99.0))
        assert again == first and again.meta == {"room": "B"}
        assert [x.session for x in s.sessions("m01")] == ["s2", "s1"]
        assert [(x.subject, x.session) for x in s.sessions()] == [("m01", "s2"), ("m01", "s1"), ("m02", "s1")]
        assert s.subjects() == ["m01", "m02"]
        assert s.session("m01", "s1").opened_at == 20.0 and s.session("m01", "s9") is None
        with pytest.raises(StoreError, match=r"a session has one rule file"):
            s.open_session(info(session="s2", rules="[learner]\nkind = 'kalman'\n"))


def test_trials_iterate_across_sessions_in_open_order(tmp_path):
    """trials() runs through sessions in open order then trial order, across page
    boundaries; after=(session, trial) starts strictly after that position."""
    with Store(tmp_path / "a.db") as s:
        s.open_session(info(session="late_name_first"))
        s.open_session(info(session="a_second"))
        batch = [(event(n, session="late_name_first"), decision(n, session="late_name_first"), {}, None)
                 for n in range(1, 1203)]
        batch += [(event(n, session="a_second"), decision(n, session="a_second"), {}, None) for n in range(1, 4)]
        assert all(r.ok for r in s.commit_batch(batch))
        keys = [(e.session, e.trial) for e in s.trials("m01")]
        assert keys == [("late_name_first", n) for n in range(1, 1203)] + [("a_second", n) for n in range(1, 4)]
        assert [(e.session, e.trial) for e in s.trials("m01", after=("late_name_first", 1201))] == [
            ("late_name_first", 1202), ("a_second", 1), ("a_second", 2), ("a_second", 3)]
        assert [d.trial for d in s.decisions("m01", session="a_second")] == [2, 3, 4]
        assert s.last_trial("m01", "late_name_first") == 1202 and s.last_trial("m01", "nope") == 0
        with pytest.raises(StoreError, match="not in the store"):
            list(s.trials("m01", after=("nope", 1)))


# --------------------------------------------------------------------------- retries


def test_duplicate_retry_returns_stored_decision(store):
    """A retry of the same trial writes nothing and returns the decision stored first,
    even if the caller computed a different one."""
    first = store.commit_trial(event(1), decision(1), {"v": 0.5}, snapshot=b"s1")
    other = decision(1, cue="light")
    again = store.commit_trial(event(1), other, {"v": 9.0}, snapshot=b"s2")
    assert first == CommitResult(decision(1), False)
    assert again == CommitResult(decision(1), True)
    stats = store.statistics()
    assert (stats["trials"], stats["decisions"], stats["quantities"], stats["snapshots"]) == (1, 1, 1, 1)
    assert next(store.rows("quantities"))["v"] == 0.5


def test_conflicting_retry_raises_and_changes_nothing(store):
    """A different event under a stored key raises ConflictingTrial; the stored row stays."""
    store.commit_trial(event(1), decision(1), {})
    with pytest.raises(ConflictingTrial, match=(
            r"^trial 1 of session 's1' for subject 'm01' is already stored with different content; "
            r"the rig sent a conflicting retry \(nothing was overwritten\)$")):
        store.commit_trial(event(1, reward=0.0), decision(1), {})
    assert store.lookup("m01", "s1", 1) == (event(1), decision(1))
    assert store.statistics()["trials"] == 1


def test_group_commit_conflict_in_the_middle_keeps_the_others(store):
    """In a batch, a conflicting item and an item for an unopened session are reported
    per item; every other item is stored, and a repeat within the batch is a duplicate."""
    store.commit_trial(event(2), decision(2), {})
    results = store.commit_batch([
        (event(1), decision(1), {"v": 1.0}, None),
        (event(2, reward=0.0), decision(2), {}, None),          # conflicts with the stored trial 2
        (event(3), decision(3), {"v": 3.0}, b"after3"),
        (event(1, session="never"), decision(1, session="never"), {}, None),
        (event(3), decision(3), {"v": 3.0}, None),              # repeat of item 3
        (event(4), decision(4), {"v": float("nan")}, None),      # bad quantities
    ])
    assert [(r.ok, r.duplicate) for r in results] == [(True, False), (False, False), (True, False),
                                                       (False, False), (True, True), (False, False)]
    assert isinstance(results[1].error, ConflictingTrial) and results[1].decision is None
    assert "never opened" in str(results[3].error)
    assert isinstance(results[5].error, BadArgument)
    assert [e.trial for e in store.trials("m01")] == [1, 2, 3]
    assert store.lookup("m01", "s1", 2)[0] == event(2)
    assert [s.trial for s in store.snapshots("m01")] == [3]


def test_commit_for_unopened_session_is_refused(store):
    """Trials need their session opened first (it carries the rule file and seed)."""
    with pytest.raises(StoreError, match=r"^session 'x' of subject 'm01' was never opened; open_session\(\) comes before its trials$"):
        store.commit_trial(event(1, session="x"), decision(1, session="x"), {})


@pytest.mark.parametrize("fails, snapshot, batch", [
    ("snapshots", b"state", False),  # a transaction: the trial row goes in first, then its snapshot fails
    ("trials", None, True),  # a trial without a snapshot: one INSERT committed on its own
])
def test_failed_write_rolls_back_whole_trial_and_stops_the_store(tmp_path, fails, snapshot, batch):
    """An SQLite error in a commit leaves no partial trial, and the store refuses further
    writes and reads (a failed commit must never be retried on the same connection)."""
    path = tmp_path / "a.db"
    s = Store(path)
    s.open_session(info())
    raw = sqlite3.connect(path)
    raw.execute(f"CREATE TRIGGER fail BEFORE INSERT ON {fails} BEGIN SELECT RAISE(ABORT, 'injected fault'); END")
    raw.commit()
    with pytest.raises(StoreError, match=r"write failed and was rolled back \(injected fault\)"):
        if batch:
            s.commit_batch([(event(1), decision(1), {}, snapshot)])
        else:
            s.commit_trial(event(1), decision(1), {}, snapshot=snapshot)
    assert raw.execute("SELECT COUNT(*) FROM trials").fetchone()[0] == 0
    with pytest.raises(StoreError, match="stopped after a failed write"):
        s.commit_trial(event(1), decision(1), {})
    with pytest.raises(StoreError, match="stopped after a failed write"):
        s.last_trial("m01", "s1")
    s.close()
    raw.close()


def test_bad_arguments_name_the_field(store):
    """Quantities must be finite numbers or None, with names that cannot clash with keys."""
    with pytest.raises(BadArgument, match=r"^\"quantities\['v'\]\" must be a finite number or None"):
        store.commit_trial(event(1), decision(1), {"v": float("inf")})
    with pytest.raises(BadArgument, match=r"^'quantities' must be names"):
        store.commit_trial(event(1), decision(1), {"trial": 1.0})
    with pytest.raises(BadArgument, match=r"^'decision' must be for subject 'm01', session 's1'"):
        store.commit_trial(event(1), decision(1, session="s2"), {})
    assert store.last_trial("m01", "s1") == 0


def test_numpy_scalars_are_accepted_as_quantities(store):
    """Model code hands numpy scalars; they are stored as plain floats."""
    import numpy as np

    store.commit_trial(event(1), decision(1), {"v": np.float32(0.5), "n": np.int64(3), "sd": np.float64(0.25)})
    assert next(store.rows("quantities")) == {"subject": "m01", "session": "s1", "trial": 1,
                                              "n": 3.0, "sd": 0.25, "v": 0.5}


def test_close_session_first_close_wins(store):
    """Closing twice keeps the first time; closing an unknown session is an error."""
    assert store.close_session("m01", "s1", 500.0).closed_at == 500.0
    assert store.close_session("m01", "s1", 900.0).closed_at == 500.0
    with pytest.raises(StoreError, match="never opened"):
        store.close_session("m01", "zz", 1.0)


# --------------------------------------------------------------------------- snapshots


def test_snapshots_newest_first_and_damage_detected(tmp_path):
    """snapshots() lists newest position first; a flipped byte in a blob gives ok=False."""
    path = tmp_path / "a.db"
    with Store(path) as s:
        s.open_session(info(session="s1"))
        s.open_session(info(session="s2"))
        s.save_snapshot("m01", "s1", 0, b"initial")
        s.commit_trial(event(1), decision(1), {}, snapshot=b"after s1/1")
        s.save_snapshot("m01", "s2", 0, b"start of s2")
    raw = sqlite3.connect(path)
    blob = bytearray(raw.execute("SELECT blob FROM snapshots WHERE session = 's1' AND trial = 1").fetchone()[0])
    blob[3] ^= 0x01
    raw.execute("UPDATE snapshots SET blob = ? WHERE session = 's1' AND trial = 1", (bytes(blob),))
    raw.commit()
    raw.close()
    with Store(path) as s:
        snaps = list(s.snapshots("m01"))
    assert [(x.session, x.trial, x.ok) for x in snaps] == [("s2", 0, True), ("s1", 1, False), ("s1", 0, True)]
    assert snaps[0].blob == b"start of s2" and snaps[0].sha256 == hashlib.sha256(b"start of s2").hexdigest()


# --------------------------------------------------------------------------- files it refuses


def test_newer_schema_is_refused_without_change(tmp_path):
    """A store written by a newer schema raises SchemaTooNew saying what to do, and the
    file is left as it was."""
    path = tmp_path / "new.db"
    Store(path).close()
    raw = sqlite3.connect(path)
    raw.execute(f"PRAGMA user_version = {SCHEMA_VERSION + 1}")
    raw.close()
    before = path.read_bytes()
    with pytest.raises(SchemaTooNew, match=(
            rf"^{path}: written with store schema version {SCHEMA_VERSION + 1}, but this rigloop reads versions "
            rf"up to {SCHEMA_VERSION}; "
            r"upgrade rigloop to open it \(the file was not changed\)$")):
        Store(path)
    assert path.read_bytes() == before


def test_store_of_schema_version_1_is_migrated(tmp_path):
    """A store written by schema version 1 (trials, decisions and quantities in three
    tables) opens as the current schema with every trial, decision, quantity and
    snapshot intact, replays identically, and takes new trials."""
    import json

    from rigloop.replay import replay_subject

    path = tmp_path / "v1.sqlite"
    raw = sqlite3.connect(path)
    raw.executescript((Path(__file__).parent / "data" / "store_v1.sql").read_text(encoding="utf-8"))
    assert raw.execute("PRAGMA user_version").fetchone()[0] == 1
    old = {t: raw.execute(f"SELECT * FROM {t} ORDER BY subject, session, trial").fetchall()
           for t in ("trials", "decisions", "quantities")}
    snaps = raw.execute("SELECT subject, session, trial, blob FROM snapshots ORDER BY id").fetchall()
    raw.close()
    with Store(path) as s:
        assert s._conn.execute("PRAGMA user_version").fetchone()[0] == SCHEMA_VERSION
        assert s.check() == []
        for subject in ("v1-m01", "v1-m02"):
            mine = [r for r in old["trials"] if r[0] == subject]
            assert [e.to_dict() for e in s.trials(subject)] == [json.loads(r[-1]) for r in mine]
            assert [d.to_dict() for d in s.decisions(subject)] == [
                json.loads(r[-1]) for r in old["decisions"] if r[0] == subject]
            assert replay_subject(s, subject).differing == 0
        assert [(r["subject"], r["trial"], {k: v for k, v in r.items() if k not in ("subject", "session", "trial")})
                for r in s.rows("quantities")] == [(r[0], r[2], json.loads(r[3])) for r in old["quantities"]]
        assert [(x.session, x.trial, x.blob) for x in s.snapshots("v1-m01")] == sorted(
            [(r[1], r[2], r[3]) for r in snaps if r[0] == "v1-m01"], key=lambda x: -x[1])
        # the views keep the old tables' names and columns for queries
        assert s._conn.execute("SELECT * FROM decisions ORDER BY subject, session, trial").fetchall() == old["decisions"]
        assert s.statistics()["trials"] == len(old["trials"]) == 10
        last = list(s.trials("v1-m02"))[-1]
        ev = TrialEvent.from_dict({**last.to_dict(), "trial": last.trial + 1})
        assert not s.commit_trial(ev, decision(ev.trial, subject="v1-m02", session="d01"), {}).duplicate


def test_garbage_file_is_refused(tmp_path):
    """A file that is not SQLite raises StoreError naming the path."""
    path = tmp_path / "notes.db"
    path.write_bytes(b"trial,cue\n1,tone_hi\n" * 50)
    with pytest.raises(StoreError, match=rf"^{path}: not a rigloop store \(the file is not an SQLite database\); check the path$"):
        Store(path)
    assert path.read_bytes() == b"trial,cue\n1,tone_hi\n" * 50


def test_damaged_and_foreign_files_are_refused(tmp_path):
    """An SQLite header over garbage, and someone else's SQLite database, raise StoreError."""
    damaged = tmp_path / "damaged.db"
    damaged.write_bytes(b"SQLite format 3\x00" + bytes(range(256)) * 20)
    with pytest.raises(StoreError, match=rf"^{damaged}: "):
        Store(damaged)
    foreign = tmp_path / "foreign.db"
    raw = sqlite3.connect(foreign)
    raw.execute("CREATE TABLE t (x)")
    raw.commit()
    raw.close()
    with pytest.raises(StoreError, match=r"an SQLite database, but not a rigloop store"):
        Store(foreign)
    with pytest.raises(StoreError, match=r"no store there \(create=False\)$"):
        Store(tmp_path / "missing.db", create=False)
    with pytest.raises(StoreError, match=r"cannot create the store, directory .*/nodir does not exist$"):
        Store(tmp_path / "nodir" / "x.db")


def test_pragmas_check_and_statistics(store):
    """The store runs in WAL mode with synchronous=FULL and foreign keys; check() is
    clean; statistics() counts rows."""
    c = store._conn
    assert c.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
    assert c.execute("PRAGMA synchronous").fetchone()[0] == 2  # FULL
    assert c.execute("PRAGMA foreign_keys").fetchone()[0] == 1
    store.commit_trial(event(1), decision(1), {"v": 1.0})
    assert store.check() == []
    stats = store.statistics()
    assert {k: stats[k] for k in ("subjects", "sessions", "trials", "decisions", "quantities", "snapshots")} == {
        "subjects": 1, "sessions": 1, "trials": 1, "decisions": 1, "quantities": 1, "snapshots": 0}
    assert stats["file_bytes"] > 0 and stats["schema_version"] == SCHEMA_VERSION
