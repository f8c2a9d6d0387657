"""The animal's own behaviour per cue: a state-space estimate of what it does.

A learner fed by the task's payouts learns what the task teaches; the animal shows what
*it* learned only by what it does. So for every cue rigloop keeps an estimate of the
probability of the animal's response to that cue, from its responses on that cue's
trials alone:

* go/no-go and Pavlovian cues: P(respond | cue), respond = licks or presses > 0;
* two-choice cues (roles ``left``/``right``): P(choose right | cue).

Model (the state-space model of binary responses of Smith, Frank, Wirth et al. 2004,
*J Neurosci* 24:447, with chance level 1/2 so that the state is the plain logit):

    x_k = x_{k-1} + eps,  eps ~ N(0, sigma2)       between two trials of the cue
    P(response on trial k) = logistic(x_k)

``sigma2`` sets the forgetting: the larger it is, the faster old trials lose weight and
the wider the band. The forward filter is :func:`rigloop.performance._filter_step`
(Gaussian at the posterior mode, Newton for the implicit mode equation).

Every number rigloop reports or a rule reads is the *predictive* estimate for the
cue's next trial: N(x, var + sigma2) on the logit scale, i.e. before that trial's
response, as ``value[cue]`` is before that trial's learning. Its 95% band
``logistic(x -/+ 1.96 sqrt(var + sigma2))`` is the interval that the test suite holds
to calibration against simulated animals whose true response probability is known on
every trial.

Derived from two cues' estimates (independent Gaussians on the logit scale):

* :func:`p_difference_above`: P(p_a - p_b > margin), the posterior probability that the
  animal discriminates a from b by at least ``margin``;
* :func:`dprime_estimate`: behavioural d' = Phi^-1(p_a) - Phi^-1(p_b) (hits and false
  alarms from the estimates, not from raw counts), with a credible interval.

Pure: standard library and numpy only.
"""

from __future__ import annotations

import functools
import math
from collections.abc import Mapping
from statistics import NormalDist

import numpy as np

from .errors import BadArgument
from .performance import _filter_step, _z_two_sided

RESPOND = "respond"  # P(respond | cue)
RIGHT = "right"  # P(choose right | cue)
CHOICE_ROLES = ("left", "right")
DEFAULT_SIGMA2 = 0.2  # random-walk variance per cue trial (forgetting); calibrated in tests/test_behaviour_calibration.py
DEFAULT_PRIOR_VAR = 2.0  # logit variance before a cue's first trial: a 95% band of about [0.06, 0.94]

_NORMAL = NormalDist()
_GH_NODES = 24  # Gauss-Hermite nodes for the two-cue integrals (exact for polynomials of degree < 48)


def kind_of_role(role: str) -> str:
    """Which behaviour a cue of this role shows: ``right`` for two-choice cues, else ``respond``."""
    return RIGHT if role in CHOICE_ROLES else RESPOND


def quantity_names(cue: str, kind: str) -> tuple[str, str, str]:
    """The per-trial quantity names of a cue's estimate and its 95% band."""
    base = "p_respond" if kind == RESPOND else "p_right"
    return f"{base}[{cue}]", f"{base}_lo95[{cue}]", f"{base}_hi95[{cue}]"


# --------------------------------------------------------------------------- what the animal did


COUNT_KINDS = ("licks", "lever", "presses", "pokes")  # response kinds whose value is a count


def observed(event, kind: str, go: bool | None = None) -> bool | None:
    """The trial's binary response for an estimate of ``kind``; None when not observed.

    ``respond``: a numeric response value (a lick or press count) > 0; without a value,
    the scored result read through the cue's role (``go``: a correct go trial was a
    response, an incorrect no-go trial was one too). ``right``: value ``"right"`` or
    ``"left"``. Omitted trials are not observed: they measure engagement, which the
    schedule counts as misses, not what the animal knows.
    """
    resp = event.response
    if resp.result == "omitted":
        return None
    value = resp.value
    if kind == RIGHT:
        if value == "right":
            return True
        if value == "left":
            return False
        return None
    if type(value) is float:
        return value > 0.0
    if isinstance(value, int | float) and not isinstance(value, bool):
        return value > 0
    if resp.result is None or go is None:
        return None
    return (resp.result == "correct") == go


# --------------------------------------------------------------------------- one cue


class CueEstimate:
    """One cue's estimate: the logit state's posterior mode ``x`` and variance ``var``
    after ``n`` observed trials; ``predictive`` gives the numbers for the next trial."""

    __slots__ = ("x", "var", "n")

    def __init__(self, x: float, var: float, n: int):
        self.x, self.var, self.n = x, var, n

    @classmethod
    def prior(cls, prior_var: float) -> CueEstimate:
        return cls(0.0, prior_var, 0)

    def updated(self, y: bool, sigma2: float) -> CueEstimate:
        """The estimate after one more observed trial (``y``: the response happened)."""
        x, var, _ = _filter_step(self.x, self.var, 1 if y else 0, 0.0, sigma2)
        return CueEstimate(x, var, self.n + 1)

    def predictive(self, sigma2: float) -> tuple[float, float]:
        """(mean, variance) of the logit state on the cue's next trial: N(x, var + sigma2)."""
        return self.x, self.var + sigma2

    def as_tuple(self) -> tuple[float, float, int]:
        return (self.x, self.var, self.n)

    @classmethod
    def from_tuple(cls, data) -> CueEstimate:
        try:
            x, var, n = data
        except (TypeError, ValueError):
            raise BadArgument("behaviour estimate", "a triple (x, var, n)", data) from None
        if not (isinstance(x, float) and math.isfinite(x) and isinstance(var, float) and 0.0 < var < math.inf
                and type(n) is int and n >= 0):
            raise BadArgument("behaviour estimate", "finite x, var > 0, whole n >= 0", data)
        return cls(x, var, n)


def logistic(a: float) -> float:
    """1 / (1 + e^-a), without overflow."""
    if a >= 0.0:
        return 1.0 / (1.0 + math.exp(-a))
    e = math.exp(a)
    return e / (1.0 + e)


def band(mean: float, var: float, level: float = 0.95) -> tuple[float, float]:
    """Two-sided credible interval of p = logistic(state), state ~ N(mean, var)."""
    z = _z_two_sided(level) * math.sqrt(var)
    return logistic(mean - z), logistic(mean + z)


# --------------------------------------------------------------------------- two cues


@functools.lru_cache(maxsize=1)
def _hermite() -> tuple[np.ndarray, np.ndarray]:
    """Probabilists' Gauss-Hermite nodes and weights normalised to sum 1:
    E[f(Z)] ~ sum_i w_i f(z_i) for Z ~ N(0, 1)."""
    z, w = np.polynomial.hermite_e.hermegauss(_GH_NODES)
    return z, w / w.sum()


def _phi(a: np.ndarray) -> np.ndarray:
    # Phi(a) = erfc(-a / sqrt 2) / 2, elementwise (math.erfc: numpy has no erf)
    return np.array([0.5 * math.erfc(-v / math.sqrt(2.0)) for v in a.tolist()])


def p_difference_above(mean_a: float, var_a: float, mean_b: float, var_b: float, margin: float = 0.0) -> float:
    """P(logistic(A) - logistic(B) > margin) for independent A ~ N(mean_a, var_a), B ~ N(mean_b, var_b).

    margin 0: Phi((mean_a - mean_b) / sqrt(var_a + var_b)) exactly (logistic is increasing).
    Otherwise E_A[ P(B < logit(logistic(A) - margin)) ] by Gauss-Hermite quadrature over A
    (zero where logistic(A) <= margin).
    """
    if margin == 0.0:
        return _NORMAL.cdf((mean_a - mean_b) / math.sqrt(var_a + var_b))
    z, w = _hermite()
    pa = 0.5 * (1.0 + np.tanh(0.5 * (mean_a + math.sqrt(var_a) * z)))  # logistic(A) at the nodes
    target = pa - margin
    ok = (target > 0.0) & (target < 1.0)
    out = np.where(target >= 1.0, 1.0, 0.0)
    if ok.any():
        t = target[ok]
        b_star = np.log(t / (1.0 - t))
        out[ok] = _phi((b_star - mean_b) / math.sqrt(var_b))
    return float(min(1.0, max(0.0, float(w @ out))))


def _probit_of_logit(a: np.ndarray) -> list[float]:
    # Phi^-1(logistic(a)), elementwise; logistic kept inside (0, 1)
    p = np.clip(0.5 * (1.0 + np.tanh(0.5 * a)), 1e-15, 1.0 - 1e-15)
    inv = _NORMAL.inv_cdf
    return [inv(v) for v in p.tolist()]


def _probit_moments(mean: float, var: float) -> tuple[float, float]:
    """E and Var of g(A) = Phi^-1(logistic(A)), A ~ N(mean, var), by Gauss-Hermite quadrature."""
    z, w = _hermite()
    g = np.array(_probit_of_logit(mean + math.sqrt(var) * z))
    m = float(w @ g)
    return m, float(w @ (g - m) ** 2)


def dprime_estimate(mean_a: float, var_a: float, mean_b: float, var_b: float,
                    level: float = 0.95) -> tuple[float, float, float]:
    """Behavioural d' of cue a (go / signal / right side) against cue b, and its interval.

    d' = Phi^-1(p_a) - Phi^-1(p_b) at the estimates' modes. The ``level`` two-sided
    credible interval is that of D = g(A) - g(B), g = Phi^-1 o logistic, from D's
    posterior mean and variance (Gauss-Hermite quadrature over A and over B, which are
    independent) as a normal: E[D] -/+ z sd(D). g is close to linear (g(a) ~ a / 1.7), so
    D is close to normal; the tests hold the interval to a Monte Carlo reference.
    Returns (d', lower, upper).
    """
    clip = 1e-15
    d = _NORMAL.inv_cdf(min(max(logistic(mean_a), clip), 1 - clip)) - \
        _NORMAL.inv_cdf(min(max(logistic(mean_b), clip), 1 - clip))
    ma, va = _probit_moments(mean_a, var_a)
    mb, vb = _probit_moments(mean_b, var_b)
    half = _z_two_sided(level) * math.sqrt(va + vb)
    return d, ma - mb - half, ma - mb + half


# --------------------------------------------------------------------------- all cues


def estimates_from(data: Mapping[str, tuple]) -> dict[str, CueEstimate]:
    """Estimates from their stored triples (a snapshot's ``behaviour`` map)."""
    return {cue: CueEstimate.from_tuple(t) for cue, t in data.items()}
