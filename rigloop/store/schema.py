"""The store's tables: the DDL, the schema version, creating a new file's tables and the
migrations from schema versions 1 and 2.

One row of ``trials`` holds a trial's event, the decision it produced and its model
quantities, each as canonical JSON text (sorted keys, no spaces, floats as ``repr`` so they
round-trip exactly), plus key columns for queries; the views ``decisions`` and
``quantities`` show them as tables of their own. One row per trial keeps a commit to one
table page and one index page in the usual case, so a durable commit writes little to
the WAL. ``supplements`` holds the water given off the rig (schema 3), one row per entry,
kept for the water ledger. A store written by schema version 1 (three tables) or 2 (no
supplements) is migrated when opened.

The functions here run inside a transaction their caller holds (``db.py`` starts it).
"""

from __future__ import annotations

import sqlite3

SCHEMA_VERSION = 3
# PRAGMA application_id marks the file as a rigloop store: "RGLP" as a 32-bit integer.
APPLICATION_ID = 0x52474C50
TABLES = frozenset({"subjects", "sessions", "trials", "snapshots", "supplements"})
# the columns an INSERT into trials fills (all but the storage-order id)
TRIAL_COLUMNS = ("subject, session, trial, rig, wall_time, first_cue, reward_ul, result, event, "
                 "next_trial, cue, block, stage, reward_armed, end_session, decision, quantities")

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
_SCHEMA_SUPPLEMENTS = """
CREATE TABLE supplements (
    id          INTEGER PRIMARY KEY,        -- entry order
    subject     TEXT NOT NULL,              -- as on the rig (an animal not yet trained may have entries)
    day         TEXT NOT NULL,              -- the lab day it counts toward, YYYY-MM-DD
    volume_ul   REAL NOT NULL CHECK (volume_ul > 0),
    recorded_at REAL NOT NULL,              -- Unix seconds when it was entered
    note        TEXT NOT NULL
);
CREATE INDEX supplements_by_subject ON supplements (subject, day);
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
""" + _SCHEMA_SUPPLEMENTS)


def version(c: sqlite3.Connection) -> int:
    """The file's schema version (``PRAGMA user_version``; 0 for a new file)."""
    return c.execute("PRAGMA user_version").fetchone()[0]


def tables(c: sqlite3.Connection) -> set[str]:
    """The names of the file's tables."""
    return {r[0] for r in c.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}


def create(c: sqlite3.Connection) -> None:
    """Create the tables of a new store and mark the file as a rigloop store of this version."""
    _execute_all(c, _SCHEMA)
    c.execute(f"PRAGMA application_id = {APPLICATION_ID}")
    c.execute(f"PRAGMA user_version = {SCHEMA_VERSION}")


def migrate_v1(c: sqlite3.Connection) -> None:
    """Schema 1 -> 2: the three tables trials, decisions and quantities (one row each per
    trial) become one row per trial, in storage order; ``decisions`` and ``quantities``
    become views of it."""
    c.execute("ALTER TABLE trials RENAME TO trials_v1")  # decisions' and quantities' keys follow
    _execute_all(c, _SCHEMA_TRIALS)
    c.execute(
        f"INSERT INTO trials ({TRIAL_COLUMNS}) "
        "SELECT t.subject, t.session, t.trial, t.rig, t.wall_time, t.first_cue, t.reward_ul, t.result, t.event, "
        "d.next_trial, d.cue, d.block, d.stage, d.reward_armed, d.end_session, d.decision, q.data "
        "FROM trials_v1 t JOIN decisions d USING (subject, session, trial) "
        "JOIN quantities q USING (subject, session, trial) "
        "JOIN sessions s ON s.subject = t.subject AND s.session = t.session ORDER BY s.id, t.trial"
    )
    for table in ("quantities", "decisions", "trials_v1"):
        c.execute(f"DROP TABLE {table}")
    _execute_all(c, _SCHEMA_VIEWS)
    c.execute("PRAGMA user_version = 2")


def migrate_v2(c: sqlite3.Connection) -> None:
    """Schema 2 -> 3: add the (empty) supplements table; nothing else changes."""
    _execute_all(c, _SCHEMA_SUPPLEMENTS)
    c.execute("PRAGMA user_version = 3")


def _execute_all(c: sqlite3.Connection, script: str) -> None:
    """Each statement of ``script`` (``executescript`` would commit the transaction)."""
    for statement in script.split(";"):
        if statement.strip():
            c.execute(statement)
