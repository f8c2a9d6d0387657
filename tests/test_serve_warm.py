"""Subjects running trials stay expanded between them; idle ones, and those beyond the
cap, rest (serve/pipeline.Warm). Resting changes no bit: a session whose state rests after
every trial (what the daemon did before) equals one whose state never rests."""

from __future__ import annotations

from rigloop.core.step import step
from rigloop.core.subject import resident
from rigloop.offline.simulate import SimulatedAnimal, open_simulated_session
from rigloop.rules import load_example
from rigloop.serve.pipeline import Warm


class Clock:
    def __init__(self):
        self.t = 100.0

    def __call__(self):
        return self.t


class Probe:
    """Stands in for a state: counts how often it was rested."""

    class _Learner:
        def __init__(self):
            self.rested = 0

        def _rest(self):
            self.rested += 1

    def __init__(self):
        self.learner = self._Learner()


def test_idle_subjects_rest_and_active_ones_stay_warm():
    clock = Clock()
    warm = Warm(most=3, idle_s=5.0, clock=clock)
    states = {s: Probe() for s in "abcde"}
    warm.touch("ab")
    assert warm.rest_cold(states) == 0 and len(warm) == 2
    clock.t += 4.0
    warm.touch("b")  # b ran another trial: a is now the oldest
    clock.t += 2.0
    assert warm.rest_cold(states) == 1  # a: idle for 6 s
    assert states["a"].learner.rested == 1 and states["b"].learner.rested == 0
    warm.touch("cde")  # b, c, d, e warm: one over the cap, so the least recently active (b) rests
    assert warm.rest_cold(states) == 1 and states["b"].learner.rested == 1 and len(warm) == 3
    clock.t += 10.0
    assert warm.rest_cold(states) == 3 and len(warm) == 0
    warm.touch(["gone"])  # a subject whose state was dropped meanwhile is only forgotten
    clock.t += 10.0
    assert warm.rest_cold(states) == 1


def test_resting_after_every_trial_changes_nothing():
    rules = load_example("tone_reversal")
    runs = []
    for rest in (True, False):
        animal = SimulatedAnimal("m1", seed=11, record_truth=False)
        state, decision, _ = open_simulated_session(rules, "m1", "s1")
        out = []
        t = 1.8e9
        for _ in range(60):
            event = animal.trial(decision, "sim-rig", t)
            t += 8.0
            state, decision, update = step(state, event, rules)
            if rest:
                resident(state)
            out.append((decision, update.quantities, state.to_bytes()))
        runs.append(out)
    assert runs[0] == runs[1]
