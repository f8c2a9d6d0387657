"""TD(λ): TD(0) identity, the random walk, and the dopamine-like error pattern."""

import numpy as np
import pytest

from rigloop.core.learners import TD


def csc_trial(cue_steps: int) -> np.ndarray:
    """Rows of one trial with complete-serial-compound features, built by hand: a pre-cue
    step (no feature on), then one one-hot feature per time step since cue onset."""
    return np.vstack([np.zeros(cue_steps), np.eye(cue_steps)])


@pytest.mark.parametrize("alpha", [0.1, [0.05, 0.1, 0.2, 0.3]])
def test_lambda_zero_is_td0_step_for_step(alpha):
    """With λ = 0, every step equals a hand-written TD(0) step bit for bit."""
    # Sutton & Barto (2018), Ch. 9: δ = r + γwᵀx' − wᵀx; w ← w + αδx [S]
    rng = np.random.default_rng(0)
    gamma, n = 0.9, 4
    td = TD(n, alpha=alpha, gamma=gamma, lam=0.0)
    a = np.asarray(alpha, dtype=float)
    w = np.zeros(n)
    for _ in range(300):
        x, x_next, r = rng.normal(size=n), rng.normal(size=n), float(rng.normal())
        if rng.random() < 0.2:
            x_next = np.zeros(n)
        delta = r + gamma * float(w @ x_next) - float(w @ x)
        w = w + a * delta * x
        assert td.update(x, x_next, r) == delta
        assert np.array_equal(td.w, w)


def test_trace_matches_hand_written_td_lambda():
    """z ← γλz + x, w ← w + αδz, with z reset at each trial start."""
    # Sutton & Barto (2018), Ch. 12, accumulating trace [S]
    rng = np.random.default_rng(1)
    n, alpha, gamma, lam = 3, 0.1, 0.95, 0.7
    td = TD(n, alpha=alpha, gamma=gamma, lam=lam)
    w = np.zeros(n)
    for _ in range(30):
        X, r = rng.normal(size=(5, n)), rng.normal(size=5)
        z = np.zeros(n)
        for t in range(5):
            x_next = X[t + 1] if t < 4 else np.zeros(n)
            delta = r[t] + gamma * w @ x_next - w @ X[t]
            z = gamma * lam * z + X[t]
            w = w + alpha * delta * z
        td.learn_trial(X, r)
        np.testing.assert_allclose(td.w, w, rtol=1e-12, atol=1e-14)


def test_learn_trial_resets_trace_and_update_does_not():
    """learn_trial starts each trial with z = 0; update keeps z until reset_trace()."""
    td = TD(2, alpha=0.1, gamma=0.9, lam=0.9)
    x = np.array([1.0, 0.0])
    td.update(x, x, 0.0)
    td.update(x, x, 0.0)
    assert td.z[0] == pytest.approx(1 + 0.81)
    td.reset_trace()
    assert not td.z.any()
    td.learn_trial(np.array([[0.0, 1.0]]), np.array([1.0]))
    np.testing.assert_array_equal(td.z, [0.0, 1.0])


@pytest.mark.parametrize("lam", [0.0, 0.6])
def test_random_walk_values(lam):
    """Five-state random walk, γ = 1: tabular TD values approach 1/6 … 5/6."""
    # Sutton & Barto (2018), Example 6.2 [S]; start at C, V initialised to 0.5 as there
    rng = np.random.default_rng(62)
    td = TD(5, alpha=0.01, gamma=1.0, lam=lam)
    td.w = np.full(5, 0.5)
    states = np.eye(5)
    history = []
    for episode in range(4000):
        s, visited = 2, [2]
        while True:
            s += 1 if rng.random() < 0.5 else -1
            if s < 0 or s > 4:
                break
            visited.append(s)
        r = np.zeros(len(visited))
        r[-1] = 1.0 if s > 4 else 0.0  # the exit transition is the trial's last step
        td.learn_trial(states[visited], r)
        if episode >= 3000:
            history.append(td.w.copy())
    np.testing.assert_allclose(np.mean(history, axis=0), np.arange(1, 6) / 6, atol=0.03)


@pytest.mark.parametrize("lam", [0.0, 0.5])
def test_prediction_error_moves_from_reward_to_cue_onset(lam):
    """Before learning the error is at the reward; after, at cue onset and ≈0 at the reward;
    an omitted reward gives a negative error at the time it was due."""
    # Schultz, Dayan & Montague (1997) Science 275:1593 [S]; CSC: Sutton & Barto Ch. 14 [M]
    K, gamma = 5, 0.9
    X = csc_trial(K)
    r = np.zeros(K + 1)
    r[K] = 1.0  # received on leaving the last cue step
    td = TD(K, alpha=0.3, gamma=gamma, lam=lam)
    first = td.learn_trial(X, r).errors
    np.testing.assert_array_equal(first, [0, 0, 0, 0, 0, 1])
    for _ in range(600):
        late = td.learn_trial(X, r).errors
    assert late[0] == pytest.approx(gamma**K, abs=1e-6)  # onset: pre-cue → first cue step
    assert abs(late[K]) < 1e-6
    omitted = td.learn_trial(X, np.zeros(K + 1)).errors
    assert omitted[K] == pytest.approx(-1.0, abs=1e-6)
    assert np.all(np.abs(omitted[1:K]) < 1e-6)


def test_csc_weights_approach_discounted_reward():
    """With reward on the last of T cue steps, cue weights approach γ^(T−1−j)."""
    # [C, methods.md §3]
    K, gamma = 6, 0.8
    X, r = csc_trial(K), np.zeros(K + 1)
    r[K] = 1.0
    td = TD(K, alpha=0.5, gamma=gamma, lam=0.0)
    for _ in range(500):
        td.learn_trial(X, r)
    np.testing.assert_allclose(td.w, gamma ** (K - 1 - np.arange(K)), atol=1e-8)


def test_learn_trial_reports_values_before_each_update():
    """TrialResult.values[t] is wᵀx_t just before step t; variances is None."""
    td = TD(2, alpha=0.5, gamma=1.0)
    td.w = [1.0, 2.0]
    out = td.learn_trial(np.array([[1.0, 0.0], [0.0, 1.0]]), np.array([0.0, 0.0]))
    # step 0: δ = 0 + 2 − 1 = 1, w0 ← 1.5; step 1 sees w1 = 2 (untouched by step 0)
    np.testing.assert_array_equal(out.values, [1.0, 2.0])
    np.testing.assert_array_equal(out.errors, [1.0, -2.0])
    assert out.variances is None
