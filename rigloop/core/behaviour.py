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
import operator
from collections.abc import Mapping
from statistics import NormalDist

import numpy as np

from ..errors import BadArgument
from .checks import _margin, _nonnegative, _number, _open_unit, _positive, first_bad
from .curve import _filter_step, _z_two_sided
from .curve import _logistic as logistic  # 1 / (1 + e^-a) without overflow: the curve's own

RESPOND = "respond"  # P(respond | cue)
RIGHT = "right"  # P(choose right | cue)
CHOICE_ROLES = ("left", "right")
DEFAULT_SIGMA2 = 0.2  # random-walk variance per cue trial (forgetting); calibrated in tests/test_behaviour_calibration.py
DEFAULT_PRIOR_VAR = 2.0  # logit variance before a cue's first trial: a 95% band of about [0.06, 0.94]

_NORMAL = NormalDist()
_INF = math.inf
_COMPARE_OPS = {"<": operator.lt, "<=": operator.le, ">": operator.gt, ">=": operator.ge}
_GH_NODES = 24  # Gauss-Hermite nodes for d's distribution (exact for polynomials of degree < 48)
_GL_NODES = 32  # Gauss-Legendre nodes for P(p_a - p_b > margin): error < 1e-5 against scipy quad (random states)


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
        return cls(0.0, _positive("prior_var", prior_var), 0)

    def updated(self, y: bool, sigma2: float) -> CueEstimate:
        """The estimate after one more observed trial (``y``: the response happened)."""
        return CueEstimate(*updated(self.as_tuple(), y, sigma2, self.var))

    def predictive(self, sigma2: float) -> tuple[float, float]:
        """(mean, variance) of the logit state on the cue's next trial: N(x, var + sigma2)."""
        return self.x, self.var + _nonnegative("sigma2", sigma2)

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


def updated(est: tuple[float, float, int] | None, y: bool, sigma2: float, prior_var: float) -> tuple[float, float, int]:
    """:meth:`CueEstimate.updated` on a stored triple (None: the cue's prior), for ``step``."""
    if est is None:
        x, var, n = 0.0, prior_var, 0
    else:
        try:
            x, var, n = est
        except (TypeError, ValueError):
            raise BadArgument("behaviour estimate", "a triple (x, var, n)", est) from None
    try:
        ok = -_INF < x < _INF and 0.0 < var < _INF and 0.0 <= sigma2 < _INF
    except TypeError:
        ok = False
    if not ok:
        raise first_bad(("behaviour estimate x", x, _number), ("behaviour estimate var" if est is not None else
                        "prior_var", var, _positive), ("sigma2", sigma2, _nonnegative))
    x, var, _ = _filter_step(x, var, 1 if y else 0, 0.0, sigma2)
    return (x, var, n + 1)


def band(mean: float, var: float, level: float = 0.95) -> tuple[float, float]:
    """Two-sided credible interval of p = logistic(state), state ~ N(mean, var)."""
    try:
        ok = -_INF < mean < _INF and 0.0 <= var < _INF and 0.0 < level < 1.0
    except TypeError:
        ok = False
    if not ok:
        raise first_bad(("mean", mean, _number), ("var", var, _nonnegative), ("level", level, _open_unit))
    z = _z_two_sided(level) * math.sqrt(var)
    return logistic(mean - z), logistic(mean + z)


# --------------------------------------------------------------------------- two cues


@functools.lru_cache(maxsize=1)
def _hermite() -> tuple[np.ndarray, np.ndarray]:
    """Probabilists' Gauss-Hermite nodes and weights normalised to sum 1:
    E[f(Z)] ~ sum_i w_i f(z_i) for Z ~ N(0, 1)."""
    z, w = np.polynomial.hermite_e.hermegauss(_GH_NODES)
    return z, w / w.sum()


_MINUS_SQRT_HALF = -math.sqrt(0.5)


def _phi(a: np.ndarray) -> np.ndarray:
    # Phi(a) = erfc(-a / sqrt 2) / 2, elementwise (math.erfc: numpy has no erf)
    return 0.5 * np.fromiter(map(math.erfc, (a * _MINUS_SQRT_HALF).tolist()), float, len(a))


@functools.lru_cache(maxsize=1)
def _legendre() -> tuple[np.ndarray, np.ndarray]:
    """Gauss-Legendre nodes and weights on [-1, 1]."""
    return np.polynomial.legendre.leggauss(_GL_NODES)


@functools.lru_cache(maxsize=1)
def _legendre_squared() -> tuple[tuple[float, float], ...]:
    """(s^2, w s) per Gauss-Legendre node, s = (t + 1)/2 on [0, 1]: the rule p_difference_above uses."""
    t, w = _legendre()
    s = 0.5 * (t + 1.0)
    return tuple(zip((s * s).tolist(), (w * s).tolist()))


def p_difference_above(mean_a: float, var_a: float, mean_b: float, var_b: float, margin: float = 0.0) -> float:
    """P(logistic(A) - logistic(B) > margin) for independent A ~ N(mean_a, var_a), B ~ N(mean_b, var_b).

    margin 0: Phi((mean_a - mean_b) / sqrt(var_a + var_b)) exactly (logistic is increasing).
    Otherwise the integral over A of phi_A(a) P(B < logit(logistic(a) - margin)) da, which is
    zero where logistic(a) <= margin: Gauss-Legendre over a from lo = max(logit(margin),
    mean_a - 8 sd_a) to hi = mean_a + 8 sd_a in the variable s, a = lo + (hi - lo) s^2, which
    crowds the nodes near lo, where the integrand can rise from 0 almost at once (an animal
    that never responds to b). The integral runs over the narrower of the two cues (B's as
    that of -B: P(logistic(A) - logistic(B) > m) = P(logistic(-B) - logistic(-A) > m)): over
    the wider one, P(B < ...) is nearly a step that 32 nodes miss (errors to 0.03 where
    var_a = 256 var_b); so the error against scipy's adaptive quad is < 1e-6 on states from
    very sure to very unsure, 5e-4 at worst where both cues are as wide as their prior
    (tests/test_behaviour.py). A loop over Python floats: a rule
    tests this on every trial, and 32 nodes cost less as floats than as a dozen small numpy
    calls (~0.1x of the decision round trip in tools/bench/latency.py).

    What depends on the integrated cue alone (each node's density weight and
    logit(logistic(a) - margin)) is kept for the last few (mean, var, margin): between two
    decisions only the cue of the trial changes, so when that was the other one, only the 32
    erfc terms are recomputed (such a call costs 0.1-0.25x of the plain loop,
    tools/bench/step.py). :func:`_p_difference_above_reference` is the plain loop; the tests
    hold the two to the same bits.
    """
    _two_states(mean_a, var_a, mean_b, var_b, ("margin", margin, _margin))
    if margin == 0.0:
        return _NORMAL.cdf((mean_a - mean_b) / math.sqrt(var_a + var_b))
    if var_b < var_a:  # over the narrower cue (see above): -B in A's place
        mean_a, var_a, mean_b, var_b = -mean_b, var_b, -mean_a, var_a
    nodes = _kept(_A_NODES, _A_NODES_MAX, (mean_a, var_a, margin), lambda: _a_nodes(mean_a, var_a, margin))
    if nodes is _NOTHING:
        return 0.0
    factor, terms = nodes
    erfc = math.erfc
    scale_b = -1.0 / math.sqrt(2.0 * var_b)  # Phi(x) = erfc(-x / sqrt 2) / 2
    total = 0.0
    for weight, logit_t in terms:
        # each term as the reference forms it: (ws * density) * inner, summed in node order
        inner = 2.0 if logit_t is None else erfc((logit_t - mean_b) * scale_b)
        total += weight * inner
    total *= factor
    return min(1.0, max(0.0, total))


_A_NODES: dict[tuple[float, float, float], object] = {}  # (mean_a, var_a, margin) -> _a_nodes(...)
# Bounded, oldest out first: a subject's unmoved cue a must still be there at that
# subject's next decision, after every other subject's (a daemon interleaves them: with a
# few entries cleared at once, 100 rigs would find none). About half the decisions add an
# entry (those whose trial moved cue a), so 128 serve ~200 subjects; ~3.7 kB an entry,
# 0.5 MB at most (reached within an animal's first day: memory stays flat over days).
_A_NODES_MAX = 128
_NOTHING = object()  # the integration range is empty: P = 0


def _a_nodes(mean_a: float, var_a: float, margin: float):
    """What :func:`p_difference_above` needs of cue a: the final factor and, per node that
    counts, (ws * density at a, logit(logistic(a) - margin) or None where that is +inf)."""
    sa = math.sqrt(var_a)
    lo, hi = max(math.log(margin / (1.0 - margin)), mean_a - 8.0 * sa), mean_a + 8.0 * sa
    if lo >= hi:
        return _NOTHING
    span = hi - lo
    exp, log = math.exp, math.log
    inv_sa = 1.0 / sa
    terms = []
    for s2, ws in _legendre_squared():
        a = lo + span * s2
        d = (a - mean_a) * inv_sa
        t = (1.0 / (1.0 + exp(-a)) if a >= 0.0 else exp(a) / (1.0 + exp(a))) - margin
        if t <= 0.0:
            continue
        terms.append((ws * exp(-0.5 * d * d), log(t / (1.0 - t)) if t < 1.0 else None))
    return span / (sa * math.sqrt(2.0 * math.pi)) * 0.5, tuple(terms)


# how far a closed-form bound must clear a threshold before it settles a comparison in the
# value's place: p_difference_above's quadrature and the distribution function of d' are within
# 5e-4 and 5e-5 of the integrals they approximate, on states from very sure to very unsure
# (against scipy's adaptive quad, tests/test_behaviour.py), 20x and 200x less than this
_BOUND_SLACK = 1e-2
_SLICES = 8  # equal-probability slices of cue a for p_difference_above's floor and ceiling


@functools.lru_cache(maxsize=1)
def _slice_edges() -> tuple[float, ...]:
    """Phi^-1(k / 8), k = 1..7: the edges between 8 equal-probability slices of N(0, 1)."""
    return tuple(_NORMAL.inv_cdf(k / _SLICES) for k in range(1, _SLICES))


def _edge_logits(mean_a: float, var_a: float, margin: float) -> tuple[float | None, ...]:
    """logit(logistic(a_k) - margin) at the upper edge a_k of each slice of cue a (the last
    edge +inf: logit(1 - margin)), None where logistic(a_k) <= margin."""
    sa = math.sqrt(var_a)
    exp, log = math.exp, math.log
    out = []
    for z in _slice_edges():
        a = mean_a + sa * z
        t = (1.0 / (1.0 + exp(-a)) if a >= 0.0 else exp(a) / (1.0 + exp(a))) - margin
        out.append(log(t / (1.0 - t)) if 0.0 < t < 1.0 else (None if t <= 0.0 else _INF))
    out.append(log((1.0 - margin) / margin) if margin > 0.0 else _INF)
    return tuple(out)


def _difference_bounds(mean_a: float, var_a: float, mean_b: float, var_b: float,
                       margin: float) -> tuple[float, float]:
    """A floor and a ceiling of P(logistic(A) - logistic(B) > margin), in closed form: eight
    erfc (with cue a's part kept as :func:`p_difference_above` keeps its nodes), where the value
    is a 32-node quadrature.

    G(a) = P(logistic(B) < logistic(a) - margin) rises with a. Over 8 slices of A of
    probability 1/8 each, with edges a_1 < ... < a_7 (a_0 = -inf, a_8 = +inf),
    P = sum_k E[G(A); A in slice k] lies between (1/8) sum_k G(a_{k-1}) and (1/8) sum_k G(a_k):
    the ceiling minus the floor is G(+inf) / 8 <= 1/8. They settle a criterion's comparison
    where the animal is far from it (83% of tone_reversal's in tools/bench/compare.py's cohort)."""
    logits = _kept(_A_EDGES, _A_NODES_MAX, (mean_a, var_a, margin), lambda: _edge_logits(mean_a, var_a, margin))
    erfc = math.erfc
    scale_b = -1.0 / math.sqrt(2.0 * var_b)  # P(B < x) = erfc((x - mean_b) * scale_b) / 2
    total = last = 0.0
    for x in logits:
        last = 0.0 if x is None else 2.0 if x == _INF else erfc((x - mean_b) * scale_b)
        total += last
    return (total - last) / (2.0 * _SLICES), total / (2.0 * _SLICES)


_A_EDGES: dict[tuple[float, float, float], tuple] = {}  # (mean_a, var_a, margin) -> _edge_logits(...), as _A_NODES


def p_difference_compared(mean_a: float, var_a: float, mean_b: float, var_b: float, margin: float,
                          op: str, c: float) -> bool:
    """``p_difference_above(...) <op> c`` for op one of < <= > >=: what a criterion such as
    ``p_discriminates(tone_hi, tone_lo, 0.3) >= 0.95`` asks, mostly without the quadrature.

    Where the closed-form floor or ceiling (:func:`_difference_bounds`) clears c by 0.01
    (``_BOUND_SLACK``: far more than the quadrature's error),
    the value lies on that side of c too, and compares as any value there does; otherwise the
    value is computed and compared (tests/test_fast_paths.py: the same answers). About 1.5 µs
    against the value's ~7 (tools/bench/step.py)."""
    if op not in _COMPARE_OPS:
        raise BadArgument("op", "one of < <= > >=", op)
    _two_states(mean_a, var_a, mean_b, var_b, ("margin", margin, _margin))
    compare = _COMPARE_OPS[op]
    if margin != 0.0 and -_INF < c < _INF:
        # sliced over the narrower cue, as p_difference_above integrates (the same P either way)
        sliced = (-mean_b, var_b, -mean_a, var_a) if var_b < var_a else (mean_a, var_a, mean_b, var_b)
        floor, ceiling = _difference_bounds(*sliced, margin)
        if ceiling < c - _BOUND_SLACK:
            return compare(-_INF, c)  # what op answers for a value below c (c is finite)
        if floor > c + _BOUND_SLACK:
            return compare(_INF, c)  # ... and for one above it
    return bool(compare(p_difference_above(mean_a, var_a, mean_b, var_b, margin), c))


def _p_difference_above_reference(mean_a: float, var_a: float, mean_b: float, var_b: float,
                                  margin: float = 0.0) -> float:
    """:func:`p_difference_above` as one plain loop, nothing kept between calls."""
    _two_states(mean_a, var_a, mean_b, var_b, ("margin", margin, _margin))
    if margin == 0.0:
        return _NORMAL.cdf((mean_a - mean_b) / math.sqrt(var_a + var_b))
    if var_b < var_a:  # over the narrower cue, as p_difference_above
        mean_a, var_a, mean_b, var_b = -mean_b, var_b, -mean_a, var_a
    sa = math.sqrt(var_a)
    lo, hi = max(math.log(margin / (1.0 - margin)), mean_a - 8.0 * sa), mean_a + 8.0 * sa
    if lo >= hi:
        return 0.0
    span = hi - lo
    exp, log, erfc = math.exp, math.log, math.erfc
    inv_sa = 1.0 / sa
    scale_b = -1.0 / math.sqrt(2.0 * var_b)  # Phi(x) = erfc(-x / sqrt 2) / 2
    total = 0.0
    for s2, ws in _legendre_squared():
        a = lo + span * s2
        d = (a - mean_a) * inv_sa
        # P(B < logit(logistic(a) - margin)), logistic(a) - margin > 0 on (lo, hi)
        t = (1.0 / (1.0 + exp(-a)) if a >= 0.0 else exp(a) / (1.0 + exp(a))) - margin
        if t <= 0.0:
            continue
        inner = erfc((log(t / (1.0 - t)) - mean_b) * scale_b) if t < 1.0 else 2.0
        total += ws * exp(-0.5 * d * d) * inner
    # ws folds in ds/dt = 1/2 and the s of da = 2 (hi - lo) s ds; the density's 1/(sd sqrt(2 pi)); Phi's 1/2
    total *= span / (sa * math.sqrt(2.0 * math.pi)) * 0.5
    return min(1.0, max(0.0, total))


def _kept(table: dict, cap: int, key, make):
    """``table[key]``, made by ``make()`` when missing; when the table is full its oldest entry
    goes first (the node tables: each subject's unmoved cue must still be there at its next
    decision, after every other subject's)."""
    got = table.get(key)
    if got is None:
        got = make()
        if len(table) >= cap:
            del table[next(iter(table))]
        table[key] = got
    return got


def _two_states(mean_a: float, var_a: float, mean_b: float, var_b: float, last: tuple) -> None:
    """Check two cues' logit states (finite means, variances > 0) and one more argument
    ``last`` = (name, value, check); BadArgument names the first that is wrong."""
    name, value, check = last
    try:
        ok = (-_INF < mean_a < _INF and 0.0 < var_a < _INF and -_INF < mean_b < _INF and 0.0 < var_b < _INF
              and 0.0 <= value < 1.0 and (check is not _open_unit or value > 0.0))
    except TypeError:
        ok = False
    if not ok:
        raise first_bad(("mean_a", mean_a, _number), ("var_a", var_a, _positive), ("mean_b", mean_b, _number),
                        ("var_b", var_b, _positive), last)


def _clip(a: np.ndarray, lo: float, hi: float) -> np.ndarray:
    """``np.clip(a, lo, hi)`` of a float array as its two ufuncs, min(max(a, lo), hi), NaN kept:
    the same array, 1.8x faster than np.clip's wrappers (d' calls it about eight times a
    decision; tools/bench/step.py, tests/test_fast_paths.py)."""
    return np.minimum(np.maximum(a, lo), hi)


def _probit_of_logit(a: np.ndarray) -> np.ndarray:
    # g(a) = Phi^-1(logistic(a)), elementwise; logistic kept inside (0, 1)
    p = _clip(0.5 * (1.0 + np.tanh(0.5 * a)), 1e-15, 1.0 - 1e-15)
    return np.fromiter(map(_NORMAL.inv_cdf, p.tolist()), float, len(p))


def _logit_of_probit(u: np.ndarray) -> np.ndarray:
    # g^-1(u) = logit(Phi(u)), elementwise
    p = _clip(_phi(u), 1e-300, 1.0 - 1e-16)
    return np.log(p / (1.0 - p))


def dprime_estimate(mean_a: float, var_a: float, mean_b: float, var_b: float,
                    level: float = 0.95) -> tuple[float, float, float]:
    """Behavioural d' of cue a (go / signal / right side) against cue b, and its interval.

    d' = Phi^-1(p_a) - Phi^-1(p_b) at the estimates' modes. The ``level`` two-sided
    credible interval is the quantiles of D = g(A) - g(B), g = Phi^-1 o logistic
    (increasing), A and B independent. Its distribution function, integrating over the
    narrower of the two by Gauss-Hermite quadrature:

        P(D <= t) = E_B[ Phi((g^-1(g(B) + t) - mean_a) / sd_a) ]      (B the narrower)
                  = E_A[ 1 - Phi((g^-1(g(A) - t) - mean_b) / sd_b) ]  (A the narrower)

    and each quantile is found by a safeguarded Newton search from the normal approximation of
    D (its moments by the same nodes), to 1e-5 in d' (about 140 us). Returns (d', lower, upper).
    """
    return _dprime_parts(mean_a, var_a, mean_b, var_b, level, True, True)


def dprime_part(mean_a: float, var_a: float, mean_b: float, var_b: float, level: float, which: str) -> float:
    """One number of :func:`dprime_estimate`: ``which`` "d" (no quadrature), "lower" or
    "upper" (one quantile search, not both): the same bits as that entry of the triple
    (each quantile is its own search; tests/test_behaviour.py). A rule reads one end at a
    time, so this halves the work of each d' criterion."""
    if which not in ("d", "lower", "upper"):
        raise BadArgument("which", '"d", "lower" or "upper"', which)
    d, lo, hi = _dprime_parts(mean_a, var_a, mean_b, var_b, level, which == "lower", which == "upper")
    return d if which == "d" else lo if which == "lower" else hi


def _dprime_parts(mean_a: float, var_a: float, mean_b: float, var_b: float, level: float,
                  lower: bool, upper: bool) -> tuple[float, float, float]:
    """:func:`dprime_estimate` with each end searched only when asked for (NaN if not)."""
    _two_states(mean_a, var_a, mean_b, var_b, ("level", level, _open_unit))
    clip = 1e-15
    d = _NORMAL.inv_cdf(min(max(logistic(mean_a), clip), 1 - clip)) - \
        _NORMAL.inv_cdf(min(max(logistic(mean_b), clip), 1 - clip))
    if not (lower or upper):
        return d, math.nan, math.nan
    cdf, centre, spread = _difference_cdf(mean_a, var_a, mean_b, var_b)
    # the normal approximation from D's moments (the same nodes) starts the search
    alpha = (1.0 - level) / 2.0
    zq = _z_two_sided(level)
    lo = _solve(cdf, alpha, centre - zq * spread) if lower else math.nan
    hi = _solve(cdf, 1.0 - alpha, centre + zq * spread) if upper else math.nan
    return d, lo, hi


def _difference_cdf(mean_a: float, var_a: float, mean_b: float, var_b: float, moments: bool = True):
    """(cdf, centre, spread) for D = g(A) - g(B) of two checked states: ``cdf(t)`` gives
    (F(t), F'(t)) by the quadrature of :func:`dprime_estimate`; ``centre`` and ``spread``
    are D's mean and sd under the same nodes (the normal approximation), or NaN without
    ``moments``: then only the narrower cue's nodes are formed (the quadrature runs over
    it), which spares the other's 24 inverse normal CDFs when that one has just moved."""
    w = _hermite()[1]
    sa, sb = math.sqrt(var_a), math.sqrt(var_b)
    narrow_b = sb <= sa
    if moments:
        (ga, ma, va), (gb, mb, vb) = _probit_nodes(mean_a, var_a), _probit_nodes(mean_b, var_b)
    elif narrow_b:
        gb = _probit_nodes(mean_b, var_b)[0]
    else:
        ga = _probit_nodes(mean_a, var_a)[0]
    # each returns (F(t), F'(t)); P = Phi(g + t) or Phi(g - t), and h = logit(P) has h' = +/- phi / (P (1 - P))
    if narrow_b:
        def cdf(t: float) -> tuple[float, float]:
            P, dh = _phi_and_slope(gb + t)
            u = (np.log(P / (1.0 - P)) - mean_a) / sa
            return float(w @ _phi(u)), float(w @ (_density(u) * dh)) / sa
    else:
        def cdf(t: float) -> tuple[float, float]:
            P, dh = _phi_and_slope(ga - t)
            u = (np.log(P / (1.0 - P)) - mean_b) / sb
            return float(w @ (1.0 - _phi(u))), float(w @ (_density(u) * dh)) / sb

    if not moments:
        return cdf, math.nan, math.nan
    return cdf, ma - mb, math.sqrt(va + vb)


# how far from c one evaluation of F must place a quantile before the comparison is taken
# as settled: 100x the search's tolerance (1e-5 in d', _solve)
_SETTLED_BY = 1e-3
_PROBIT_SLOPE = 1.702  # logit(Phi(y)) ~ 1.702 y (the logistic's probit approximation): picks s below
_LOGIT_PHI_RANGE = 30.0  # |y| beyond which logit(Phi(y)) is not formed from two erfc (the smaller underflows near 38)


def _difference_cdf_bounds(mean_a: float, var_a: float, mean_b: float, var_b: float,
                           t: float) -> tuple[float, float] | None:
    """A floor and a ceiling of F(t) = P(D <= t), D = g(A) - g(B), g = Phi^-1 o logistic,
    in closed form (six erfc, two logs; F itself is a quadrature), or None where they are not
    formed (arguments out of range).

    For any s, D <= t needs g(A) <= s + t or g(B) >= s, and D > t needs g(A) > s + t or
    g(B) < s (the union bound), so with z1 = (l(s + t) - mean_a) / sd_a and
    z2 = (mean_b - l(s)) / sd_b, l = g^-1 = logit o Phi:

        Phi(z1) + Phi(z2) - 1  <=  F(t)  <=  Phi(z1) + Phi(z2).

    Any s gives a bound; s here makes z1 = z2 under l(y) ~ 1.702 y, so the two tails are
    about equal and the bounds about tightest. They settle most comparisons of an animal far
    from its criterion, where F is near 0 or 1."""
    sa, sb = math.sqrt(var_a), math.sqrt(var_b)
    k = _PROBIT_SLOPE
    s = (mean_a / sa + mean_b / sb - k * t / sa) / (k * (1.0 / sa + 1.0 / sb))
    y = s + t
    if not (-_LOGIT_PHI_RANGE < s < _LOGIT_PHI_RANGE and -_LOGIT_PHI_RANGE < y < _LOGIT_PHI_RANGE):
        return None
    erfc, log, h = math.erfc, math.log, _MINUS_SQRT_HALF
    # l(y) = log(Phi(y) / Phi(-y)), Phi(y) = erfc(-y / sqrt 2) / 2; Phi(z) likewise
    z1 = (log(erfc(y * h) / erfc(-y * h)) - mean_a) / sa
    z2 = (mean_b - log(erfc(s * h) / erfc(-s * h))) / sb
    total = 0.5 * erfc(z1 * h) + 0.5 * erfc(z2 * h)
    return total - 1.0, total


def dprime_part_compared(mean_a: float, var_a: float, mean_b: float, var_b: float, level: float,
                         which: str, op: str, c: float) -> bool:
    """``dprime_part(...) <op> c`` for "lower" or "upper" and op one of < <= > >=: what a
    criterion such as ``dprime_lower(a, b) >= 1.0`` asks, mostly without the quantile search.

    F (D's distribution function) is increasing, and the quantile q = F^-1(p) is what the
    search finds to within 1e-5. So if F(c - 0.001) > p, q lies below c by more than the
    search's error, and the searched value compares with c as "below" does; if
    F(c + 0.001) < p, as "above" does. One evaluation of F (sometimes two) instead of the
    search's ~4.4 settles most trials: an animal far from its criterion. Before F, its
    closed-form bounds (:func:`_difference_cdf_bounds`) are tried: where one clears p by 0.01,
    so does F, and the comparison costs ~1.5 µs instead of F's ~20 (95% of gonogo_shaping's
    d' comparisons in tools/bench/compare.py's cohort). Within 0.001 of c the search runs and
    its value is compared (tests/test_fast_paths.py: the same answer as comparing
    dprime_part's value, on states and thresholds at and around the quantile).
    """
    if which not in ("lower", "upper") or op not in _COMPARE_OPS:
        raise BadArgument("which, op", '"lower" or "upper", and one of < <= > >=', (which, op))
    _two_states(mean_a, var_a, mean_b, var_b, ("level", level, _open_unit))
    compare = _COMPARE_OPS[op]
    if -_INF < c < _INF:
        alpha = (1.0 - level) / 2.0
        p = alpha if which == "lower" else 1.0 - alpha
        # the side a criterion's answer is usually on first: below for > / >=, above for < / <=
        sides = (-1.0, 1.0) if op in (">", ">=") else (1.0, -1.0)
        for side in sides:
            # F's bounds first: where one clears p by the slack, F does too
            bounds = _difference_cdf_bounds(mean_a, var_a, mean_b, var_b, c + side * _SETTLED_BY)
            if bounds is None:
                break
            if side < 0.0 and bounds[0] > p + _BOUND_SLACK:
                return compare(-_INF, c)
            if side > 0.0 and bounds[1] < p - _BOUND_SLACK:
                return compare(_INF, c)
        cdf = _difference_cdf(mean_a, var_a, mean_b, var_b, moments=False)[0]
        for side in sides:
            f = cdf(c + side * _SETTLED_BY)[0]
            if side < 0.0 and f > p:
                return compare(-_INF, c)  # what op answers for a value below c (c is finite)
            if side > 0.0 and f < p:
                return compare(_INF, c)  # ... and for one above it
    return bool(compare(dprime_part(mean_a, var_a, mean_b, var_b, level, which), c))


_G_NODES: dict[tuple[float, float], tuple[np.ndarray, float, float]] = {}  # (mean, var) -> _g_nodes(...)
# Bounded, oldest out first, as _A_NODES: each subject's unmoved cue must still be there at
# that subject's next decision; each decision adds one entry, so 256 serve ~250 subjects;
# ~0.4 kB an entry, 0.1 MB at most.
_G_NODES_MAX = 256


def _probit_nodes(mean: float, var: float) -> tuple[np.ndarray, float, float]:
    """:func:`_g_nodes` of one cue, kept for the last few states: between two decisions only
    the trial's cue moves, so the other cue's 24 inverse normal CDFs are not redone (each
    call of dprime_estimate then does half of them: ~1.1x the call, tools/bench/step.py; same
    numbers, tests/test_fast_paths.py)."""
    return _kept(_G_NODES, _G_NODES_MAX, (mean, var), lambda: _g_nodes(mean, var))


def _g_nodes(mean: float, var: float) -> tuple[np.ndarray, float, float]:
    """g = Phi^-1(logistic(state)) at the Gauss-Hermite nodes of N(mean, var), its mean and
    its variance under the node weights (read-only; what dprime_estimate needs of one cue)."""
    z, w = _hermite()
    g = _probit_of_logit(mean + math.sqrt(var) * z)
    g.setflags(write=False)
    m = float(w @ g)
    return g, m, float(w @ (g - m) ** 2)


def _density(u: np.ndarray) -> np.ndarray:
    # phi(u), the standard normal density
    return np.exp(-0.5 * u * u) / math.sqrt(2.0 * math.pi)


def _phi_and_slope(u: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """P = Phi(u) (kept inside (0, 1)) and d logit(P) / du = phi(u) / (P (1 - P))."""
    P = _clip(_phi(u), 1e-300, 1.0 - 1e-16)
    return P, _density(u) / (P * (1.0 - P))


def _solve(cdf, q: float, start: float) -> float:
    """The t with F(t) = q (F increasing; ``cdf`` gives F and F'): Newton's method from
    ``start``, bisecting whenever a step would leave the bracket known so far."""
    lo, hi = -math.inf, math.inf
    t = start
    for _ in range(60):
        f, slope = cdf(t)
        f -= q
        if f < 0.0:
            lo = t
        else:
            hi = t
        nxt = t - f / slope if slope > 0.0 else math.nan
        if not lo < nxt < hi:
            if math.isinf(lo):
                nxt = hi - 1.0 - 2.0 * abs(hi - t)
            elif math.isinf(hi):
                nxt = lo + 1.0 + 2.0 * abs(t - lo)
            else:
                nxt = 0.5 * (lo + hi)
        if abs(nxt - t) < 1e-5:
            return nxt
        t = nxt
    return t


# --------------------------------------------------------------------------- all cues


def estimates_from(data: Mapping[str, tuple]) -> dict[str, CueEstimate]:
    """Estimates from their stored triples (a snapshot's ``behaviour`` map)."""
    return {cue: CueEstimate.from_tuple(t) for cue, t in data.items()}
