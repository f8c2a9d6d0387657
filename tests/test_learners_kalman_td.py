"""Kalman TD: exact Bayesian regression on h = x − γx', the sign of h, filterpy agreement."""

import numpy as np
import pytest
from filterpy.kalman import KalmanFilter as ReferenceFilter

from rigloop.core.learners import KalmanFilter, KalmanTD
from rigloop.errors import BadArgument


def trial_rows(X: np.ndarray, gamma: float) -> np.ndarray:
    """h_t = x_t − γx_{t+1} for one trial, the row after the last being terminal (zero)."""
    X_next = np.vstack([X[1:], np.zeros((1, X.shape[1]))])
    return X - gamma * X_next


def test_zero_diffusion_is_bayesian_regression_on_h():
    """τ² = 0: Σ_N = (I/c + HᵀH/σ²)⁻¹ and μ_N = Σ_N Hᵀr/σ² over all steps, to 1e-10."""
    # Geist & Pietquin (2010) JAIR 39:483 [S abstract]; batch oracle [C, methods.md §4]
    rng = np.random.default_rng(4)
    n, gamma, c, noise = 5, 0.9, 1.5, 0.4
    ktd = KalmanTD(n, gamma=gamma, diffusion=0.0, noise=noise, prior_var=c)
    H, R = [], []
    for _ in range(12):
        T = int(rng.integers(1, 7))
        X = (rng.random((T, n)) < 0.4).astype(float)
        r = np.where(rng.random(T) < 0.3, 1.0, 0.0)
        ktd.learn_trial(X, r)
        # learn_trial skips steps out of a featureless row (module docstring)
        keep = X.any(axis=1)
        H.append(trial_rows(X, gamma)[keep])
        R.append(r[keep])
    H, R = np.vstack(H), np.concatenate(R)
    cov = np.linalg.inv(np.eye(n) / c + H.T @ H / noise)
    np.testing.assert_allclose(ktd.cov, cov, rtol=0, atol=1e-10)
    np.testing.assert_allclose(ktd.w, cov @ H.T @ R / noise, rtol=0, atol=1e-10)


def test_cue_followed_by_reward_learns_positive_value():
    """h = x − γx' (this sign): a cue that leads to reward gets positive value, and an
    earlier cue in the chain gets γ times the later one."""
    # methods.md §4: a flipped sign would learn −V
    ktd = KalmanTD(1, gamma=0.9, diffusion=0.0, noise=0.1, prior_var=10.0)
    for _ in range(50):
        ktd.learn_trial(np.ones((1, 1)), np.ones(1))
    assert ktd.w[0] == pytest.approx(1.0, abs=0.01)

    chain = KalmanTD(2, gamma=0.9, diffusion=0.001, noise=0.1, prior_var=10.0)
    for _ in range(200):
        chain.learn_trial(np.eye(2), np.array([0.0, 1.0]))
    assert chain.w[1] == pytest.approx(1.0, abs=0.01)
    assert chain.w[0] == pytest.approx(0.9 * chain.w[1], abs=0.01)


def test_error_is_td_error():
    """update returns δ = r + γ ŵᵀx' − ŵᵀx with the weights before the update."""
    ktd = KalmanTD(2, gamma=0.5)
    ktd.w = [1.0, 4.0]
    assert ktd.update(np.array([1.0, 0.0]), np.array([0.0, 1.0]), 0.5) == pytest.approx(1.5)


def test_credits_earlier_cue_on_first_trial():
    """Unlike TD(0), Kalman TD credits the earlier cue already on the first rewarded trial."""
    # Gershman (2015) [S]; [C, methods.md §4]
    X, r = np.eye(2), np.array([0.0, 1.0])
    ktd = KalmanTD(2, gamma=0.9, diffusion=0.01, noise=0.5, prior_var=1.0)
    ktd.learn_trial(X, r)
    assert ktd.w[0] > 0 and ktd.w[1] > 0


@pytest.mark.parametrize("seed", range(4))
def test_equals_filterpy_fed_h_rows(seed):
    """Step for step, ŵ and Σ equal filterpy's predict + update on rows h to 1e-10."""
    # filterpy.kalman.KalmanFilter as a reference implementation (F = I, Q = τ²I, R = σ_r²)
    rng = np.random.default_rng(100 + seed)
    n = int(rng.integers(1, 9))
    gamma, tau2 = float(rng.uniform(0, 1)), float(rng.uniform(0, 0.1))
    noise, c = float(rng.uniform(0.1, 2)), float(rng.uniform(0.5, 3))
    ours = KalmanTD(n, gamma=gamma, diffusion=tau2, noise=noise, prior_var=c)
    ref = ReferenceFilter(dim_x=n, dim_z=1)
    ref.x, ref.P, ref.F = np.zeros((n, 1)), np.eye(n) * c, np.eye(n)
    ref.Q, ref.R = np.eye(n) * tau2, np.array([[noise]])
    x = (rng.random(n) < 0.4).astype(float)
    for t in range(300):
        x_next = np.zeros(n) if t % 7 == 6 else (rng.random(n) < 0.4).astype(float)
        r = float(rng.random() < 0.3)
        delta = ours.update(x, x_next, r)
        ref.predict()
        ref.update(r, H=(x - gamma * x_next).reshape(1, n))
        assert delta == pytest.approx(float(ref.y[0, 0]), abs=1e-10)
        np.testing.assert_allclose(ours.w, ref.x[:, 0], rtol=0, atol=1e-10)
        np.testing.assert_allclose(ours.cov, ref.P, rtol=0, atol=1e-10)
        x = x_next if x_next.any() else (rng.random(n) < 0.4).astype(float)


def test_gamma_zero_is_the_kalman_filter():
    """With γ = 0, h = x and Kalman TD is the Kalman filter of immediate reward, exactly."""
    rng = np.random.default_rng(9)
    params = dict(diffusion=0.02, noise=0.6, prior_var=1.2)
    ktd, kf = KalmanTD(3, gamma=0.0, **params), KalmanFilter(3, **params)
    for _ in range(100):
        x, x_next, r = rng.normal(size=3), rng.normal(size=3), float(rng.normal())
        assert ktd.update(x, x_next, r) == kf.update(x, r)
    assert np.array_equal(ktd.w, kf.w) and np.array_equal(ktd.cov, kf.cov)


def test_trial_result_values_and_variances():
    """values[t], variances[t] equal predict(x_t) just before step t (Σ before diffusion)."""
    rng = np.random.default_rng(2)
    X, r = rng.normal(size=(4, 3)), rng.normal(size=4)
    a = KalmanTD(3, gamma=0.8, diffusion=0.05, noise=0.5, prior_var=1.0)
    b = KalmanTD.from_state(a.state())
    out = a.learn_trial(X, r)
    for t in range(4):
        mean, var = b.predict(X[t])
        assert out.values[t] == mean
        assert out.variances[t] == pytest.approx(var, rel=1e-14)
        x_next = X[t + 1] if t < 3 else np.zeros(3)
        assert out.errors[t] == b.update(X[t], x_next, float(r[t]))
    assert np.array_equal(a.w, b.w) and np.array_equal(a.cov, b.cov)


def test_featureless_pre_cue_rows_do_not_drag_cue_values():
    """A trial that starts with empty (pre-cue) rows learns the same cue weights as one
    that starts at the cue: the unpredictable ITI -> cue transition is not evidence
    that the cue is worth nothing. Target weights gamma**(L-1-j) for a cue on L bins
    with reward on leaving its last bin (methods.md §3 [C])."""
    import numpy as np

    from rigloop.core.learners import KalmanTD

    L, gamma, pre = 5, 0.9, 3
    cue = np.eye(L)
    with_pre = np.vstack([np.zeros((pre, L)), cue])
    r_cue = np.zeros(L)
    r_cue[-1] = 1.0
    r_pre = np.concatenate([np.zeros(pre), r_cue])
    a = KalmanTD(L, gamma=gamma, diffusion=0.0, noise=0.1, prior_var=10.0)
    b = KalmanTD(L, gamma=gamma, diffusion=0.0, noise=0.1, prior_var=10.0)
    for _ in range(300):
        a.learn_trial(with_pre, r_pre)
        res = b.learn_trial(cue, r_cue)
    np.testing.assert_allclose(a.w, b.w, rtol=0, atol=1e-12)
    np.testing.assert_allclose(a.w, gamma ** np.arange(L - 1, -1, -1), atol=0.02)
    out = a.learn_trial(with_pre, r_pre)
    # the error on entering the cue is gamma * V(onset) (Schultz, Dayan & Montague 1997)
    assert out.errors[pre - 1] == pytest.approx(gamma * a.w[0], rel=1e-3)
    assert res.errors[-1] == pytest.approx(0.0, abs=0.05)


def _reference_trial(learner, X, r):
    """learn_trial written out row by row: every product computed, featureless rows included."""
    T, n = X.shape
    values, errors, variances = np.empty(T), np.empty(T), np.empty(T)
    for t in range(T):
        x = X[t]
        x_next = X[t + 1] if t + 1 < T else np.zeros(n)
        values[t] = x @ learner.w
        variances[t] = x @ learner.cov.dot(x)
        if not x.any():
            errors[t] = float(r[t]) + learner.gamma * float(x_next @ learner.w)
        else:
            errors[t] = learner.update(x, x_next, float(r[t]))
    return values, errors, variances


@pytest.mark.parametrize("scale", [1.0, 1e300])
def test_featureless_rows_report_exact_zeros_even_for_extreme_states(scale):
    """Featureless rows skip their products only while the state is finite: learn_trial
    equals the row-by-row computation bit for bit, also when the state overflows."""
    rng = np.random.default_rng(4)
    with np.errstate(all="ignore"):
        for _ in range(200):
            n, T = int(rng.integers(1, 5)), int(rng.integers(1, 7))
            a = KalmanTD(n, gamma=0.9, diffusion=0.01, noise=0.2, prior_var=1.0)
            B = rng.normal(size=(n, n))
            a.cov = B @ B.T * scale  # a covariance; huge ones overflow within the trial
            a.w = rng.normal(size=n) * scale
            b = a.copy()
            X = np.where(rng.random((T, n)) < 0.5, 1.0, 0.0)
            X[rng.random(T) < 0.5] = 0.0
            r = rng.normal(size=T)
            try:
                expected = _reference_trial(b, X, r)
            except (BadArgument, ValueError) as err:  # a non-finite error, or sqrt of an overflowed s
                with pytest.raises(type(err)):
                    a.learn_trial(X, r)
                continue
            got = a.learn_trial(X, r)
            for x, y in zip((got.values, got.errors, got.variances), expected):
                assert x.tobytes() == y.tobytes()
            assert a._A.tobytes() == b._A.tobytes()


def test_rows_kept_only_when_they_cannot_change():
    """A read-only view of a writable array is not kept by identity: after its base
    changes, learning follows the new rows."""
    base = np.eye(3)
    X = base.view()
    X.setflags(write=False)
    a, b = KalmanTD(3), KalmanTD(3)
    a.learn_trial(X, np.ones(3))
    base[0] = [0.0, 1.0, 1.0]
    got = a.copy()._learn(X, np.ones(3))
    b.learn_trial(np.eye(3), np.ones(3))
    want = b._learn(base.copy(), np.ones(3))
    assert got.values.tobytes() == want.values.tobytes()
    assert got.errors.tobytes() == want.errors.tobytes()


def test_finite_pass_equals_the_full_products():
    """On finite states (signed zeros, tiny and huge entries, zero variances included),
    the pass that skips featureless rows and reads one-hot rows as ŵ_i and Σ_ii gives
    what computing every product gives, bit for bit."""
    from rigloop.core.learners.kalman_td import _rows_of

    rng = np.random.default_rng(17)
    n = 6
    for _ in range(300):
        T = int(rng.integers(1, 7))
        X = np.zeros((T, n))
        for t in range(T):
            kind = rng.integers(4)
            if kind == 1:
                X[t, rng.integers(n)] = 1.0
            elif kind == 2:
                X[t] = rng.random(n) < 0.4
            elif kind == 3:
                X[t, rng.integers(n)] = rng.choice([1.0, 0.5, -1.0])
        r = rng.choice([0.0, 1.0, -0.5], size=T)
        a = KalmanTD(n, gamma=0.9, diffusion=float(rng.choice([0.0, 0.01])), noise=0.3)
        a._w[...] = rng.choice([0.0, -0.0, 1e-310, -2.5, 1e200, 0.3], size=n)
        a._P[...] = np.diag(rng.choice([0.0, -0.0, 1e-310, 0.7, 1e150], size=n))
        b = a.copy()
        rows = _rows_of(X, a._gamma)
        outcomes = []
        for learner, finite in ((a, True), (b, False)):
            try:
                with np.errstate(all="ignore"):
                    outcomes.append(learner._trial(rows, r, finite=finite))
            except (ValueError, ArithmeticError) as err:
                outcomes.append(type(err))
        got, want = outcomes
        if not isinstance(want, type(got)) or not isinstance(got, type(want)):
            assert got == want  # the same error, or a result both ways
        if isinstance(got, type) or not (np.isfinite(a._A).all() and np.isfinite(b._A).all()):
            continue  # _learn takes the full pass after a non-finite one
        for x, y in ((got.values, want.values), (got.errors, want.errors), (got.variances, want.variances)):
            assert x.tobytes() == y.tobytes()
        assert a._A.tobytes() == b._A.tobytes()
