"""Response-performance statistics agree with their published definitions and references."""

import json
import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import optimize, stats

from rigloop.core.performance import (
    BernoulliSPRT,
    LearningCurve,
    binomial_p_above,
    dprime,
    learning_trial,
    smooth,
    sprt_bounds,
)
from rigloop.errors import BadArgument


def logistic(a):
    return 1.0 / (1.0 + np.exp(-a))


# --------------------------------------------------------------------------- forward filter


def test_filter_mode_equals_numeric_maximum_of_the_log_posterior():
    """Each step's x is the mode of log p(y | x) + log N(x; x_prev, v_prev + sigma2), and its
    variance the inverse curvature there (Smith et al. 2004 filter; scipy.optimize as reference)."""
    chance, sigma2 = 0.5, 0.3
    mu = math.log(chance / (1 - chance))
    curve = LearningCurve(chance, sigma2, var0=0.7)
    for y in [1, 1, 0, 1, 1, 1, 0, 0, 1]:
        x_prev, v_pred = curve.x, curve.var + sigma2

        def neg_log_post(x, y=y, x_prev=x_prev, v_pred=v_pred):
            p = logistic(mu + x)
            return -(y * np.log(p) + (1 - y) * np.log1p(-p)) + (x - x_prev) ** 2 / (2 * v_pred)

        ref = optimize.minimize_scalar(neg_log_post, bracket=(x_prev - 3, x_prev + 3), tol=1e-12)
        curve.update(bool(y))
        assert curve.x == pytest.approx(ref.x, abs=1e-7)
        p = logistic(mu + curve.x)
        assert curve.var == pytest.approx(1 / (1 / v_pred + p * (1 - p)), rel=1e-12)


def test_all_correct_trials_drive_p_up_and_certainty_to_one():
    """With every trial correct, p rises monotonically and Pr(p > chance) -> 1 (over a
    session's worth of trials; see the ceiling test below for what happens much later)."""
    curve = LearningCurve(0.5, 0.01)
    ps = []
    for _ in range(100):
        curve.update(True)
        ps.append(curve.p())
    assert all(b > a for a, b in zip(ps, ps[1:], strict=False))
    assert ps[-1] > 0.95
    assert curve.prob_above_chance() > 0.99999
    lo, hi = curve.interval()
    assert 0.5 < curve.lower() < curve.p() < hi and lo < curve.lower()


def test_ceiling_all_correct_runs_lose_certainty_eventually():
    """A documented property of the model: at p near 1 a trial carries information p(1 - p) -> 0,
    so after thousands of all-correct trials var grows like n * sigma2 while x grows only like
    log n, and Pr(p > chance) drifts back down. p itself keeps rising."""
    curve = LearningCurve(0.5, 0.05)
    for _ in range(300):
        curve.update(True)
    early_certainty, early_p = curve.prob_above_chance(), curve.p()
    for _ in range(3000):
        curve.update(True)
    assert curve.p() > early_p and curve.var > 50 * 0.05
    assert curve.prob_above_chance() < early_certainty


def test_bounds_one_and_two_sided_use_the_stated_z():
    """One-sided 95% lower bound uses z = 1.645; two-sided uses 1.960 (methods.md section 5)."""
    curve = LearningCurve(0.25, 0.1)
    for y in [1, 0, 1, 1, 1, 0, 1]:
        curve.update(y)
    a, sd = curve.mu + curve.x, math.sqrt(curve.var)
    # z values from scipy.stats.norm.ppf as the reference
    assert curve.lower(0.95) == pytest.approx(logistic(a - stats.norm.ppf(0.95) * sd), rel=1e-12)
    z2 = stats.norm.ppf(0.975)
    assert curve.lower(0.95, one_sided=False) == pytest.approx(logistic(a - z2 * sd), rel=1e-12)
    assert curve.interval(0.95)[1] == pytest.approx(logistic(a + z2 * sd), rel=1e-12)
    assert curve.prob_above_chance() == pytest.approx(stats.norm.cdf(curve.x / sd), rel=1e-12)


def test_invalid_parameters_name_the_argument():
    """chance must be in (0, 1), sigma2 > 0, outcomes binary."""
    message = r"^'chance' must be a probability strictly between 0 and 1 \(got 1.0\)$"
    with pytest.raises(BadArgument, match=message):
        LearningCurve(1.0, 0.1)
    cases = [
        ({"chance": math.nan, "sigma2": 0.1}, "chance"),
        ({"chance": 0.5, "sigma2": 0.0}, "sigma2"),
        ({"chance": 0.5, "sigma2": 0.1, "var0": -1.0}, "var0"),
    ]
    for kwargs, name in cases:
        with pytest.raises(BadArgument) as info:
            LearningCurve(**kwargs)
        assert info.value.argument == name
    with pytest.raises(BadArgument, match="'correct'"):
        LearningCurve(0.5, 0.1).update(2)


# --------------------------------------------------------------------------- smoother


def test_smoother_equals_the_exact_gaussian_posterior_of_the_filters_pseudo_observations():
    """Brute force: each filter step equals a linear-Gaussian observation z_k of x_k with
    precision p(1-p); the joint Gaussian posterior of x_0..x_K (prior x_0 ~ N(0, var0),
    random-walk steps of variance sigma2), solved by dense linear algebra, has the same
    means and marginal variances as the RTS smoother (Rauch-Tung-Striebel; Smith et al. 2004)."""
    chance, sigma2, var0 = 0.5, 0.2, 0.4
    ys = [0, 1, 1, 0, 1, 1, 1]
    curve = LearningCurve(chance, sigma2, var0)
    obs_prec, obs_info = [], []
    for y in ys:
        x_pred, v_pred = curve.x, curve.var + sigma2
        curve.update(y)
        prec = 1 / curve.var - 1 / v_pred  # = p (1 - p)
        obs_prec.append(prec)
        obs_info.append(curve.x / curve.var - x_pred / v_pred)  # = prec * z_k
    K = len(ys)
    J = np.zeros((K + 1, K + 1))
    J[0, 0] = 1 / var0
    for k in range(1, K + 1):
        # (x_k - x_{k-1})^2 / sigma2
        J[k - 1 : k + 1, k - 1 : k + 1] += np.array([[1, -1], [-1, 1]]) / sigma2
        J[k, k] += obs_prec[k - 1]
    h = np.concatenate(([0.0], obs_info))
    cov = np.linalg.inv(J)
    s = smooth(ys, chance, sigma2, var0)
    np.testing.assert_allclose(s.x, (cov @ h)[1:], rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(s.var, np.diag(cov)[1:], rtol=1e-10)
    # the last smoothed state is the filtered one
    assert s.x[-1] == curve.x and s.var[-1] == curve.var


def _coverage(truth_fn, sigma2, seed, animals=200, K=100):
    rng = np.random.default_rng(seed)
    hits = []
    for _ in range(animals):
        truth = truth_fn(rng)
        ys = (rng.random(K) < truth).tolist()
        s = smooth(ys, 0.5, sigma2)
        hits.append(((s.lo <= truth) & (truth <= s.hi)).mean())
    return float(np.mean(hits))


def test_smoothed_band_covers_a_rising_true_curve_near_nominal():
    """200 simulated animals x 100 trials, true p rising from chance 0.5 to 0.9 along a logistic
    in trial number (midpoint 40, scale 8). sigma2 = 0.02 is fixed a priori: over the ~30-trial
    learning window a random walk then has sd sqrt(30 * 0.02) = 0.77, so +-2 sd spans the true rise
    in logit(p) of about 1.5. The band is Bayesian and the curve is not a random walk (and the
    filter is a Gaussian approximation), so coverage is near, not at, 95%: accept 85-99%
    (measured about 96%; Monte Carlo sd well under 1 point)."""
    k = np.arange(1, 101)
    truth = 0.5 + 0.4 / (1 + np.exp(-(k - 40) / 8))
    assert 0.85 <= _coverage(lambda rng: truth, 0.02, seed=20240501) <= 0.99


def test_smoothed_band_covers_model_generated_truth_near_nominal():
    """When the truth is drawn from the model itself (x_0 ~ N(0, sigma2), random walk with
    sigma2), the band is a posterior band and coverage is close to 95%; the Laplace
    approximation costs a little: accept 90-98% (measured about 94%)."""
    sigma2 = 0.02

    def truth(rng):
        sd = math.sqrt(sigma2)
        return logistic(rng.normal(0, sd) + np.cumsum(rng.normal(0, sd, 100)))

    assert 0.90 <= _coverage(truth, sigma2, seed=7) <= 0.98


def test_learning_trial_is_first_of_the_final_run_above_level():
    """The learning trial is the 1-based start of the last run where the smoothed
    Pr(p > chance) > 0.95 lasting to the end (Smith et al. 2004); None if the run is absent."""
    rng = np.random.default_rng(5)
    ys = (rng.random(30) < 0.5).tolist() + [True] * 30
    s = smooth(ys, 0.5, 0.05)
    above = s.prob_above_chance > 0.95
    expected = next(k + 1 for k in range(len(ys)) if above[k:].all())
    got = learning_trial(ys, 0.5, 0.05)
    assert got == expected and 25 < got < 45
    assert learning_trial([True, False] * 30, 0.5, 0.05) is None
    assert learning_trial(ys + [False] * 20, 0.5, 0.05) is None  # fell back: not learned at the end
    assert learning_trial([], 0.5, 0.05) is None


# --------------------------------------------------------------------------- binomial


def test_binomial_tail_matches_scipy_docs_example():
    """binomtest(3, 15, 0.1, 'greater').pvalue = 0.18406106910639114 (source: SciPy docs)."""
    assert binomial_p_above(3, 15, 0.1) == pytest.approx(0.18406106910639114, rel=1e-12)


@pytest.mark.parametrize(
    ("k", "n", "p"),
    [(0, 10, 0.5), (1, 1, 0.3), (7, 10, 0.5), (20, 20, 0.5), (13, 40, 0.25), (60, 100, 0.5),
     (95, 100, 0.5), (1, 500, 0.001), (2600, 5000, 0.5), (1100, 3000, 0.33)],
)  # fmt: skip
def test_binomial_tail_matches_scipy_binomtest(k, n, p):
    """P(X >= k) equals scipy.stats.binomtest(k, n, p, alternative='greater').pvalue."""
    ref = stats.binomtest(k, n, p, alternative="greater").pvalue
    assert binomial_p_above(k, n, p) == pytest.approx(ref, rel=1e-9, abs=1e-300)


def test_eight_of_last_ten_is_not_significant_against_chance():
    """P(X >= 8 | 10, 0.5) = (45 + 10 + 1) / 1024 = 0.0547 > 0.05; 9 of 10: 11 / 1024 < 0.05
    (methods.md section 6 [C])."""
    assert binomial_p_above(8, 10, 0.5) == pytest.approx(56 / 1024, rel=1e-14)
    assert binomial_p_above(8, 10, 0.5) > 0.05
    assert binomial_p_above(9, 10, 0.5) == pytest.approx(11 / 1024, rel=1e-14)


def test_binomial_edges():
    """k <= 0 is certain, k > n impossible; p0 of 0 or 1 are degenerate but defined."""
    assert binomial_p_above(0, 5, 0.3) == 1.0 and binomial_p_above(6, 5, 0.3) == 0.0
    assert binomial_p_above(1, 5, 0.0) == 0.0 and binomial_p_above(5, 5, 1.0) == 1.0
    with pytest.raises(BadArgument) as info:
        binomial_p_above(3, 10, 1.5)
    assert info.value.argument == "p0"


# --------------------------------------------------------------------------- d'


def test_dprime_uncorrected_matches_norm_ppf():
    """H = 30/40 = 0.75, F = 5/40 = 0.125: d' = z(H) - z(F), c = -(z(H) + z(F))/2
    (scipy.stats.norm.ppf as reference); symmetric rates 0.8/0.2 give c = 0."""
    zh, zf = stats.norm.ppf(0.75), stats.norm.ppf(0.125)
    d, c = dprime(30, 10, 5, 35, correction=None)
    assert d == pytest.approx(zh - zf, rel=1e-12) and c == pytest.approx(-(zh + zf) / 2, rel=1e-12)
    d, c = dprime(80, 20, 20, 80, correction=None)
    assert d == pytest.approx(2 * stats.norm.ppf(0.8), rel=1e-12)
    assert c == pytest.approx(0.0, abs=1e-12)


def test_dprime_loglinear_correction_by_hand():
    """Log-linear (Hautus 1995 [from memory]): 10 hits, 0 misses, 2 FA, 8 CR ->
    H = (10 + 0.5)/(10 + 1) = 10.5/11, F = (2 + 0.5)/(10 + 1) = 2.5/11."""
    zh, zf = stats.norm.ppf(10.5 / 11), stats.norm.ppf(2.5 / 11)
    d, c = dprime(10, 0, 2, 8)
    assert d == pytest.approx(zh - zf, rel=1e-12) and c == pytest.approx(-(zh + zf) / 2, rel=1e-12)


def test_dprime_uncorrected_perfect_rate_is_an_error():
    """Without correction a hit rate of 1 has an infinite z: refuse it, naming the count."""
    with pytest.raises(BadArgument, match=r"^'hits' must be a hit rate strictly between 0 and 1"):
        dprime(10, 0, 2, 8, correction=None)
    with pytest.raises(BadArgument) as info:
        dprime(10, 1, 2, 8, correction="probit")
    assert info.value.argument == "correction"


# --------------------------------------------------------------------------- SPRT


def test_sprt_bounds_are_walds():
    """ln A = ln((1 - beta)/alpha), ln B = ln(beta/(1 - alpha)) (Wald 1945 [from memory]):
    alpha = 0.05, beta = 0.2 -> ln 16 and ln(0.2/0.95)."""
    ln_b, ln_a = sprt_bounds(0.05, 0.2)
    assert ln_a == pytest.approx(math.log(16.0), rel=1e-15)
    assert ln_b == pytest.approx(math.log(0.2 / 0.95), rel=1e-15)
    with pytest.raises(BadArgument):
        sprt_bounds(0.6, 0.5)


def _run(test, p, rng, limit=2000):
    for _ in range(limit):
        verdict = test.update(bool(rng.random() < p))
        if verdict != "continue":
            return verdict
    return "continue"


def test_sprt_error_rates_near_alpha_and_beta():
    """2000 seeded runs each of p = p1 and p = p0 (p0 = 0.5, p1 = 0.8, alpha = 0.05, beta = 0.2).
    Wald's bounds make the true error rates at most about alpha/(1 - beta) = 0.0625 and
    beta/(1 - alpha) = 0.21 (Wald 1945 [from memory]); allow 3 Monte Carlo sd above those."""
    rng = np.random.default_rng(1945)
    test = BernoulliSPRT(0.5, 0.8, alpha=0.05, beta=0.2)
    under_h1 = []
    for _ in range(2000):
        test.reset()
        under_h1.append(_run(test, 0.8, rng))
    under_h0 = []
    for _ in range(2000):
        test.reset()
        under_h0.append(_run(test, 0.5, rng))
    miss = under_h1.count("accept_h0") / 2000
    false_alarm = under_h0.count("accept_h1") / 2000
    assert under_h1.count("accept_h1") / 2000 > 0.75
    assert miss < 0.21 + 3 * math.sqrt(0.21 * 0.79 / 2000)
    assert false_alarm < 0.0625 + 3 * math.sqrt(0.0625 * 0.9375 / 2000)
    assert "continue" not in under_h1 + under_h0


def test_sprt_llr_increments_verdict_sticks_and_state_round_trips():
    """A success adds ln(p1/p0), a failure ln((1-p1)/(1-p0)); after a verdict, updates change
    nothing until reset; state() survives JSON and continues identically."""
    test = BernoulliSPRT(0.5, 0.8)
    test.update(True)
    test.update(False)
    assert test.llr == pytest.approx(math.log(0.8 / 0.5) + math.log(0.2 / 0.5), rel=1e-15)
    copy = BernoulliSPRT.from_state(json.loads(json.dumps(test.state())))
    assert copy.state() == test.state()
    for _ in range(10):
        assert copy.update(True) == test.update(True)
    assert test.verdict == "accept_h1"
    n, llr = test.n, test.llr
    assert test.update(False) == "accept_h1" and (test.n, test.llr) == (n, llr)
    test.reset()
    assert (test.verdict, test.n, test.llr) == ("continue", 0, 0.0)
    with pytest.raises(BadArgument) as info:
        BernoulliSPRT(0.5, 0.5)
    assert info.value.argument == "p1"


# --------------------------------------------------------------------------- properties

outcome_lists = st.lists(st.booleans(), max_size=300)
chances = st.floats(0.05, 0.95)
sigma2s = st.floats(1e-4, 5.0)


@settings(max_examples=60, deadline=None)
@given(outcome_lists, chances, sigma2s, st.one_of(st.none(), st.floats(1e-4, 10.0)))
def test_filter_stays_finite_and_proper(ys, chance, sigma2, var0):
    """For any outcome sequence: var > 0 and finite, p in (0, 1), lo <= p <= hi."""
    curve = LearningCurve(chance, sigma2, var0)
    for y in ys:
        curve.update(y)
        assert math.isfinite(curve.x) and math.isfinite(curve.var) and curve.var > 0
        assert 0.0 < curve.p() < 1.0
        lo, hi = curve.interval()
        assert lo <= curve.p() <= hi
        assert 0.0 <= curve.prob_above_chance() <= 1.0
    assert curve.n == len(ys)


@settings(max_examples=40, deadline=None)
@given(outcome_lists, outcome_lists, chances, sigma2s)
def test_state_round_trip_is_exact(before, after, chance, sigma2):
    """from_state(state()) through JSON continues bit for bit like the original."""
    curve = LearningCurve(chance, sigma2)
    for y in before:
        curve.update(y)
    state = curve.state()
    assert all(type(v) in (float, int) for v in state.values())
    copy = LearningCurve.from_state(json.loads(json.dumps(state)))
    assert copy.state() == state
    for y in after:
        curve.update(y)
        copy.update(y)
    assert copy.state() == curve.state()


@settings(max_examples=40, deadline=None)
@given(outcome_lists.filter(len), chances, sigma2s)
def test_smoother_never_less_certain_than_the_filter(ys, chance, sigma2):
    """Later trials can only shrink the variance: var_{k|K} <= var_{k|k}; bands are ordered."""
    curve = LearningCurve(chance, sigma2)
    filtered = []
    for y in ys:
        curve.update(y)
        filtered.append(curve.var)
    s = smooth(ys, chance, sigma2)
    assert (s.var <= np.array(filtered) * (1 + 1e-12)).all() and (s.var > 0).all()
    assert (s.lo <= s.p).all() and (s.p <= s.hi).all()
    assert np.isfinite(s.x).all()
    assert ((0 <= s.prob_above_chance) & (s.prob_above_chance <= 1)).all()


@pytest.mark.parametrize(
    "key, value, argument",
    [("x", float("nan"), "state.x"), ("var", 0.0, "state.var"), ("var", -1.0, "state.var"),
     ("n", -1, "state.n"), ("n", 1.0, "state.n"), ("n", True, "state.n"), ("x", "1", "state.x"),
     ("x", True, "state.x"), ("chance", 1.0, "chance"), ("sigma2", float("inf"), "sigma2")],
)
def test_curve_state_checks_name_the_bad_entry(key, value, argument):
    """from_state checks every entry, whatever its type (fast path for plain floats included)."""
    state = {**LearningCurve(0.5, 0.05).state(), key: value}
    with pytest.raises(BadArgument) as info:
        LearningCurve.from_state(state)
    assert info.value.argument == argument


def test_credible_levels_give_the_normal_quantiles():
    """The cached quantiles are Phi^-1 of the level (one-sided) and of (1 + level)/2."""
    from statistics import NormalDist

    from rigloop.core.performance import _logistic

    c = LearningCurve(0.5, 0.05)
    c.update(True)
    for level in (0.5, 0.9, 0.95, 0.99, 0.95):
        z1, z2 = NormalDist().inv_cdf(level), NormalDist().inv_cdf(0.5 + level / 2.0)
        assert c.lower(level) == _logistic(c.mu + c.x - z1 * c.sd)
        assert c.interval(level) == (_logistic(c.mu + c.x - z2 * c.sd), _logistic(c.mu + c.x + z2 * c.sd))


def test_curve_from_plain_state_equals_the_checked_path():
    """from_state of a plain dict (one combined test) gives what the checked path gives
    (reached here through a read-only mapping), values and errors alike."""
    from types import MappingProxyType

    good = LearningCurve(0.5, 0.05)
    for y in (1, 1, 0, 1):
        good.update(y)
    base = good.state()
    variants = [{}, {"chance": 0.25}, {"n": 0}, {"x": -0.0}, {"chance": 1}, {"x": math.nan}, {"var": -1.0},
                {"var": math.inf}, {"n": True}, {"n": -1}, {"sigma2": np.float64(0.05)}, {"chance": 1.0},
                {"var0": 0.0}, {"n": np.int64(3)}, {"x": 3}]
    swapped = {k: v for k, v in base.items() if k != "x"} | {"y": 0.0}  # six keys, one wrong
    for change in [*variants, None]:
        d = {**base, **change} if change is not None else swapped
        outcomes = []
        for arg in (d, MappingProxyType(d)):
            try:
                c = LearningCurve.from_state(arg)
                outcomes.append(("ok", repr((c.chance, c.sigma2, c.var0, c.mu, c.x, c.var, c.n)),
                                 tuple(type(v) for v in (c.chance, c.x, c.var, c.n))))
            except BadArgument as err:
                outcomes.append(("error", str(err)))
        assert outcomes[0] == outcomes[1], change
