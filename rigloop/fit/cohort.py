"""A cohort: every animal fitted on its own, then a Gaussian population over them.

Each animal is fitted by maximum likelihood (``fit_subject``); its estimate of each
free parameter and the standard error from the Hessian become a Gaussian
approximation of its likelihood (a Laplace approximation, diagonal: the correlations
between an animal's parameters are left out) on the parameter's unconstrained scale:

    u = log θ                         variances, β (the parameters searched on a log scale)
    u = logit((θ − lo) / (hi − lo))   rates, probabilities (searched linearly in [lo, hi])
    u = θ                             θ, which has no bounds of its own

Population model (empirical Bayes; a normal–normal hierarchy per parameter):
u_i ~ N(μ, σ²) for animal i, and its estimate û_i ~ N(u_i, c_i) with c_i its squared
standard error on the u scale. μ and σ² maximise the marginal likelihood
Π_i N(û_i; μ, σ² + c_i), found by EM (Dempster, Laird & Rubin 1977; this hierarchy as in
Efron & Morris 1975): the E-step gives each animal's posterior
N(m_i, v_i), v_i = 1 / (1/c_i + 1/σ²), m_i = v_i (û_i / c_i + μ / σ²); the M-step sets
μ = mean m_i and σ² = mean((m_i − μ)² + v_i). The shrunken estimate of animal i is m_i
(mapped back: the posterior median on the natural scale), pulled towards μ the more,
the less its own trials pin it down.

An estimate on a bound of its search range, or without a standard error, carries
almost no information here (c_i = 10², on the u scale): its posterior is the population.

Outliers: animal i is judged against the population fitted to the *other* animals
(leave one out, so an outlier cannot widen the population that judges it): for each
parameter z = (û_i − μ₋ᵢ) / √(σ²₋ᵢ + c_i + Var μ̂₋ᵢ), and the animal is an outlier when
some |z| exceeds the two-sided Bonferroni bound for a 5% family-wise rate over every
animal and parameter (common practice). An estimate on a bound (no standard error) is
judged where it sits (1% of the range inside a bound on the logit scale) against the
others' spread, unless another animal sits on the same bound. A parameter is judged only
where at least three (and half) of the other animals have a standard error for it. The reason says which parameter, how far and which way.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from statistics import NormalDist
from typing import Any

import numpy as np

from ..errors import BadArgument
from .params import PARAMETERS
from .results import FitResult

UNINFORMATIVE_VAR = 100.0  # c_i on the u scale for an estimate without a standard error
_EDGE = 1e-4  # logit scale: proportions kept in [_EDGE, 1 − _EDGE] of the range
MIN_ANIMALS = 3
FAMILY_ALPHA = 0.05


# --------------------------------------------------------------------------- scales


@dataclass(frozen=True, slots=True)
class Scale:
    """The unconstrained scale of one parameter: ``log``, ``logit`` over [lo, hi], or ``linear``."""

    kind: str
    lo: float = 0.0
    hi: float = 1.0

    @classmethod
    def of(cls, name: str, bounds: tuple[float, float]) -> Scale:
        spec = PARAMETERS.get(name)
        if spec is not None and spec.log:
            return cls("log")
        lo, hi = bounds
        if spec is not None and not math.isfinite(spec.domain[0]) and not math.isfinite(spec.domain[1]):
            return cls("linear")
        return cls("logit", float(lo), float(hi))

    def to_u(self, theta: float) -> float:
        if self.kind == "log":
            return math.log(max(theta, 1e-300))
        if self.kind == "linear":
            return float(theta)
        p = min(max((theta - self.lo) / (self.hi - self.lo), _EDGE), 1 - _EDGE)
        return math.log(p / (1 - p))

    def to_u_near(self, theta: float) -> float:
        """``to_u`` with a logit-scale value kept 1% of the range inside its bounds (where an
        estimate on a bound is taken to sit when it is judged against the others)."""
        if self.kind != "logit":
            return self.to_u(theta)
        p = min(max((theta - self.lo) / (self.hi - self.lo), 0.01), 0.99)
        return math.log(p / (1 - p))

    def from_u(self, u: float) -> float:
        if self.kind == "log":
            return math.exp(u)
        if self.kind == "linear":
            return float(u)
        return self.lo + (self.hi - self.lo) / (1 + math.exp(-u))

    def slope(self, theta: float) -> float:
        """du/dθ at θ (the delta method's factor for a standard error)."""
        if self.kind == "log":
            return 1.0 / theta
        if self.kind == "linear":
            return 1.0
        p = min(max((theta - self.lo) / (self.hi - self.lo), _EDGE), 1 - _EDGE)
        return 1.0 / ((self.hi - self.lo) * p * (1 - p))


# --------------------------------------------------------------------------- results


@dataclass(frozen=True, slots=True)
class Animal:
    """One animal of the cohort: its own estimates, the shrunken ones, and why it stands out."""

    name: str
    params: dict[str, float]
    shrunken: dict[str, float]
    z: dict[str, float]
    reasons: tuple[str, ...]
    u: dict[str, float]
    u_var: dict[str, float]
    post_u: dict[str, float]
    post_var: dict[str, float]

    @property
    def outlier(self) -> bool:
        return bool(self.reasons)


@dataclass(frozen=True, slots=True)
class CohortFit:
    """The cohort: per animal fits, the population per parameter, the animals.

    names: the population's parameters (the free ones every animal shares);
    mean[name], sd[name]: μ and σ on the u scale (``scales[name]``); median[name]: μ
    mapped to the natural scale; z_crit: the outlier bound on |z|.
    """

    learner: str
    names: tuple[str, ...]
    scales: dict[str, Scale]
    mean: dict[str, float]
    sd: dict[str, float]
    animals: tuple[Animal, ...]
    fits: tuple[FitResult, ...]
    z_crit: float
    em_iterations: int
    warnings: tuple[str, ...] = field(default=())

    @property
    def subjects(self) -> list[str]:
        return [a.name for a in self.animals]

    def median(self, name: str) -> float:
        return self.scales[name].from_u(self.mean[name])

    def band(self, name: str, k: float = 1.0) -> tuple[float, float]:
        """The natural-scale range μ ± kσ (on the u scale) maps to."""
        s = self.scales[name]
        return s.from_u(self.mean[name] - k * self.sd[name]), s.from_u(self.mean[name] + k * self.sd[name])

    def to_dict(self) -> dict[str, Any]:
        """The cohort JSON: subjects, population, animals, fits (each as ``FitResult.to_dict``)."""
        return {
            "subjects": self.subjects,
            "learner": self.learner,
            "population": {n: {"mean": self.median(n), "sd": self.sd[n],
                               "scale": self.scales[n].kind, "mean_u": self.mean[n],
                               "range68": list(self.band(n))} for n in self.names},
            "animals": {a.name: {"params": a.params, "shrunken": a.shrunken, "outlier": a.outlier,
                                 "reasons": list(a.reasons),
                                 "z": {n: (None if math.isnan(v) else v) for n, v in a.z.items()}}
                           for a in self.animals},
            "fits": [f.to_dict() for f in self.fits],
            "outlier_z": self.z_crit,
            "warnings": list(self.warnings),
        }


# --------------------------------------------------------------------------- the population


def population_em(U: np.ndarray, C: np.ndarray, *, max_iter: int = 2000, tol: float = 1e-10):
    """μ (k,), σ² (k,), posterior means m (N, k) and variances v (N, k), iterations.

    U: (N, k) estimates on the u scale; C: (N, k) their variances. EM for the normal–normal
    hierarchy per column (module docstring); σ² is kept above 1e-12.
    """
    U = np.asarray(U, dtype=np.float64)
    C = np.asarray(C, dtype=np.float64)
    mu = U.mean(axis=0)
    var = np.maximum(U.var(axis=0), 1e-6)
    it = 0
    for it in range(1, max_iter + 1):  # noqa: B007 (the count is returned)
        v = 1.0 / (1.0 / C + 1.0 / var)
        m = v * (U / C + mu / var)
        mu_new = m.mean(axis=0)
        var_new = np.maximum(((m - mu_new) ** 2 + v).mean(axis=0), 1e-12)
        done = np.max(np.abs(mu_new - mu)) < tol and np.max(np.abs(var_new - var)) < tol
        mu, var = mu_new, var_new
        if done:
            break
    v = 1.0 / (1.0 / C + 1.0 / var)
    m = v * (U / C + mu / var)
    return mu, var, m, v, it


def population_from_fits(fits: Sequence[tuple[str, FitResult]]) -> CohortFit:
    """The population over these animals' fits (module docstring)."""
    if len(fits) < MIN_ANIMALS:
        raise BadArgument("subjects", f"at least {MIN_ANIMALS} animals for a population",
                          [n for n, _ in fits])
    learners = {f.learner for _, f in fits}
    if len(learners) != 1:
        raise BadArgument("subjects", "animals fitted with one learner", sorted(learners))
    names = tuple(n for n in fits[0][1].free if all(n in f.free for _, f in fits))
    if not names:
        raise BadArgument("fixed", "at least one parameter free in every animal's fit", [])
    scales = {n: Scale.of(n, _bounds_of(fits[0][1], n)) for n in names}
    N, k = len(fits), len(names)
    U, C = np.empty((N, k)), np.empty((N, k))
    warnings = []
    for i, (animal, f) in enumerate(fits):
        if not f.converged:
            warnings.append(f"{animal}: the optimiser did not report convergence ({f.message})")
        for j, n in enumerate(names):
            s, theta = scales[n], f.params[n]
            U[i, j] = s.to_u(theta)
            se = (f.se or {}).get(n)
            lo, hi = _bounds_of(f, n)
            on_bound = theta <= lo or theta >= hi
            if se is None or not math.isfinite(se) or se <= 0 or on_bound:
                C[i, j] = UNINFORMATIVE_VAR
            else:
                C[i, j] = min((se * s.slope(theta)) ** 2, UNINFORMATIVE_VAR)
    mu, var, m, v, iters = population_em(U, C)
    z_crit = NormalDist().inv_cdf(1 - FAMILY_ALPHA / (2 * N * k))
    informative = np.sum(C < UNINFORMATIVE_VAR, axis=0)
    at_bound = np.array([[_on_bound(f, n) for n in names] for _, f in fits], dtype=bool)
    for j, n in enumerate(names):
        if informative[j] < MIN_ANIMALS + 1:
            warnings.append(f"{n}: only {int(informative[j])} of {N} animals have a standard error for it "
                            "(the others sit on a bound or are not identified): its population rests on "
                            "few animals, and no animal is judged an outlier on it unless at least "
                            f"{MIN_ANIMALS} (and half) of the others pin it down; consider fixing it (--fix)")
    animals = []
    for i, (animal, f) in enumerate(fits):
        others = np.arange(N) != i
        mu_o, var_o, *_ = population_em(U[others], C[others])
        # the predictive variance of a new animal's estimate: σ² + c_i + Var(μ̂), where
        # Var(μ̂) = 1 / Σ_j 1/(σ² + c_j) over the others (μ is estimated too)
        var_mu = 1.0 / np.sum(1.0 / (var_o + C[others]), axis=0)
        on_bound = C[i] >= UNINFORMATIVE_VAR
        # an estimate on a bound is judged where it sits (a logit-scale one at 1% of the
        # range inside its bound), against the others' spread alone
        u_i = np.array([scales[n].to_u_near(f.params[n]) if on_bound[j] else U[i, j]
                        for j, n in enumerate(names)])
        z = (u_i - mu_o) / np.sqrt(var_o + var_mu + np.where(on_bound, 0.0, C[i]))
        # a population that too few other animals pin down judges no one; an animal on a
        # bound that another animal shares is not unusual there
        others_informative = informative - (C[i] < UNINFORMATIVE_VAR)
        z[others_informative < max(MIN_ANIMALS, math.ceil((N - 1) / 2))] = math.nan
        z[on_bound & (at_bound[i] & (at_bound.sum(axis=0) > 1))] = math.nan
        bound_names = [n for j, n in enumerate(names) if at_bound[i, j]]
        reasons = []
        for j, n in enumerate(names):
            if abs(z[j]) > z_crit:
                s = scales[n]
                where = f"{n} = {f.params[n]:.3g}" + (
                    " (on its search bound)" if at_bound[i, j] else
                    " (no standard error: judged where it sits)" if on_bound[j] else "")
                note = ""
                others_on_bound = [b for b in bound_names if b != n]
                if others_on_bound:
                    note = (f"; its {', '.join(others_on_bound)} sits on a search bound, so this fit may "
                            "be degenerate: look at its trials")
                reasons.append(
                    f"{where} lies {abs(z[j]):.1f} sd {'above' if z[j] > 0 else 'below'} "
                    f"the other animals (population {s.from_u(mu_o[j]):.3g}, sd {math.sqrt(var_o[j]):.2g} "
                    f"on its {s.kind} scale){note}")
        animals.append(Animal(
            animal, {n: float(f.params[n]) for n in f.params},
            {n: scales[n].from_u(m[i, j]) for j, n in enumerate(names)},
            {n: float(z[j]) for j, n in enumerate(names)}, tuple(reasons),
            {n: float(U[i, j]) for j, n in enumerate(names)},
            {n: float(C[i, j]) for j, n in enumerate(names)},
            {n: float(m[i, j]) for j, n in enumerate(names)},
            {n: float(v[i, j]) for j, n in enumerate(names)}))
    return CohortFit(fits[0][1].learner, names, scales, dict(zip(names, map(float, mu), strict=True)),
                     dict(zip(names, (math.sqrt(x) for x in var), strict=True)), tuple(animals),
                     tuple(f for _, f in fits), z_crit, iters, tuple(warnings))


def _on_bound(f: FitResult, name: str) -> bool:
    lo, hi = _bounds_of(f, name)
    return not lo < f.params[name] < hi


def _bounds_of(f: FitResult, name: str) -> tuple[float, float]:
    b = getattr(f, "bounds", None) or {}
    if name in b:
        lo, hi = b[name]
        return float(lo), float(hi)
    spec = PARAMETERS[name]
    return spec.lo, spec.hi


# --------------------------------------------------------------------------- fitting


def fit_cohort(datas: Mapping[str, Any], learner_name: str, *, starts: int = 2, seed: int = 0,
               progress: Callable[[int, int], None] | None = None, **fit_options: Any) -> CohortFit:
    """Fit each animal's ``FitData`` (name -> data) with ``learner_name``, then the population.

    starts: optimiser starts per animal (2: the population check catches the odd poor
    fit, and a cohort's time is the sum of its animals'); fit_options go to
    ``fit_subject`` (fixed, bounds, start, ...). progress(done, total) counts animals.
    """
    from .search import fit_subject

    fits = []
    items = list(datas.items())
    for i, (name, data) in enumerate(items):
        options = {"hessian": True, "intervals": False, **fit_options}
        fits.append((name, fit_subject(data, learner_name, starts=starts, seed=seed, **options)))
        if progress is not None:
            progress(i + 1, len(items))
    return population_from_fits(fits)


def cohort_from_store(store, subjects: Sequence[str] | str, learner: str | None = None, *,
                      starts: int = 2, seed: int = 0,
                      progress: Callable[[int, int], None] | None = None,
                      **options: Any) -> CohortFit:
    """Fit the stored ``subjects`` (names, or "all") one by one (``fit_from_store``, each with
    its own rule files), then the population. options: link, fix, bounds, start."""
    from .compare import fit_from_store

    names = resolve_subjects(store, subjects)
    fits = []
    for i, name in enumerate(names):
        got = fit_from_store(store, name, learner, starts=starts, seed=seed, crossval=False,
                             intervals=False, **options)
        fits.append((name, got))
        if progress is not None:
            progress(i + 1, len(names))
    return population_from_fits(fits)


def resolve_subjects(store, subjects: Sequence[str] | str) -> list[str]:
    """``subjects`` checked against the store ("all": every stored subject with sessions)."""
    known = list(store.subjects())
    if isinstance(subjects, str):
        subjects = known if subjects == "all" else [s.strip() for s in subjects.split(",") if s.strip()]
    subjects = list(dict.fromkeys(subjects))
    unknown = [s for s in subjects if s not in known]
    if unknown:
        raise BadArgument("--subjects", f"stored subjects ({', '.join(known) or 'none'}) or 'all'",
                          ", ".join(unknown))
    if len(subjects) < MIN_ANIMALS:
        raise BadArgument("--subjects", f"at least {MIN_ANIMALS} animals for a population",
                          ", ".join(subjects) or "none")
    return subjects


def format_cohort(c: CohortFit) -> str:
    """One table: the population per parameter, then each animal's estimate → shrunken."""
    lines = [f"cohort of {len(c.animals)} animals, learner {c.learner}",
             "population (empirical Bayes; mean as the natural-scale median, sd on the fitted scale):"]
    for n in c.names:
        lo, hi = c.band(n)
        lines.append(f"  {n:<10} {c.median(n):>10.4g}   sd {c.sd[n]:.3g} ({c.scales[n].kind})   "
                     f"68% of animals in [{lo:.4g}, {hi:.4g}]")
    head = "  ".join(f"{n:>19}" for n in c.names)
    lines.append(f"{'animal':<12} {head}  outlier")
    for a in c.animals:
        cells = "  ".join(f"{a.params[n]:>8.3g} → {a.shrunken[n]:<8.3g}" for n in c.names)
        lines.append(f"{a.name:<12} {cells}  {'YES' if a.outlier else ''}")
    lines.append("(each cell: the animal's own estimate → its shrunken estimate)")
    flagged = [a for a in c.animals if a.outlier]
    if flagged:
        lines.append(f"outliers (|z| > {c.z_crit:.2f} against the other animals; Bonferroni 5%):")
        for a in flagged:
            for reason in a.reasons:
                lines.append(f"  {a.name}: {reason}")
    else:
        lines.append(f"no outliers (every |z| <= {c.z_crit:.2f} against the other animals)")
    for w in c.warnings:
        lines.append(f"warning: {w}")
    return "\n".join(lines)
