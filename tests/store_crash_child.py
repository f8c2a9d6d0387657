"""Child process for the store crash test: commit trials in a loop, print each one's
number after its commit returns (the acknowledgement), until killed.

Usage: python store_crash_child.py STORE_PATH SESSION [SESSION ...]
Trials go round-robin over the sessions (as several rigs would), half of them by group
commit, and every 7th trial carries a snapshot.
"""

from __future__ import annotations

import sys

from rigloop.core.trial import CuePresentation, Decision, Outcome, Response, TrialEvent
from rigloop.store import SessionInfo, Store


def event(session: str, trial: int) -> TrialEvent:
    cue = "tone_hi" if trial % 2 else "tone_lo"
    reward = 4.0 if trial % 3 else 0.0
    return TrialEvent(
        subject="m01", rig=f"box_{session}", session=session, trial=trial,
        cues=(CuePresentation(cue, 0.0, 1.0),),
        outcome=Outcome(reward_ul=reward, reward_time=1.0 if reward else None),
        response=Response(kind="licks", value=float(trial % 5), result="correct" if reward else "incorrect"),
        wall_time=1.7e9 + trial,
    )


def decision(session: str, trial: int) -> Decision:
    """A deterministic stand-in: the cue alternates with the trial number."""
    return Decision("m01", session, trial + 1, "tone_lo" if trial % 2 else "tone_hi", 0.8, 4.0, True, "b1", "s")


def main() -> None:
    path, sessions = sys.argv[1], sys.argv[2:]
    with Store(path) as store:
        nxt = {}
        for s in sessions:
            store.open_session(SessionInfo.new("m01", s, f"box_{s}", "crash.toml", "x = 1\n", 1, 0.0))
            nxt[s] = store.last_trial("m01", s) + 1
        round_no = 0
        while True:
            round_no += 1
            items = []
            for s in sessions:
                n = nxt[s]
                snap = f"{s}:{n}".encode() if n % 7 == 0 else None
                items.append((event(s, n), decision(s, n), {"v": n * 0.5, "sd": None}, snap))
            if round_no % 2:
                results = store.commit_batch(items)
            else:
                results = [store.commit_trial(*item) for item in items]
            for item, result in zip(items, results):
                if not result.ok:
                    raise SystemExit(f"commit failed: {result.error}")
                ev = item[0]
                print(ev.session, ev.trial, flush=True)
                nxt[ev.session] = ev.trial + 1


if __name__ == "__main__":
    main()
