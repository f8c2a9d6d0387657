"""The durable store: one SQLite file holding sessions, trials (each with its decision and
model quantities), and snapshots. The only sqlite3 import in rigloop is in this package.

Durability contract: every write method returns only after its transaction is committed
with ``PRAGMA synchronous=FULL`` in WAL mode, i.e. after the WAL has been fsync'd. The
caller replies to a rig **only after** ``commit_trial`` / ``commit_batch`` returns; a rig
that got no reply retries, and the retry is answered from what is stored
(``CommitResult.duplicate``), so nothing is counted twice. A failed write stops the
``Store``; reopen the file (``db.py`` says why).

The modules, from the bottom up:

  records   the values kept and returned (SessionInfo, CommitResult, Snapshot), canonical
            JSON, one trial's commit checked and encoded; pure
  schema    the DDL, SCHEMA_VERSION, creating a new file's tables, the v1 -> v2 -> v3 migrations
  db        the connection: header and application-id checks, pragmas, durable writes and
            reads, stopping after a failed write
  reading   read-only queries (``Reader``): sessions, paged trials / decisions / export
            rows, snapshots, water (rewards, ``Supplement`` entries), statistics
  store     ``Store``: a ``Reader`` that also opens and closes sessions, commits trials
            (one or a group per transaction), saves snapshots and records supplements
"""

from __future__ import annotations

from .reading import Supplement
from .records import BatchItem, CommitResult, SessionInfo, Snapshot, canonical_json, rules_digest
from .schema import APPLICATION_ID, SCHEMA_VERSION
from .store import Store

__all__ = [
    "APPLICATION_ID",
    "SCHEMA_VERSION",
    "BatchItem",
    "CommitResult",
    "SessionInfo",
    "Snapshot",
    "Store",
    "Supplement",
    "canonical_json",
    "rules_digest",
]
