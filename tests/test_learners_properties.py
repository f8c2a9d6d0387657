"""Properties over random sequences: PSD covariances, finite outputs, exact state round trip."""

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st
from strategies import learner_cases

from rigloop.core.learners import make_learner

FEW = settings(max_examples=40, deadline=None)


def run(learner, X, r, trial_steps):
    """Feed X, r as trials of ``trial_steps`` rows (one row per trial for reward learners)."""
    step = 1 if learner.kind == "reward" else trial_steps
    return [learner.learn_trial(X[i : i + step], r[i : i + step]) for i in range(0, len(X), step)]


@FEW
@given(learner_cases(names=("kalman_filter", "kalman_td"), max_steps=200),
       st.integers(1, 8))
def test_covariance_stays_symmetric_psd(case, trial_steps):
    """Σ stays exactly symmetric, and its eigenvalues ≥ −1e-9·trace (rounding only)."""
    name, n, params, X, r = case
    learner = make_learner(name, n, **params)
    for _ in range(3):  # a long sequence: the drawn one, three times over
        run(learner, X, r, trial_steps)
        cov = learner.cov
        assert np.array_equal(cov, cov.T)
        assert np.linalg.eigvalsh(cov).min() >= -1e-9 * max(np.trace(cov), 1e-300)


@FEW
@given(learner_cases(), st.integers(1, 8))
def test_outputs_finite(case, trial_steps):
    """Within sane parameter ranges, every value, error, variance and weight stays finite."""
    name, n, params, X, r = case
    learner = make_learner(name, n, **params)
    for result in run(learner, X, r, trial_steps):
        assert np.all(np.isfinite(result.values)) and np.all(np.isfinite(result.errors))
        if result.variances is not None:
            assert np.all(np.isfinite(result.variances)) and np.all(result.variances >= -1e-9)
    assert np.all(np.isfinite(learner.w))
    mean, var = learner.predict(X[0])
    assert np.isfinite(mean) and np.isfinite(var) and var >= -1e-9


@FEW
@given(learner_cases(max_steps=30))
def test_state_round_trip_exact(case):
    """from_state(state()) is bit for bit the same learner and then updates identically."""
    name, n, params, X, r = case
    half = len(X) // 2
    learner = make_learner(name, n, **params)
    run(learner, X[:half], r[:half], 4)
    copy = type(learner).from_state(learner.state())
    assert copy.params() == learner.params()
    for key, value in learner.state().items():
        assert np.array_equal(copy.state()[key], value)
    a = run(learner, X[half:], r[half:], 4)
    b = run(copy, X[half:], r[half:], 4)
    assert [x.errors.tolist() for x in a] == [x.errors.tolist() for x in b]
    assert np.array_equal(copy.w, learner.w)
    if learner.bayesian:
        assert np.array_equal(copy.cov, learner.cov)
