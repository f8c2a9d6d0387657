"""A resting learner (the compact form the daemon keeps between trials) is the same learner:
resting and waking change no bit of its state, its next trial or its stored bytes."""

from __future__ import annotations

import numpy as np
import pytest

from rigloop.core import step as core_step
from rigloop.core.learners.kalman_filter import KalmanFilter
from rigloop.core.learners.kalman_td import KalmanTD
from rigloop.core.subject import new_subject, resident
from rigloop.offline.simulate import simulate_session
from rigloop.offline.sweep import animal_for
from rigloop.rules import load_example


def _trial(rng, n, T=12):
    X = (rng.random((T, n)) < 0.15).astype(float)
    return X, rng.normal(size=T)


@pytest.mark.parametrize("cls", [KalmanTD, KalmanFilter])
@pytest.mark.parametrize("n", [1, 5, 32])
def test_rest_then_learn_equals_never_resting(cls, n):
    rng = np.random.default_rng(n)
    plain, rested = cls(n), cls(n)
    for _ in range(6):
        X, r = _trial(rng, n)
        a, ra, _ = plain._learned(X, r)
        rested._rest()
        assert rested._packed is not None  # really compact
        b, rb, _ = rested._learned(X, r)
        assert np.array_equal(a._A, b._A)
        assert np.array_equal(ra.errors, rb.errors) and np.array_equal(ra.values, rb.values)
        plain, rested = a, b


def test_resting_keeps_state_and_reads():
    rng = np.random.default_rng(0)
    learner = KalmanTD(8)
    learner._learn(*_trial(rng, 8))
    want, w, cov = learner.state(), learner.w.copy(), learner.cov.copy()
    learner._rest()
    learner._rest()  # twice: still the one compact form
    assert learner._packed.size == 8 * 9 // 2 + 8
    got = learner.state()  # reading wakes it
    assert learner._packed is None
    assert np.array_equal(got["w"], want["w"]) and np.array_equal(got["cov"], want["cov"])
    assert np.array_equal(learner.w, w) and np.array_equal(learner.cov, cov)


def test_an_asymmetric_covariance_is_not_packed():
    learner = KalmanFilter(3)
    learner._P[...] = np.eye(3)
    learner._P[0, 1] = 0.1  # (the cov setter refuses this) the mirror of the upper triangle would change it
    learner._P[2, 2] = np.nan  # and a NaN is not equal to itself: kept as it is too
    cov = learner._P.copy()
    learner._rest()
    assert learner._packed is None
    assert np.array_equal(learner.cov, cov, equal_nan=True)


def test_resident_states_step_and_store_the_same():
    rules = load_example("tone_reversal")
    run = simulate_session(rules, animal_for(rules, "b1", 1), session="s1", max_trials=60)
    states = []
    for rest in (False, True):
        state = new_subject("b1", rules)
        state, _ = core_step.begin_session(state, rules, session="s1", rig="sim-rig", wall_time=1.8e9,
                                           seed=run.state.context.seed)
        out = []
        for event in run.events:
            if rest:
                resident(state)
            state, decision, update = core_step.step(state, event, rules)
            out.append((decision.to_dict(), dict(update.quantities)))
        states.append((out, state.to_bytes()))
    assert states[0][0] == states[1][0]
    assert states[0][1] == states[1][1]


def test_a_copy_of_a_resting_learner_leaves_it_resting():
    rng = np.random.default_rng(4)
    learner = KalmanTD(6)
    learner._learn(*_trial(rng, 6))
    want = learner._A.copy()
    learner._rest()
    twin = learner.copy()
    assert learner._packed is not None  # still compact: the copy read the compact form
    assert np.array_equal(twin._A, want)
    new, _, _ = learner._learned(*_trial(rng, 6))
    assert learner._packed is not None and new._packed is None


def test_the_onset_reader_of_a_resting_learner_reads_the_same_without_waking():
    rng = np.random.default_rng(9)
    learner = KalmanTD(5)
    learner._learn(*_trial(rng, 5))
    learner._w[2] = 0.0  # a zero mean: that read takes the products (and wakes the learner)
    eye = np.eye(5)
    want = [learner._onset_reader(True)(eye[i], i) for i in range(5)]
    learner._rest()
    read = learner._onset_reader(True)
    got = [read(eye[i], i) for i in (0, 1, 3, 4)]
    assert learner._packed is not None  # the nonzero entries were read from the compact form
    assert got == [want[i] for i in (0, 1, 3, 4)]
    assert read(eye[2], 2) == want[2]
