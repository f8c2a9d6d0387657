"""Counting criteria: the exact binomial tail for "k of n correct", and signal-detection d'.

Pure: standard library and numpy only.
"""

from __future__ import annotations

import math

import numpy as np

from ..errors import BadArgument
from .checks import _count, _number
from .curve import _NORMAL, _logit


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
