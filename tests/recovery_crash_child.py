"""Child process for the recovery crash test: the daemon's loop without sockets.

Recovers subject m01 from the store (newest snapshot + replay), then steps and commits
trials made by a deterministic stand-in animal, printing each trial number after its
commit returns (the acknowledgement), until killed. It prints ``ready`` once the session
is open, before the first trial.

Usage: python recovery_crash_child.py STORE_PATH
"""

from __future__ import annotations

import sys

import numpy as np

from rigloop.core.step import begin_session, session_seed, step
from rigloop.core.subject import new_subject
from rigloop.core.trial import CuePresentation, Decision, Outcome, Response, TrialEvent
from rigloop.replay import recover
from rigloop.rules import load_example
from rigloop.store import SessionInfo, Store

RULES = load_example("gonogo_shaping")
SUBJECT, SESSION, RIG, START = "m01", "s1", "box1", 1.8e9
SNAPSHOT_EVERY = 7


def make_event(decision: Decision) -> TrialEvent:
    """The animal's trial: a function of the decision and the trial number alone."""
    n = decision.trial
    u = np.random.default_rng([7, n]).random()
    go = decision.reward_prob > 0
    pressed = (u < 0.85) if go else (u < 0.25)
    rewarded = go and pressed and decision.reward_armed
    return TrialEvent(
        SUBJECT, RIG, SESSION, n,
        cues=(CuePresentation(decision.cue, 0.5, 1.5),),
        outcome=Outcome(decision.reward_ul if rewarded else 0.0, 1.6 if rewarded else None),
        response=Response("lever", float(pressed), "correct" if pressed == go else "incorrect", 0.9 if pressed else None),
        duration=3.0,
        wall_time=START + 0.25 * n,
    )


def opened() -> tuple:
    state = new_subject(SUBJECT, RULES)
    return begin_session(state, RULES, session=SESSION, rig=RIG, wall_time=START, seed=session_seed(SUBJECT, SESSION))


def main() -> None:
    with Store(sys.argv[1]) as store:
        state = recover(store, SUBJECT)
        if state is None:
            state, decision = opened()
            store.open_session(SessionInfo.new(SUBJECT, SESSION, RIG, RULES.name, RULES.text, state.context.seed,
                                               START, meta={"first_decision": decision.to_dict()}))
        elif state.last_trial == 0:
            decision = Decision.from_dict(state.context.first_decision)
        else:
            decision = store.lookup(SUBJECT, SESSION, state.last_trial)[1]
        print("ready", flush=True)  # the session is open: the test may start its kill timer
        while not decision.end_session:
            event = make_event(decision)
            state, decision, update = step(state, event, RULES)
            snap = state.to_bytes() if event.trial % SNAPSHOT_EVERY == 0 else None
            store.commit_trial(event, decision, update.quantities, snap)
            print(event.trial, flush=True)


if __name__ == "__main__":
    main()
