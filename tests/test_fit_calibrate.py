"""Calibrated profile intervals (fit/calibrate.py): the Bartlett factor from simulated data
sets, checked against models whose likelihood-ratio statistic has a known exact law."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from rigloop import fit
from rigloop.cli.main import main
from rigloop.errors import BadArgument
from rigloop.fit import synthetic as sy
from rigloop.fit.calibrate import (
    CALIBRATED_UNDERCOVER_BELOW,
    UNDERCOVER_BELOW,
    bartlett_factors,
    calibrated_fit,
    calibrated_small_data_warning,
    factor_of,
    small_data_warning,
)
from rigloop.fit.calibrate_sim import choice_replicates
from rigloop.fit.profile import CHI2_1_95

RW = "rescorla_wagner"
stats = pytest.importorskip("scipy.stats")


def test_bartlett_scaling_restores_coverage_for_a_normal_mean_with_unknown_variance():
    """The method itself, on the textbook case: for a normal mean with unknown variance the
    likelihood-ratio statistic is W = n·log(1 + t²/(n − 1)) with t Student's t on n − 1
    degrees of freedom, so its exact law is known. Its mean is 1 + 3/(2n) + O(n⁻²) (the
    Bartlett factor of this test; Barndorff-Nielsen & Cox 1994, Inference and Asymptotics,
    ch. 6, from memory; checked here as n(E[W] − 1) → 3/2 by numerical integration), and
    scaling the 3.84 cutoff by E[W] brings the coverage of the
    interval {μ : W(μ) ≤ cutoff} from well below 95% back to it (exact, via scipy's t)."""
    from scipy import integrate

    def exact(n: int) -> tuple[float, object]:
        t = stats.t(n - 1)
        mean, _ = integrate.quad(lambda x: n * math.log1p(x * x / (n - 1)) * t.pdf(x),
                                 -np.inf, np.inf)
        return mean, t

    def coverage(n: int, t, cutoff: float) -> float:
        # W ≤ c  ⇔  |t| ≤ √((n − 1)(e^{c/n} − 1))
        return float(2 * t.cdf(math.sqrt((n - 1) * math.expm1(cutoff / n))) - 1)

    mean_200, _ = exact(200)
    assert 200 * (mean_200 - 1) == pytest.approx(1.5, abs=0.02)  # E[W] = 1 + 3/(2n) + O(n⁻²)
    mean_8, t8 = exact(8)
    assert coverage(8, t8, CHI2_1_95) < 0.93  # uncalibrated: 92.4% at n = 8
    assert coverage(8, t8, CHI2_1_95 * factor_of(mean_8)) == pytest.approx(0.95, abs=0.002)


def _binomial_events(n: int, theta: float, seed: int) -> list:
    """Go/no-go trials with a learner that learns nothing (α = 0, so V = 0): each response
    is a Bernoulli draw with p = σ(−θ) (β = 1, lapse 0)."""
    return sy.gonogo_trials({"alpha": 0.0}, 1.0, theta, 0.0, n=n, seed=seed)


def test_factor_of_a_binomial_rate_equals_the_exact_mean_likelihood_ratio():
    """With α, β and lapse pinned the fitted model is one binomial proportion p = σ(−θ), and
    the statistic at the generating p has an exact finite mean: Σ_k Binom(k; n, p)·W(k),
    W(k) = 2[k log(k/np) + (n − k) log((n − k)/n(1 − p))] (the binomial likelihood ratio;
    scipy.stats.binom as the reference). The replicates' mean must agree within 3.5 of its
    standard errors."""
    from scipy.special import xlogy

    n = 20
    events = _binomial_events(n, 1.7, seed=5)
    pins = {"alpha": 0.0, "beta": 1.0, "lapse": 0.0}
    r = fit.fit_subject(events, RW, sy.IDENTITY, reward_unit_ul=sy.UNIT_UL, fixed=pins, starts=1,
                        bounds={"theta": (-8.0, 8.0)})
    data = fit.prepare(events, sy.IDENTITY, reward_unit_ul=sy.UNIT_UL)
    cal = bartlett_factors(data, r, 200, seed=2)
    p = 1.0 / (1.0 + math.exp(r.params["theta"]))
    k = np.arange(n + 1)
    w = 2 * (xlogy(k, k / (n * p)) + xlogy(n - k, (n - k) / (n * (1 - p))))
    exact = float((stats.binom.pmf(k, n, p) * w).sum())
    assert abs(cal.mean_lr["theta"] - exact) < 3.5 * cal.se["theta"], (cal.mean_lr, exact)
    assert 0.0 < cal.se["theta"] < 0.2
    assert cal.factor["theta"] == max(1.0, cal.mean_lr["theta"])


@pytest.fixture(scope="module")
def gonogo_fit():
    events = sy.gonogo_trials({"alpha": 0.2}, 6.0, 0.4, 0.1, n=200, seed=11)
    r = fit.fit_subject(events, RW, sy.IDENTITY, reward_unit_ul=sy.UNIT_UL, starts=1,
                        fixed={"alpha": 0.2, "lapse": 0.1})
    return events, r


def test_calibrated_intervals_contain_the_plain_ones_and_say_so(gonogo_fit):
    """Each calibrated interval is the plain one or wider (factor ≥ 1), is the profile's
    crossing of 3.84 × factor, keeps the uncalibrated interval beside it, and the JSON
    record and the table say what was done."""
    events, r = gonogo_fit
    c = calibrated_fit(events, r, 40, seed=1, representation=sy.IDENTITY, reward_unit_ul=sy.UNIT_UL)
    assert c.ci95_uncalibrated == r.ci95 and set(c.ci95) == set(r.free)
    for name in r.free:
        assert c.calibration.factor[name] >= 1.0
        assert c.ci95[name].lo <= r.ci95[name].lo + 1e-9
        assert c.ci95[name].hi >= r.ci95[name].hi - 1e-9
    assert any("calibrated from 40 simulated data sets" in w for w in c.warnings)
    rec = c.record()
    assert rec["calibration"]["replicates"] == 40
    assert set(rec["calibration"]["factor"]) == set(r.free)
    assert rec["ci95"]["beta"] == [c.ci95["beta"].lo, c.ci95["beta"].hi]
    assert "calibrated (40 simulated data sets" in fit.format_fit(c)
    assert r.record()["calibration"] is None


def test_calibration_refuses_too_few_replicates_and_other_trials(gonogo_fit):
    events, r = gonogo_fit
    with pytest.raises(BadArgument, match="calibrate"):
        calibrated_fit(events, r, 5, representation=sy.IDENTITY, reward_unit_ul=sy.UNIT_UL)
    with pytest.raises(BadArgument, match="trials the fit was made on"):
        calibrated_fit(events[:150], r, 20, representation=sy.IDENTITY, reward_unit_ul=sy.UNIT_UL)


def test_choice_replicates_rerun_the_task_on_the_animals_trials():
    """A two-choice replicate keeps the animal's cues, sessions and omissions; its choices
    are the model's own; a choice of the correct side is paid at the rate the animal was
    (here every correct choice of the animal paid: p_good 1), an incorrect one never."""
    events = sy.choice_trials({"alpha": 0.3}, 4.0, 0.0, 0.05, n=120, seed=2, p_good=1.0)
    data = fit.prepare(events, sy.IDENTITY, reward_unit_ul=sy.UNIT_UL)
    r = fit.fit_subject(data, RW, starts=1, intervals=False, hessian=False,
                        fixed={"decay": 0.7, "persev": 0.0, "lapse": 0.05})
    reps = choice_replicates(events, data, r, 4, np.random.default_rng(0))
    assert len(reps) == 4
    for rep in reps:
        assert rep.sessions == data.sessions and rep.n_observed == data.n_observed
        assert not np.array_equal(rep.responded, data.responded)
        # the reward each replicate got follows its own choice and the trial's correct side
        for k, (_, rew) in enumerate(rep.rows):
            correct = "right" if (events[k].cues[0].cue == "tone_hi") == (k < 60) else "left"
            chose_right = rep.responded[k] == 1.0
            assert (rew.sum() > 0) == ((correct == "right") == chose_right)


def test_small_data_warning_names_the_option_and_thresholds():
    """The measured thresholds: below them a fit is told that its χ² intervals undercover."""
    w = small_data_warning(500, 5, "choice")
    assert w is not None and "--calibrate" in w and "100 per parameter" in w
    assert small_data_warning(UNDERCOVER_BELOW["respond"] * 4, 4, "respond") is None
    assert small_data_warning(2000, 5, "choice") is None


def test_calibrated_small_data_warning_where_calibration_was_measured_short():
    """Below the measured thresholds a calibrated fit is told its intervals still undercover
    (recovery.py --calibrate 30: two-choice 87–92% at 100 trials per parameter, 93–94% at
    200); at and above them, nothing."""
    w = calibrated_small_data_warning(500, 5, "choice")
    assert w is not None and "even calibrated" in w and "--fix" in w and "100 per parameter" in w
    assert calibrated_small_data_warning(CALIBRATED_UNDERCOVER_BELOW["choice"] * 5, 5, "choice") is None
    assert calibrated_small_data_warning(1000, 4, "respond") is None
    assert calibrated_small_data_warning(500, 4, "respond") is not None
    assert calibrated_small_data_warning(10, 0, "choice") is None


def test_cli_calibrate_and_its_wrong_input(tmp_path, capsys):
    """rigloop fit --calibrate B: the JSON's calibration block; fewer than 20 refused by the
    parser; without it a small fit carries the undercoverage warning naming the option."""
    from rigloop.offline.simulate import SimulatedAnimal, record_session
    from rigloop.rules import load_example
    from rigloop.store import Store

    path = tmp_path / "rig.db"
    rules = load_example("two_choice_staircase")
    sides = {"light_left": "left", "light_right": "right"}
    animal = SimulatedAnimal("r07", task="choice", sides=sides, seed=4)
    with Store(path) as store:
        record_session(store, rules, animal, session="s1", start_time=1.8e9, max_trials=80)
    base = ["fit", "--db", str(path), "--subject", "r07", "--starts", "1", "--fix", "persev=0",
            "--fix", "lapse=0.05", "--fix", "alpha=0.2", "--json"]
    assert main(base) == 0
    plain = json.loads(capsys.readouterr().out)["fits"][0]
    assert plain["calibration"] is None and any("--calibrate" in w for w in plain["warnings"])
    assert main([*base, "--calibrate", "20"]) == 0
    f = json.loads(capsys.readouterr().out)["fits"][0]
    assert f["calibration"]["replicates"] == 20
    assert set(f["calibration"]["factor"]) == set(f["ci95"]) == {"beta", "bias"}
    assert main([*base, "--calibrate", "5"]) == 2
    assert "--calibrate" in capsys.readouterr().err
