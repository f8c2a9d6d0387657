"""Fits of the two-step learners: the likelihood against the agents' own probabilities,
the profile interval, parameter recovery of w, model comparison, and the command."""

from __future__ import annotations

import csv
import os

import numpy as np
import pytest

from rigloop.cli.main import main
from rigloop.core.two_step import hybrid_agent, simulate_agent
from rigloop.errors import BadArgument
from rigloop.fit.two_step import (
    CHI2_1_95,
    TwoStepData,
    TwoStepLikelihood,
    _profile_interval,
    fit_two_step,
    linear_scan,
    value_paths,
    value_paths_reference,
)

pytest.importorskip("scipy")


def _data(run) -> TwoStepData:
    return TwoStepData.of(run.a1, run.s2, run.a2, run.reward)


@pytest.mark.parametrize("kind", ["model_free", "model_based", "hybrid", "successor"])
def test_likelihood_is_the_agents_own_choice_probabilities(kind):
    """At the true parameters, −ℓ = −Σ log P(a1) − Σ log P(a2) with the probabilities the
    agent chose by (the fast value paths equal the readable learners)."""
    run = simulate_agent(kind, 300, seed=4)
    data = _data(run)
    prm = run.params.as_dict()
    v = value_paths(data, prm["alpha1"], prm["alpha2"], prm["lam"])
    assert np.allclose(v["mf"], run.q_mf[:, 0] - run.q_mf[:, 1])
    assert np.allclose(v["mb"], run.q_mb[:, 0] - run.q_mb[:, 1])
    assert np.allclose(v["sr"], run.q_sr[:, 0] - run.q_sr[:, 1])
    t = np.arange(run.n_trials)
    expected = -(np.log(run.p_first[t, run.a1]).sum() + np.log(run.p_second[t, run.a2]).sum())
    assert TwoStepLikelihood(data, kind)(run.params) == pytest.approx(expected, rel=1e-10)


def test_profile_interval_of_a_quadratic_profile():
    """A profile −ℓ(w) = ℓ0 + (w − 0.5)²/(2·0.1²) (a normal likelihood, sd 0.1) has the 95%
    interval 0.5 ± 1.96·0.1 (Pawitan 2001, §2.6); at a bound the interval stops there."""
    ws = np.linspace(0, 1, 101)
    pts = [(w, 10.0 + (w - 0.5) ** 2 / (2 * 0.01)) for w in ws]
    low, high = _profile_interval(pts, 10.0)
    half = np.sqrt(CHI2_1_95) * 0.1
    assert (low, high) == pytest.approx((0.5 - half, 0.5 + half), abs=1e-3)
    pts = [(w, 10.0 + (w - 0.05) ** 2 / (2 * 0.01)) for w in ws]
    assert _profile_interval(pts, 10.0)[0] == 0.0


def test_w_is_recovered_in_order_with_covering_intervals():
    """Hybrid agents with w = 0, 0.25, 0.5, 0.75, 1 (400 trials, all seven parameters
    free): the estimates rank in the true order and the 95% profile intervals cover the
    true w in >= 90% of fits. By default one repetition (5 fits, a few seconds): it ranks
    fully in order and at least 4 of 5 intervals cover; RIGLOOP_FULL=1 runs 8 repetitions
    (40 fits): the mean estimates rank in order and coverage >= 90%, as
    tools/bench/two_step_recovery.py reports. The target is the coverage a 95% interval
    promises, less the slack of a few dozen fits (common practice)."""
    ws = (0.0, 0.25, 0.5, 0.75, 1.0)
    reps = 8 if os.environ.get("RIGLOOP_FULL") else 1
    est = np.empty((reps, len(ws)))
    covered = np.zeros((reps, len(ws)), dtype=bool)
    for rep in range(reps):
        for j, w in enumerate(ws):
            seed = j if rep == 0 else 1000 * rep + j
            f = fit_two_step(_data(hybrid_agent(w, 400, seed=seed)), "hybrid", starts=2, seed=rep)
            assert f.k == 7
            assert set(f.free) == {"alpha1", "alpha2", "lam", "beta1", "beta2", "p", "w"}
            low, high = f.w_interval
            est[rep, j] = f.params["w"]
            covered[rep, j] = low - 1e-9 <= w <= high + 1e-9
    if reps == 1:
        assert np.all(np.diff(est[0]) > 0), est
        assert covered.sum() >= 4, (est, covered)
    else:
        assert np.all(np.diff(est.mean(axis=0)) > 0), est.mean(axis=0)
        assert covered.mean() >= 0.9, covered.mean()


def test_value_paths_equal_the_trial_loop():
    """The value paths solved as linear recurrences (``linear_scan``), one parameter set or
    several at once, equal the plain loop over trials to rounding."""
    run = simulate_agent("hybrid", 250, seed=8)
    data = _data(run)
    sets = [(0.5, 0.5, 0.6), (0.9, 0.1, 0.0), (1.0 - 1e-6, 1e-6, 1.0), (0.05, 0.95, 0.3)]
    batch = value_paths(data, *(np.array(x) for x in zip(*sets, strict=True)))
    for j, prm in enumerate(sets):
        ref = value_paths_reference(data, *prm)
        one = value_paths(data, *prm)
        for key in ("mf", "mb", "sr", "q2"):
            assert np.allclose(one[key], ref[key], rtol=0, atol=1e-12), (prm, key)
            assert np.allclose(batch[key][:, j], ref[key], rtol=0, atol=1e-12), (prm, key)
        assert np.array_equal(one["rep"], ref["rep"])


def test_linear_scan_solves_the_recurrence():
    """x[t] = a[t] x[t-1] + b[t] against the loop, for lengths around powers of two."""
    rng = np.random.default_rng(0)
    for n in (1, 2, 3, 7, 8, 9, 64, 100):
        a, b = rng.uniform(0, 1, (n, 3)), rng.normal(size=(n, 3))
        x, ref = np.zeros(3), []
        for t in range(n):
            x = a[t] * x + b[t]
            ref.append(x)
        assert np.allclose(linear_scan(a, b), np.array(ref), rtol=0, atol=1e-12)


def test_model_comparison_tells_model_free_from_model_based():
    """BIC prefers the learner that generated the choices (600 trials each)."""
    for truth, other in (("model_free", "model_based"), ("model_based", "model_free")):
        data = _data(simulate_agent(truth, 600, seed=2))
        own = fit_two_step(data, truth, starts=1)
        alt = fit_two_step(data, other, starts=1)
        assert own.bic < alt.bic, (truth, own.bic, alt.bic)
        assert own.aic == pytest.approx(2 * own.k - 2 * own.log_likelihood)


def test_fit_refuses_short_or_non_binary_trials():
    with pytest.raises(BadArgument, match="at least 20 trials"):
        TwoStepData.of([0] * 5, [0] * 5, [0] * 5, [1] * 5)
    with pytest.raises(BadArgument, match=r"^'a2' must be 0 or 1 on every trial"):
        TwoStepData.of([0] * 30, [0] * 30, [2] * 30, [1] * 30)


def test_two_step_command_on_a_csv(tmp_path, capsys):
    """rigloop two-step on a CSV: the stay table, the regression and the figure."""
    run = simulate_agent("model_based", 300, seed=1)
    path = tmp_path / "trials.csv"
    with open(path, "w", newline="") as f:
        w = csv.writer(f)
        w.writerow(["a1", "s2", "a2", "reward"])
        w.writerows(zip(run.a1, run.s2, run.a2, run.reward.astype(int), strict=True))
    fig = tmp_path / "stay.png"
    assert main(["two-step", str(path), "--fit", "none", "--figure", str(fig)]) == 0
    out = capsys.readouterr().out
    assert "300 trials" in out and "reward_x_transition" in out and "rewarded, rare" in out
    assert fig.stat().st_size > 10_000


def test_two_step_command_refuses_a_file_without_the_columns(tmp_path, capsys):
    path = tmp_path / "t.csv"
    path.write_text("a1,s2\n0,1\n")
    assert main(["two-step", str(path), "--fit", "none", "--figure", ""]) == 2
    err = capsys.readouterr().err
    assert "a CSV with a header naming a1, s2, a2, reward (it has a1, s2)" in err


def test_standard_errors_against_statsmodels_numerical_hessian():
    """The SEs are sqrt(diag(H⁻¹)) of −ℓ's Hessian at the estimate (Pawitan 2001, §2.5):
    held against statsmodels' approx_hess3 (a general-purpose numerical Hessian) on the
    same likelihood; a parameter at a bound gets none."""
    from rigloop.fit.two_step import standard_errors

    approx_hess3 = pytest.importorskip("statsmodels.tools.numdiff").approx_hess3

    data = _data(hybrid_agent(0.5, 400, seed=2))
    fit = fit_two_step(data, "hybrid", starts=2)
    se, note = standard_errors(data, fit)
    assert note is None and set(se) == set(fit.free)
    nll = TwoStepLikelihood(data, "hybrid")
    names = list(fit.free)

    def f(x):
        return nll(dict(fit.params, **dict(zip(names, x, strict=True))))

    ref = np.sqrt(np.diag(np.linalg.inv(approx_hess3(np.array([fit.params[n] for n in names]), f))))
    assert np.allclose([se[n] for n in names], ref, rtol=0.02), (se, ref)
    # near the estimate −ℓ is about quadratic: ŵ ± 1.96 SE is close to the profile interval
    low, high = fit.w_interval
    assert abs((fit.params["w"] - 1.96 * se["w"]) - low) < 0.05
    assert abs((fit.params["w"] + 1.96 * se["w"]) - high) < 0.05
    at_zero = fit_two_step(_data(hybrid_agent(0.0, 400, seed=11)), "hybrid", starts=2)
    assert at_zero.params["w"] < 1e-3
    se0, note0 = standard_errors(_data(hybrid_agent(0.0, 400, seed=11)), at_zero)
    assert se0["w"] is None and "w at a bound" in note0
