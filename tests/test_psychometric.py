"""Psychometric fits: the functions and thresholds against their closed forms, the fit
against a general-purpose GLM, intervals that cover, staircase targets, and the command."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from rigloop.fit import psychometric as P

statsmodels_api = pytest.importorskip("statsmodels.api")


def _observer(function, alpha, beta, guess, lapse, levels, n, seed):
    """Trials of a simulated observer whose ψ is known (invented test data)."""
    rng = np.random.default_rng(seed)
    x = rng.choice(levels, n)
    y = (rng.random(n) < P.psi(function, x, alpha, beta, guess, lapse)).astype(float)
    return x, y


def test_logistic_without_guess_and_lapse_is_the_logit_glm():
    """With γ = λ = 0 the logistic ψ is a logistic regression: statsmodels' Logit gives the
    same location −b0/b1, slope b1 and log-likelihood (statsmodels Logit, a general GLM)."""
    x, y = _observer("logistic", 0.4, 8.0, 0.0, 0.0, np.linspace(0.05, 1.0, 10), 600, seed=3)
    glm = statsmodels_api.Logit(y, statsmodels_api.add_constant(x)).fit(disp=0)
    b0, b1 = glm.params
    fit = P.fit_psychometric(x, y, function="logistic", level=0.5, guess=0.0, lapse=0.0, band_runs=0)
    assert fit.params["threshold"] == pytest.approx(-b0 / b1, rel=1e-4)
    assert fit.params["slope"] == pytest.approx(b1, rel=1e-4)
    assert fit.log_likelihood == pytest.approx(glm.llf, rel=1e-8)


def test_normal_without_guess_and_lapse_is_the_probit_glm():
    """Cumulative normal ψ with γ = λ = 0 is probit regression (statsmodels Probit)."""
    x, y = _observer("normal", 0.5, 4.0, 0.0, 0.0, np.linspace(0.0, 1.0, 9), 600, seed=4)
    glm = statsmodels_api.Probit(y, statsmodels_api.add_constant(x)).fit(disp=0)
    b0, b1 = glm.params
    fit = P.fit_psychometric(x, y, function="normal", level=0.5, guess=0.0, lapse=0.0, band_runs=0)
    assert fit.params["threshold"] == pytest.approx(-b0 / b1, rel=1e-4)
    assert fit.params["slope"] == pytest.approx(b1, rel=1e-4)


@pytest.mark.parametrize("function", P.FUNCTIONS)
@pytest.mark.parametrize("direction", [1, -1])
def test_threshold_puts_psi_at_the_level(function, direction):
    """alpha_at and threshold_at are inverses, and ψ(threshold) = level (closed form)."""
    a = P.alpha_at(function, 0.3, 2.5, 0.5, 0.04, 0.8, direction)
    assert P.threshold_at(function, a, 2.5, 0.5, 0.04, 0.8, direction) == pytest.approx(0.3, rel=1e-12)
    assert float(P.psi(function, 0.3, a, 2.5, 0.5, 0.04, direction)) == pytest.approx(0.8, rel=1e-12)


def test_location_conventions():
    """Weibull: F(α) = 1 − 1/e; logistic and normal: F(α) = 1/2 (Wichmann & Hill 2001,
    Percept Psychophys 63:1293, their parameterisation; from memory)."""
    assert float(P.core_function("weibull", 0.3, 0.3, 3.0)) == pytest.approx(1 - math.exp(-1), rel=1e-12)
    assert float(P.core_function("logistic", 0.3, 0.3, 3.0)) == 0.5
    assert float(P.core_function("normal", 0.3, 0.3, 3.0)) == 0.5
    # the 2AFC Weibull reaches γ + (1 − γ)(1 − 1/e) ≈ 81.6% at α (closed form)
    assert P.threshold_at("weibull", 0.3, 3.0, 0.5, 0.0, 0.5 + 0.5 * (1 - math.exp(-1))) == pytest.approx(0.3)


def test_levitt_targets():
    """Transformed up-down rules converge on p = 0.5^(1/k) (Levitt 1971, J Acoust Soc Am
    49:467): 1-up-2-down 70.7%, 1-up-3-down 79.4%."""
    assert P.levitt_target(2, 1) == pytest.approx(0.7071, abs=1e-4)
    assert P.levitt_target(3, 1) == pytest.approx(0.7937, abs=1e-4)
    assert P.levitt_target(1, 2) == pytest.approx(1 - 0.7071, abs=1e-4)
    assert P.levitt_target(2, 2) is None


def test_reversals_of_a_track():
    """A reversal is the level where the track turns."""
    track = [1.0, 0.9, 0.8, 0.9, 0.8, 0.7, 0.7, 0.8, 0.9, 0.8]
    assert P.reversal_levels(track) == [0.8, 0.9, 0.7, 0.9]
    assert P.convergence_level(track)[0] == pytest.approx(np.mean([0.7, 0.9]))
    assert P.convergence_level([1.0, 0.9, 0.8]) == (None, 0)


def test_wilson_interval_matches_statsmodels():
    """Wilson score interval (Wilson 1927) as statsmodels' proportion_confint(method='wilson')."""
    from statsmodels.stats.proportion import proportion_confint

    lo, hi = P.wilson_interval(np.array([3, 17, 40]), np.array([10, 20, 40]))
    ref = [proportion_confint(k, n, method="wilson") for k, n in [(3, 10), (17, 20), (40, 40)]]
    assert np.allclose(lo, [r[0] for r in ref], rtol=1e-10)
    assert np.allclose(hi, [r[1] for r in ref], rtol=1e-10)


def test_chi2_constants():
    """The interval's critical values are scipy's χ²₁ quantiles (scipy.stats.chi2)."""
    from scipy.stats import chi2

    assert P.CHI2_1_95 == pytest.approx(chi2.ppf(0.95, 1), rel=1e-12)
    assert P.CHI2_MIX_95 == pytest.approx(chi2.ppf(0.90, 1), rel=1e-12)


def test_profile_interval_ends_sit_at_the_critical_deviance():
    """At each end of the threshold's interval the profile deviance is χ²₁(0.95)."""
    x, y = _observer("weibull", 0.25, 2.0, 0.5, 0.02, np.linspace(0.05, 0.8, 10), 500, seed=5)
    fit = P.fit_psychometric(x, y, function="weibull", guess=0.5, band_runs=0, intervals=("threshold",))
    lo, hi = fit.ci95["threshold"]
    assert lo < fit.params["threshold"] < hi
    for end in (lo, hi):
        held = P.fit_psychometric(x, y, function="weibull", guess=0.5, band_runs=0, intervals=())
        # the refit with the threshold pinned: its log-likelihood, by the module's own profile
        from rigloop.fit.search import _scipy_optimize

        xs, k, n = P.counts_by_level(x, y)
        model = P._Model("weibull", 1, 0.75, xs, k, n, {"guess": 0.5})
        start = {"threshold": held.params["threshold"], "slope": math.log(held.params["slope"]),
                 "guess": 0.5, "lapse": held.params["lapse"]}
        ll = P._profile(_scipy_optimize(), model, "threshold", end, start)
        assert 2 * (held.log_likelihood - ll) == pytest.approx(P.CHI2_1_95, abs=0.02)


def test_threshold_intervals_cover_the_truth():
    """Over simulated observers with a known threshold, the 95% profile interval holds it
    in most runs (small campaign: at least 21 of 25; the full rate is near 95%)."""
    truth = P.threshold_at("weibull", 0.3, 2.0, 0.5, 0.03, 0.75)
    hits = 0
    for seed in range(25):
        x, y = _observer("weibull", 0.3, 2.0, 0.5, 0.03, np.linspace(0.05, 1.0, 12), 400, seed=100 + seed)
        fit = P.fit_psychometric(x, y, function="weibull", guess=0.5, band_runs=0, intervals=("threshold",))
        lo, hi = fit.ci95["threshold"]
        hits += lo <= truth <= hi
    assert hits >= 21


def test_lapse_on_its_bound_gets_a_one_sided_interval():
    """An observer that never lapses: λ̂ = 0, its interval starts at 0, said in words."""
    x, y = _observer("logistic", 0.4, 12.0, 0.5, 0.0, np.linspace(0.0, 1.0, 11), 800, seed=7)
    fit = P.fit_psychometric(x, y, function="logistic", guess=0.5, band_runs=0)
    if fit.params["lapse"] == 0.0:
        assert "lapse" in fit.one_sided
        assert fit.ci95["lapse"][0] == 0.0
        assert any("one-sided" in w for w in fit.warnings)


def test_an_observer_that_ignores_the_level_gets_no_confident_threshold():
    """P(correct) = 0.6 at every level: the threshold is not pinned down and a warning says so."""
    rng = np.random.default_rng(8)
    x = rng.choice(np.linspace(0.05, 1.0, 10), 600)
    y = (rng.random(600) < 0.6).astype(float)
    fit = P.fit_psychometric(x, y, function="weibull", guess=0.5, band_runs=0)
    assert fit.warnings
    lo, hi = fit.ci95["threshold"]
    assert hi - lo > 0.5 or not (x.min() <= fit.params["threshold"] <= x.max())


def test_band_holds_the_curve():
    """The bootstrap band brackets the fitted curve."""
    x, y = _observer("weibull", 0.3, 2.0, 0.5, 0.03, np.linspace(0.05, 1.0, 8), 300, seed=9)
    fit = P.fit_psychometric(x, y, function="weibull", guess=0.5, band_runs=40)
    grid, lo, hi = fit.band
    curve = fit.predict(grid)
    assert np.all(lo <= curve + 0.02) and np.all(curve <= hi + 0.02)


def test_bad_arguments_are_named():
    x, y = _observer("logistic", 0.4, 8.0, 0.5, 0.0, np.linspace(0.05, 1.0, 5), 100, seed=1)
    with pytest.raises(ValueError, match="function"):
        P.fit_psychometric(x, y, function="gompertz")
    with pytest.raises(ValueError, match="level"):
        P.fit_psychometric(x, y, level=0.4, guess=0.5)
    with pytest.raises(ValueError, match="at least 20 scored trials"):
        P.fit_psychometric(x[:5], y[:5])


# --------------------------------------------------------------------------- the command


@pytest.fixture(scope="module")
def staircase_store(tmp_path_factory):
    """One simulated rat through side training into the contrast staircase (invented data)."""
    from rigloop.offline.simulate import preset_animal, record_session
    from rigloop.rules.load import load_example
    from rigloop.store import Store

    path = tmp_path_factory.mktemp("psy") / "store.sqlite"
    rules = load_example("two_choice_staircase")
    animal = preset_animal("fast_learner", rules, "rat01", seed=11)
    with Store(path) as store:
        state = None
        for s in range(2):
            run = record_session(store, rules, animal, session=f"s{s + 1}", state=state, max_trials=450)
            state = run.state
    return str(path)


def test_command_json_and_figure(staircase_store, tmp_path, capsys):
    """`rigloop psychometric --json` prints the fixed document; --out writes the figure."""
    from rigloop.cli.main import main

    fig = tmp_path / "psy.png"
    assert main(["psychometric", "--db", staircase_store, "--subject", "rat01", "--json", "--band-runs", "30",
                 "--out", str(fig)]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert {"subject", "function", "params", "ci95", "level", "n_trials"} <= set(doc)
    assert set(doc["params"]) == {"threshold", "slope", "guess", "lapse"}
    assert doc["params"]["guess"] == 0.5 and doc["ci95"]["guess"] is None
    assert doc["staircase"]["target"] == pytest.approx(0.7071, abs=1e-4)
    # the 1-up-2-down track settles where the fitted curve gives Levitt's 70.7% (Levitt 1971)
    lo, hi = doc["staircase"]["threshold_at_target_ci95"]
    assert lo <= doc["staircase"]["level"] <= hi
    assert abs(doc["staircase"]["p_fit_at_level"] - 0.7071) < 0.06
    assert fig.stat().st_size > 10_000


def test_command_text_and_wrong_input(staircase_store, capsys):
    from rigloop.cli.main import main

    assert main(["psychometric", "--db", staircase_store, "--subject", "rat01", "--band-runs", "0",
                 "--function", "logistic"]) == 0
    out = capsys.readouterr().out
    assert "threshold (75%)" in out and "Levitt (1971) target 70.7%" in out
    assert main(["psychometric", "--db", staircase_store, "--subject", "rat99"]) == 2
    assert "rat01" in capsys.readouterr().err
    assert main(["psychometric", "--db", staircase_store, "--subject", "rat01", "--level", "1.5"]) == 2
    assert main(["psychometric", "--db", staircase_store, "--subject", "rat01", "--guess", "lots"]) == 2
    assert "--guess" in capsys.readouterr().err


def test_yes_no_fit_frees_the_guess_rate():
    """Yes/no: responding at a 15% floor is the fitted guess rate, inside its interval."""
    x, y = _observer("logistic", 0.5, 10.0, 0.15, 0.02, np.linspace(0.0, 1.0, 11), 1500, seed=12)
    fit = P.fit_psychometric(x, y, function="logistic", guess=None, band_runs=0)
    lo, hi = fit.ci95["guess"]
    assert lo <= 0.15 <= hi and "guess" not in fit.fixed
