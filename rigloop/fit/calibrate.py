"""Calibrated profile intervals for small data: the χ²(1) cutoff corrected by a
Bartlett-type factor estimated with a parametric bootstrap at the estimate.

Why. The profile interval keeps the values whose likelihood-ratio statistic
W = 2·(ℓ̂ − ℓ_p(θ_j)) is below 3.84, χ²(1)'s 95% quantile. That holds as the trials grow;
with a few hundred trials per animal and four or five free parameters the statistic at the
truth is larger than a χ²(1) (its mean is 1.1–1.7 instead of 1 in ``tools/bench/recovery.py``),
so the intervals are too short and miss the truth more often than 5% of the time.

The correction. Bartlett (1937, Proc R Soc A 160:268) showed that E[W] = 1 + b/n + O(n⁻²)
and that W / E[W] follows χ²(1) to a higher order than W itself (for the likelihood-ratio
statistic in general: Lawley 1956, Biometrika 43:295; Barndorff-Nielsen & Cox 1994,
*Inference and Asymptotics*, §6.5, from memory). Dividing W by its mean is the same as
multiplying the cutoff by it: the interval of θ_j is {θ_j : W(θ_j) ≤ 3.84·E[W]}.

E[W] is estimated at the estimate (``bartlett_factors``): B data sets are simulated from
the fitted model on the animal's own trial sequence (``calibrate_sim.py``), each is
fitted (from the generating values), and for each parameter the statistic at its
generating value, 2·(ℓ̂_b − ℓ_b(θ_j = θ̂_j)), is computed; its mean over the replicates
is the factor, raised to 1 where it is lower: a calibrated interval is never shorter than
the χ² one. Two reasons: a mean below 1 comes mostly from parameters the trials barely
pin down (an estimate near a bound or on a flat ridge, where shrinking the interval would
claim knowledge the trials do not hold), and a generating value on a bound (lapse at 0)
gives W a mixture of 0 and χ²(1) with mean near ½ (Self & Liang 1987, JASA 82:605) that
says nothing about an interior truth. The factor's own
standard error is reported; B = 100 gives about ±0.15–0.3 (W's variance is about 2·E[W]²).

Cost: B × (1 + free parameters) local refits from the generating values, each a few
hundredths of a second on the batched likelihood (about 0.2 s a replicate for a
five-parameter Rescorla–Wagner fit of 500 trials), then one profile per parameter.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass

import numpy as np

from ..errors import BadArgument
from .data import FitData, as_fit_data
from .likelihood import NegLogLik
from .params import PARAMETERS
from .profile import CHI2_1_95, interval_warnings, profile_intervals
from .results import FitResult

MIN_REPLICATES = 20  # a mean of fewer likelihood ratios is too noisy to scale a cutoff by
WIDE_FACTOR = 2.5  # above this the trials are far from the χ² regime: said in a warning


@dataclass(frozen=True, slots=True)
class Calibration:
    """The Bartlett factors of a fit: per free parameter, the mean likelihood-ratio
    statistic at its generating value over ``replicates`` simulated data sets (``mean_lr``),
    its standard error, and the factor used (``factor`` = max(1, mean_lr)); the cutoff of
    its calibrated 95% interval is 3.84 × factor."""

    replicates: int
    mean_lr: dict[str, float]
    se: dict[str, float]
    factor: dict[str, float]

    def cutoff(self, name: str) -> float:
        return CHI2_1_95 * self.factor[name]


def bartlett_factors(data: FitData, result: FitResult, replicates: int, *, seed: int = 0,
                     events: Sequence | None = None,
                     progress: Callable[[int, int], None] | None = None) -> Calibration:
    """The Bartlett factor of each free parameter of ``result`` (fitted to ``data``) from
    ``replicates`` data sets simulated at the estimate (see the module docstring).

    events: the trials ``data`` was prepared from; a choice fit needs them (its replicates
    re-run the task: the chosen side decides what is learned and earned).
    """
    from .calibrate_sim import replicate_objectives
    from .search import _Box, _local, _scipy_optimize

    replicates = _count(replicates)
    optimize = _scipy_optimize()
    free = result.free
    box = _Box(free, result.bounds)
    s_hat = box.unit(np.array([result.params[n] for n in free], dtype=np.float64))
    lr = np.zeros((replicates, len(free)))
    for b, objective in enumerate(replicate_objectives(data, result, replicates, seed, events)):
        lr[b] = _ratios_at_generating(optimize, _local, box, objective, s_hat)
        if progress is not None:
            progress(b + 1, replicates)
    mean = lr.mean(axis=0)
    se = lr.std(axis=0, ddof=1) / math.sqrt(replicates)
    return Calibration(replicates, {n: float(mean[j]) for j, n in enumerate(free)},
                       {n: float(se[j]) for j, n in enumerate(free)},
                       {n: factor_of(float(mean[j])) for j, n in enumerate(free)})


def factor_of(mean_lr: float) -> float:
    """The Bartlett factor a mean likelihood ratio gives: itself, at least 1."""
    return max(1.0, float(mean_lr))


def _ratios_at_generating(optimize, local, box, objective: NegLogLik,
                          s_gen: np.ndarray) -> np.ndarray:
    """2·(ℓ̂_b − ℓ_b(θ_j = generating)) for each coordinate j of one replicate, every fit
    started from the generating values (the replicate's own maximum is near them)."""
    def nll(s: np.ndarray) -> float:
        return objective(box.natural(s))

    k = len(s_gen)
    s_b, f_b = local(optimize, nll, s_gen, objective)
    s_b = np.clip(s_b, 0.0, 1.0)
    constrained = np.empty(k)
    for j in range(k):
        others = [i for i in range(k) if i != j]
        if not others:
            constrained[j] = nll(s_gen)
            continue
        full = np.array(s_gen, dtype=np.float64)

        def inner(z: np.ndarray, full: np.ndarray = full, others: list = others) -> float:
            full[others] = z
            return nll(full)

        # from the replicate's estimate; where that lands beyond the 95% line, also from
        # the generating values (a far start can stop in another basin), the lower one
        _, value = local(optimize, inner, s_b[others], objective)
        if 2.0 * (value - f_b) > CHI2_1_95:
            value = min(value, local(optimize, inner, s_gen[others], objective)[1])
        constrained[j] = value
    best = min(f_b, float(constrained.min()))
    return np.maximum(2.0 * (constrained - best), 0.0)


def calibrated_fit(events: Iterable | FitData, result: FitResult, replicates: int, *,
                   seed: int = 0, representation=None, reward_unit_ul: float | None = None,
                   data: FitData | None = None,
                   progress: Callable[[int, int], None] | None = None) -> FitResult:
    """``result`` with calibrated 95% profile intervals: each parameter's cutoff 3.84 × its
    Bartlett factor from ``replicates`` simulated data sets (``bartlett_factors``).

    events: the trials ``result`` was fitted to (or their FitData; a choice fit needs the
    events); representation, reward_unit_ul: as for ``fit_subject``; data: the FitData
    already prepared from the events (saves preparing them again). The returned result
    keeps the uncalibrated intervals (``ci95_uncalibrated``) and the factors
    (``calibration``), and says in its warnings what was done.
    """
    from .search import _Box, _local, _scipy_optimize

    if not isinstance(result, FitResult):
        raise BadArgument("result", "the FitResult of fit_subject on these trials", result)
    event_list = None if isinstance(events, FitData) else list(events)
    if data is None:
        data = as_fit_data(events if event_list is None else event_list, representation,
                           reward_unit_ul, result.link)
    if data.n_observed != result.n_trials:
        raise BadArgument("events", f"the trials the fit was made on ({result.n_trials} in its "
                          f"likelihood)", f"{data.n_observed} trials in the likelihood")
    cal = bartlett_factors(data, result, replicates, seed=seed, events=event_list,
                           progress=progress)
    optimize = _scipy_optimize()
    free = result.free
    pinned = dict(result.fixed)
    box = _Box(free, result.bounds)
    theta = np.array([result.params[n] for n in free], dtype=np.float64)
    s_hat = box.unit(theta)
    objective = NegLogLik(data, result.learner, free, pinned)

    def nll(s: np.ndarray) -> float:
        return objective(box.natural(s))

    se_unit = _unit_se(result, box, theta)
    ci, lowest = profile_intervals(nll, s_hat, -result.log_likelihood, box.natural, free,
                                   lambda f, z0: _local(optimize, f, z0, objective), se_unit,
                                   cutoffs=[cal.cutoff(n) for n in free])
    warnings = list(result.warnings)
    warnings.append(calibration_note(cal))
    short = calibrated_small_data_warning(result.n_trials, result.k, result.link)
    if short is not None:
        warnings.append(short)
    for name in free:
        se = result.se.get(name) if result.se else None
        for w in interval_warnings(name, result.params[name], ci[name], result.bounds[name], se,
                                   PARAMETERS[name].log):
            if w not in warnings and "95% interval" in w:
                warnings.append(w)
    wide = [n for n in free if cal.factor[n] > WIDE_FACTOR]
    if wide:
        warnings.append(f"Calibration factor above {WIDE_FACTOR} for {', '.join(wide)}: these "
                        f"trials are far from the amount of data where likelihood intervals "
                        f"behave; the calibrated intervals are wide and rest on the fitted "
                        f"model being right; fit more trials or fix parameters (--fix).")
    if lowest < -result.log_likelihood - 0.01:
        warnings.append(f"A calibrated profile found a log-likelihood "
                        f"{-result.log_likelihood - lowest:.2f} higher than the fit's: it stopped "
                        f"at a local optimum; fit again with more starts (--starts).")
    return dataclasses.replace(result, ci95=ci, ci95_uncalibrated=dict(result.ci95),
                               calibration=cal, warnings=tuple(warnings))


# trials per free parameter below which χ² profile intervals were measured to cover the
# truth less than 93% of the time (tools/bench/recovery.py --lr-only, Rescorla–Wagner,
# 160 data sets per point): go/no-go 125/parameter 92%, 250/parameter 95%; two-choice
# 100/parameter 84–90%, 200/parameter 91–94%, 400/parameter 92–95%
UNDERCOVER_BELOW = {"respond": 250, "choice": 400}


def small_data_warning(n_trials: int, n_free: int, link: str) -> str | None:
    """The warning for a fit with so few trials per free parameter that its uncalibrated
    95% intervals are known to undercover (``UNDERCOVER_BELOW``), naming the option; None
    with enough trials."""
    need = _short_of(UNDERCOVER_BELOW, n_trials, n_free, link)
    if need is None:
        return None
    kind = "two-choice" if link == "choice" else "go/no-go"
    return (f"{_per_parameter(n_trials, n_free)}: at fewer than {need} per parameter, {kind} 95% profile intervals were "
            f"measured to contain the truth less than 95% of the time (84–92% at 100–125 per "
            f"parameter); calibrate them (rigloop fit --calibrate 100; calibrated_fit in "
            f"Python) or fix parameters (--fix).")


# trials per free parameter below which even calibrated intervals were measured to cover
# the truth less than 93% of the time (tools/bench/recovery.py --lr-only --calibrate 30,
# Rescorla–Wagner, 160 data sets per point): go/no-go 125/parameter 92.5–96.9% (lapse short),
# 250/parameter 95–96% uncalibrated already; two-choice 100/parameter 87–92%, 200/parameter
# 93.1–94.4%
CALIBRATED_UNDERCOVER_BELOW = {"respond": 250, "choice": 200}


def calibrated_small_data_warning(n_trials: int, n_free: int, link: str) -> str | None:
    """The warning for a calibrated fit with so few trials per free parameter that even
    its calibrated intervals were measured to undercover (``CALIBRATED_UNDERCOVER_BELOW``);
    None with enough trials."""
    need = _short_of(CALIBRATED_UNDERCOVER_BELOW, n_trials, n_free, link)
    if need is None:
        return None
    kind, measured = (("two-choice", "87–92% at 100 per parameter") if link == "choice"
                      else ("go/no-go", "92.5% for lapse at 125 per parameter"))
    return (f"{_per_parameter(n_trials, n_free)}: even calibrated, {kind} 95% intervals were measured to contain the "
            f"truth less often than 93% of the time below {need} per parameter ({measured}); "
            f"read them as approximate, fix parameters (--fix) or fit more trials.")


def _short_of(table: dict[str, int], n_trials: int, n_free: int, link: str) -> int | None:
    """The trials per free parameter ``table`` asks of ``link`` when this fit has fewer;
    None when it has enough (or the table says nothing of the link)."""
    need = table.get(link)
    if need is None or n_free < 1 or n_trials >= need * n_free:
        return None
    return need


def _per_parameter(n_trials: int, n_free: int) -> str:
    return (f"{n_trials} trials for {n_free} free parameters ({n_trials / n_free:.0f} per "
            f"parameter)")


def calibration_note(cal: Calibration) -> str:
    """The sentence that says the intervals are calibrated, and by how much."""
    factors = ", ".join(f"{n} ×{f:.2f}" for n, f in cal.factor.items())
    return (f"95% intervals calibrated from {cal.replicates} simulated data sets at the estimate "
            f"(Bartlett factor of the 3.84 cutoff: {factors}).")


def _unit_se(result: FitResult, box, theta: np.ndarray) -> list[float | None] | None:
    """The fit's standard errors on the unit box (first guesses of the interval ends)."""
    if not result.se:
        return None
    jac = box.jacobian(theta)
    out: list[float | None] = []
    for j, name in enumerate(result.free):
        se = result.se.get(name)
        out.append(None if se is None or not jac[j] else float(se) / float(jac[j]))
    return out


def _count(replicates) -> int:
    if isinstance(replicates, bool) or not isinstance(replicates, (int, np.integer)) \
            or int(replicates) < MIN_REPLICATES:
        raise BadArgument("calibrate", f"a whole number of simulated data sets >= {MIN_REPLICATES} "
                          "(the factor is their mean likelihood ratio; 100 or more gives it to "
                          "about ±0.15)", replicates)
    return int(replicates)
