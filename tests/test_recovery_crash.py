"""Kill -9 campaign through step and recovery: after every restart the recovered state
is bit-identical to an uninterrupted run's, and no acknowledged trial is lost or doubled.

A child process recovers subject m01, steps trials from a deterministic stand-in animal
and commits each (snapshot every 7 trials) before printing its number. The test SIGKILLs
it at random (seeded) moments, RIGLOOP_CRASH_ROUNDS times (default 12, 40 with
RIGLOOP_FULL=1), restarting each time; most kills are timed from the child's ``ready``
line, so a slow start on a loaded machine cannot leave a round with nothing to test.
SIGKILL lets the OS keep its page cache: this tests transaction atomicity, the
reply-after-commit discipline and recovery, not power loss.
"""

from __future__ import annotations

import os
import random
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

from rigloop.core.step import step
from rigloop.replay import recover
from rigloop.store import Store

sys.path.insert(0, str(Path(__file__).parent))
import recovery_crash_child as child  # noqa: E402

CHILD = Path(__file__).with_name("recovery_crash_child.py")


def _round(path: Path, delay: float, *, after_ready: bool) -> list[int]:
    """One child run killed after ``delay`` s: counted from its start, or (``after_ready``)
    from its ``ready`` line, so that a slow start on a loaded machine (imports alone can
    take seconds) cannot leave the store without its session, which the checks need."""
    proc = subprocess.Popen([sys.executable, str(CHILD), str(path)], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True)
    first = proc.stdout.readline() if after_ready else ""  # blocks until ready (or the child died)
    time.sleep(delay)
    proc.send_signal(signal.SIGKILL)
    out, err = proc.communicate(timeout=30)
    assert proc.returncode == -signal.SIGKILL, f"child ended on its own (rc {proc.returncode}): {err[-2000:]}"
    return [int(line) for line in (first + out).splitlines() if line.strip().isdigit()]


class Reference:
    """The uninterrupted run, advanced as far as each check needs."""

    def __init__(self):
        self.state, self.decision = child.opened()

    def advance_to(self, trial: int):
        while self.state.last_trial < trial:
            self.state, self.decision, _ = step(self.state, child.make_event(self.decision), child.RULES)
        return self.state


def test_sigkill_campaign_recovers_the_uninterrupted_state(tmp_path):
    path = tmp_path / "crash.sqlite"
    # 12 rounds by default (each waits for its child's start, ~1 s); RIGLOOP_FULL=1 runs 40
    rounds = int(os.environ.get("RIGLOOP_CRASH_ROUNDS", "40" if os.environ.get("RIGLOOP_FULL") else "12"))
    rng = random.Random(20261201)
    reference = Reference()
    acked: set[int] = set()
    for k in range(rounds):
        # most kills are timed from the child's ready line, so they land among commits however slowly
        # a loaded machine starts the child; every fourth is timed from the start and may land
        # anywhere, recovery included (the first round, which opens the session, always waits)
        got = _round(path, rng.uniform(0.05, 0.6), after_ready=k % 4 != 3)
        assert not (set(got) & acked), f"round {k}: trials acknowledged twice: {sorted(set(got) & acked)[:5]}"
        acked |= set(got)
        with Store(path) as store:
            last = store.last_trial("m01", "s1")
            stored = [e.trial for e in store.trials("m01", "s1")]
            assert stored == list(range(1, last + 1)), f"round {k}: gap or double in stored trials"
            assert acked <= set(stored), f"round {k}: acknowledged trials lost: {sorted(acked - set(stored))[:5]}"
            state = recover(store, "m01")
        assert state.to_bytes() == reference.advance_to(last).to_bytes(), f"round {k}: recovered state differs"
        db = sqlite3.connect(path)
        try:
            counts = [db.execute(f"SELECT COUNT(*) FROM {t} WHERE subject = 'm01'").fetchone()[0]
                      for t in ("trials", "decisions", "quantities")]
            assert counts == [last] * 3, f"round {k}: a partial trial is visible: {counts}"
            assert db.execute("PRAGMA integrity_check").fetchall() == [("ok",)]
        finally:
            db.close()
    assert len(acked) > 3 * rounds, "the child acknowledged too few trials; the campaign tested little"
