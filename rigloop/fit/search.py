"""The search for the maximum-likelihood parameters of one learner on one animal.

Parameters are found with ``scipy.optimize.minimize`` (L-BFGS-B) inside bounds, from
several starts (the default point and a seeded draw from a grid), because the
likelihood of learning models often has local optima. Each parameter is searched on a
unit box (``_Box``): linearly for rates, probabilities and θ; on a log scale for
variances and β (``params.PARAMETERS`` lists the default bounds). Standard errors come
from a numerical Hessian of the negative log-likelihood at the optimum, taken in the
same unit-box coordinates and mapped back by the delta method (equal to the
natural-scale Hessian at a stationary point). 95% intervals come from the profile
likelihood (``profile.py``), one-sided where an estimate sits on a bound; a parametric
bootstrap (``bootstrap.py``) is on request. ``warnings`` says, in sentences, where a
parameter is not identified by the trials.

scipy is an optional dependency (the ``fit`` extra) and is imported here only, when a
fit runs.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterable, Mapping, Sequence
from typing import Any

import numpy as np

from ..core.features import Representation
from ..errors import BadArgument, RigloopError
from .data import FitData, as_fit_data, check_enough_trials
from .likelihood import NegLogLik, fitted_trials
from .params import (
    PARAMETERS,
    default_fixed,
    free_parameters,
    model_parameters,
    pinned_parameters,
    search_bounds,
    start_values,
)
from .profile import interval_warnings, profile_intervals
from .results import FitResult

_HESSIAN_STEP = 1e-4  # in unit-box coordinates: about eps**(1/4), common practice


class MissingDependency(RigloopError, ImportError):
    """An optional dependency that this feature needs is not installed."""


def _scipy_optimize():
    """``scipy.optimize``, or MissingDependency naming the extra to install."""
    try:
        from scipy import optimize
    except ImportError:  # pragma: no cover - depends on the environment
        raise MissingDependency(
            "fitting needs scipy, which is not installed; install the 'fit' extra "
            "(pip install 'rigloop[fit]')"
        ) from None
    return optimize


def fit_subject(
    events: Iterable | FitData,
    learner_name: str,
    representation: Representation | None = None,
    *,
    reward_unit_ul: float | None = None,
    fixed: Mapping[str, Any] | None = None,
    start: Mapping[str, float] | None = None,
    bounds: Mapping[str, tuple[float, float]] | None = None,
    starts: int = 4,
    seed: int = 0,
    hessian: bool = True,
    progress: Callable[[int, int], None] | None = None,
    link: str | None = None,
    intervals: bool = True,
    bootstrap: int = 0,
    crossval: bool = False,
) -> FitResult:
    """Maximum-likelihood fit of ``learner_name`` and the observation model to ``events``.

    events: TrialEvents in order (or a ``FitData`` from ``prepare``, to fit several
    learners on rows computed once); representation, reward_unit_ul: how trials become
    rows and reward units (required with events).
    fixed: parameters pinned at a value; None pins ``default_fixed`` (a mapping replaces
    it entirely, so ``{}`` frees every parameter).
    start: starting values for some free parameters (the first start); the others come
    from ``PARAMETERS`` defaults. bounds: (low, high) per parameter, replacing the default.
    With ``fixed`` None, a default pin that ``bounds`` or ``start`` names is freed.
    starts: number of starts (the first, then a seeded draw from a 3-level grid).
    progress(done, total) is called after each start (and each profile and bootstrap fit).
    link: "respond" (go/no-go) or "choice" (two sides); None picks it from the trials'
    response kinds (``data.link_for``). intervals: profile-likelihood 95% intervals
    (``profile.py``); bootstrap: that many parametric-bootstrap refits (``bootstrap.py``);
    crossval: the cross-validated log-likelihood of held-out sessions (``crossval.py``).

    Steps:
      1. import scipy.optimize (MissingDependency without it);
      2. the trials as ``FitData`` (``prepare``, unless one is given);
      3. the pins, the free parameters and their bounds (each checked);
      4. enough observed trials for that many free parameters, and ``starts`` >= 1;
      5. the starting points on the unit box: the first start, then grid points;
      6. L-BFGS-B from each point on the negative log-likelihood; the lowest wins;
      7. standard errors from the Hessian there (unless ``hessian`` is False);
      8. profile intervals, bootstrap intervals and the warnings;
      9. the per-trial values and probabilities at the fitted parameters.
    """
    optimize = _scipy_optimize()
    data = as_fit_data(events, representation, reward_unit_ul, link)
    if fixed is None:
        # a default pin the caller gave bounds or a start for is fitted instead
        named = set(bounds or {}) | set(start or {})
        fixed = {k: v for k, v in default_fixed(learner_name, data.representation, data.link).items()
                 if k not in named}
    pinned = pinned_parameters(learner_name, data.representation, fixed, data.link)
    names = model_parameters(learner_name, data.link)
    free = free_parameters(names, pinned)
    box_bounds = search_bounds(free, bounds or {}, names)
    check_enough_trials(data, len(free))
    starts = _count_of_starts(starts)

    box = _Box(free, box_bounds)
    first = start_values(free, start, box_bounds)
    points = [box.unit(first)] + _grid_points(len(free), starts - 1, seed)
    objective = NegLogLik(data, learner_name, free, pinned)

    def nll(s: np.ndarray) -> float:
        return objective(box.natural(s))

    best = _multistart(optimize, nll, points, progress, objective)
    s_hat = np.clip(best.x, 0.0, 1.0)
    theta_hat = box.natural(s_hat)
    params = {n: pinned[n] if n in pinned else float(theta_hat[free.index(n)]) for n in names}
    se, note, se_unit = (_standard_errors(nll, s_hat, theta_hat, box, objective) if hessian
                         else (None, "standard errors not computed (hessian=False)", None))
    message = best.message if isinstance(best.message, str) else best.message.decode()
    warnings = [] if best.success else [
        f"The optimiser did not converge ({message}): the estimates may not be the maximum "
        f"of the likelihood; try more starts (--starts)."]
    if se is None and hessian:
        warnings.append("The Hessian of the negative log-likelihood is not positive definite: "
                        "some parameter is not identified by these trials (two may trade off "
                        "against each other); fix one and fit again.")
    ci95 = {}
    if intervals:
        ci95, lowest = profile_intervals(nll, s_hat, float(best.fun), box.natural, free,
                                         lambda f, z0: _local(optimize, f, z0, objective),
                                         se_unit)
        if lowest < float(best.fun) - 0.01:
            warnings.append(f"A profile found a log-likelihood {float(best.fun) - lowest:.2f} "
                            f"higher than the optimiser's: the fit stopped at a local optimum; "
                            f"fit again with more starts (--starts).")
        for name in free:
            se_n = se.get(name) if se else None
            warnings += interval_warnings(name, params[name], ci95[name], box_bounds[name], se_n,
                                          PARAMETERS[name].log)

    def refit(objective_b: NegLogLik) -> np.ndarray:
        got = _local(optimize, lambda z: objective_b(box.natural(z)), s_hat, objective_b)[0]
        return box.natural(np.clip(got, 0.0, 1.0))

    boot = None
    if bootstrap:
        from .bootstrap import parametric_bootstrap

        boot = parametric_bootstrap(data, learner_name, free, pinned, params, bootstrap, seed,
                                    refit, progress)
    cv = None
    if crossval:
        from .crossval import cross_validated

        cv = cross_validated(data, learner_name, free, pinned, refit)
    return FitResult(
        learner=learner_name, representation=data.representation.kind, params=params, free=free,
        fixed=pinned, log_likelihood=-float(best.fun), n_trials=data.n_observed,
        n_events=data.n_events, converged=bool(best.success), message=message, se=se,
        se_note=note, starts=len(points), trials=fitted_trials(data, learner_name, params),
        link=data.link, ci95=ci95, warnings=tuple(warnings), bounds=dict(box_bounds),
        start=dict(zip(free, map(float, first), strict=True)), bootstrap=boot,
        cv_log_likelihood=None if cv is None else cv[0], cv_sessions=0 if cv is None else cv[1])


def _local(optimize, f: Callable[[np.ndarray], float], z0: np.ndarray,
           objective: NegLogLik | None = None) -> tuple[np.ndarray, float]:
    """One L-BFGS-B run on the unit box from ``z0``: (point, value); ``objective``, the
    NegLogLik that ``f`` calls, lets its gradients run in batches (``_minimize``)."""
    res = _minimize(optimize, f, np.asarray(z0, dtype=np.float64), objective)
    return np.asarray(res.x), float(res.fun)


# L-BFGS-B's finite-difference step on the unit box (scipy's default ``eps``): the points
# a gradient at x will ask for are x ± _FD_STEP along each coordinate
_FD_STEP = 1e-8


def _minimize(optimize, f: Callable[[np.ndarray], float], x0: np.ndarray,
              objective: NegLogLik | None):
    """``optimize.minimize(f, x0, method="L-BFGS-B")`` on the unit box, its numerical
    gradients batched: the same run, step for step, as without ``objective``.

    L-BFGS-B asks for f at a point and then for its forward-difference gradient there
    (scipy's ``approx_derivative``, through the ``workers`` map it is given). With the
    objective, a new point and the gradient points it will need (x + 1e-8 along each
    coordinate, − near the upper bound) are noted and run in one learner batch before
    f is computed, and the ``workers`` map notes whatever points scipy actually asks
    for (a guess that missed costs one more batch, never a different number). Each
    value is the objective's own: the batch fills its cache with the numbers a call one
    at a time would compute.
    """
    bounds = [(0.0, 1.0)] * len(x0)
    if objective is None:
        return optimize.minimize(f, x0, method="L-BFGS-B", bounds=bounds)
    mapping = [False]
    guessed: set[bytes] = set()  # the unit points of the last batch ahead of a gradient

    def ahead(x: np.ndarray) -> float:
        if not mapping[0]:
            guessed.clear()
            with objective.collecting():
                f(x)
                for i in range(len(x)):
                    y = np.array(x, dtype=np.float64)
                    y[i] = x[i] + _FD_STEP if x[i] + _FD_STEP <= 1.0 else x[i] - _FD_STEP
                    f(y)
                    guessed.add(y.tobytes())
        return f(x)

    def batched_map(fun, points):
        points = list(points)
        if not all(np.asarray(y, dtype=np.float64).tobytes() in guessed for y in points):
            with objective.collecting():
                for y in points:
                    f(y)
        mapping[0] = True
        try:
            return list(map(fun, points))
        finally:
            mapping[0] = False

    return optimize.minimize(ahead, x0, method="L-BFGS-B", bounds=bounds,
                             options={"workers": batched_map})


def _count_of_starts(starts: Any) -> int:
    """``starts`` as a whole number >= 1."""
    starts = int(starts)
    if starts < 1:
        raise BadArgument("starts", "a whole number >= 1", starts)
    return starts


def _multistart(optimize, nll: Callable[[np.ndarray], float], points: Sequence[np.ndarray],
                progress: Callable[[int, int], None] | None, objective: NegLogLik | None = None):
    """The lowest of L-BFGS-B runs on the unit box from each of ``points``."""
    best = None
    for i, s0 in enumerate(points):
        res = _minimize(optimize, nll, s0, objective)
        if best is None or res.fun < best.fun:
            best = res
        if progress is not None:
            progress(i + 1, len(points))
    return best


# --------------------------------------------------------------------------- the unit box


class _Box:
    """Map between natural parameters and the unit box s ∈ [0, 1]^k the optimiser sees."""

    def __init__(self, names: Sequence[str], bounds: Mapping[str, tuple[float, float]]):
        self.names = tuple(names)
        self.log = np.array([PARAMETERS[n].log for n in self.names])
        lo = np.array([bounds[n][0] for n in self.names], dtype=np.float64)
        hi = np.array([bounds[n][1] for n in self.names], dtype=np.float64)
        # u = log θ for log-scale parameters, θ otherwise; s = (u − u_lo) / (u_hi − u_lo)
        self.ulo = np.where(self.log, np.log(np.where(self.log, lo, 1.0)), lo)
        self.uhi = np.where(self.log, np.log(np.where(self.log, hi, 1.0)), hi)
        self.width = self.uhi - self.ulo
        self.lo, self.hi = lo, hi
        self._any_log = bool(self.log.any())

    def natural(self, s: np.ndarray) -> np.ndarray:
        u = self.ulo + np.asarray(s) * self.width
        # θ = e^u on the log scale, u otherwise (exp only where it is used: the same
        # numbers as np.where(log, exp(u), u), a few times cheaper on short vectors)
        theta = np.exp(u, out=u.copy(), where=self.log) if self._any_log else u
        # rounding in exp/log must not step outside the bounds (np.clip's min of max)
        return np.minimum(np.maximum(theta, self.lo), self.hi)

    def unit(self, theta: np.ndarray) -> np.ndarray:
        theta = np.asarray(theta, dtype=np.float64)
        u = np.where(self.log, np.log(np.where(self.log, theta, 1.0)), theta)
        return np.clip((u - self.ulo) / self.width, 0.0, 1.0)

    def jacobian(self, theta: np.ndarray) -> np.ndarray:
        """dθ/ds per parameter at θ."""
        return np.where(self.log, theta * self.width, self.width)


def _grid_points(k: int, count: int, seed: int) -> list[np.ndarray]:
    """``count`` distinct points of the 3-level grid {0.15, 0.5, 0.85}^k, drawn with ``seed``."""
    if count <= 0:
        return []
    levels = np.array([0.15, 0.5, 0.85])
    rng = np.random.default_rng(seed)
    total = 3**k
    picks = rng.choice(total, size=min(count, total), replace=False)
    out = []
    for code in picks:
        digits = [(int(code) // 3**d) % 3 for d in range(k)]
        out.append(levels[digits])
    return out


# --------------------------------------------------------------------------- standard errors


def _standard_errors(nll, s_hat: np.ndarray, theta_hat: np.ndarray, box: _Box,
                     objective: NegLogLik | None = None):
    """SEs from the Hessian of the NLL in unit-box coordinates, mapped to θ (delta method);
    ``objective`` (the NegLogLik ``nll`` calls) runs the Hessian's points in one batch."""
    h = _HESSIAN_STEP
    inside = [i for i, s in enumerate(s_hat) if 2 * h < s < 1 - 2 * h]
    at_bound = [box.names[i] for i in range(len(s_hat)) if i not in inside]
    se: dict[str, float | None] = {n: None for n in box.names}
    se_unit: list[float | None] = [None] * len(box.names)
    notes = []
    if at_bound:
        notes.append(f"{', '.join(at_bound)} at a bound: no standard error there "
                     "(consider fixing it or widening its bounds)")
    if not inside:
        return se, "; ".join(notes), se_unit
    if objective is not None:
        with objective.collecting():
            _hessian(nll, s_hat, inside, h)
    H = _hessian(nll, s_hat, inside, h)
    try:
        np.linalg.cholesky(H)
    except np.linalg.LinAlgError:
        notes.insert(0, "the Hessian of the negative log-likelihood is not positive definite "
                        "(a parameter may not be identifiable from these trials; try fixing one)")
        return None, "; ".join(notes), se_unit
    cov_s = np.linalg.inv(H)
    J = box.jacobian(theta_hat)[inside]
    # Cov(θ) = J Cov(s) J, J = diag(dθ/ds)
    var = J * np.diagonal(cov_s) * J
    for j, i in enumerate(inside):
        se[box.names[i]] = float(math.sqrt(var[j]))
        se_unit[i] = float(math.sqrt(cov_s[j, j]))
    return se, "; ".join(notes), se_unit


def _hessian(f, x: np.ndarray, idx: Sequence[int], h: float) -> np.ndarray:
    """Central-difference Hessian of f at x over the coordinates ``idx``."""
    m = len(idx)
    H = np.empty((m, m))
    f0 = f(x)

    def at(*steps: tuple[int, float]) -> float:
        y = np.array(x, dtype=np.float64)
        for i, d in steps:
            y[i] += d
        return f(y)

    for a, i in enumerate(idx):
        # ∂²f/∂x_i² ≈ (f(x + h e_i) − 2 f(x) + f(x − h e_i)) / h²
        H[a, a] = (at((i, h)) - 2 * f0 + at((i, -h))) / h**2
        for b in range(a):
            j = idx[b]
            # ∂²f/∂x_i∂x_j ≈ (f(++) − f(+−) − f(−+) + f(−−)) / 4h²
            H[a, b] = H[b, a] = (at((i, h), (j, h)) - at((i, h), (j, -h))
                                 - at((i, -h), (j, h)) + at((i, -h), (j, -h))) / (4 * h**2)
    return H
