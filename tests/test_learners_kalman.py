"""The Kalman filter of conditioning: its phenomena, its steady state, and filterpy agreement."""

import math

import numpy as np
import pytest
from filterpy.kalman import KalmanFilter as ReferenceFilter
from scipy.linalg import solve_discrete_are

from rigloop.core.learners import KalmanFilter, kalman_correct, kalman_predict

A, B = np.array([1.0, 0.0]), np.array([0.0, 1.0])
AB = A + B


def reference(n, diffusion, noise, prior_var):
    """filterpy's KalmanFilter set up as the conditioning model: F = I, Q = τ²I, R = σ_r²."""
    kf = ReferenceFilter(dim_x=n, dim_z=1)
    kf.x = np.zeros((n, 1))
    kf.P = np.eye(n) * prior_var
    kf.F = np.eye(n)
    kf.Q = np.eye(n) * diffusion
    kf.R = np.array([[noise]])
    return kf


def test_first_observation_diffuses_then_corrects():
    """The very first update uses Σ⁻ = cI + τ²I (predict, then correct; methods.md §2)."""
    c, tau2, noise = 1.0, 0.5, 2.0
    kf = KalmanFilter(1, diffusion=tau2, noise=noise, prior_var=c)
    kf.update(np.ones(1), 1.0)
    prior = c + tau2
    assert kf.w[0] == pytest.approx(prior / (prior + noise))
    assert kf.cov[0, 0] == pytest.approx(prior - prior**2 / (prior + noise))


def test_backward_blocking():
    """After AB+, A+ trials lower w_B although B is absent (negative covariance)."""
    # Dayan & Kakade (2001) [M]; Gershman (2015) PLoS Comput Biol 11:e1004567 [S]
    kf = KalmanFilter(2, diffusion=0.01, noise=0.5, prior_var=1.0)
    for _ in range(10):
        kf.update(AB, 1.0)
    assert kf.cov[0, 1] < 0
    w_b = kf.w[1]
    for _ in range(10):
        kf.update(A, 1.0)
    assert kf.w[1] < w_b - 0.05


def test_latent_inhibition():
    """Non-reinforced pre-exposure keeps the mean at 0 but shrinks the first conditioning gain."""
    # Gershman (2015) [S]; mechanism as stated in methods.md §2
    params = dict(diffusion=0.01, noise=0.5, prior_var=1.0)
    exposed, naive = KalmanFilter(1, **params), KalmanFilter(1, **params)
    x = np.ones(1)
    for _ in range(20):
        exposed.update(x, 0.0)
    assert exposed.w[0] == 0.0
    assert exposed.cov[0, 0] < naive.cov[0, 0]
    exposed.update(x, 1.0)
    naive.update(x, 1.0)
    assert 0 < exposed.w[0] < 0.5 * naive.w[0]


def test_single_cue_steady_state_matches_riccati():
    """A single cue reaches P⁻ = solve_discrete_are(Fᵀ, Hᵀ, Q, R) = (q + √(q² + 4qs))/2."""
    # scipy.linalg.solve_discrete_are docs (control form; a = Fᵀ, b = Hᵀ gives the
    # a-priori covariance) [S]; scalar closed form [C, methods.md §2]
    q, s = 0.05, 0.8
    kf = KalmanFilter(1, diffusion=q, noise=s, prior_var=3.0)
    rng = np.random.default_rng(3)
    for r in rng.normal(size=400):
        kf.update(np.ones(1), float(r))
    prior = kf.cov[0, 0] + q  # the a-priori covariance of the next observation
    dare = solve_discrete_are(np.eye(1), np.eye(1), q * np.eye(1), s * np.eye(1))
    assert prior == pytest.approx(dare[0, 0], rel=1e-12)
    assert prior == pytest.approx((q + math.sqrt(q * q + 4 * q * s)) / 2, rel=1e-12)
    # in steady state the filter is the delta rule with rate K∞ = P⁻/(P⁻ + s)
    w0 = kf.w[0]
    delta = kf.update(np.ones(1), 1.0)
    assert kf.w[0] - w0 == pytest.approx(prior / (prior + s) * delta, rel=1e-12)


def test_cycling_cues_steady_state_matches_riccati():
    """Identity rows cycling through n cues: each cue diffuses n times per observation, so
    just before its observation its variance is the Riccati solution with q = nτ²."""
    # scipy.linalg.solve_discrete_are docs [S]; reduction to one cue per cycle [C]
    n, tau2, s = 3, 0.02, 0.5
    kf = KalmanFilter(n, diffusion=tau2, noise=s, prior_var=1.0)
    rows = np.eye(n)
    for t in range(300 * n):
        kf.update(rows[t % n], 0.0)
    dare = solve_discrete_are(np.eye(1), np.eye(1), n * tau2 * np.eye(1), s * np.eye(1))
    for i in range(n):  # the next cue observed is i; cue i has diffused n − 1 times since
        assert kf.cov[i, i] + tau2 == pytest.approx(dare[0, 0], rel=1e-10)
        kf.update(rows[i], 0.0)
    assert np.array_equal(kf.cov, np.diag(np.diagonal(kf.cov)))  # cues stay independent


@pytest.mark.parametrize("seed", range(4))
def test_equals_filterpy_on_random_sequences(seed):
    """Step for step, w, Σ and δ equal filterpy's predict + update to 1e-10."""
    # filterpy.kalman.KalmanFilter as a reference implementation (F = I, Q = τ²I, R = σ_r²)
    rng = np.random.default_rng(seed)
    n = int(rng.integers(1, 8))
    params = dict(diffusion=float(rng.uniform(0, 0.2)), noise=float(rng.uniform(0.1, 2)),
                  prior_var=float(rng.uniform(0.1, 5)))
    ours, ref = KalmanFilter(n, **params), reference(n, **params)
    binary = seed % 2 == 0
    for _ in range(300):
        x = (rng.random(n) < 0.4).astype(float) if binary else rng.normal(size=n)
        r = float(rng.normal())
        delta = ours.update(x, r)
        ref.predict()
        ref.update(r, H=x.reshape(1, n))
        assert delta == pytest.approx(float(ref.y[0, 0]), abs=1e-10)
        np.testing.assert_allclose(ours.w, ref.x[:, 0], rtol=0, atol=1e-10)
        np.testing.assert_allclose(ours.cov, ref.P, rtol=0, atol=1e-10)


def test_zero_diffusion_is_bayesian_linear_regression():
    """τ² = 0: the posterior is Σ_N = (I/c + XᵀX/σ²)⁻¹, μ_N = Σ_N Xᵀr/σ²."""
    # conjugate Gaussian linear regression [C, methods.md §2]
    rng = np.random.default_rng(11)
    n, c, noise = 4, 2.0, 0.3
    X = (rng.random((40, n)) < 0.5).astype(float)
    r = rng.normal(size=40)
    kf = KalmanFilter(n, diffusion=0.0, noise=noise, prior_var=c)
    kf.learn_trial(X, r)
    cov = np.linalg.inv(np.eye(n) / c + X.T @ X / noise)
    np.testing.assert_allclose(kf.cov, cov, rtol=0, atol=1e-10)
    np.testing.assert_allclose(kf.w, cov @ X.T @ r / noise, rtol=0, atol=1e-10)


def test_class_equals_procedural_functions():
    """The in-place learner equals kalman_predict + kalman_correct (the readable form)."""
    rng = np.random.default_rng(5)
    n, tau2, noise = 5, 0.05, 0.7
    kf = KalmanFilter(n, diffusion=tau2, noise=noise, prior_var=1.5)
    w, P = np.zeros(n), 1.5 * np.eye(n)
    for _ in range(200):
        x, r = rng.normal(size=n), float(rng.normal())
        delta = kf.update(x, r)
        w, P, d, _ = kalman_correct(w, kalman_predict(P, tau2), x, r, noise)
        assert delta == pytest.approx(d, abs=1e-12)
    np.testing.assert_allclose(kf.w, w, rtol=0, atol=1e-12)
    np.testing.assert_allclose(kf.cov, P, rtol=0, atol=1e-12)


def test_covariance_exactly_symmetric():
    """The symmetric rank-1 form keeps Σ = Σᵀ bit for bit."""
    rng = np.random.default_rng(8)
    kf = KalmanFilter(6, diffusion=0.01, noise=0.5, prior_var=1.0)
    for _ in range(500):
        kf.update(rng.normal(size=6), float(rng.normal()))
    assert np.array_equal(kf.cov, kf.cov.T)


def test_predict_gives_mean_and_variance():
    """predict(x) = (xᵀŵ, xᵀΣx)."""
    kf = KalmanFilter(2, diffusion=0.0, noise=1.0, prior_var=2.0)
    kf.update(A, 1.0)
    mean, var = kf.predict(AB)
    assert mean == pytest.approx(kf.w.sum())
    assert var == pytest.approx(kf.cov.sum())
