"""The animal's own behaviour per cue (rigloop.behaviour) against independent references:
the forward filter of Smith et al. 2004 written out here, scipy.stats quantiles, and
Monte Carlo over the estimates' posteriors."""

import math

import msgpack
import numpy as np
import pytest
from scipy import optimize, special, stats

from rigloop import CuePresentation, Outcome, Response, TrialEvent
from rigloop.core import behaviour as B
from rigloop.errors import BadArgument

MC_DRAWS = 1_000_000


# --------------------------------------------------------------------------- references


def smith_filter_step(x_prev, v_prev, y, sigma2):
    """One step of the forward filter of Smith, Frank, Wirth et al. 2004 (J Neurosci 24:447;
    methods.md section 5), chance 1/2 so mu = 0, written independently of rigloop:
    predict v_pred = v_prev + sigma2; the mode solves x = x_prev + v_pred (y - logistic(x))
    (by scipy.optimize.brentq); the variance is 1 / (1/v_pred + p (1 - p)) at the mode."""
    v_pred = v_prev + sigma2

    def f(x):
        return x - x_prev - v_pred * (y - special.expit(x))

    # f(x_prev - v_pred) <= 0 <= f(x_prev + v_pred) because 0 < logistic < 1
    x = optimize.brentq(f, x_prev - v_pred - 1.0, x_prev + v_pred + 1.0, xtol=1e-15, rtol=4 * np.finfo(float).eps,
                        maxiter=500)
    p = special.expit(x)
    return x, 1.0 / (1.0 / v_pred + p * (1.0 - p))


def filter_states(responses, sigma2, prior_var=B.DEFAULT_PRIOR_VAR):
    """The predictive (mean, variance) on the next trial after a response stream, by rigloop's filter."""
    est = B.CueEstimate.prior(prior_var)
    for y in responses:
        est = est.updated(bool(y), sigma2)
    return est.predictive(sigma2)


def _probit_of_logit(a):
    # Phi^-1(logistic(a)) with scipy; logistic kept inside (0, 1) as rigloop keeps it
    return stats.norm.ppf(np.clip(special.expit(a), 1e-15, 1 - 1e-15))


# Predictive states the filter reaches from fixed streams: a go cue answered on 19 of every
# 20 trials, a no-go cue on 1 of 20 (n trials each), with forgetting sigma2 per cue trial.
_GO_STREAM = [k % 20 != 0 for k in range(100)]
_NOGO_STREAM = [k % 20 == 0 for k in range(100)]


def trained(n, sigma2):
    """(go mean, var, no-go mean, var) after n trials of each stream."""
    return (*filter_states(_GO_STREAM[:n], sigma2), *filter_states(_NOGO_STREAM[:n], sigma2))


UNSEEN = (0.0, B.DEFAULT_PRIOR_VAR + B.DEFAULT_SIGMA2)  # a cue before its first trial


# --------------------------------------------------------------------------- one cue


@pytest.mark.parametrize("sigma2, prior_var, p_true, seed", [
    (0.08, 2.0, 0.5, 1), (0.2, 2.0, 0.9, 2), (0.02, 1.0, 0.1, 3), (1.5, 5.0, 0.7, 4), (0.001, 0.5, 0.97, 5),
])
def test_filter_step_equals_an_independent_smith_filter(sigma2, prior_var, p_true, seed):
    """Every step of CueEstimate.updated equals the reference forward filter (Smith et al.
    2004, mode by brentq on the implicit equation) to 1e-10, on random response streams."""
    rng = np.random.default_rng(seed)
    est = B.CueEstimate.prior(prior_var)
    x, v = 0.0, prior_var
    for k, y in enumerate(rng.random(200) < p_true):
        est = est.updated(bool(y), sigma2)
        x, v = smith_filter_step(x, v, float(y), sigma2)
        assert est.n == k + 1
        assert est.x == pytest.approx(x, abs=1e-10)
        assert est.var == pytest.approx(v, abs=1e-10)


def test_prior_and_predictive_variance():
    """A cue's prior is N(0, prior_var) after 0 trials; the next trial's predictive state is
    N(x, var + sigma2) (the random walk adds sigma2 between two trials of the cue)."""
    est = B.CueEstimate.prior(2.0)
    assert est.as_tuple() == (0.0, 2.0, 0)
    assert est.predictive(0.08) == (0.0, 2.08)
    est = est.updated(True, 0.08).updated(False, 0.08).updated(True, 0.08)
    mean, var = est.predictive(0.3)
    assert (mean, var) == (est.x, est.var + 0.3)


def test_a_response_raises_and_a_withhold_lowers_the_estimate():
    est = B.CueEstimate(0.4, 0.5, 7)
    assert est.updated(True, 0.1).x > 0.4 > est.updated(False, 0.1).x
    assert est.updated(True, 0.1).var < 0.5 + 0.1  # one more trial's information


@pytest.mark.parametrize("mean, var, level", [
    (0.0, 2.08, 0.95), (1.3, 0.4, 0.95), (-2.5, 0.05, 0.9), (4.0, 3.0, 0.5), (0.2, 1e-6, 0.99),
])
def test_band_is_logistic_of_the_normal_quantiles(mean, var, level):
    """band = logistic(mean -/+ Phi^-1((1 + level)/2) sqrt(var)), Phi^-1 by scipy.stats.norm.ppf."""
    z = stats.norm.ppf(0.5 + level / 2)
    lo, hi = B.band(mean, var, level)
    assert lo == pytest.approx(special.expit(mean - z * math.sqrt(var)), rel=1e-12, abs=1e-15)
    assert hi == pytest.approx(special.expit(mean + z * math.sqrt(var)), rel=1e-12, abs=1e-15)


def test_logistic_is_scipy_expit_without_overflow():
    for a in (-800.0, -40.0, -1.5, 0.0, 2.0, 40.0, 800.0):
        assert B.logistic(a) == pytest.approx(special.expit(a), rel=1e-14, abs=1e-300)


# --------------------------------------------------------------------------- two cues


@pytest.mark.parametrize("ma, va, mb, vb", [
    (1.5, 0.3, -1.5, 0.3), (0.0, 2.08, 0.0, 2.08), (-1.0, 1.0, 1.0, 1.0), (4.0, 1.0, -4.0, 1.0), (0.3, 1e-4, 0.2, 1e-4),
])
def test_p_difference_above_margin_zero_is_the_normal_cdf(ma, va, mb, vb):
    """At margin 0, P(logistic(A) > logistic(B)) = P(A > B) = Phi((ma - mb)/sqrt(va + vb))
    (logistic is increasing; scipy.stats.norm.cdf as reference)."""
    ref = stats.norm.cdf((ma - mb) / math.sqrt(va + vb))
    assert B.p_difference_above(ma, va, mb, vb) == pytest.approx(ref, rel=1e-12, abs=1e-15)
    assert B.p_difference_above(ma, va, mb, vb, 0.0) == pytest.approx(ref, rel=1e-12, abs=1e-15)


P_DIFF_SETTINGS = {
    "well apart": (1.5, 0.3, -1.5, 0.3),
    "moderate": (2.0, 1.0, -0.5, 0.5),
    "two unseen cues": (*UNSEEN, *UNSEEN),
    "narrow and close": (0.5, 0.05, 0.2, 0.05),
    "reversed": (-1.0, 1.0, 1.0, 1.0),
    "extreme means": (4.0, 1.0, -4.0, 1.0),
    "go vs no-go, 20 trials, sigma2 0.08": trained(20, 0.08),
    "go vs no-go, 100 trials, sigma2 0.08": trained(100, 0.08),
    "go vs no-go, 5 trials, sigma2 0.2": trained(5, 0.2),
    "go vs no-go, 20 trials, sigma2 0.2": trained(20, 0.2),
    "go vs no-go, 100 trials, sigma2 0.2": trained(100, 0.2),
}


@pytest.mark.parametrize("setting", list(P_DIFF_SETTINGS))
def test_p_difference_above_agrees_with_monte_carlo(setting):
    """P(logistic(A) - logistic(B) > margin) for margins 0.1-0.5 agrees with a Monte Carlo
    reference (numpy, 1e6 draws, fixed seed) within 3 Monte Carlo standard errors + 1e-3."""
    ma, va, mb, vb = P_DIFF_SETTINGS[setting]
    rng = np.random.default_rng(20240611)
    a = rng.normal(ma, math.sqrt(va), MC_DRAWS)
    b = rng.normal(mb, math.sqrt(vb), MC_DRAWS)
    diff = special.expit(a) - special.expit(b)
    for margin in (0.1, 0.2, 0.3, 0.4, 0.5):
        mc = float(np.mean(diff > margin))
        se = math.sqrt(mc * (1 - mc) / MC_DRAWS)
        got = B.p_difference_above(ma, va, mb, vb, margin)
        assert abs(got - mc) <= 3 * se + 1e-3, (margin, got, mc)


def test_p_difference_above_is_zero_when_the_margin_cannot_be_reached():
    """With the first cue certain to sit below the margin, no difference can exceed it."""
    assert B.p_difference_above(-6.0, 0.01, 0.0, 1.0, 0.5) == pytest.approx(0.0, abs=1e-12)


@pytest.mark.parametrize("ma, mb", [(2.0, -1.0), (0.0, 0.0), (-0.7, 1.2), (4.0, -4.0), (-4.0, 4.0), (36.0, -36.0)])
def test_dprime_point_value_is_the_probit_difference(ma, mb):
    """d' = Phi^-1(logistic(ma)) - Phi^-1(logistic(mb)) (methods.md section 6; scipy.stats.norm.ppf
    of scipy.special.expit as reference, probabilities kept inside [1e-15, 1 - 1e-15])."""
    d, lo, hi = B.dprime_estimate(ma, 0.5, mb, 0.5)
    assert d == pytest.approx(float(_probit_of_logit(ma) - _probit_of_logit(mb)), rel=1e-9, abs=1e-12)
    assert lo < hi


DPRIME_SETTINGS = {
    "well apart": (1.5, 0.3, -1.5, 0.3, 0.95),
    "two unseen cues": (*UNSEEN, *UNSEEN, 0.95),
    "moderate, level 0.8": (2.0, 1.0, -0.5, 0.5, 0.8),
    "close, both high": (4.0, 0.1, 3.0, 0.1, 0.95),
    "extreme means, narrow": (4.0, 0.5, -4.0, 0.5, 0.95),
    "extreme means": (4.0, 1.0, -4.0, 1.0, 0.95),
    "extreme means, reversed": (-4.0, 1.0, 4.0, 1.0, 0.95),
    "go vs no-go, 20 trials, sigma2 0.08": (*trained(20, 0.08), 0.95),
    "go vs no-go, 100 trials, sigma2 0.08": (*trained(100, 0.08), 0.95),
    "go vs no-go, 100 trials, sigma2 0.2": (*trained(100, 0.2), 0.95),
}


@pytest.mark.parametrize("setting", list(DPRIME_SETTINGS))
def test_dprime_interval_agrees_with_monte_carlo_quantiles(setting):
    """The interval ends of dprime_estimate agree within 0.05 with the Monte Carlo quantiles
    of the posterior of D = Phi^-1(logistic(A)) - Phi^-1(logistic(B)) (numpy, 1e6 draws,
    fixed seed; the MC quantiles are good to about 0.005 here)."""
    ma, va, mb, vb, level = DPRIME_SETTINGS[setting]
    rng = np.random.default_rng(20240612)
    d = _probit_of_logit(rng.normal(ma, math.sqrt(va), MC_DRAWS)) - \
        _probit_of_logit(rng.normal(mb, math.sqrt(vb), MC_DRAWS))
    q_lo, q_hi = np.quantile(d, [(1 - level) / 2, (1 + level) / 2])
    _, lo, hi = B.dprime_estimate(ma, va, mb, vb, level)
    assert lo == pytest.approx(q_lo, abs=0.05)
    assert hi == pytest.approx(q_hi, abs=0.05)



def _p_difference_by_quad(ma, va, mb, vb, margin):
    """P(logistic(A) - logistic(B) > margin) = E_A[P(B < logit(logistic(A) - margin))] by
    scipy.integrate.quad over A's standard normal (scipy.special.expit and logit, scipy.stats.norm)."""
    from scipy import integrate

    sa, sb = math.sqrt(va), math.sqrt(vb)

    def integrand(z):
        t = special.expit(ma + sa * z) - margin
        if t <= 0.0:
            return 0.0
        inner = 1.0 if t >= 1.0 else stats.norm.cdf((special.logit(t) - mb) / sb)
        return stats.norm.pdf(z) * inner

    return integrate.quad(integrand, -12.0, 12.0, limit=400, epsabs=1e-12, epsrel=1e-12)[0]


def test_p_difference_above_is_the_integral_and_its_bounds_hold_it():
    """p_difference_above (a 32-node quadrature) is within 1e-5 of scipy's adaptive quad of the
    same integral on states from very sure to very unsure; the closed-form floor and ceiling that
    settle most p_discriminates comparisons hold the integral between them, 1/8 apart at most."""
    import random

    rng = random.Random(12)
    for _ in range(60):
        ma, mb = rng.uniform(-6.0, 6.0), rng.uniform(-6.0, 6.0)
        va, vb = (rng.choice([rng.uniform(1e-4, 0.01), rng.uniform(0.01, 1.0), rng.uniform(1.0, 8.0)])
                  for _ in range(2))
        margin = rng.choice([0.1, 0.3, 0.6, rng.uniform(0.01, 0.9)])
        exact = _p_difference_by_quad(ma, va, mb, vb, margin)
        assert B.p_difference_above(ma, va, mb, vb, margin) == pytest.approx(exact, abs=1e-5), (ma, va, mb, vb, margin)
        floor, ceiling = B._difference_bounds(ma, va, mb, vb, margin)
        assert floor <= exact + 1e-12 and exact <= ceiling + 1e-12 and ceiling - floor <= 0.125 + 1e-12


def _difference_cdf_by_quad(ma, va, mb, vb, t):
    """F(t) = P(D <= t) = E_B[Phi((logit(Phi(g(B) + t)) - ma) / sd_a)], g = Phi^-1 o logistic,
    by scipy.integrate.quad over B's standard normal (the reference: scipy.stats and
    scipy.special throughout, logit(Phi(y)) as norm.logcdf(y) - norm.logsf(y))."""
    from scipy import integrate

    sa, sb = math.sqrt(va), math.sqrt(vb)

    def integrand(z):
        y = stats.norm.ppf(special.expit(mb + sb * z)) + t
        return stats.norm.pdf(z) * stats.norm.cdf((stats.norm.logcdf(y) - stats.norm.logsf(y) - ma) / sa)

    return integrate.quad(integrand, -12.0, 12.0, limit=400, epsabs=1e-12, epsrel=1e-12)[0]


def test_the_distribution_of_d_prime_is_the_integral_and_its_bounds_hold_it():
    """The quadrature's F (what d' intervals and comparisons rest on) is within 1e-4 of scipy's
    adaptive quad of the same integral (5e-5 was the worst of 1,200 such points), on states from
    very sure to very unsure; the closed-form floor and ceiling that settle most d' comparisons
    (the union bound) hold the integral between them, and are near 0 and 1 where F is."""
    import random

    rng = random.Random(11)
    for _ in range(40):
        ma, mb = rng.uniform(-6.0, 6.0), rng.uniform(-6.0, 6.0)
        va, vb = (rng.choice([rng.uniform(1e-4, 0.01), rng.uniform(0.01, 1.0), rng.uniform(1.0, 8.0)])
                  for _ in range(2))
        cdf = B._difference_cdf(ma, va, mb, vb, moments=False)[0]
        for t in (rng.uniform(-4.0, 4.0), rng.uniform(-1.0, 1.0)):
            exact = _difference_cdf_by_quad(ma, va, mb, vb, t)
            assert cdf(t)[0] == pytest.approx(exact, abs=1e-4), (ma, va, mb, vb, t)
            bounds = B._difference_cdf_bounds(ma, va, mb, vb, t)
            if bounds is not None:
                floor, ceiling = bounds
                assert floor <= exact + 1e-12 and exact <= ceiling + 1e-12, (ma, va, mb, vb, t, bounds, exact)
    # an animal far from a criterion: F(0.5) near 0 for a sure d' of about 2, near 1 for about 0
    assert B._difference_cdf_bounds(2.5, 0.05, -2.0, 0.05, 0.5)[1] < 1e-3
    assert B._difference_cdf_bounds(0.0, 0.01, 0.0, 0.01, 0.5)[0] > 0.99

# --------------------------------------------------------------------------- what the animal did


def _event(value=None, result=None, kind="licks"):
    return TrialEvent("m1", "r1", "s1", 1, cues=(CuePresentation("tone", 0.0, 1.0),), outcome=Outcome(),
                      response=Response(kind=kind, value=value, result=result, latency=None), duration=2.0)


@pytest.mark.parametrize("value, result, expected", [
    (0, "correct", False), (0.0, None, False), (3, None, True), (2.5, "incorrect", True), (1, "correct", True),
    (-1.0, None, False),
])
def test_observed_count_values(value, result, expected):
    """A lick or press count: responded when > 0, whatever the scored result says."""
    assert B.observed(_event(value, result), B.RESPOND, go=True) is expected
    assert B.observed(_event(value, result), B.RESPOND, go=None) is expected


@pytest.mark.parametrize("value, expected", [("right", True), ("left", False), ("centre", None), (2, None),
                                             (None, None)])
def test_observed_choice_sides(value, expected):
    """Two-choice cues: right is True, left False; anything else is not a side (None)."""
    assert B.observed(_event(value, "correct", kind="choice"), B.RIGHT) is expected


@pytest.mark.parametrize("kind, value", [(B.RESPOND, 4), (B.RESPOND, None), (B.RIGHT, "right"), (B.RIGHT, "left")])
def test_observed_omitted_is_none(kind, value):
    """An omitted trial measures engagement, not what the animal does: never observed."""
    assert B.observed(_event(value, "omitted"), kind, go=True) is None


@pytest.mark.parametrize("result, go, expected", [
    ("correct", True, True),  # a correct go trial was a response
    ("incorrect", True, False),  # a miss
    ("correct", False, False),  # a correct rejection
    ("incorrect", False, True),  # a false alarm was a response
    ("correct", None, None),  # the cue's role is unknown
    (None, True, None),  # not scored
])
def test_observed_without_a_value_reads_the_result_through_the_role(result, go, expected):
    assert B.observed(_event(None, result), B.RESPOND, go=go) is expected


def test_kind_of_role_and_quantity_names():
    assert [B.kind_of_role(r) for r in ("go", "nogo", "go_nogo", "plain", "left", "right")] == \
        [B.RESPOND] * 4 + [B.RIGHT] * 2
    assert B.quantity_names("tone", B.RESPOND) == ("p_respond[tone]", "p_respond_lo95[tone]", "p_respond_hi95[tone]")
    assert B.quantity_names("light", B.RIGHT) == ("p_right[light]", "p_right_lo95[light]", "p_right_hi95[light]")


# --------------------------------------------------------------------------- stored form


def test_cue_estimate_tuple_round_trip():
    """as_tuple -> from_tuple rebuilds the estimate exactly, also through msgpack (a list)."""
    est = B.CueEstimate.prior(2.0).updated(True, 0.08).updated(True, 0.08).updated(False, 0.08)
    again = B.CueEstimate.from_tuple(est.as_tuple())
    assert again.as_tuple() == est.as_tuple()
    packed = msgpack.unpackb(msgpack.packb(list(est.as_tuple())))
    assert B.CueEstimate.from_tuple(packed).as_tuple() == est.as_tuple()
    assert {k: v.as_tuple() for k, v in B.estimates_from({"a": est.as_tuple()}).items()} == {"a": est.as_tuple()}
    assert again.updated(True, 0.08).as_tuple() == est.updated(True, 0.08).as_tuple()


@pytest.mark.parametrize("data, expected", [
    ((0.1, 1.0), "a triple (x, var, n)"),
    (None, "a triple (x, var, n)"),
    ((0.1, 0.0, 3), "finite x, var > 0, whole n >= 0"),
    ((0.1, -1.0, 3), "finite x, var > 0, whole n >= 0"),
    ((math.nan, 1.0, 3), "finite x, var > 0, whole n >= 0"),
    ((0.1, math.inf, 3), "finite x, var > 0, whole n >= 0"),
    ((0.1, 1.0, -1), "finite x, var > 0, whole n >= 0"),
    ((0.1, 1.0, 2.0), "finite x, var > 0, whole n >= 0"),
    ((0.1, 1.0, True), "finite x, var > 0, whole n >= 0"),
])
def test_from_tuple_error_names_the_field(data, expected):
    with pytest.raises(BadArgument) as info:
        B.CueEstimate.from_tuple(data)
    assert info.value.argument == "behaviour estimate"
    assert str(info.value).startswith(f"'behaviour estimate' must be {expected} (got ")
