"""Response models: the go/no-go and two-choice links, their log-likelihoods, the choice
kernel, and the checked ResponseLink, against scipy and closed forms."""

import dataclasses
import math
import sys

import numpy as np
import pytest
from scipy import special, stats
from test_layout import PKG, _imports

from rigloop import fit
from rigloop.core import responses as rm
from rigloop.errors import BadArgument

RNG_SEED = 20240611


def _reference_p(z, lapse):
    # reference: scipy.special.expit, σ(z) = 1/(1 + e^−z)
    return lapse / 2 + (1 - lapse) * special.expit(z)


def _reference_loglik_terms(V, y, beta, theta, lapse):
    """The logaddexp form of the go/no-go log-likelihood, written out independently of
    rigloop (fit's numbers are pinned to it bit for bit)."""
    z = beta * (V - theta)
    log_half_lapse = math.log(lapse / 2) if lapse > 0 else -math.inf
    log_engaged = math.log1p(-lapse) if lapse < 1 else -math.inf
    sign = np.where(y > 0.5, 1.0, -1.0)
    log_sig = -np.logaddexp(0.0, -sign * z)
    return np.logaddexp(log_half_lapse, log_engaged + log_sig)


def _random_inputs(rng, n=2000):
    V = np.concatenate([rng.normal(0.4, 0.5, n // 2), rng.normal(0.0, 30.0, n // 2)])
    y = (rng.random(n) < 0.5).astype(np.float64)
    return V, y


# --------------------------------------------------------------------------- go/no-go


@pytest.mark.parametrize("beta, theta, lapse", [(5.0, 0.5, 0.05), (0.7, -1.0, 0.3),
                                                (40.0, 0.2, 0.0), (-3.0, 0.1, 0.5)])
def test_p_respond_equals_the_logistic_with_lapse(beta, theta, lapse):
    """p = lapse/2 + (1 − lapse)·σ(β(V − θ)) against scipy's expit."""
    V = np.random.default_rng(RNG_SEED).normal(0.3, 2.0, 500)
    got = rm.p_respond(V, beta, theta, lapse)
    np.testing.assert_allclose(got, _reference_p(beta * (V - theta), lapse), rtol=1e-14, atol=0)


def test_p_respond_limits():
    """lapse = 0 is the plain logistic; β = 0 gives 1/2 whatever V and lapse; V = θ gives 1/2."""
    V = np.linspace(-3.0, 3.0, 61)
    # reference: scipy.special.expit
    np.testing.assert_allclose(rm.p_respond(V, 2.0, 0.5, 0.0), special.expit(2.0 * (V - 0.5)),
                               rtol=1e-15)
    for lapse in (0.0, 0.05, 0.4):
        np.testing.assert_allclose(rm.p_respond(V, 0.0, 0.5, lapse), 0.5, rtol=1e-15)
        assert rm.p_respond(0.5, 7.0, 0.5, lapse) == pytest.approx(0.5, rel=1e-15)
    # the lapse floor and ceiling: p ∈ [lapse/2, 1 − lapse/2]
    assert rm.p_respond(-1e6, 5.0, 0.5, 0.1) == pytest.approx(0.05, rel=1e-15)
    assert rm.p_respond(1e6, 5.0, 0.5, 0.1) == pytest.approx(0.95, rel=1e-15)


@pytest.mark.parametrize("lapse", [0.0, 0.05])
def test_no_overflow_for_huge_slopes(lapse):
    """Huge |β(V − θ)| gives finite probabilities and log-likelihoods, no overflow or NaN."""
    V = np.array([-1e300, -1e6, -800.0, -745.0, -701.0, -700.0, -30.0, 0.0, 30.0, 800.0, 1e6,
                  1e300])
    with np.errstate(over="raise", invalid="raise", divide="raise"):
        p = rm.p_respond(V, 1.0, 0.0, lapse)
        ll_yes = rm.log_lik_respond(V, np.ones_like(V), 1.0, 0.0, lapse)
        ll_no = rm.log_lik_respond(V, np.zeros_like(V), 1.0, 0.0, lapse)
        pr = rm.p_right(np.zeros_like(V), V, 1.0, 0.0, lapse)
    assert np.all(np.isfinite(p)) and np.all(np.isfinite(pr))
    assert np.all((p >= lapse / 2) & (p <= 1 - lapse / 2))
    # reference: scipy.special.expit (saturates without overflow); atol: at z = −745 the true
    # σ(z) ≈ 4.9e−324 is a subnormal that expit rounds to 0
    np.testing.assert_allclose(p, _reference_p(V, lapse), rtol=1e-14, atol=1e-320)
    assert np.all(np.isfinite(ll_yes[1:-1])) and np.all(np.isfinite(ll_no[1:-1]))
    if lapse == 0.0:
        # log σ(z) is finite where σ(z) underflows; reference: scipy.special.log_expit
        np.testing.assert_allclose(ll_yes[1:-1], special.log_expit(V[1:-1]), rtol=1e-14)
        np.testing.assert_allclose(ll_no[1:-1], special.log_expit(-V[1:-1]), rtol=1e-14)
    else:
        # the lapse bounds log p below by log(lapse/2)
        assert np.all(ll_yes >= math.log(lapse / 2) - 1e-12)


def test_far_tail_is_continuous_at_the_switch():
    """Either side of z = −700 the two forms of σ agree with scipy to rounding."""
    z = np.nextafter(-700.0, [-np.inf, np.inf])
    z = np.concatenate([z, [-700.0, -699.5, -700.5]])
    # reference: scipy.special.expit
    np.testing.assert_allclose(rm.p_respond(z, 1.0, 0.0, 0.0), special.expit(z), rtol=1e-13)


def test_log_lik_respond_is_log_p_and_log_one_minus_p():
    """log P(y) = log p for a response, log(1 − p) for a withhold; reference:
    scipy.stats.bernoulli.logpmf with p from scipy.special.expit."""
    rng = np.random.default_rng(RNG_SEED)
    V = rng.normal(0.4, 1.0, 400)
    y = (rng.random(400) < 0.5).astype(np.float64)
    beta, theta, lapse = 6.0, 0.35, 0.1
    got = rm.log_lik_respond(V, y, beta, theta, lapse)
    p = _reference_p(beta * (V - theta), lapse)
    np.testing.assert_allclose(got, stats.bernoulli.logpmf(y, p), rtol=1e-12)
    np.testing.assert_allclose(got, np.where(y > 0, np.log(p), np.log1p(-p)), rtol=1e-12)
    # booleans count as 1/0; nan (not observed) gives nan
    np.testing.assert_array_equal(rm.log_lik_respond(V, y > 0, beta, theta, lapse), got)
    out = rm.log_lik_respond([0.2, 0.6], [math.nan, 1.0], beta, theta, lapse)
    assert math.isnan(out[0]) and out[1] == pytest.approx(math.log(rm.p_respond(0.6, beta, theta,
                                                                                  lapse)))


def test_fit_likelihood_terms_are_unchanged_bit_for_bit():
    """fit's likelihood is the logaddexp form, bit for bit, on random inputs (so fitted
    parameters do not move), and fit.response_probability is p_respond."""
    rng = np.random.default_rng(RNG_SEED)
    for beta, theta, lapse in [(5.0, 0.5, 0.05), (100.0, 0.3, 0.0), (0.3, -2.0, 0.45),
                               (12.5, 0.9, 1e-9), (8.0, 0.4, 1.0)]:
        V, y = _random_inputs(rng)
        want = _reference_loglik_terms(V, y, beta, theta, lapse)
        np.testing.assert_array_equal(rm.log_lik_respond(V, y, beta, theta, lapse), want)
        np.testing.assert_array_equal(fit.log_lik_respond(V, y, beta, theta, lapse), want)
        # the textbook form 1/(1 + e^−z), bit for bit wherever e^−z is finite
        with np.errstate(over="ignore"):
            textbook = lapse / 2 + (1 - lapse) / (1 + np.exp(-beta * (V - theta)))
        keep = beta * (V - theta) >= -700.0
        np.testing.assert_array_equal(fit.response_probability(V, beta, theta, lapse)[keep],
                                      textbook[keep])


def test_floats_in_floats_out_and_arrays_broadcast():
    """A float gives a Python float; arrays keep their shape and broadcast."""
    assert type(rm.p_respond(0.3, 5.0, 0.5, 0.05)) is float
    assert type(rm.log_lik_respond(0.3, 1.0, 5.0, 0.5, 0.05)) is float
    assert type(rm.p_right(0.1, 0.4, 3.0, 0.2, 0.05, 0.5, -0.3)) is float
    assert type(rm.history_step(0.2, rm.RIGHT, 0.7)) is float
    V = np.linspace(0, 1, 6).reshape(2, 3)
    assert rm.p_respond(V, 5.0, 0.5, 0.05).shape == (2, 3)
    assert rm.log_lik_respond(V, np.array([1.0, 0.0, 1.0]), 5.0, 0.5, 0.05).shape == (2, 3)
    assert rm.p_right(V, 0.5, 3.0, 0.0, 0.05, 1.0, np.zeros((2, 1))).shape == (2, 3)
    np.testing.assert_array_equal(rm.p_respond(V, 5.0, 0.5, 0.05)[1],
                                  [rm.p_respond(float(v), 5.0, 0.5, 0.05) for v in V[1]])


# --------------------------------------------------------------------------- two choices


def test_p_right_is_the_softmax_with_bias_lapse_and_perseveration():
    """p = lapse/2 + (1 − lapse)·σ(β(Q_R − Q_L) + bias + persev·h); the two-option softmax
    e^(βQ_R)/(e^(βQ_L) + e^(βQ_R)) when bias, persev and lapse are 0."""
    rng = np.random.default_rng(RNG_SEED)
    ql, qr, h = rng.normal(0, 1, 300), rng.normal(0, 1, 300), rng.uniform(-1, 1, 300)
    beta, bias, lapse, persev = 3.0, -0.4, 0.08, 0.9
    got = rm.p_right(ql, qr, beta, bias, lapse, persev, h)
    want = _reference_p(beta * (qr - ql) + bias + persev * h, lapse)
    np.testing.assert_allclose(got, want, rtol=1e-14)
    # reference: scipy.special.softmax over the two sides' β·Q
    soft = special.softmax(beta * np.stack([ql, qr]), axis=0)[1]
    np.testing.assert_allclose(rm.p_right(ql, qr, beta, 0.0, 0.0), soft, rtol=1e-13)
    # β = 0 and no bias: indifferent whatever the values
    np.testing.assert_allclose(rm.p_right(ql, qr, 0.0, 0.0, lapse), 0.5, rtol=1e-15)


def test_p_right_swapping_the_sides_gives_one_minus_p():
    """p_right(Q_L, Q_R, bias, h) = 1 − p_right(Q_R, Q_L, −bias, −h)."""
    rng = np.random.default_rng(RNG_SEED + 1)
    ql, qr, h = rng.normal(0, 2, 300), rng.normal(0, 2, 300), rng.uniform(-1, 1, 300)
    for beta, bias, lapse, persev in [(5.0, 0.0, 0.05, 0.0), (2.0, 0.7, 0.2, -1.5),
                                      (30.0, -1.1, 0.0, 0.4)]:
        p = rm.p_right(ql, qr, beta, bias, lapse, persev, h)
        swapped = rm.p_right(qr, ql, beta, -bias, lapse, persev, -h)
        np.testing.assert_allclose(p, 1 - swapped, rtol=1e-13, atol=1e-15)


def test_log_lik_right_is_log_p_and_log_one_minus_p():
    """log P(right) = log p, log P(left) = log(1 − p); no choice gives nan; reference:
    scipy.stats.bernoulli.logpmf with p from scipy.special.expit."""
    rng = np.random.default_rng(RNG_SEED + 2)
    ql, qr, h = rng.normal(0, 1, 300), rng.normal(0, 1, 300), rng.uniform(-1, 1, 300)
    chose = np.where(rng.random(300) < 0.5, rm.RIGHT, rm.LEFT)
    beta, bias, lapse, persev = 4.0, 0.3, 0.1, 0.6
    got = rm.log_lik_right(ql, qr, chose, beta, bias, lapse, persev, h)
    p = _reference_p(beta * (qr - ql) + bias + persev * h, lapse)
    np.testing.assert_allclose(got, stats.bernoulli.logpmf(chose > 0, p), rtol=1e-12)
    out = rm.log_lik_right([0.0, 0.0, 0.0], [1.0, 1.0, 1.0], [rm.NO_CHOICE, math.nan, rm.LEFT],
                           beta, bias, lapse)
    assert math.isnan(out[0]) and math.isnan(out[1]) and math.isfinite(out[2])
    # a steep slope with lapse 0: log σ(z) stays finite; reference: scipy.special.log_expit
    assert rm.log_lik_right(0.0, 500.0, rm.LEFT, 2.0, 0.0, 0.0) == pytest.approx(
        float(special.log_expit(-1000.0)), rel=1e-14)


# --------------------------------------------------------------------------- choice kernel


@pytest.mark.parametrize("decay", [0.0, 0.3, 0.7, 0.95])
def test_history_kernel_closed_form(decay):
    """From h = 0, k choices of one side give h = ±(1 − decay^k) (sum of the geometric
    series (1 − decay)·Σ_{j<k} decay^j); trials without a choice leave h unchanged."""
    h_right = h_left = 0.0
    for k in range(1, 40):
        h_right = rm.history_step(h_right, rm.RIGHT, decay)
        h_left = rm.history_step(h_left, rm.LEFT, decay)
        assert h_right == pytest.approx(1 - decay**k, rel=1e-13, abs=1e-15)
        assert h_left == pytest.approx(-(1 - decay**k), rel=1e-13, abs=1e-15)
        assert -1.0 <= h_left <= 0.0 <= h_right <= 1.0
        assert rm.history_step(h_right, rm.NO_CHOICE, decay) == h_right
        assert rm.history_step(h_right, math.nan, decay) == h_right


def test_history_step_over_arrays_and_its_choice_check():
    """Many subjects at once; a choice code other than ±1, 0 or nan is refused."""
    h = np.array([0.0, 0.5, -0.2, 0.9])
    c = np.array([rm.RIGHT, rm.LEFT, rm.NO_CHOICE, math.nan])
    got = rm.history_step(h, c, 0.7)
    want = [rm.history_step(float(a), float(b), 0.7) for a, b in zip(h, c, strict=True)]
    np.testing.assert_array_equal(got, want)
    assert got[0] == pytest.approx(0.3) and got[1] == pytest.approx(0.35 - 0.3)
    with pytest.raises(BadArgument, match=r"'choice' must be \+1 \(right\), -1 \(left\)"):
        rm.history_step(0.0, 0.5, 0.7)
    assert (rm.choice_code("right"), rm.choice_code("left"), rm.choice_code(None)) == (
        rm.RIGHT, rm.LEFT, rm.NO_CHOICE)
    with pytest.raises(BadArgument, match=r"'side' must be 'left', 'right' or None \(got 'up'\)"):
        rm.choice_code("up")


# --------------------------------------------------------------------------- the checked link


def test_response_link_defaults_are_the_module_constants():
    link = rm.ResponseLink()
    assert (link.kind, link.beta, link.theta, link.lapse, link.bias, link.persev, link.decay) == (
        "respond", rm.DEFAULT_BETA, rm.DEFAULT_THETA, rm.DEFAULT_LAPSE, rm.DEFAULT_BIAS,
        rm.DEFAULT_PERSEV, rm.DEFAULT_DECAY)
    assert (rm.DEFAULT_BETA, rm.DEFAULT_THETA, rm.DEFAULT_LAPSE, rm.DEFAULT_BIAS,
            rm.DEFAULT_PERSEV, rm.DEFAULT_DECAY) == (5.0, 0.5, 0.05, 0.0, 0.0, 0.7)
    with pytest.raises(dataclasses.FrozenInstanceError):
        link.beta = 1.0  # type: ignore[misc]


def test_response_link_computes_what_the_functions_compute():
    go = rm.ResponseLink("respond", beta=6.0, theta=0.35, lapse=0.1)
    V = np.array([0.0, 0.3, 0.9])
    np.testing.assert_array_equal(go.probability(V), rm.p_respond(V, 6.0, 0.35, 0.1))
    np.testing.assert_array_equal(go.log_likelihood([1.0, 0.0, 1.0], V),
                                  rm.log_lik_respond(V, [1.0, 0.0, 1.0], 6.0, 0.35, 0.1))
    two = rm.ResponseLink("choice", beta=3.0, lapse=0.02, bias=0.2, persev=0.5, decay=0.6)
    assert two.probability(q_left=0.1, q_right=0.4, history=-0.5) == rm.p_right(
        0.1, 0.4, 3.0, 0.2, 0.02, 0.5, -0.5)
    assert two.log_likelihood(rm.LEFT, q_left=0.1, q_right=0.4) == rm.log_lik_right(
        0.1, 0.4, rm.LEFT, 3.0, 0.2, 0.02, 0.5, 0.0)
    assert two.next_history(0.5, rm.RIGHT) == rm.history_step(0.5, rm.RIGHT, 0.6)
    with pytest.raises(BadArgument, match=r"'q_right' must be a model quantity \(a 'choice' link"):
        two.probability(q_left=0.1)
    with pytest.raises(BadArgument, match=r"'value' must be a model quantity \(a 'respond' link"):
        go.probability(q_left=0.1, q_right=0.2)


@pytest.mark.parametrize("field, value, expected", [
    ("kind", "softmax", "one of 'respond', 'choice'"),
    ("beta", math.inf, "a finite number"),
    ("beta", "5", "a finite number"),
    ("theta", math.nan, "a finite number"),
    ("lapse", 1.0, r"a number in \[0, 1\)"),
    ("lapse", -0.01, r"a number in \[0, 1\)"),
    ("bias", True, "a finite number"),
    ("persev", -math.inf, "a finite number"),
    ("decay", 1.0, r"a number in \[0, 1\)"),
])
def test_response_link_names_the_bad_field(field, value, expected):
    with pytest.raises(BadArgument, match=rf"^'{field}' must be {expected} \(got ") as err:
        rm.ResponseLink(**{field: value})
    assert err.value.argument == field


def test_response_link_takes_numpy_and_integer_numbers_as_floats():
    link = rm.ResponseLink("choice", beta=np.float32(2.5), lapse=0, decay=np.float64(0.5))
    assert type(link.beta) is float and link.beta == 2.5 and type(link.lapse) is float


def test_module_is_pure():
    """standard library and numpy only (the rule tests/test_layout.py holds for pure modules)."""
    stdlib = set(sys.stdlib_module_names)
    for name in _imports(PKG / "core" / "responses.py"):
        assert name in stdlib | {"numpy", "rigloop"}, name
        assert name not in {"os", "time", "socket", "sqlite3", "threading", "subprocess"}, name


def test_scalar_paths_agree_with_the_array_paths():
    """A float in takes a scalar path (step's per-trial case); it equals the array path to
    one ulp (math.exp and numpy's exp may round the last bit differently)."""
    rng = np.random.default_rng(11)
    for v, ql, qr, h in rng.normal(0.0, 3.0, (200, 4)):
        a = rm.p_respond(float(v), 5.0, 0.5, 0.05)
        b = float(rm.p_respond(np.array([v]), 5.0, 0.5, 0.05)[0])
        assert type(a) is float and abs(a - b) <= 2 * np.spacing(b)
        h = float(np.tanh(h))
        a = rm.p_right(float(ql), float(qr), 3.0, 0.4, 0.1, 0.7, h)
        b = float(rm.p_right(np.array([ql]), np.array([qr]), 3.0, 0.4, 0.1, 0.7, np.array([h]))[0])
        assert abs(a - b) <= 2 * np.spacing(b)
        assert rm.history_step(h, 1.0, 0.7) == float(rm.history_step(np.array([h]), np.array([1.0]), 0.7)[0])
    assert math.isnan(rm.p_respond(math.nan, 5.0, 0.5, 0.05))
