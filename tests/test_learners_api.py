"""The learners' shared API: registry, parameters, state, trial method, argument errors."""

import math

import numpy as np
import pytest

from rigloop.core.learners import (
    LEARNERS,
    TD,
    KalmanFilter,
    KalmanTD,
    RescorlaWagner,
    TrialResult,
    make_learner,
)
from rigloop.errors import BadArgument

KINDS = {
    "rescorla_wagner": ("reward", False),
    "kalman_filter": ("reward", True),
    "td": ("value", False),
    "kalman_td": ("value", True),
}


# learners over cue feature rows of any width (two_step reads the fixed rows of multi-step
# trials; its copy, state and fast paths are tested in tests/test_two_step_example.py)
CUE_LEARNERS = sorted(n for n in LEARNERS if n != "two_step")

def feed(learner, X, r):
    """Per-row updates in the trial method's order (the terminal row after the last)."""
    if learner.kind == "reward":
        return [learner.update(x, float(v)) for x, v in zip(X, r, strict=True)]
    X_next = np.vstack([X[1:], np.zeros((1, X.shape[1]))])
    return [learner.update(x, xn, float(v)) for x, xn, v in zip(X, X_next, r, strict=True)]


@pytest.mark.parametrize("name", list(KINDS))
def test_registry_and_class_attributes(name):
    """LEARNERS maps each name to its class; kind and bayesian say which corner it fills."""
    cls = LEARNERS[name]
    assert cls.name == name
    assert (cls.kind, cls.bayesian) == KINDS[name]
    learner = make_learner(name, 3)
    assert isinstance(learner, cls) and learner.w.shape == (3,)
    assert learner.w.dtype == np.float64 and learner.w.flags.writeable
    if cls.bayesian:
        assert learner.cov.shape == (3, 3)


@pytest.mark.parametrize("name", list(KINDS))
def test_params_rebuild_an_equal_fresh_learner(name):
    """make_learner(l.name, l.n_features, **l.params()) gives the same parameters, fresh."""
    params = {"rescorla_wagner": {"alpha": [0.1, 0.2, 0.3]},
              "kalman_filter": {"diffusion": 0.1, "noise": 2.0, "prior_var": 3.0},
              "td": {"alpha": 0.2, "gamma": 0.8, "lam": 0.5},
              "kalman_td": {"gamma": 0.7, "diffusion": 0.1, "noise": 2.0, "prior_var": 3.0}}
    learner = make_learner(name, 3, **params[name])
    feed(learner, np.eye(3), np.ones(3))
    again = make_learner(learner.name, learner.n_features, **learner.params())
    assert again.params() == learner.params() == params[name]
    assert not again.w.any()
    for value in learner.params().values():
        assert type(value) in (float, list)


@pytest.mark.parametrize("name", list(KINDS))
def test_learn_trial_equals_updates(name):
    """The trial method gives exactly the per-row updates (same errors, same state)."""
    rng = np.random.default_rng(3)
    a, b = make_learner(name, 4), make_learner(name, 4)
    for _ in range(5):
        X, r = rng.normal(size=(6, 4)), rng.normal(size=6)
        result = a.learn_trial(X, r)
        if name == "td":
            b.reset_trace()
        errors = feed(b, X, r)
        assert isinstance(result, TrialResult)
        assert result.errors.tolist() == errors
        assert (result.variances is None) == (not a.bayesian)
        assert np.array_equal(a.w, b.w)
        if a.bayesian:
            assert np.array_equal(a.cov, b.cov)
    with pytest.raises(ValueError):
        result.values[0] = 1.0  # results are read-only


@pytest.mark.parametrize("name", list(KINDS))
def test_state_round_trip_through_plain_lists(name):
    """state() → lists (as msgpack would carry them) → from_state() is exact, and the copy
    then makes identical updates."""
    rng = np.random.default_rng(7)
    learner = make_learner(name, 3)
    learner.learn_trial(rng.normal(size=(4, 3)), rng.normal(size=4))
    if name == "td":
        feed(learner, rng.normal(size=(2, 3)), rng.normal(size=2))  # mid-trial trace
    state = learner.state()
    assert all(isinstance(v, (float, np.ndarray)) for v in state.values())
    plain = {k: v.tolist() if isinstance(v, np.ndarray) else v for k, v in state.items()}
    copy = type(learner).from_state(plain)
    assert copy.params() == learner.params()
    for key, value in state.items():
        assert np.array_equal(copy.state()[key], value)
    X, r = rng.normal(size=(5, 3)), rng.normal(size=5)
    assert feed(copy, X, r) == feed(learner, X, r)
    assert np.array_equal(copy.w, learner.w)


def test_writable_weights_and_covariance():
    """w and cov can be set (copied in) or written in place, and the learner uses them."""
    kf = KalmanFilter(2, diffusion=0.0, noise=1.0, prior_var=1.0)
    kf.w = np.array([0.5, 0.5])
    kf.cov = np.diag([2.0, 3.0])
    kf.w[1] = 1.0
    assert kf.predict(np.array([1.0, 1.0])) == (1.5, 5.0)
    with pytest.raises(BadArgument, match=r"^'cov' must be a symmetric matrix"):
        kf.cov = np.array([[1.0, 0.5], [0.0, 1.0]])


# --------------------------------------------------------------------------- errors


def test_gamma_out_of_range_message():
    with pytest.raises(BadArgument, match=r"^'gamma' must be a number in \[0, 1\] \(got 1\.5\)$"):
        TD(3, gamma=1.5)


def test_negative_alpha_message():
    with pytest.raises(BadArgument, match=r"^'alpha' must be a finite number >= 0 \(got -1\.0\)$"):
        RescorlaWagner(3, alpha=-1.0)


def test_wrong_shape_message():
    with pytest.raises(BadArgument,
                       match=r"^'x' must be a float array of shape \(3,\) \(got shape \(2,\)\)$"):
        KalmanTD(3).update(np.ones(2), np.zeros(3), 1.0)


def test_nan_row_message_and_state_untouched():
    """A NaN in x_next is named, and the learner's state is left exactly as it was."""
    ktd = KalmanTD(3, gamma=0.9, diffusion=0.1)
    ktd.update(np.ones(3), np.zeros(3), 1.0)
    w, cov = ktd.w.copy(), ktd.cov.copy()
    bad = np.array([0.0, math.nan, 0.0])
    with pytest.raises(BadArgument, match=r"^'x_next' must be a float array of shape \(3,\) "
                                          r"with finite entries \(got nan at index 1\)$"):
        ktd.update(np.ones(3), bad, 1.0)
    assert np.array_equal(ktd.w, w) and np.array_equal(ktd.cov, cov)


def test_unknown_learner_name_message():
    with pytest.raises(BadArgument, match=r"^'name' must be one of 'rescorla_wagner', "
                                          r"'kalman_filter', 'td', 'kalman_td', 'two_step' \(got 'rw'\)$"):
        make_learner("rw", 2)


@pytest.mark.parametrize("make, call, argument", [
    (lambda: RescorlaWagner(2), lambda l: l.update(np.ones(2), math.inf), "r"),
    (lambda: RescorlaWagner(2), lambda l: l.update([1.0, "a"], 1.0), "x"),
    (lambda: RescorlaWagner(2), lambda l: l.update(np.ones(2), "1"), "r"),
    (lambda: RescorlaWagner(2), lambda l: l.update(np.ones(2), True), "r"),
    (lambda: KalmanFilter(2), lambda l: l.update(np.array([math.inf, 0.0]), 1.0), "x"),
    (lambda: KalmanFilter(2), lambda l: l.learn_trial(np.ones((2, 2)), np.ones(3)), "r"),
    (lambda: KalmanFilter(2), lambda l: l.learn_trial(np.ones(2), np.ones(1)), "X"),
    (lambda: TD(2), lambda l: l.update(np.ones(2), np.full(2, math.nan), 0.0), "x_next"),
    (lambda: TD(2), lambda l: l.learn_trial(np.full((1, 2), math.nan), [0.0]), "X"),
    (lambda: KalmanTD(2), lambda l: l.update(np.ones(2), np.zeros(2), math.nan), "r"),
    (lambda: KalmanTD(2), lambda l: l.predict(np.ones(3)), "x"),
])
@pytest.mark.filterwarnings("ignore:invalid value encountered:RuntimeWarning")  # inf·0 in a dot
def test_bad_inputs_name_the_argument(make, call, argument):
    """Wrong shapes, NaN/inf and non-numbers raise BadArgument naming the argument."""
    learner = make()
    with pytest.raises(BadArgument) as info:
        call(learner)
    assert info.value.argument == argument
    assert isinstance(info.value, ValueError)


@pytest.mark.parametrize("make, argument", [
    (lambda: RescorlaWagner(0), "n_features"),
    (lambda: RescorlaWagner(2.5), "n_features"),
    (lambda: RescorlaWagner(2, alpha=math.nan), "alpha"),
    (lambda: RescorlaWagner(2, alpha=[0.1, -0.1]), "alpha"),
    (lambda: RescorlaWagner(2, alpha=[0.1, 0.1, 0.1]), "alpha"),
    (lambda: TD(2, lam=-0.1), "lam"),
    (lambda: TD(2, gamma=math.nan), "gamma"),
    (lambda: KalmanFilter(2, diffusion=-1.0), "diffusion"),
    (lambda: KalmanFilter(2, noise=0.0), "noise"),
    (lambda: KalmanTD(2, prior_var=math.inf), "prior_var"),
    (lambda: KalmanTD(2, gamma=True), "gamma"),
    (lambda: make_learner("td", 2, beta=1.0), "params"),
    (lambda: KalmanTD.from_state({"w": [0.0]}), "state"),
])
def test_bad_parameters_name_the_argument(make, argument):
    """Out-of-range or non-finite parameters raise BadArgument naming the parameter."""
    with pytest.raises(BadArgument) as info:
        make()
    assert info.value.argument == argument


@pytest.mark.parametrize("name", CUE_LEARNERS)
def test_copy_equals_state_round_trip(name):
    """copy() is the fast path of from_state(state()): same arrays, independent buffers."""
    rng = np.random.default_rng(2)
    params = {"td": {"alpha": 0.1, "gamma": 0.9, "lam": 0.5}}.get(name, {})
    learner = make_learner(name, 4, **params)
    X = (rng.random((6, 4)) < 0.5).astype(float)
    learner.learn_trial(X if learner.kind == "value" else X[:1], np.ones(6) if learner.kind == "value" else np.ones(1))
    a, b = learner.copy(), type(learner).from_state(learner.state())
    for key, value in b.state().items():
        np.testing.assert_array_equal(a.state()[key], value)
    a.w[0] += 1.0
    assert learner.w[0] != a.w[0]


@pytest.mark.parametrize("name", CUE_LEARNERS)
def test_copy_shares_no_array_and_learns_identically(name):
    """copy() re-checks no parameter and owns every array it can change (it may share
    read-only constants); it then learns bit for bit as the original (and as a learner
    rebuilt with full checks)."""
    rng = np.random.default_rng(5)
    params = {"td": {"alpha": [0.1, 0.2, 0.3, 0.4], "gamma": 0.9, "lam": 0.5},
              "rescorla_wagner": {"alpha": [0.1, 0.2, 0.3, 0.4]}}.get(name, {})
    learner = make_learner(name, 4, **params)
    value = learner.kind == "value"
    X = (rng.random((6, 4)) < 0.5).astype(float)
    r = np.ones(6) if value else np.ones(1)
    learner.learn_trial(X if value else X[:1], r)
    copy, rebuilt = learner.copy(), type(learner).from_state(learner.state())
    for slot in {s for c in type(learner).__mro__ for s in getattr(c, "__slots__", ())}:
        mine, theirs = getattr(learner, slot, None), getattr(copy, slot, None)
        if isinstance(mine, np.ndarray) and mine.size and np.shares_memory(mine, theirs):
            # only constants may be shared, and no one can make them writable again
            for arr in (mine, theirs):
                with pytest.raises(ValueError):
                    arr.setflags(write=True)
    assert copy.params() == learner.params()
    for other in (copy, rebuilt):
        a = learner.copy().learn_trial(X if value else X[:1], r)
        b = other.learn_trial(X if value else X[:1], r)
        assert a.values.tobytes() == b.values.tobytes() and a.errors.tobytes() == b.errors.tobytes()


@pytest.mark.parametrize("name", CUE_LEARNERS)
def test_unchecked_paths_equal_the_checked_ones(name):
    """_predict and _learn (step's paths for rows it built itself) give what predict and
    learn_trial give, bit for bit."""
    rng = np.random.default_rng(8)
    a = make_learner(name, 4)
    value = a.kind == "value"
    X = (rng.random((5, 4)) < 0.5).astype(float)
    X, r = (X, rng.random(5)) if value else (X[:1], rng.random(1))
    b = a.copy()
    ra, rb = a.learn_trial(X, r), b._learn(X, r)
    for x, y in ((ra.values, rb.values), (ra.errors, rb.errors), (ra.variances, rb.variances)):
        assert (x is None and y is None) or x.tobytes() == y.tobytes()
    assert a.w.tobytes() == b.w.tobytes()
    for x in X:
        assert a.predict(x) == b._predict(x)


@pytest.mark.parametrize("name", CUE_LEARNERS)
def test_learned_copy_equals_learning_in_place_and_leaves_the_original(name):
    """_learned (step's learning call) returns a learner and result bit for bit equal to
    copy() then _learn, with read-only rows (kept by identity) or writable ones, and the
    learner it is called on does not change."""
    rng = np.random.default_rng(11)
    learner = make_learner(name, 4)
    value = learner.kind == "value"
    for k in range(6):
        X = (rng.random((5, 4)) < 0.5).astype(float)
        X, r = (X, rng.random(5)) if value else (X[:1].copy(), rng.random(1))
        if k % 2:
            X.setflags(write=False)
        before = learner.state()
        expected = learner.copy()
        want = expected._learn(X, r)
        for _ in range(2):  # the second call may reuse what the first kept of X
            got_learner, got, finite = learner._learned(X, r)
            if finite:  # both states were checked finite
                assert np.isfinite(learner.w).all() and np.isfinite(got_learner.w).all()
                assert np.isfinite(learner.cov).all() and np.isfinite(got_learner.cov).all()
            for x, y in ((want.values, got.values), (want.errors, got.errors), (want.variances, got.variances)):
                assert (x is None and y is None) or x.tobytes() == y.tobytes()
            assert got_learner.w.tobytes() == expected.w.tobytes()
            assert not got.values.flags.writeable and not got.errors.flags.writeable
        for key, value_before in before.items():
            assert np.asarray(learner.state()[key]).tobytes() == np.asarray(value_before).tobytes()
        learner = got_learner


@pytest.mark.filterwarnings("ignore::RuntimeWarning")  # products of inf and NaN states
@pytest.mark.parametrize("name", CUE_LEARNERS)
def test_onset_reader_equals_predict_bit_for_bit(name):
    """_onset_reader()(e_i, i) gives what _predict(e_i) gives, for states with zeros,
    negative zeros, huge, infinite and NaN entries (the reader's shortcut must not show)."""
    rng = np.random.default_rng(21)
    n = 5
    for k in range(40):
        learner = make_learner(name, n)
        w = rng.normal(size=n) * 10.0 ** rng.integers(-3, 300)
        w[rng.random(n) < 0.3] = 0.0
        w[rng.random(n) < 0.2] = -0.0
        if k % 4 == 1:
            w[rng.integers(n)] = rng.choice([np.inf, -np.inf, np.nan])
        learner._w[...] = w
        if learner.bayesian:
            cov = np.diag(rng.random(n))
            cov[rng.random((n, n)) < 0.1] = 0.0
            if k % 4 == 2:
                cov[rng.integers(n), rng.integers(n)] = rng.choice([np.inf, np.nan, 1e308])
            learner._P[...] = cov
        finite = bool(np.isfinite(learner.w).all() and (not learner.bayesian or np.isfinite(learner.cov).all()))
        for read in (learner._onset_reader(), learner._onset_reader(finite)):
            for i in range(n):
                x = np.zeros(n)
                x[i] = 1.0
                got, want = read(x, i), learner._predict(x)
                assert np.array(got).tobytes() == np.array(want).tobytes()
                assert [type(v) for v in got] == [type(v) for v in want]


@pytest.mark.parametrize("name", ["kalman_filter", "kalman_td"])
def test_learners_in_several_threads_learn_as_they_do_alone(name):
    """Gaussian learners keep no scratch of their own and share read-only constants:
    learners stepped in four threads at once end bit for bit where each ends alone."""
    import threading

    rng = np.random.default_rng(11)
    value = KINDS[name][0] == "value"
    trials = [((rng.random((8, 16)) < 0.3).astype(float), rng.normal(size=8)) for _ in range(300)]

    def run(k):
        learner = make_learner(name, 16, diffusion=0.01 * (k + 1))
        for X, r in trials:
            learner.learn_trial(X if value else X[:1], r if value else r[:1])
        return learner.state()["w"].tobytes() + learner.state()["cov"].tobytes()

    alone = [run(k) for k in range(4)]
    together = [None] * 4

    def work(k):
        together[k] = run(k)

    import sys

    threads = [threading.Thread(target=work, args=(k,)) for k in range(4)]
    interval = sys.getswitchinterval()
    sys.setswitchinterval(1e-6)  # switch threads as often as the interpreter can
    try:
        for t in threads:
            t.start()
        for t in threads:
            t.join()
    finally:
        sys.setswitchinterval(interval)
    assert together == alone
