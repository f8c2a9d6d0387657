"""Every failure in the numeric core is a rigloop error naming the input (BadArgument), never
a bare ValueError, ZeroDivisionError, OverflowError, StatisticsError or an endless loop; and
valid inputs give the numbers they gave before (tools/step_digest.py holds those bit for bit)."""

from __future__ import annotations

import math
from statistics import NormalDist

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from rigloop.core import behaviour as B
from rigloop.core import responses as R
from rigloop.core import sequential as S
from rigloop.core.learners import make_learner
from rigloop.core.learners.kalman_filter import kalman_correct
from rigloop.errors import BadArgument


def bad(call, argument: str) -> BadArgument:
    """The BadArgument ``call`` raises, checked to name ``argument``."""
    with pytest.raises(BadArgument) as info:
        call()
    assert info.value.argument == argument, str(info.value)
    return info.value


# --------------------------------------------------------------------------- the animal's behaviour


def test_band_refuses_a_negative_variance_and_a_level_outside_0_1():
    err = bad(lambda: B.band(0.0, -1.0), "var")  # was math's 'math domain error'
    assert str(err) == "'var' must be a finite number >= 0 (got -1.0)"
    bad(lambda: B.band(0.0, 1.0, 1.5), "level")  # was statistics.StatisticsError
    bad(lambda: B.band(math.nan, 1.0), "mean")  # was a silent (nan, nan)
    bad(lambda: B.band("0.3", 1.0), "mean")  # was a TypeError


def test_p_difference_above_refuses_zero_variance_and_impossible_margins():
    assert str(bad(lambda: B.p_difference_above(0.5, 1.0, 0.0, 0.0, 0.2), "var_b")) == \
        "'var_b' must be a finite number > 0 (got 0.0)"  # was ZeroDivisionError
    bad(lambda: B.p_difference_above(0.5, 0.0, 0.0, 0.0), "var_a")  # margin 0: was ZeroDivisionError
    bad(lambda: B.p_difference_above(0.5, 1.0, 0.0, 1.0, 1.0), "margin")  # was ZeroDivisionError
    err = bad(lambda: B.p_difference_above(0.5, 1.0, 0.0, 1.0, -0.1), "margin")  # was 'math domain error'
    assert str(err) == "'margin' must be a margin between probabilities in [0, 1) (got -0.1)"


def test_dprime_estimate_refuses_non_positive_variances():
    bad(lambda: B.dprime_estimate(1.0, -math.inf, 0.0, 1.0), "var_a")  # was 'math domain error'
    bad(lambda: B.dprime_estimate(1.0, 1.0, 0.0, 0.0), "var_b")
    bad(lambda: B.dprime_estimate(1.0, 1.0, 0.0, 1.0, 0.0), "level")


def test_the_behaviour_filter_refuses_an_infinite_forgetting_and_a_broken_estimate():
    bad(lambda: B.updated(None, True, math.inf, 2.0), "sigma2")  # was ZeroDivisionError
    bad(lambda: B.updated(None, True, 0.2, -2.0), "prior_var")
    bad(lambda: B.updated((0.0, 1.0), True, 0.2, 2.0), "behaviour estimate")  # was an unpacking ValueError
    bad(lambda: B.updated((math.nan, 1.0, 3), True, 0.2, 2.0), "behaviour estimate x")
    bad(lambda: B.CueEstimate.prior(2.0).updated(True, math.inf), "sigma2")  # was ZeroDivisionError
    bad(lambda: B.CueEstimate.prior(0.0), "prior_var")


def test_valid_behaviour_numbers_are_the_closed_forms():
    """band: logistic(mean -/+ z sqrt(var)); margin 0: Phi((a - b) / sqrt(var_a + var_b))
    (both closed forms of the module docstring; Phi from the standard library's NormalDist)."""
    z = NormalDist().inv_cdf(0.975)
    assert B.band(0.4, 0.5) == (B.logistic(0.4 - z * math.sqrt(0.5)), B.logistic(0.4 + z * math.sqrt(0.5)))
    assert B.p_difference_above(0.9, 0.3, -0.2, 0.4) == NormalDist().cdf(1.1 / math.sqrt(0.7))


finite_or_not = st.one_of(st.floats(allow_nan=True, allow_infinity=True), st.sampled_from([0.0, -0.0, 1.0]))


@settings(max_examples=300, deadline=None)
@given(finite_or_not, finite_or_not, finite_or_not, finite_or_not, finite_or_not)
def test_two_cue_functions_raise_only_bad_argument(ma, va, mb, vb, margin):
    """Whatever numbers come, the answer is a probability or a BadArgument naming one input."""
    for call in (lambda: B.p_difference_above(ma, va, mb, vb, margin), lambda: B.band(ma, va, margin)):
        try:
            p = call()
        except BadArgument as err:
            assert err.argument in ("mean_a", "var_a", "mean_b", "var_b", "margin", "mean", "var", "level")
        else:
            assert all(0.0 <= q <= 1.0 for q in (p if isinstance(p, tuple) else (p,)))


# --------------------------------------------------------------------------- learners


@pytest.mark.parametrize("model", ["kalman_filter", "kalman_td"])
def test_kalman_with_a_covariance_that_is_not_positive_semi_definite(model):
    """Σ = [[1, 2], [2, 1]] is symmetric with a positive diagonal but has eigenvalue -1:
    along h = (1, -1), hᵀΣh + noise = 2 - 4 + 1 < 0 (was math's 'math domain error')."""
    learner = make_learner(model, 2, diffusion=0.0, noise=1.0)
    learner.cov = np.array([[1.0, 2.0], [2.0, 1.0]])
    h = np.array([1.0, -1.0])
    update = (lambda: learner.update(h, 1.0)) if model == "kalman_filter" else \
        (lambda: learner.update(h, np.zeros(2), 1.0))
    err = bad(update, "cov")
    assert "positive semi-definite covariance" in str(err) and "hᵀΣh + noise = -1.0" in str(err)
    bad(lambda: learner.learn_trial(h[None, :], np.array([1.0])), "cov")


@pytest.mark.filterwarnings("ignore:overflow encountered")
def test_kalman_with_a_covariance_that_overflows_is_refused_not_silently_nan():
    learner = make_learner("kalman_filter", 2)
    learner.cov = np.diag([8e307, 8e307])
    before = learner.w.copy()
    bad(lambda: learner.update(np.full(2, 2.0), 1.0), "cov")  # hᵀΣh = inf: was weights and covariance of NaN
    assert np.array_equal(learner.w, before)
    bad(lambda: setattr(learner, "cov", np.diag([1e308, 1e308])), "cov")  # was a covariance of inf, silently


def test_kalman_correct_reference_refuses_an_indefinite_covariance():
    bad(lambda: kalman_correct(np.zeros(2), np.array([[1.0, 2.0], [2.0, 1.0]]), np.array([1.0, -1.0]), 1.0, 1.0),
        "P")


@pytest.mark.parametrize("model", ["rescorla_wagner", "td", "kalman_filter", "kalman_td"])
def test_a_stored_learner_state_with_weights_that_are_not_numbers(model):
    state = make_learner(model, 2).state()
    state["w"] = ["0.1", "high"]
    err = bad(lambda: type(make_learner(model, 2)).from_state(state), "state['w']")  # was a numpy ValueError
    assert str(err).startswith("\"state['w']\" must be an array of finite numbers")


# --------------------------------------------------------------------------- responses and sequential tests


def test_response_models_name_values_that_are_not_numbers():
    bad(lambda: R.p_respond(["0.2", "lots"], 2.0, 0.5, 0.05), "value")  # was a numpy ValueError
    bad(lambda: R.log_lik_respond([0.2], ["yes"], 2.0, 0.5, 0.05), "responded")
    bad(lambda: R.p_right([0.1], ["x"], 2.0, 0.0, 0.05), "q_right")
    bad(lambda: R.history_step(["x"], 1.0, 0.5), "h")


def test_wald_trials_to_pass_refuses_certain_animals_instead_of_searching_for_ever():
    up, down = S.llr_steps(0.5, 0.8)
    ln_b, ln_a = S.sprt_bounds(0.05, 0.2)
    bad(lambda: S.wald_trials_to_pass(1.0, up, down, ln_b, ln_a), "p")  # was an endless loop
    bad(lambda: S.wald_trials_to_pass(0.0, up, down, ln_b, ln_a), "p")  # was an endless loop
    bad(lambda: S.wald_trials_to_pass(1e-320, up, down, ln_b, ln_a), "p")  # was OverflowError
    bad(lambda: S.wald_trials_to_pass(0.7, up, down, ln_a, ln_b), "ln_b")
    assert math.isfinite(S.wald_trials_to_pass(0.8, up, down, ln_b, ln_a))


def test_bernoulli_sprt_names_an_alpha_that_is_not_a_number():
    bad(lambda: S.BernoulliSPRT(0.5, 0.8, alpha="five percent"), "alpha")  # was float()'s ValueError
    bad(lambda: S.BernoulliSPRT(0.5, 0.8, beta=None), "beta")  # was float()'s TypeError
