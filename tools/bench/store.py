"""Store write throughput: rigloop's durable commits vs bare sqlite3 inserts, same run.

Every variant writes N trials to a fresh SQLite file in WAL mode with synchronous=FULL
(an fsync of the WAL per transaction):

  bare        one INSERT per BEGIN IMMEDIATE … COMMIT of the trial's canonical JSON text
              (pre-encoded; only SQLite's cost)
  commit      Store.commit_trial: dedup check, one row holding the trial, its decision
              and its quantities, JSON encoding included, one transaction per trial
  batch k     Store.commit_batch with k trials per transaction (group commit), k = 1, 8, 32

The variants run interleaved, 32 trials at a time each, so machine noise hits all of
them alike; each figure is the median over repetitions. ``ratio`` is
bare_inserts_per_s / trials_per_s (how many times slower a full commit is than a bare
insert). Use --dir on the disk the daemon will use: on tmpfs fsync costs nothing and
the figures mean little.

    python tools/bench/store.py [--json] [--trials 1000] [--reps 5] [--dir PATH]
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import sqlite3
import statistics
import sys
import tempfile
import time

from rigloop.core.trial import CuePresentation, Decision, Outcome, Response, TrialEvent
from rigloop.store import SessionInfo, Store, canonical_json

GROUPS = (1, 8, 32)


def workload(n: int) -> list[tuple[TrialEvent, Decision, dict[str, float | None]]]:
    """n trials of one session: alternating cues, every other trial rewarded."""
    out = []
    for t in range(1, n + 1):
        cue = "tone_hi" if t % 2 else "tone_lo"
        reward = 4.0 if t % 2 else 0.0
        ev = TrialEvent(
            subject="m01", rig="box1", session="s1", trial=t,
            cues=(CuePresentation(cue, 0.5, 2.5),),
            outcome=Outcome(reward_ul=reward, reward_time=2.5 if reward else None),
            response=Response(kind="licks", value=float(t % 7), result="correct" if reward else "incorrect",
                              latency=0.4 + 0.001 * t),
            wall_time=1.9e9 + 20.0 * t,
        )
        dec = Decision("m01", "s1", t + 1, "tone_lo" if t % 2 else "tone_hi", 0.8, 4.0, t % 5 != 0,
                       "b1", "pavlov", reasons=("block b1 continues: 12 of 40 trials",))
        q = {"v_tone_hi": 0.01 * t, "sd_tone_hi": 0.3, "delta_cue": 0.1, "delta_outcome": -0.2}
        out.append((ev, dec, q))
    return out


class Bare:
    """Bare sqlite3: one INSERT of pre-encoded canonical JSON per transaction."""

    def __init__(self, path: str):
        self.c = sqlite3.connect(path, isolation_level=None)
        self.c.execute("PRAGMA journal_mode = WAL")
        self.c.execute("PRAGMA synchronous = FULL")
        self.c.execute("PRAGMA foreign_keys = ON")
        self.c.execute("CREATE TABLE trials (subject TEXT, session TEXT, trial INTEGER, event TEXT, "
                       "PRIMARY KEY (subject, session, trial)) WITHOUT ROWID")

    def write(self, chunk) -> None:
        c = self.c
        for ev, _, _, text in chunk:
            c.execute("BEGIN IMMEDIATE")
            c.execute("INSERT INTO trials VALUES (?, ?, ?, ?)", ("m01", "s1", ev.trial, text))
            c.execute("COMMIT")

    def close(self) -> None:
        self.c.close()


class Commit:
    """Store.commit_trial, one transaction per trial."""

    def __init__(self, path: str):
        self.s = Store(path)
        self.s.open_session(SessionInfo.new("m01", "s1", "box1", "bench.toml", "x = 1\n", 1, 0.0))

    def write(self, chunk) -> None:
        for ev, dec, q, _ in chunk:
            self.s.commit_trial(ev, dec, q)

    def close(self) -> None:
        self.s.close()


class Batch(Commit):
    """Store.commit_batch with k trials per transaction."""

    def __init__(self, path: str, k: int):
        super().__init__(path)
        self.k = k

    def write(self, chunk) -> None:
        for i in range(0, len(chunk), self.k):
            results = self.s.commit_batch([(ev, dec, q, None) for ev, dec, q, _ in chunk[i:i + self.k]])
            assert all(r.ok for r in results)


def one_rep(root: str, rep: int, work, chunk: int) -> dict[str, float]:
    """Trials/s of every variant, interleaved chunk by chunk so that a burst of machine
    load hits all of them alike."""
    variants = {"bare": Bare(os.path.join(root, f"bare-{rep}.db")),
                "commit": Commit(os.path.join(root, f"commit-{rep}.db"))}
    for k in GROUPS:
        variants[f"batch{k}"] = Batch(os.path.join(root, f"batch{k}-{rep}.db"), k)
    spent = dict.fromkeys(variants, 0.0)
    try:
        for i in range(0, len(work), chunk):
            part = work[i:i + chunk]
            for name, v in variants.items():
                start = time.perf_counter()
                v.write(part)
                spent[name] += time.perf_counter() - start
    finally:
        for v in variants.values():
            v.close()
    return {name: len(work) / t for name, t in spent.items()}


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--json", action="store_true", help="print one JSON object instead of a table")
    ap.add_argument("--trials", type=int, default=1000, help="trials per variant and repetition (default 1000)")
    ap.add_argument("--reps", type=int, default=5, help="repetitions (default 5)")
    ap.add_argument("--dir", default=None, help="directory for the test files (default: the system temp dir)")
    args = ap.parse_args(argv)

    chunk = max(GROUPS)
    work = [(ev, dec, q, canonical_json(ev.to_dict())) for ev, dec, q in workload(args.trials)]
    root = tempfile.mkdtemp(prefix="rigloop-bench-", dir=args.dir)
    figures: dict[str, list[float]] = {}
    try:
        for rep in range(args.reps):
            for name, rate in one_rep(root, rep, work, chunk).items():
                figures.setdefault(name, []).append(rate)
            for f in os.listdir(root):
                os.remove(os.path.join(root, f))
    finally:
        shutil.rmtree(root, ignore_errors=True)

    med = {name: statistics.median(v) for name, v in figures.items()}
    result = {
        "trials_per_s": round(med["commit"], 1),
        "bare_inserts_per_s": round(med["bare"], 1),
        "ratio": round(med["bare"] / med["commit"], 3),
        "group_commit_trials_per_s": {str(k): round(med[f"batch{k}"], 1) for k in GROUPS},
        "group_commit_speedup_vs_commit": {str(k): round(med[f"batch{k}"] / med["commit"], 2) for k in GROUPS},
        "trials": args.trials,
        "reps": args.reps,
        "dir": os.path.dirname(root),
        "sqlite_version": sqlite3.sqlite_version,
    }
    if args.json:
        print(json.dumps(result))
        return 0
    print(f"store write throughput: {args.trials} trials x {args.reps} reps, WAL + synchronous=FULL, "
          f"files in {result['dir']} (SQLite {sqlite3.sqlite_version})")
    print(f"{'variant':<34}{'trials/s':>12}{'vs bare':>10}")
    rows = [("bare INSERT, 1 per transaction", med["bare"]), ("Store.commit_trial", med["commit"])]
    rows += [(f"Store.commit_batch, k = {k}", med[f"batch{k}"]) for k in GROUPS]
    for label, rate in rows:
        print(f"{label:<34}{rate:>12.0f}{rate / med['bare']:>9.2f}x")
    print(f"ratio (bare / commit_trial): {result['ratio']:.2f}  (1.0 = as fast as a bare insert)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
