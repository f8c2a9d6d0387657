"""Psychometric functions fitted by maximum likelihood, with profile-likelihood intervals.

    ψ(x) = γ + (1 − γ − λ)·F(x; α, β)

the probability of a correct (n-AFC) or "yes" (yes/no) response at stimulus level x
(Wichmann & Hill 2001, Percept Psychophys 63:1293). F is one of

    logistic   F = 1 / (1 + e^(−β(x − α)))        α: F = 1/2, β: 1/level units
    normal     F = Φ(β(x − α))                     α: F = 1/2, β = 1/σ
    weibull    F = 1 − exp(−(x/α)^β), x ≥ 0        α: F = 1 − 1/e, β: shape

and, when performance falls as x grows (a staircase whose ``harder`` is ``"higher"``),
1 − F instead (``direction = -1``). γ is the guess rate: fixed at 1/n for n-AFC, free in
[0, 0.5] for yes/no. λ is the lapse rate, free with a uniform prior on [0, 0.1] (so the
estimate is the likelihood maximum inside that box; a lapse above 0.1 means the animal
is not doing the task, not a fact about its threshold).

The model is searched in the coordinates (threshold, log β, γ, λ), where threshold is
the level at which ψ reaches the stated performance ``level`` (default 0.75), so the
threshold's profile likelihood is an ordinary profile. A 95% interval is every value
whose profile deviance 2(ℓ̂ − ℓ_p) is at most 3.841 (χ²₁ 0.95); an estimate on a bound
gets a one-sided interval at 2.706 (the ½χ²₀ + ½χ²₁ mixture, Self & Liang 1987,
J Am Stat Assoc 82:605; from memory). The fitted curve's band is the pointwise 2.5–97.5%
range of a parametric bootstrap (Wichmann & Hill 2001, part II: Percept Psychophys
63:1314), refitted from the estimate.

scipy's optimisers come through ``search._scipy_optimize`` (the one scipy import).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from statistics import NormalDist
from typing import Any

import numpy as np

from ..errors import BadArgument

FUNCTIONS = ("logistic", "normal", "weibull")
LAPSE_MAX = 0.1
GUESS_MAX = 0.5
CHI2_1_95 = 3.841458820694124   # χ²₁ 0.95 quantile (scipy.stats.chi2.ppf(0.95, 1))
CHI2_MIX_95 = 2.705543454095404  # χ²₁ 0.90 quantile: the 95% point of ½χ²₀ + ½χ²₁
_EPS = 1e-12
_NORMAL = NormalDist()
PARAM_NAMES = ("threshold", "slope", "guess", "lapse")


# --------------------------------------------------------------------------- the functions


def core_function(function: str, x: Any, alpha: float, beta: float) -> np.ndarray:
    """F(x; α, β) of ``function`` (rising in x), elementwise."""
    x = np.asarray(x, dtype=np.float64)
    if function == "logistic":
        # F = 1 / (1 + e^(−β(x − α)))
        z = np.clip(beta * (x - alpha), -700.0, 700.0)
        return 1.0 / (1.0 + np.exp(-z))
    if function == "normal":
        # F = Φ(β(x − α)) = (1 + erf(β(x − α)/√2)) / 2
        z = beta * (x - alpha) / math.sqrt(2.0)
        return 0.5 * (1.0 + np.array([math.erf(v) for v in np.ravel(z)]).reshape(np.shape(z)))
    if function == "weibull":
        # F = 1 − exp(−(x/α)^β), 0 for x ≤ 0
        ratio = np.maximum(x, 0.0) / alpha
        return -np.expm1(-np.power(ratio, beta))
    raise BadArgument("function", f"one of {', '.join(FUNCTIONS)}", function)


def psi(function: str, x: Any, alpha: float, beta: float, guess: float, lapse: float,
        direction: int = 1) -> np.ndarray:
    """ψ(x) = γ + (1 − γ − λ)·F(x), with 1 − F when ``direction`` is −1."""
    F = core_function(function, x, alpha, beta)
    if direction < 0:
        F = 1.0 - F
    return guess + (1.0 - guess - lapse) * F


def alpha_at(function: str, threshold: float, beta: float, guess: float, lapse: float,
             level: float, direction: int = 1) -> float:
    """The α that puts ψ(threshold) at ``level``; nan when ``level`` is out of ψ's range.

    u = (level − γ)/(1 − γ − λ) is F's value there (1 − u when falling); then
    logistic α = t − logit(u)/β, normal α = t − Φ⁻¹(u)/β, weibull α = t/(−ln(1 − u))^(1/β).
    """
    span = 1.0 - guess - lapse
    if span <= 0:
        return math.nan
    u = (level - guess) / span
    if direction < 0:
        u = 1.0 - u
    if not 0.0 < u < 1.0:
        return math.nan
    if function == "logistic":
        return threshold - math.log(u / (1.0 - u)) / beta
    if function == "normal":
        return threshold - _NORMAL.inv_cdf(u) / beta
    if threshold <= 0:
        return math.nan
    return threshold / (-math.log1p(-u)) ** (1.0 / beta)


def threshold_at(function: str, alpha: float, beta: float, guess: float, lapse: float,
                 level: float, direction: int = 1) -> float:
    """The level x at which ψ(x) = ``level`` (the inverse of ``alpha_at``); nan if none."""
    span = 1.0 - guess - lapse
    u = (level - guess) / span if span > 0 else math.nan
    if direction < 0:
        u = 1.0 - u
    if not 0.0 < u < 1.0:
        return math.nan
    if function == "logistic":
        return alpha + math.log(u / (1.0 - u)) / beta
    if function == "normal":
        return alpha + _NORMAL.inv_cdf(u) / beta
    return alpha * (-math.log1p(-u)) ** (1.0 / beta)


# --------------------------------------------------------------------------- the fit


@dataclass(frozen=True, slots=True, eq=False)
class PsychometricFit:
    """A fitted psychometric function.

    params: threshold (the level where ψ = ``level``), slope (β of F), guess (γ), lapse (λ).
    alpha:  F's own location (see the module docstring), for drawing and checks.
    ci95:   per parameter (lo, hi), from the profile likelihood (None for a fixed one);
            ``one_sided`` lists those whose estimate sits on a bound.
    x, k, n: the distinct levels, correct (or "yes") counts and trials at each.
    band:   (grid, lower, upper) of the bootstrap pointwise 95% band, or None.
    """

    function: str
    direction: int
    level: float
    params: dict[str, float]
    alpha: float
    fixed: tuple[str, ...]
    ci95: dict[str, tuple[float, float] | None]
    one_sided: tuple[str, ...]
    log_likelihood: float
    x: np.ndarray
    k: np.ndarray
    n: np.ndarray
    bounds: dict[str, tuple[float, float]]
    warnings: tuple[str, ...] = ()
    band: tuple[np.ndarray, np.ndarray, np.ndarray] | None = field(default=None, repr=False)

    @property
    def n_trials(self) -> int:
        return int(self.n.sum())

    def predict(self, x: Any) -> np.ndarray:
        """ψ(x) at the fitted parameters."""
        p = self.params
        return psi(self.function, x, self.alpha, p["slope"], p["guess"], p["lapse"], self.direction)

    def threshold_for(self, level: float) -> float:
        """The stimulus level at which ψ reaches ``level`` (nan when ψ never does)."""
        p = self.params
        return threshold_at(self.function, self.alpha, p["slope"], p["guess"], p["lapse"], level,
                            self.direction)


def counts_by_level(x: Sequence[float], y: Sequence[float]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The distinct levels, the number of 1s and of trials at each (levels rounded to 1e-9)."""
    x = np.round(np.asarray(x, dtype=np.float64), 9)
    y = np.asarray(y, dtype=np.float64)
    levels, inverse = np.unique(x, return_inverse=True)
    k = np.bincount(inverse, weights=y, minlength=len(levels))
    n = np.bincount(inverse, minlength=len(levels)).astype(np.float64)
    return levels, k, n


class _Model:
    """The negative log-likelihood over (threshold, log β, γ, λ), some of them fixed."""

    def __init__(self, function, direction, level, x, k, n, fixed: dict[str, float]):
        self.function, self.direction, self.level = function, direction, level
        self.x, self.k, self.n = x, k, n
        self.fixed = dict(fixed)
        self.free = [name for name in PARAM_NAMES if name not in self.fixed]

    def full(self, values: Sequence[float]) -> dict[str, float]:
        out = dict(self.fixed)
        out.update(zip(self.free, (float(v) for v in values), strict=True))
        return out

    def nll_of(self, p: dict[str, float]) -> float:
        beta = math.exp(p["slope"])
        a = alpha_at(self.function, p["threshold"], beta, p["guess"], p["lapse"], self.level,
                     self.direction)
        if not math.isfinite(a) or (self.function == "weibull" and a <= 0):
            return 1e10
        q = np.clip(psi(self.function, self.x, a, beta, p["guess"], p["lapse"], self.direction),
                    _EPS, 1.0 - _EPS)
        # −ℓ = −Σ k log ψ + (n − k) log(1 − ψ)
        return float(-np.sum(self.k * np.log(q) + (self.n - self.k) * np.log1p(-q)))

    def __call__(self, values: np.ndarray) -> float:
        return self.nll_of(self.full(values))


def fit_psychometric(
    x: Sequence[float],
    correct: Sequence[float],
    *,
    function: str = "logistic",
    level: float = 0.75,
    guess: float | None = 0.5,
    lapse: float | None = None,
    direction: int = 1,
    band_runs: int = 200,
    seed: int = 0,
    intervals: Sequence[str] = PARAM_NAMES,
) -> PsychometricFit:
    """Maximum-likelihood ψ to trials at levels ``x`` scored ``correct`` (1/0).

    guess: a number fixes γ (1/n for n-AFC); None frees it in [0, 0.5] (yes/no).
    lapse: a number fixes λ; None frees it in [0, 0.1]. direction: +1 when performance
    rises with x, −1 when it falls. band_runs: parametric-bootstrap refits for the curve's
    band (0: no band). intervals: the free parameters that get a profile interval (the
    others' ``ci95`` is None).
    """
    from .search import _scipy_optimize

    optimize = _scipy_optimize()
    function = _choice("function", function, FUNCTIONS)
    if direction not in (1, -1):
        raise BadArgument("direction", "+1 (performance rises with the level) or -1 (falls)", direction)
    xs, k, n = counts_by_level(x, correct)
    if len(xs) < 2 or n.sum() < 20:
        raise BadArgument("trials", "at least 20 scored trials at two or more levels",
                          f"{int(n.sum())} trials at {len(xs)} level(s)")
    if function == "weibull" and xs[0] <= 0:
        raise BadArgument("function", "logistic or normal for levels at or below 0 (the Weibull "
                          "needs levels > 0)", function)
    fixed: dict[str, float] = {}
    if guess is not None:
        fixed["guess"] = _probability("guess", guess, 0.0, 1.0)
    if lapse is not None:
        fixed["lapse"] = _probability("lapse", lapse, 0.0, LAPSE_MAX)
    level = _level(level, fixed.get("guess", GUESS_MAX), fixed.get("lapse", LAPSE_MAX))
    bounds = _bounds(function, xs)
    model = _Model(function, direction, level, xs, k, n, fixed)
    box = [bounds[name] for name in model.free]
    best = _best_start(optimize, model, box, xs)
    p_hat = model.full(best.x)
    ll_hat = -float(best.fun)
    ci, one_sided = {}, []
    for name in PARAM_NAMES:
        if name in fixed or name not in intervals:
            ci[name] = None
            continue
        lo, hi, on_bound = _profile_interval(optimize, model, name, p_hat, ll_hat, bounds[name])
        ci[name] = (lo, hi)
        if on_bound:
            one_sided.append(name)
    beta_hat = math.exp(p_hat["slope"])
    params = {"threshold": p_hat["threshold"], "slope": beta_hat, "guess": p_hat["guess"],
              "lapse": p_hat["lapse"]}
    if ci.get("slope") is not None:
        ci["slope"] = (math.exp(ci["slope"][0]), math.exp(ci["slope"][1]))
    alpha = alpha_at(function, params["threshold"], beta_hat, params["guess"], params["lapse"],
                     level, direction)
    natural_bounds = dict(bounds)
    natural_bounds["slope"] = (math.exp(bounds["slope"][0]), math.exp(bounds["slope"][1]))
    fit = PsychometricFit(function, direction, level, params, alpha, tuple(sorted(fixed)), ci,
                          tuple(one_sided), ll_hat, xs, k, n, natural_bounds)
    warnings = _warnings(fit)
    band = _bootstrap_band(optimize, model, best.x, box, fit, band_runs, seed) if band_runs else None
    return PsychometricFit(function, direction, level, params, alpha, fit.fixed, ci, fit.one_sided,
                           ll_hat, xs, k, n, natural_bounds, warnings, band)


def _bounds(function: str, xs: np.ndarray) -> dict[str, tuple[float, float]]:
    """Search bounds: threshold within the tested range widened by its span, log slope
    over five decades scaled to the range (Weibull: shape 0.2–20), γ ≤ 0.5, λ ≤ 0.1."""
    span = float(xs[-1] - xs[0])
    if function == "weibull":
        t = (float(xs[0]) * 0.25, float(xs[-1]) + span)
        slope = (math.log(0.2), math.log(20.0))
    else:
        t = (float(xs[0]) - span, float(xs[-1]) + span)
        slope = (math.log(0.05 / span), math.log(500.0 / span))
    return {"threshold": t, "slope": slope, "guess": (0.0, GUESS_MAX), "lapse": (0.0, LAPSE_MAX)}


def _best_start(optimize, model: _Model, box, xs: np.ndarray):
    """L-BFGS-B from a small grid of starts; the lowest wins."""
    span = float(xs[-1] - xs[0])
    t_starts = np.quantile(xs, [0.25, 0.5, 0.75])
    if model.function == "weibull":
        slopes = [math.log(1.5), math.log(4.0)]
    else:
        slopes = [math.log(2.0 / span), math.log(10.0 / span)]
    best = None
    for t in t_starts:
        for s in slopes:
            start = {"threshold": float(t), "slope": s, "guess": 0.1, "lapse": 0.02}
            s0 = np.array([min(max(start[nm], lo), hi) for nm, (lo, hi) in zip(model.free, box, strict=True)])
            res = optimize.minimize(model, s0, method="L-BFGS-B", bounds=box)
            if best is None or res.fun < best.fun:
                best = res
    return best


def _profile(optimize, model: _Model, name: str, value: float, start: dict[str, float]) -> float:
    """max ℓ with ``name`` held at ``value`` (the others re-fitted from ``start``)."""
    held = _Model(model.function, model.direction, model.level, model.x, model.k, model.n,
                  {**model.fixed, name: value})
    if not held.free:
        return -held(np.zeros(0))
    box = [_bounds_of(model, nm) for nm in held.free]
    s0 = np.array([start[nm] for nm in held.free])
    res = optimize.minimize(held, s0, method="L-BFGS-B", bounds=box)
    return -float(res.fun)


def _bounds_of(model: _Model, name: str) -> tuple[float, float]:
    return _bounds(model.function, model.x)[name]


def _profile_interval(optimize, model: _Model, name: str, p_hat: dict[str, float], ll_hat: float,
                      bound: tuple[float, float]) -> tuple[float, float, bool]:
    """The profile-likelihood interval of ``name`` (in search coordinates) and whether the
    estimate sits on a bound (then one-sided, at the mixture's critical value)."""
    est = p_hat[name]
    lo_b, hi_b = bound
    width = hi_b - lo_b
    on_lo, on_hi = est - lo_b <= 1e-6 * width, hi_b - est <= 1e-6 * width
    crit = CHI2_MIX_95 if (on_lo or on_hi) else CHI2_1_95

    def excess(v: float) -> float:
        # 2(ℓ̂ − ℓ_p(v)) − critical value: ≤ 0 inside the interval
        return 2.0 * (ll_hat - _profile(optimize, model, name, v, p_hat)) - crit

    ends = []
    for edge, at_edge in ((lo_b, on_lo), (hi_b, on_hi)):
        if at_edge:
            ends.append(est)
            continue
        ends.append(_walk(optimize, excess, est, edge))
    return ends[0], ends[1], on_lo or on_hi


def _walk(optimize, excess, est: float, edge: float) -> float:
    """From the estimate toward ``edge``: the first crossing of the critical value (by
    Brent's root finder between grid points), or ``edge`` if the profile never rises that far."""
    prev = est
    for frac in (0.01, 0.03, 0.07, 0.15, 0.3, 0.5, 0.75, 1.0):
        v = est + frac * (edge - est)
        if excess(v) > 0:
            return float(optimize.brentq(excess, prev, v, xtol=1e-6 * abs(edge - est) + 1e-12))
        prev = v
    return float(edge)


def _bootstrap_band(optimize, model: _Model, x_hat: np.ndarray, box, fit: PsychometricFit,
                    runs: int, seed: int):
    """Pointwise 2.5–97.5% of ψ over a grid, from ``runs`` parametric-bootstrap refits."""
    runs = int(runs)
    if runs < 20:
        raise BadArgument("band_runs", "0 (no band) or at least 20 bootstrap refits", runs)
    rng = np.random.default_rng(seed)
    grid = curve_grid(fit)
    p_true = np.clip(fit.predict(model.x), 0.0, 1.0)
    curves = np.empty((runs, len(grid)))
    for i in range(runs):
        k_star = rng.binomial(model.n.astype(np.int64), p_true).astype(np.float64)
        boot = _Model(model.function, model.direction, model.level, model.x, k_star, model.n, model.fixed)
        res = optimize.minimize(boot, x_hat, method="L-BFGS-B", bounds=box)
        p = boot.full(res.x)
        beta = math.exp(p["slope"])
        a = alpha_at(model.function, p["threshold"], beta, p["guess"], p["lapse"], model.level,
                     model.direction)
        curves[i] = psi(model.function, grid, a, beta, p["guess"], p["lapse"], model.direction)
    lower, upper = np.nanpercentile(curves, [2.5, 97.5], axis=0)
    return grid, lower, upper


def curve_grid(fit: PsychometricFit, points: int = 120) -> np.ndarray:
    """Levels to draw the curve over: the tested range (from 0 for a Weibull)."""
    lo, hi = float(fit.x[0]), float(fit.x[-1])
    pad = 0.05 * (hi - lo)
    start = max(lo - pad, 0.0) if fit.function == "weibull" else lo - pad
    return np.linspace(start, hi + pad, points)


def _warnings(fit: PsychometricFit) -> tuple[str, ...]:
    """Plain sentences about estimates a reader should not take at face value."""
    out = []
    lo, hi = float(fit.x[0]), float(fit.x[-1])
    t = fit.params["threshold"]
    if not lo <= t <= hi:
        out.append(f"the threshold {t:.3g} lies outside the tested levels {lo:.3g}–{hi:.3g}: "
                   "an extrapolation; test levels around it")
    ci = fit.ci95.get("threshold")
    if ci is not None and (ci[0] <= fit.bounds["threshold"][0] or ci[1] >= fit.bounds["threshold"][1]):
        out.append("the threshold's interval reaches its search bound: the data do not pin it down")
    lapse_ci = fit.ci95.get("lapse")
    if "lapse" in fit.one_sided and fit.params["lapse"] >= LAPSE_MAX - 1e-9:
        out.append(f"the lapse rate sits at its upper bound {LAPSE_MAX}: the animal errs often even "
                   "at the easiest levels; check engagement before reading the threshold")
    elif lapse_ci is not None and "lapse" in fit.one_sided:
        out.append(f"the lapse rate sits at 0: one-sided interval [0, {lapse_ci[1]:.3g}]")
    if "guess" in fit.one_sided and fit.params["guess"] >= GUESS_MAX - 1e-9:
        out.append("the guess rate sits at its upper bound 0.5: responses barely depend on the level")
    return tuple(out)


# --------------------------------------------------------------------------- staircases


def levitt_target(down: int, up: int = 1) -> float | None:
    """P(correct) a transformed up-down rule converges on (Levitt 1971, J Acoust Soc Am
    49:467): 1-up-k-down → 0.5^(1/k) (70.7% for k = 2, 79.4% for k = 3); k-up-1-down →
    1 − 0.5^(1/k). None for other rules (no single closed form)."""
    down, up = int(down), int(up)
    if up == 1:
        return 0.5 ** (1.0 / down)
    if down == 1:
        return 1.0 - 0.5 ** (1.0 / up)
    return None


def reversal_levels(levels: Sequence[float]) -> list[float]:
    """The level at each reversal of a staircase track: where its direction of change flips."""
    out: list[float] = []
    last_dir = 0
    prev = None
    for v in levels:
        v = float(v)
        if prev is not None and v != prev:
            d = 1 if v > prev else -1
            if last_dir and d != last_dir:
                out.append(prev)
            last_dir = d
        prev = v
    return out


def convergence_level(levels: Sequence[float]) -> tuple[float | None, int]:
    """The mean level at the track's reversals after the first quarter of them (at least
    two dropped while the track homes in; an even number kept, so peaks and valleys
    weigh alike; common practice) and how many reversals there were; (None, count) with
    fewer than 4 reversals."""
    rev = reversal_levels(levels)
    if len(rev) < 4:
        return None, len(rev)
    tail = rev[max(2, len(rev) // 4):]
    if len(tail) % 2:
        tail = tail[1:]
    return float(np.mean(tail)), len(rev)


# --------------------------------------------------------------------------- checks


def _choice(name: str, value: Any, options: Sequence[str]) -> str:
    if value not in options:
        raise BadArgument(name, f"one of {', '.join(options)}", value)
    return value


def _probability(name: str, value: Any, lo: float, hi: float) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise BadArgument(name, f"a number in [{lo}, {hi}]", value) from None
    if not lo <= v <= hi:
        raise BadArgument(name, f"a number in [{lo}, {hi}]", value)
    return v


def _level(level: Any, guess_hi: float, lapse_hi: float) -> float:
    """The performance level for the threshold: above the guess rate, below 1 − the largest lapse."""
    lo, hi = guess_hi, 1.0 - lapse_hi
    try:
        v = float(level)
    except (TypeError, ValueError):
        raise BadArgument("level", f"a probability between {lo:g} and {hi:g}", level) from None
    if not lo < v < hi:
        raise BadArgument("level", f"a probability between {lo:g} and {hi:g} (above the guess rate, "
                          "below 1 minus the largest lapse rate)", level)
    return v


# --------------------------------------------------------------------------- binned data


def wilson_interval(k: Any, n: Any, z: float = 1.959963984540054) -> tuple[np.ndarray, np.ndarray]:
    """Wilson's (1927, J Am Stat Assoc 22:209) score interval for k successes in n trials:
    (p̂ + z²/2n ± z·√(p̂(1 − p̂)/n + z²/4n²)) / (1 + z²/n), elementwise."""
    k = np.asarray(k, dtype=np.float64)
    n = np.asarray(n, dtype=np.float64)
    p = k / n
    denom = 1.0 + z * z / n
    centre = (p + z * z / (2 * n)) / denom
    half = z * np.sqrt(p * (1 - p) / n + z * z / (4 * n * n)) / denom
    return centre - half, centre + half


def binned(fit: PsychometricFit, max_bins: int = 12) -> dict[str, np.ndarray]:
    """The trials in at most ``max_bins`` bins of neighbouring levels with about equal
    trial counts (each distinct level its own bin when there are few): mean level, the
    counts, the proportion and its Wilson 95% interval."""
    x, k, n = fit.x, fit.k, fit.n
    if len(x) <= max_bins:
        groups = [np.array([i]) for i in range(len(x))]
    else:
        edges = np.searchsorted(np.cumsum(n) / n.sum(), np.linspace(0, 1, max_bins + 1)[1:-1])
        groups = [g for g in np.split(np.arange(len(x)), np.unique(edges)) if len(g)]
    nb = np.array([n[g].sum() for g in groups])
    kb = np.array([k[g].sum() for g in groups])
    xb = np.array([float(np.sum(x[g] * n[g]) / n[g].sum()) for g in groups])
    lo, hi = wilson_interval(kb, nb)
    return {"x": xb, "k": kb, "n": nb, "p": kb / nb, "lower": lo, "upper": hi}
