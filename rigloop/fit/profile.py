"""Profile-likelihood 95% intervals for each free parameter, and the warnings that say
when a parameter is not identified by the trials.

The profile of parameter j is the lowest negative log-likelihood with θ_j held at a value
and every other free parameter re-fitted. The 95% interval is the set of values whose
profile lies within 3.84/2 = 1.92 of the minimum: the likelihood-ratio statistic
2·(ℓ̂ − ℓ_p(θ_j)) has a χ²(1) distribution asymptotically, and its 95% quantile is 3.84
(Wilks 1938, Ann Math Stat 9:60; the profile form: Venzon & Moolgavkar 1988, Appl Stat
37:87). Unlike ±1.96 SE it follows a skewed likelihood and stays inside the bounds.

At a bound. When the estimate sits on a bound of its search range (lapse at 0, a
variance at its floor), the interval is one-sided: it starts at the bound and ends where
the profile has risen by 1.92; the result says so in words. When the profile has not
risen by 1.92 by the far end of the search range, the interval is cut there and the
result says that the trials do not rule out values beyond it.

The search is on the optimiser's unit box (``search._Box``); the caller hands in a local
minimiser, so this module needs no scipy of its own.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np

CHI2_1_95 = 3.841458820694124  # χ²(1) 95% quantile (scipy.stats.chi2.ppf(0.95, 1))
DROP = CHI2_1_95 / 2  # the rise in −log L that bounds the 95% profile interval
AT_BOUND = 1e-4  # unit-box distance from a bound at which an estimate counts as on it
_XTOL = 1e-4  # unit-box tolerance of an interval end
_FTOL = 0.005  # tolerance on the signed root at an end: 2Δℓ within ±0.02 of 3.84

Minimiser = Callable[[Callable[[np.ndarray], float], np.ndarray], tuple[np.ndarray, float]]


@dataclass(frozen=True, slots=True)
class Interval:
    """A 95% profile interval in natural units, and how each end was reached.

    lo_end, hi_end: "profile" (where the profile rose by 1.92), "estimate at bound" (the
    estimate sits on that bound: the interval is one-sided), or "search bound" (the
    profile did not rise by 1.92 within the search range: the interval is cut there).
    """

    lo: float
    hi: float
    lo_end: str
    hi_end: str

    @property
    def one_sided(self) -> bool:
        return "estimate at bound" in (self.lo_end, self.hi_end)

    def words(self, name: str) -> str:
        """The interval in words: two-sided, one-sided at a bound, or cut at a search bound."""
        text = f"{name} 95% interval [{self.lo:.4g}, {self.hi:.4g}]"
        if self.lo_end == "estimate at bound":
            return text + f", one-sided: the estimate sits on its lower bound {self.lo:.4g}"
        if self.hi_end == "estimate at bound":
            return text + f", one-sided: the estimate sits on its upper bound {self.hi:.4g}"
        cut = [f"{'low' if end == 'lo' else 'high'} end at the search bound"
               for end, how in (("lo", self.lo_end), ("hi", self.hi_end)) if how == "search bound"]
        return text + (f" ({' and '.join(cut)})" if cut else "")


def profile_intervals(nll: Callable[[np.ndarray], float], s_hat: np.ndarray, nll_hat: float,
                      natural: Callable[[np.ndarray], np.ndarray], names: Sequence[str],
                      minimise: Minimiser, se_unit: Sequence[float | None] | None = None,
                      progress: Callable[[], None] | None = None,
                      cutoffs: Sequence[float] | None = None
                      ) -> tuple[dict[str, Interval], float]:
    """The 95% profile interval of every free parameter, and the lowest −log L seen.

    nll: −log L on the unit box; s_hat, nll_hat: the optimum there; natural: unit box →
    natural values; minimise(f, s0) → (s, f(s)) a local minimiser on [0, 1]^m; se_unit:
    Wald standard errors on the unit box (a first guess of each end), None where unknown.
    The lowest −log L seen is below nll_hat when a profile found a better point than the
    optimiser (the caller warns). cutoffs: the likelihood-ratio cutoff of each parameter's
    interval (default 3.84, χ²(1)'s 95% quantile, for all); a calibrated interval
    (``calibrate.py``) hands in 3.84 times its Bartlett factor.
    """
    out: dict[str, Interval] = {}
    best = [float(nll_hat)]
    for j, name in enumerate(names):
        guess = se_unit[j] if se_unit is not None else None
        drop = DROP if cutoffs is None else float(cutoffs[j]) / 2.0
        prof = _Profile(nll, s_hat, j, minimise, best, drop)
        ends = []
        for direction in (-1.0, 1.0):
            ends.append(_end(prof, s_hat[j], nll_hat, direction, guess, drop))
        (s_lo, lo_end), (s_hi, hi_end) = ends
        lo_pt, hi_pt = np.array(s_hat, dtype=np.float64), np.array(s_hat, dtype=np.float64)
        lo_pt[j], hi_pt[j] = s_lo, s_hi
        out[name] = Interval(float(natural(lo_pt)[j]), float(natural(hi_pt)[j]), lo_end, hi_end)
        if progress is not None:
            progress()
    return out, best[0]


class _Profile:
    """The profile −log L of coordinate j: the others re-fitted from the estimate (and,
    where that lands above the 1.92 line, also from the last point solved)."""

    def __init__(self, nll, s_hat, j, minimise, best, drop: float = DROP):
        self.nll, self.j, self.minimise, self.best, self.drop = nll, j, minimise, best, drop
        self.s_hat = np.array(s_hat, dtype=np.float64)
        self.others = [i for i in range(len(s_hat)) if i != j]
        self.warm = self.s_hat[self.others]

    def __call__(self, sj: float) -> float:
        full = np.array(self.s_hat)
        full[self.j] = sj
        if not self.others:
            value = float(self.nll(full))
        else:
            def inner(z: np.ndarray) -> float:
                full[self.others] = z
                return float(self.nll(full))

            # from the estimate's other coordinates: a warm start carried from a far probe
            # can sit in another basin and make the profile rise too soon
            z, value = self.minimise(inner, self.s_hat[self.others])
            if value > self.best[0] + self.drop and not np.array_equal(self.warm, self.s_hat[self.others]):
                z2, v2 = self.minimise(inner, self.warm)
                if v2 < value:
                    z, value = z2, v2
            self.warm = np.clip(z, 0.0, 1.0)
        self.best[0] = min(self.best[0], value)
        return value

    def reset(self) -> None:
        self.warm = self.s_hat[self.others]


def _end(prof: _Profile, sj_hat: float, nll_hat: float, direction: float,
         guess: float | None, drop: float = DROP) -> tuple[float, str]:
    """One end of the interval on the unit box, and how it was reached.

    The end is the root of the signed likelihood root r(s) = √(2(ℓ_p(s) − ℓ̂)) − √(2·drop)
    (√3.84 uncalibrated),
    which is close to linear in the parameter where the χ²(1) calibration holds (the
    statistic is a squared, nearly normal quantity; Barndorff-Nielsen & Cox 1994,
    *Inference and Asymptotics*, §3.4, from memory), so a secant step on it lands near
    the end in two or three profile points.
    """
    bound = 0.0 if direction < 0 else 1.0
    prof.reset()
    if abs(sj_hat - bound) <= AT_BOUND:
        return bound, "estimate at bound"
    root = math.sqrt(2.0 * drop)

    def rise(sj: float) -> float:
        return math.sqrt(2.0 * max(prof(sj) - nll_hat, 0.0)) - root

    # a first probe at the Wald end (2 SE on the unit box), else a tenth of the way
    step = 2.0 * guess if guess is not None and math.isfinite(guess) and guess > 0 else 0.1
    inner, f_inner = sj_hat, -root  # at the estimate the profile is the minimum
    probe = min(max(sj_hat + direction * step, 0.0), 1.0)
    while True:
        f_probe = rise(probe)
        if f_probe > 0.0:
            return _solve(rise, inner, f_inner, probe, f_probe), "profile"
        if probe == bound:
            return bound, "search bound"
        # extrapolate the near-linear root to the line, at least doubling the step
        slope = (f_probe - f_inner) / (probe - inner)
        reach = abs(f_probe / slope) * 1.2 if slope * direction > 0 else math.inf
        step = max(2.0 * step, abs(probe - sj_hat) + min(reach, 3.0 * step))
        inner, f_inner = probe, f_probe
        probe = min(max(sj_hat + direction * step, 0.0), 1.0)


def _solve(f: Callable[[float], float], a: float, fa: float, b: float, fb: float) -> float:
    """The root of f between a (f(a) = fa <= 0) and b (fb > 0): secant guesses kept
    inside the bracket (regula falsi with a floor on the step), stopping when the
    bracket is narrower than _XTOL or f is within _FTOL of 0."""
    for _ in range(40):
        if abs(b - a) <= _XTOL:
            break
        # secant guess, kept away from the ends so the bracket always shrinks
        t = fa / (fa - fb) if fb != fa else 0.5
        t = min(max(t, 0.05), 0.95)
        m = a + t * (b - a)
        fm = f(m)
        if abs(fm) <= _FTOL:
            return m
        if fm > 0.0:
            b, fb = m, fm
        else:
            a, fa = m, fm
    return a - fa * (b - a) / (fb - fa) if fb != fa else 0.5 * (a + b)


# --------------------------------------------------------------------------- warnings


def interval_warnings(name: str, estimate: float, interval: Interval,
                      bounds: tuple[float, float], se: float | None, log_scale: bool) -> list[str]:
    """Plain sentences about a parameter the trials do not pin down."""
    lo, hi = bounds
    out = []
    if interval.lo_end == "search bound" and interval.hi_end == "search bound":
        out.append(f"{name}: the likelihood is flat across its whole search range "
                   f"[{lo:.4g}, {hi:.4g}] (it changes by less than {DROP:.2f}), so these trials "
                   f"do not tell its value; fix it (--fix {name}=VALUE) or fit trials that "
                   f"depend on it.")
    else:
        for end, how, where in (("low", interval.lo_end, lo), ("high", interval.hi_end, hi)):
            if how == "estimate at bound":
                out.append(f"{name} = {estimate:.4g} sits on its {'lower' if end == 'low' else 'upper'} "
                           f"bound {where:.4g}: its 95% interval is one-sided, from the bound "
                           f"[{interval.lo:.4g}, {interval.hi:.4g}], and it has no standard "
                           f"error; if the bound is not a hard limit, widen it (--bounds).")
            elif how == "search bound":
                out.append(f"{name}: the {end} end of its 95% interval reached the search bound "
                           f"{where:.4g}, so the trials do not rule out "
                           f"{'smaller' if end == 'low' else 'larger'} values (the interval "
                           f"is cut there).")
    if se is not None and _huge(estimate, se, bounds, log_scale):
        out.append(f"{name} has a standard error of {se:.3g}, wider than its whole search range "
                   f"[{lo:.4g}, {hi:.4g}] at ±1.96 SE: the curvature of the likelihood does not "
                   f"pin it down; read its profile interval, not the SE.")
    return out


def _huge(estimate: float, se: float, bounds: tuple[float, float], log_scale: bool) -> bool:
    """A Wald interval ±1.96 SE wider than the search range (on the log scale for
    log-scale parameters, SE(log θ) = SE/θ by the delta method)."""
    lo, hi = bounds
    if log_scale:
        if estimate <= 0:
            return False
        return 2 * 1.96 * se / estimate > math.log(hi / lo)
    return 2 * 1.96 * se > hi - lo
