"""Response performance: state-space learning curve, learning criteria, d', SPRT.

* :class:`LearningCurve` is the forward filter, and :func:`smooth` the offline
  forward-backward smoother, of the state-space model of binary responses of
  Smith, Frank, Wirth et al. (2004, J Neurosci 24:447): a hidden learning state
  ``x_k = x_{k-1} + eps`` (``eps ~ N(0, sigma2)``) sets the probability correct
  ``p_k = logistic(mu + x_k)`` with ``mu = logit(chance)``, so ``x = 0`` is chance.
* :func:`learning_trial` is their ideal-observer learning trial.
* :func:`binomial_p_above` is the exact one-sided binomial tail for "k of n correct"
  criteria, :func:`dprime` signal-detection sensitivity, :class:`BernoulliSPRT` Wald's
  sequential probability ratio test (one test: its verdict stays).
* :func:`sequential_step` runs the criteria that keep testing over unbounded trials: Page's
  CUSUM, Robbins' test of power one, and Wald's SPRT restarting after it accepts p0;
  :func:`sequential_summary` says what each guarantees and how soon it passes.

Pure: standard library and numpy only (Phi and its inverse from ``statistics.NormalDist``).
"""

from __future__ import annotations

import functools
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from statistics import NormalDist
from typing import Any

import numpy as np

from ..errors import BadArgument

_NORMAL = NormalDist()
_NEWTON_MAX = 60  # safeguarded Newton converges in < 10 steps; the cap is a guard only
_NEWTON_TOL = 1e-12
_INF = math.inf


# --------------------------------------------------------------------------- checks


def _number(name: str, value: Any) -> float:
    if type(value) is not float:  # a float, the common case, needs only the finiteness test
        if isinstance(value, bool) or not isinstance(value, int | float | np.integer | np.floating):
            raise BadArgument(name, "a finite number", value)
        value = float(value)
    if not math.isfinite(value):
        raise BadArgument(name, "a finite number", value)
    return value


def _open_unit(name: str, value: Any) -> float:
    value = _number(name, value)
    if not 0.0 < value < 1.0:
        raise BadArgument(name, "a probability strictly between 0 and 1", value)
    return value


def _positive(name: str, value: Any) -> float:
    value = _number(name, value)
    if value <= 0.0:
        raise BadArgument(name, "a finite number > 0", value)
    return value


def _count(name: str, value: Any) -> int:
    if type(value) is int and value >= 0:
        return value
    if isinstance(value, bool) or not isinstance(value, int | np.integer) or value < 0:
        raise BadArgument(name, "a whole number >= 0", value)
    return int(value)


def _binary(name: str, value: Any) -> int:
    if value is True or value is False:
        return int(value)
    if isinstance(value, bool | np.bool_):
        return int(value)
    if isinstance(value, int | np.integer) and value in (0, 1):
        return int(value)
    raise BadArgument(name, "True/False (or 1/0)", value)


def _logistic(a: float) -> float:
    # 1 / (1 + e^-a), written so that neither branch overflows
    if a >= 0.0:
        return 1.0 / (1.0 + math.exp(-a))
    e = math.exp(a)
    return e / (1.0 + e)


def _logit(p: float) -> float:
    return math.log(p / (1.0 - p))


_MU: dict[float, float] = {}  # chance -> logit(chance); a rule file uses a level or two


def _mu(chance: float) -> float:
    """_logit(chance) of a float chance, computed once per level."""
    mu = _MU.get(chance)
    if mu is None:
        if len(_MU) >= 64:
            _MU.clear()
        mu = _MU[chance] = _logit(chance)
    return mu


@functools.lru_cache(maxsize=64)
def _z_two_sided(level: float) -> float:
    # Phi^-1((1 + level)/2); a rule file uses a level or two, so each is computed once
    return _NORMAL.inv_cdf(0.5 + level / 2.0)


@functools.lru_cache(maxsize=64)
def _z_one_sided(level: float) -> float:
    # Phi^-1(level)
    return _NORMAL.inv_cdf(level)


# --------------------------------------------------------------------------- filter step


def _filter_step(
    x: float, var: float, y: int, mu: float, sigma2: float
) -> tuple[float, float, float]:
    """One trial of the forward filter (Smith et al. 2004). Returns (x_post, var_post, var_pred).

    Predict:  x_{k|k-1} = x_{k-1|k-1};  v_{k|k-1} = v_{k-1|k-1} + sigma2
    Mode:     x = x_{k|k-1} + v_{k|k-1} (y - logistic(mu + x))   (implicit in x)
    Variance: v_{k|k} = 1 / (1/v_{k|k-1} + p (1 - p)),  p = logistic(mu + x_{k|k})
    """
    var_pred = var + sigma2
    # The root of f(z) = z - x - v (y - p(z)) lies between x and x + v(y - 0 or 1),
    # and f' = 1 + v p (1 - p) >= 1: Newton inside that bracket, bisection if it leaves.
    lo, hi = (x, x + var_pred) if y else (x - var_pred, x)
    z = x
    exp = math.exp
    # float operands throughout (y as 1.0 or 0.0: the same values), which the
    # interpreter's float fast paths take
    yf = 1.0 if y else 0.0
    for _ in range(_NEWTON_MAX):
        # p = logistic(mu + z), as _logistic computes it (inline: this loop is the hot path)
        a = mu + z
        if a >= 0.0:
            p = 1.0 / (1.0 + exp(-a))
        else:
            e = exp(a)
            p = e / (1.0 + e)
        f = z - x - var_pred * (yf - p)
        if f > 0.0:
            hi = z
        else:
            lo = z
        step = f / (1.0 + var_pred * p * (1.0 - p))
        z_new = z - step
        if not lo <= z_new <= hi:
            z_new = 0.5 * (lo + hi)
        if abs(z_new - z) <= _NEWTON_TOL * (1.0 + abs(z)):
            z = z_new
            break
        z = z_new
    p = _logistic(mu + z)
    var_post = 1.0 / (1.0 / var_pred + p * (1.0 - p))
    return z, var_post, var_pred


# --------------------------------------------------------------------------- learning curve


_CURVE_KEYS = frozenset({"chance", "sigma2", "var0", "x", "var", "n"})


class LearningCurve:
    """Online estimate of the probability of a correct response (forward filter only).

    chance: probability correct by chance, in (0, 1) (0.5 for two choices).
    sigma2: variance of the trial-to-trial change in the learning state, > 0.
    var0: variance of the state before the first trial (default: sigma2).
    Attributes ``x`` (state at the posterior mode), ``var``, ``n`` (trials seen).

    Ceiling caveat (a property of the model, pinned in the tests): near p = 1 a trial
    carries information p(1 - p) -> 0, so over thousands of all-correct trials ``var``
    grows like n * sigma2 while ``x`` grows like log n, and ``prob_above_chance`` and
    ``lower`` drift back down although ``p`` keeps rising. Errors keep it bounded.
    """

    __slots__ = ("chance", "sigma2", "var0", "mu", "x", "var", "n")

    def __init__(self, chance: float, sigma2: float, var0: float | None = None):
        self.chance = _open_unit("chance", chance)
        self.sigma2 = _positive("sigma2", sigma2)
        self.var0 = self.sigma2 if var0 is None else _positive("var0", var0)
        # mu = logit(chance), so that x = 0 means performance at chance
        self.mu = _logit(self.chance)
        self.x = 0.0
        self.var = self.var0
        self.n = 0

    def __repr__(self) -> str:
        return (
            f"LearningCurve(chance={self.chance}, n={self.n}, p={self.p():.3f}, "
            f"x={self.x:.4g}, var={self.var:.4g})"
        )

    def update(self, correct: bool) -> None:
        """Fold in one trial: ``correct`` True (1) or False (0)."""
        y = _binary("correct", correct)
        self.x, self.var, _ = _filter_step(self.x, self.var, y, self.mu, self.sigma2)
        self.n += 1

    @property
    def sd(self) -> float:
        return math.sqrt(self.var)

    def p(self) -> float:
        """Probability correct at the mode: logistic(mu + x)."""
        return _logistic(self.mu + self.x)

    def interval(self, level: float = 0.95) -> tuple[float, float]:
        """Two-sided credible interval of p: logistic(mu + x -/+ z sd), z = Phi^-1((1+level)/2)."""
        return self._band(_z_two_sided(_open_unit("level", level)))

    def _band(self, z: float) -> tuple[float, float]:
        """:meth:`interval` for its z = Phi^-1((1 + level)/2) already at hand."""
        sd = math.sqrt(self.var)
        return _logistic(self.mu + self.x - z * sd), _logistic(self.mu + self.x + z * sd)

    def lower(self, level: float = 0.95, one_sided: bool = True) -> float:
        """Lower credible bound of p. One-sided: z = Phi^-1(level) (1.645 at 0.95);
        two-sided: the lower end of :meth:`interval` (z = 1.960 at 0.95)."""
        level = _open_unit("level", level)
        z = _z_one_sided(level) if one_sided else _z_two_sided(level)
        return _logistic(self.mu + self.x - z * self.sd)

    def prob_above_chance(self) -> float:
        """Pr(p > chance) = Pr(x > 0) = Phi(x / sd)."""
        return _NORMAL.cdf(self.x / self.sd)

    def state(self) -> dict[str, float | int]:
        """Plain data; ``LearningCurve.from_state(c.state())`` continues exactly as ``c``."""
        return {
            "chance": self.chance,
            "sigma2": self.sigma2,
            "var0": self.var0,
            "x": self.x,
            "var": self.var,
            "n": self.n,
        }

    @classmethod
    def from_state(cls, d: Mapping[str, Any]) -> LearningCurve:
        if type(d) is dict and len(d) == len(_CURVE_KEYS):
            curve = cls._from_plain(d)
            if curve is not None:
                return curve
        keys = _CURVE_KEYS
        if not isinstance(d, Mapping) or set(d) != keys:
            got = sorted(d) if isinstance(d, Mapping) else d
            raise BadArgument("state", f"a map with keys {', '.join(sorted(keys))}", got)
        curve = cls(d["chance"], d["sigma2"], d["var0"])
        curve.x = _number("state.x", d["x"])
        curve.var = _positive("state.var", d["var"])
        curve.n = _count("state.n", d["n"])
        return curve

    @classmethod
    def _from_plain(cls, d: dict[str, Any]) -> LearningCurve | None:
        """:meth:`from_state` of a dict of the six keys (no others: the caller saw six
        entries) whose values are plain floats and an int that pass every check (what
        ``state`` gives), in one test; None for any other."""
        try:
            chance, sigma2, var0, x, var, n = d["chance"], d["sigma2"], d["var0"], d["x"], d["var"], d["n"]
        except KeyError:
            return None
        if not (type(chance) is float and 0.0 < chance < 1.0 and type(sigma2) is float and 0.0 < sigma2 < _INF
                and type(var0) is float and 0.0 < var0 < _INF and type(x) is float and -_INF < x < _INF
                and type(var) is float and 0.0 < var < _INF and type(n) is int and n >= 0):
            return None  # NaN fails every comparison above
        curve = object.__new__(cls)
        curve.chance, curve.sigma2, curve.var0 = chance, sigma2, var0
        # mu = logit(chance), as __init__ sets it
        curve.mu = _mu(chance)
        curve.x, curve.var, curve.n = x, var, n
        return curve


# --------------------------------------------------------------------------- smoother


@dataclass(frozen=True, slots=True)
class Smoothed:
    """Smoothed learning curve; every array has shape (K,), one entry per trial.

    x, var: smoothed state mean and variance; p = logistic(mu + x); lo, hi: two-sided
    ``level`` credible band of p; prob_above_chance = Phi(x / sqrt(var)).
    """

    x: np.ndarray
    var: np.ndarray
    p: np.ndarray
    lo: np.ndarray
    hi: np.ndarray
    prob_above_chance: np.ndarray
    level: float


def smooth(
    outcomes: Sequence[bool],
    chance: float,
    sigma2: float,
    var0: float | None = None,
    *,
    level: float = 0.95,
) -> Smoothed:
    """Forward filter then backward (RTS) smoother over a whole session, offline.

    outcomes: K binary responses (True/1 correct). Backward pass (Smith et al. 2004):
    A_k = v_{k|k} / v_{k+1|k};  x_{k|K} = x_{k|k} + A_k (x_{k+1|K} - x_{k+1|k});
    v_{k|K} = v_{k|k} + A_k^2 (v_{k+1|K} - v_{k+1|k}).
    """
    curve = LearningCurve(chance, sigma2, var0)  # validates chance, sigma2, var0
    z = _z_two_sided(_open_unit("level", level))
    ys = [_binary(f"outcomes[{k}]", y) for k, y in enumerate(outcomes)]
    K = len(ys)
    xf = np.empty(K)  # x_{k|k}
    vf = np.empty(K)  # v_{k|k}
    vp = np.empty(K)  # v_{k|k-1}; x_{k|k-1} = x_{k-1|k-1}
    x, var = 0.0, curve.var0
    for k, y in enumerate(ys):
        x, var, v_pred = _filter_step(x, var, y, curve.mu, curve.sigma2)
        xf[k], vf[k], vp[k] = x, var, v_pred
    xs, vs = xf.copy(), vf.copy()
    for k in range(K - 2, -1, -1):
        a = vf[k] / vp[k + 1]
        # x_{k+1|k} = x_{k|k} under the random walk
        xs[k] = xf[k] + a * (xs[k + 1] - xf[k])
        vs[k] = vf[k] + a * a * (vs[k + 1] - vp[k + 1])
    sd = np.sqrt(vs)
    eta = curve.mu + xs

    def logistic(a: np.ndarray) -> np.ndarray:
        return 0.5 * (1.0 + np.tanh(0.5 * a))  # = 1 / (1 + e^-a), overflow-free

    pac = np.array([_NORMAL.cdf(v) for v in (xs / sd).tolist()])
    lo, hi = logistic(eta - z * sd), logistic(eta + z * sd)
    return Smoothed(xs, vs, logistic(eta), lo, hi, pac, level)


def learning_trial(
    outcomes: Sequence[bool], chance: float, sigma2: float, level: float = 0.95
) -> int | None:
    """Ideal-observer learning trial (1-based): the first trial k such that the smoothed
    Pr(p_j > chance) > level for every j >= k (Smith et al. 2004); None if never."""
    level = _open_unit("level", level)
    s = smooth(outcomes, chance, sigma2)
    below = np.flatnonzero(~(s.prob_above_chance > level))
    K = len(s.x)
    if K == 0:
        return None
    if below.size == 0:
        return 1
    first = int(below[-1]) + 1  # 0-based index of the first trial of the final run
    return first + 1 if first < K else None


# --------------------------------------------------------------------------- binomial


def binomial_p_above(k: int, n: int, p0: float) -> float:
    """One-sided p-value P(X >= k), X ~ Binomial(n, p0), computed exactly.

    Terms C(n, i) p0^i (1 - p0)^(n - i) are summed in log space: log C(n, k) from
    ``math.comb`` (n <= 2000) or ``math.lgamma``, then the ratio recurrence
    t_{i+1} / t_i = (n - i) / (i + 1) * p0 / (1 - p0).
    """
    if isinstance(k, bool) or not isinstance(k, int | np.integer):
        raise BadArgument("k", "a whole number", k)
    k, n = int(k), _count("n", n)
    p0 = _number("p0", p0)
    if not 0.0 <= p0 <= 1.0:
        raise BadArgument("p0", "a probability in [0, 1]", p0)
    if k <= 0:
        return 1.0
    if k > n:
        return 0.0
    if p0 == 0.0:
        return 0.0
    if p0 == 1.0:
        return 1.0
    if n <= 2000:
        log_comb = math.log(math.comb(n, k))
    else:
        log_comb = math.lgamma(n + 1) - math.lgamma(k + 1) - math.lgamma(n - k + 1)
    # log t_k = log C(n, k) + k log p0 + (n - k) log(1 - p0)
    log_tk = log_comb + k * math.log(p0) + (n - k) * math.log1p(-p0)
    i = np.arange(k, n)
    # log t_{i+1} - log t_i = log(n - i) - log(i + 1) + logit(p0)
    steps = np.log(n - i) - np.log(i + 1) + _logit(p0)
    log_t = log_tk + np.concatenate(([0.0], np.cumsum(steps)))
    top = log_t.max()
    total = math.exp(top) * float(np.sum(np.exp(log_t - top)))
    return min(1.0, total)


# --------------------------------------------------------------------------- d prime


def dprime(
    hits: int,
    misses: int,
    false_alarms: int,
    correct_rejections: int,
    correction: str | None = "loglinear",
) -> tuple[float, float]:
    """Sensitivity d' and criterion c from the four counts of a yes/no task.

    d' = Phi^-1(H) - Phi^-1(F);  c = -(Phi^-1(H) + Phi^-1(F)) / 2.
    correction "loglinear" (Hautus 1995): H = (hits + 0.5) / (hits + misses + 1), and the
    same for F; None: raw rates, BadArgument if either is 0 or 1 (Phi^-1 is infinite).
    """
    h, m = _count("hits", hits), _count("misses", misses)
    fa, cr = _count("false_alarms", false_alarms), _count("correct_rejections", correct_rejections)
    if h + m == 0:
        raise BadArgument("hits + misses", "at least one signal trial", 0)
    if fa + cr == 0:
        raise BadArgument("false_alarms + correct_rejections", "at least one noise trial", 0)
    if correction == "loglinear":
        H = (h + 0.5) / (h + m + 1.0)
        F = (fa + 0.5) / (fa + cr + 1.0)
    elif correction is None:
        H, F = h / (h + m), fa / (fa + cr)
        if H in (0.0, 1.0):
            raise BadArgument("hits", "a hit rate strictly between 0 and 1 without correction", H)
        if F in (0.0, 1.0):
            expected = "a false-alarm rate strictly between 0 and 1 without correction"
            raise BadArgument("false_alarms", expected, F)
    else:
        raise BadArgument("correction", "'loglinear' or None", correction)
    zh, zf = _NORMAL.inv_cdf(H), _NORMAL.inv_cdf(F)
    return zh - zf, -(zh + zf) / 2.0


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
        self.alpha, self.beta = float(alpha), float(beta)
        self.ln_b, self.ln_a = sprt_bounds(alpha, beta)
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
    theta = _wald_exponent(p, up, down)
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
