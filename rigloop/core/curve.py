"""The state-space learning curve from binary responses (Smith, Frank, Wirth et al. 2004).

* :class:`LearningCurve` is the forward filter, and :func:`smooth` the offline
  forward-backward smoother, of the state-space model of binary responses of
  Smith, Frank, Wirth et al. (2004, J Neurosci 24:447): a hidden learning state
  ``x_k = x_{k-1} + eps`` (``eps ~ N(0, sigma2)``) sets the probability correct
  ``p_k = logistic(mu + x_k)`` with ``mu = logit(chance)``, so ``x = 0`` is chance.
* :func:`learning_trial` is their ideal-observer learning trial.
* :func:`_filter_step` is one trial of the filter; the animal's behaviour estimates
  (``behaviour.py``) use it with mu = 0.

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
from .checks import _binary, _count, _number, _open_unit, _positive

_NORMAL = NormalDist()
_NEWTON_MAX = 60  # safeguarded Newton converges in < 10 steps; the cap is a guard only
_NEWTON_TOL = 1e-12
_INF = math.inf


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


def _filter_step(x: float, var: float, y: int, mu: float, sigma2: float) -> tuple[float, float, float]:
    """One trial of the forward filter (Smith et al. 2004). Returns (x_post, var_post, var_pred).

    Predict:  x_{k|k-1} = x_{k-1|k-1};  v_{k|k-1} = v_{k-1|k-1} + sigma2
    Mode:     x = x_{k|k-1} + v_{k|k-1} (y - logistic(mu + x))   (implicit in x)
    Variance: v_{k|k} = 1 / (1/v_{k|k-1} + p (1 - p)),  p = logistic(mu + x_{k|k})

    The root of f(z) = z - x - v (y - p(z)) lies between x and x + v (y - 0 or 1), and
    f' = 1 + v p (1 - p) >= 1: Newton inside that bracket, bisection if a step leaves it.
    (An inlined logistic here bought 5% of this function, tools/bench/step.py: not kept.)
    """
    var_pred = var + sigma2  # v_{k|k-1} = v_{k-1|k-1} + sigma2
    lo, hi = (x, x + var_pred) if y else (x - var_pred, x)  # the mode lies in this bracket
    yf = 1.0 if y else 0.0
    z = x
    for _ in range(_NEWTON_MAX):
        p = _logistic(mu + z)
        f = z - x - var_pred * (yf - p)  # f(z) = z - x - v (y - p(z)), its root is the mode
        if f > 0.0:
            hi = z
        else:
            lo = z
        z_new = z - f / (1.0 + var_pred * p * (1.0 - p))  # Newton: f' = 1 + v p (1 - p)
        if not lo <= z_new <= hi:
            z_new = 0.5 * (lo + hi)  # bisection when Newton leaves the bracket
        if abs(z_new - z) <= _NEWTON_TOL * (1.0 + abs(z)):
            z = z_new
            break
        z = z_new
    p = _logistic(mu + z)
    return z, 1.0 / (1.0 / var_pred + p * (1.0 - p)), var_pred


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
        # 2.6x the checked path (tools/bench/step.py); test_fast_paths holds the two to one value
        """:meth:`from_state` of a dict of the six keys (no others: the caller saw six
        entries) whose values are plain floats and an int that pass every check (what
        ``state`` gives), in one test; None for any other."""
        plain = _plain_values(d)
        if plain is None:
            return None
        chance, sigma2, var0, x, var, n = plain
        curve = object.__new__(cls)
        curve.chance, curve.sigma2, curve.var0 = chance, sigma2, var0
        # mu = logit(chance), as __init__ sets it
        curve.mu = _mu(chance)
        curve.x, curve.var, curve.n = x, var, n
        return curve


def _plain_values(d: dict[str, Any]) -> tuple | None:
    """(chance, sigma2, var0, x, var, n) of a curve state whose values are plain floats and
    an int that pass every check of :meth:`LearningCurve.from_state`; None for any other."""
    try:
        chance, sigma2, var0, x, var, n = d["chance"], d["sigma2"], d["var0"], d["x"], d["var"], d["n"]
    except KeyError:
        return None
    if not (type(chance) is float and 0.0 < chance < 1.0 and type(sigma2) is float and 0.0 < sigma2 < _INF
            and type(var0) is float and 0.0 < var0 < _INF and type(x) is float and -_INF < x < _INF
            and type(var) is float and 0.0 < var < _INF and type(n) is int and n >= 0):
        return None  # NaN fails every comparison above
    return chance, sigma2, var0, x, var, n


def _updated_state(d: Any, correct: bool) -> dict[str, float | int] | None:
    """``from_state(d)``, ``update(correct)``, ``state()`` without the curve object in between:
    the same dict (keys in ``state``'s order), for a plain six-key dict and a bool; None for
    anything else (the caller then takes the checked path). ``step`` updates two or three
    curves a trial this way (1.3x the object path, tools/bench/step.py; tests/test_fast_paths.py:
    the same bits)."""
    if type(d) is not dict or len(d) != 6 or type(correct) is not bool:
        return None
    plain = _plain_values(d)
    if plain is None:
        return None
    chance, sigma2, var0, x, var, n = plain
    x, var, _ = _filter_step(x, var, 1 if correct else 0, _mu(chance), sigma2)
    return {"chance": chance, "sigma2": sigma2, "var0": var0, "x": x, "var": var, "n": n + 1}


def _updated_state_reference(d: Mapping[str, Any], correct: bool) -> dict[str, float | int]:
    """What :func:`_updated_state` gives, through the curve object."""
    curve = LearningCurve.from_state(d)
    curve.update(correct)
    return curve.state()


def _p_band(d: Any, z: float) -> tuple[float, float, float] | None:
    """(p(), *_band(z)) of ``from_state(d)`` without the object, for a plain state (else None)."""
    if type(d) is not dict or len(d) != 6:
        return None
    plain = _plain_values(d)
    if plain is None:
        return None
    chance, _, _, x, var, _ = plain
    mu = _mu(chance)
    # logistic(mu + x) and logistic(mu + x -/+ z sd), as p() and _band() write them
    sd = math.sqrt(var)
    return _logistic(mu + x), _logistic(mu + x - z * sd), _logistic(mu + x + z * sd)


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
