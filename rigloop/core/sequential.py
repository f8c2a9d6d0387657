"""Sequential criteria on a stream of correct / incorrect trials.

* :class:`BernoulliSPRT` is Wald's sequential probability ratio test, one test (its
  verdict stays); :func:`sprt_bounds` its thresholds.
* :func:`sequential_step` runs the criteria that keep testing over unbounded trials: Page's
  CUSUM, Robbins' test of power one, and Wald's SPRT restarting after it accepts p0;
  :func:`sequential_summary` says what each guarantees and how soon it passes.

Pure: standard library and numpy only.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

import numpy as np

from ..errors import BadArgument
from .checks import _binary, _count, _negative, _number, _open_unit, _positive, first_bad

_INF = math.inf


# --------------------------------------------------------------------------- SPRT


def sprt_bounds(alpha: float, beta: float) -> tuple[float, float]:
    """Wald's (1945) SPRT thresholds ``(ln B, ln A)``: A = (1 - beta)/alpha, B = beta/(1 - alpha).

    alpha: error rate accepting H1 when H0 holds; beta: accepting H0 when H1 holds;
    both in (0, 1) with alpha + beta < 1 (so that ln B < 0 < ln A).
    """
    alpha, beta = _open_unit("alpha", alpha), _open_unit("beta", beta)
    if alpha + beta >= 1.0:
        raise BadArgument("alpha + beta", "less than 1", alpha + beta)
    return math.log(beta / (1.0 - alpha)), math.log((1.0 - beta) / alpha)


SPRT_VERDICTS = ("continue", "accept_h1", "accept_h0")


class BernoulliSPRT:
    """Wald's SPRT of H0: p = p0 against H1: p = p1 on a stream of successes/failures.

    The log likelihood ratio ``llr`` gains ln(p1/p0) per success and
    ln((1 - p1)/(1 - p0)) per failure; the test continues while ln B < llr < ln A.
    Once decided, the verdict stays: later updates change nothing until :meth:`reset`.
    """

    __slots__ = ("p0", "p1", "alpha", "beta", "ln_b", "ln_a", "llr", "n", "verdict")

    def __init__(self, p0: float, p1: float, alpha: float = 0.05, beta: float = 0.2):
        self.p0, self.p1 = _open_unit("p0", p0), _open_unit("p1", p1)
        if self.p0 == self.p1:
            raise BadArgument("p1", f"a probability different from p0 = {self.p0:g}", p1)
        self.ln_b, self.ln_a = sprt_bounds(alpha, beta)  # (checks alpha and beta first)
        self.alpha, self.beta = float(alpha), float(beta)
        self.reset()

    def __repr__(self) -> str:
        return (
            f"BernoulliSPRT(p0={self.p0}, p1={self.p1}, n={self.n}, "
            f"llr={self.llr:.4g}, verdict={self.verdict!r})"
        )

    def reset(self) -> None:
        self.llr = 0.0
        self.n = 0
        self.verdict = "continue"

    def update(self, success: bool) -> str:
        """Fold in one trial; returns ``"continue"``, ``"accept_h1"`` or ``"accept_h0"``."""
        y = _binary("success", success)
        if self.verdict != "continue":
            return self.verdict
        # Lambda += ln(p1/p0) on a success, ln((1 - p1)/(1 - p0)) on a failure
        if y:
            self.llr += math.log(self.p1 / self.p0)
        else:
            self.llr += math.log((1.0 - self.p1) / (1.0 - self.p0))
        self.n += 1
        if self.llr >= self.ln_a:
            self.verdict = "accept_h1"
        elif self.llr <= self.ln_b:
            self.verdict = "accept_h0"
        return self.verdict

    def state(self) -> dict[str, float | int | str]:
        return {
            "p0": self.p0,
            "p1": self.p1,
            "alpha": self.alpha,
            "beta": self.beta,
            "llr": self.llr,
            "n": self.n,
            "verdict": self.verdict,
        }

    @classmethod
    def from_state(cls, d: Mapping[str, Any]) -> BernoulliSPRT:
        keys = {"p0", "p1", "alpha", "beta", "llr", "n", "verdict"}
        if not isinstance(d, Mapping) or set(d) != keys:
            got = sorted(d) if isinstance(d, Mapping) else d
            raise BadArgument("state", f"a map with keys {', '.join(sorted(keys))}", got)
        test = cls(d["p0"], d["p1"], d["alpha"], d["beta"])
        test.llr = _number("state.llr", d["llr"])
        test.n = _count("state.n", d["n"])
        if d["verdict"] not in SPRT_VERDICTS:
            raise BadArgument("state.verdict", f"one of {', '.join(SPRT_VERDICTS)}", d["verdict"])
        test.verdict = d["verdict"]
        return test


# --------------------------------------------------------------------------- sequential tests
#
# A training animal changes: one at 55% early may be at 95% later. A criterion must keep
# testing over an unbounded number of trials and still say how often it passes an animal
# that never improved. Each test below runs on the Bernoulli log likelihood ratio of
# p1 ("performing at p1") against p0, one increment per scored trial, and passes at an
# upper threshold; once passed, the caller keeps the verdict.
#
# * "cusum": Page's CUSUM (Page 1954, Biometrika 41:100), S_n = max(0, S_{n-1} + step).
#   Bound within `horizon` trials: P(any pass | p = p0 throughout) <= horizon e^{-h} = alpha.
# * "power_one": Robbins' test of power one (Robbins 1970, Ann Math Stat 41:1397), the log LR
#   with no lower boundary. Bound for ever: P(any pass | p0) <= alpha (Ville 1939).
# * "wald": Wald's SPRT (1945) that restarts at 0 when it accepts p0. Each restart spends
#   alpha again, so over many restarts it has no bound: an animal at p0 passes in the end.

SEQUENTIAL_TESTS = ("cusum", "power_one", "wald")

_TEST_NAMES = {
    "cusum": "Page's CUSUM", "power_one": "test of power one", "wald": "Wald's SPRT, restarting",
}


def llr_steps(p0: float, p1: float) -> tuple[float, float]:
    """What one success and one failure add to the log likelihood ratio of p1 against p0:
    (ln(p1/p0), ln((1 - p1)/(1 - p0))), Bernoulli likelihoods (Wald 1945)."""
    p0, p1 = _open_unit("p0", p0), _open_unit("p1", p1)
    if p1 <= p0:
        raise BadArgument("p1", f"a probability above p0 = {p0:g}", p1)
    return math.log(p1 / p0), math.log((1.0 - p1) / (1.0 - p0))


def kl_bernoulli(p: float, q: float) -> float:
    """Kullback-Leibler divergence KL(p || q) = p ln(p/q) + (1 - p) ln((1 - p)/(1 - q)) in
    nats: the mean per-trial log likelihood ratio of p against q when the truth is p."""
    p, q = _open_unit("p", p), _open_unit("q", q)
    return p * math.log(p / q) + (1.0 - p) * math.log((1.0 - p) / (1.0 - q))


def llr_drift(p: float, p0: float, p1: float) -> float:
    """Mean log-LR increment per trial when the animal is correct with probability p:
    p ln(p1/p0) + (1 - p) ln((1 - p1)/(1 - p0)); KL(p1 || p0) at p1, -KL(p0 || p1) at p0."""
    up, down = llr_steps(p0, p1)
    p = _open_unit("p", p)
    return p * up + (1.0 - p) * down


def cusum_threshold(horizon: int, alpha: float) -> float:
    """Page's CUSUM threshold h = ln(horizon / alpha).

    A pass by trial n means some start k <= n has a likelihood ratio Lambda_{k..n} >= e^h; under
    p0 each start's ratio is a mean-one martingale, so by Ville's inequality it ever reaches
    e^h with probability <= e^{-h}, and a union bound over the n starts gives n e^{-h}: at
    most alpha within `horizon` trials. Lorden (1971): mean trials to a false pass >= e^h.
    """
    if isinstance(horizon, bool) or not isinstance(horizon, int | np.integer) or horizon < 1:
        raise BadArgument("horizon", "a whole number of trials >= 1", horizon)
    alpha = _open_unit("alpha", alpha)
    return math.log(int(horizon) / alpha)


def power_one_threshold(alpha: float) -> float:
    """Robbins' (1970) threshold ln(1/alpha): under p0 the likelihood ratio is a non-negative
    martingale with mean 1, so P(it ever reaches 1/alpha) <= alpha (Ville 1939)."""
    return -math.log(_open_unit("alpha", alpha))


def cusum_step(s: float, step: float) -> float:
    """Page's recursion S_n = max(0, S_{n-1} + step), step the trial's log-LR increment."""
    s += step
    return s if s > 0.0 else 0.0


def wald_restart_step(llr: float, step: float, ln_b: float, ln_a: float) -> tuple[float, str]:
    """One trial of Wald's SPRT that restarts: ``(llr', verdict)``.

    llr' = llr + step; at llr' >= ln A it accepts p1 ("accept_h1"); at llr' <= ln B it
    accepts p0 ("accept_h0") and starts again from llr' = 0, a fresh test that may pass
    with probability about alpha again (Wald's bounds hold per test only).
    """
    llr += step
    if llr >= ln_a:
        return llr, "accept_h1"
    if llr <= ln_b:
        return 0.0, "accept_h0"
    return llr, "continue"


def sequential_bounds(test: str, p0: float, p1: float, alpha: float = 0.05, beta: float = 0.2,
                      horizon: int = 2000) -> tuple[float, float, float, float]:
    """``(up, down, upper, lower)`` for :func:`sequential_step`: the log-LR increments of a
    success and a failure, the pass threshold and Wald's ln B (-inf for the other tests).

    cusum: upper = ln(horizon/alpha); power_one: ln(1/alpha); wald: (ln B, ln A) of
    :func:`sprt_bounds`. ``beta`` is read by wald only, ``horizon`` by cusum only.
    """
    up, down = llr_steps(p0, p1)
    if test == "cusum":
        return up, down, cusum_threshold(horizon, alpha), -_INF
    if test == "power_one":
        return up, down, power_one_threshold(alpha), -_INF
    if test == "wald":
        ln_b, ln_a = sprt_bounds(alpha, beta)
        return up, down, ln_a, ln_b
    raise BadArgument("test", f"one of {', '.join(SEQUENTIAL_TESTS)}", test)


def sequential_step(test: str, llr: float, success: bool, up: float, down: float, upper: float,
                    lower: float) -> tuple[float, str]:
    """One scored trial of a sequential test: ``(statistic', verdict)``.

    The statistic is CUSUM's S_n, the power-one log LR or Wald's llr; ``up``, ``down``,
    ``upper``, ``lower`` come from :func:`sequential_bounds` (not checked here: this runs
    per trial). The verdict is "accept_h1" at statistic' >= upper, Wald's "accept_h0"
    (after which the statistic is 0) or "continue".
    """
    step = up if success else down
    if test == "cusum":
        llr = cusum_step(llr, step)
    elif test == "wald":
        return wald_restart_step(llr, step, lower, upper)
    else:
        llr += step  # power_one: Lambda_n = Lambda_{n-1} + step, no lower boundary
    return llr, "accept_h1" if llr >= upper else "continue"


def _wald_exponent(p: float, up: float, down: float) -> float:
    """The theta != 0 with p e^{theta up} + (1 - p) e^{theta down} = 1 (Wald 1945's h(p));
    0 when the mean increment is 0. theta = 1 at p0 and -1 at p1."""
    drift = p * up + (1.0 - p) * down
    if drift == 0.0:
        return 0.0

    def g(theta: float) -> float:
        return p * math.exp(theta * up) + (1.0 - p) * math.exp(theta * down) - 1.0

    # g is convex with g(0) = 0 and g'(0) = drift: the other root lies on the far side of 0
    sign = -1.0 if drift > 0.0 else 1.0
    far = sign
    while g(far) <= 0.0:
        far *= 2.0
    near = 0.0
    for _ in range(200):
        mid = 0.5 * (near + far)
        if mid in (near, far):
            break
        if g(mid) > 0.0:
            far = mid
        else:
            near = mid
    return 0.5 * (near + far)


def wald_trials_to_pass(p: float, up: float, down: float, ln_b: float, ln_a: float) -> float:
    """Expected trials until Wald's restarting SPRT passes, animal at p (approximate).

    Wald's (1945) approximations, overshoot ignored: P(accept p0) L = (e^{theta ln A} - 1) /
    (e^{theta ln A} - e^{theta ln B}) and E[N] = (L ln B + (1 - L) ln A) / drift (at drift 0:
    L = ln A / (ln A - ln B), E[N] = -ln A ln B / E[step^2]); tests are repeated until one
    passes, so the total is E[N] / (1 - L) (Wald's identity over the restarts).
    """
    try:
        ok = 0.0 < p < 1.0 and 0.0 < up < _INF and -_INF < down < 0.0 and -_INF < ln_b < 0.0 < ln_a < _INF
    except TypeError:
        ok = False
    if not ok:  # (at p = 0 or 1 the search for Wald's exponent would never end)
        raise first_bad(("p", p, _open_unit), ("up", up, _positive), ("down", down, _negative),
                        ("ln_b", ln_b, _negative), ("ln_a", ln_a, _positive))
    try:
        theta = _wald_exponent(p, up, down)
    except OverflowError:  # p so near 0 or 1 that e^(theta step) leaves the floats before the root
        raise BadArgument("p", "a probability far enough from 0 and 1 for Wald's approximation", p) from None
    drift = p * up + (1.0 - p) * down
    if theta == 0.0:
        accept0 = ln_a / (ln_a - ln_b)
        n = -ln_a * ln_b / (p * up * up + (1.0 - p) * down * down)
    else:
        ea, eb = math.exp(theta * ln_a), math.exp(theta * ln_b)
        accept0 = (ea - 1.0) / (ea - eb)
        n = (accept0 * ln_b + (1.0 - accept0) * ln_a) / drift
    return _INF if accept0 >= 1.0 else n / (1.0 - accept0)


def _trials_to_pass(
    test: str, p: float, up: float, down: float, upper: float, lower: float
) -> float | None:
    """Expected trials to pass from a fresh start with the animal at p (approximate), or None
    where there is no simple approximation (CUSUM with a mean increment <= 0)."""
    drift = p * up + (1.0 - p) * down
    if test == "wald":
        return wald_trials_to_pass(p, up, down, lower, upper)
    if drift > 0.0:
        # Wald's identity E[Lambda_N] = drift E[N] with Lambda_N ~ the threshold; for the CUSUM
        # the delay after a change is ~ h / KL(p1 || p0) (Lorden 1971), approximate
        return upper / drift
    return _INF if test == "power_one" else None


def sequential_summary(test: str, p0: float, p1: float, alpha: float = 0.05, beta: float = 0.2,
                       horizon: int = 2000, p: float | None = None) -> dict[str, Any]:
    """What a person needs to know about a sequential criterion, as plain values.

    Keys: ``test``, ``name``, ``threshold`` (pass when the statistic reaches it, log-LR
    units), ``restart_at`` (Wald's ln B, else None), ``false_pass_bound`` (the bound on
    passing an animal at p0: within ``horizon`` trials for cusum, ever for power_one, per
    test for wald: Wald 1945), ``mean_trials_to_false_pass`` (at least, at p0: e^h for
    cusum (Lorden 1971), inf for power_one (some such animals never pass), None for wald),
    ``guarantee`` (in words; for wald it says how soon an animal at p0 passes),
    ``trials_to_pass_p1`` and, if ``p`` is given,
    ``trials_to_pass_at_p`` (expected trials from a fresh start, approximate: the overshoot
    of the threshold and CUSUM's floor at 0 are ignored; None where there is no simple
    approximation, inf where the mean is infinite).
    """
    up, down, upper, lower = sequential_bounds(test, p0, p1, alpha, beta, horizon)
    alpha = float(alpha)
    if test == "cusum":
        bound, mean_false = alpha, math.exp(upper)
        words = (f"an animal at p0 throughout passes within {int(horizon)} trials with probability "
                 f"at most {alpha:g}; mean trials to a false pass at least e^h = {mean_false:.0f}")
    elif test == "power_one":
        bound, mean_false = alpha, _INF
        words = ("an animal at p0 throughout ever passes, however long it trains, with probability "
                 f"at most {alpha:g}")
    else:
        bound, mean_false = alpha / (1.0 - float(beta)), None
        soon = wald_trials_to_pass(float(p0), up, down, lower, upper)
        words = (f"each test passes an animal at p0 with probability at most alpha/(1 - beta) = "
                 f"{bound:.3g}; every restart spends that again: an animal that stays at p0 passes "
                 f"after about {soon:.0f} trials on average")
    out: dict[str, Any] = {
        "test": test, "name": _TEST_NAMES[test], "threshold": upper,
        "restart_at": lower if test == "wald" else None, "false_pass_bound": bound,
        "mean_trials_to_false_pass": mean_false, "guarantee": words,
        "trials_to_pass_p1": _trials_to_pass(test, float(p1), up, down, upper, lower),
    }
    if p is not None:
        out["p"] = _open_unit("p", p)
        out["trials_to_pass_at_p"] = _trials_to_pass(test, out["p"], up, down, upper, lower)
    return out
