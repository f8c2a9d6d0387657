"""The classic two-step analysis: how often the animal repeats its first-stage choice,
by whether the previous trial was rewarded and whether its transition was common.

A model-free learner repeats rewarded choices whatever the transition (a main effect of
reward); a model-based learner repeats a rewarded choice after a common transition but
switches after a rare one (a reward × transition interaction) (Daw et al. 2011, Neuron
69:1204, Fig. 2). ``stay_regression`` fits

    logit P(stay_t) = b0 + b_r·R_{t−1} + b_c·C_{t−1} + b_rc·R_{t−1}·C_{t−1}

with R, C coded +1 (rewarded, common) and −1 (unrewarded, rare), by iteratively
reweighted least squares (Newton's method on the log-likelihood, McCullagh & Nelder
1989, §4.4). Intervals of the stay probabilities are Wilson score intervals (Wilson
1927, JASA 22:209).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ...errors import BadArgument

Z95 = 1.959963984540054  # the 97.5% point of the standard normal
TERMS = ("intercept", "reward", "transition", "reward_x_transition")
CELLS = ((True, True), (True, False), (False, True), (False, False))  # (rewarded, common)


def _trials(a1, reward, common):
    a1 = np.asarray(a1)
    reward = np.asarray(reward, dtype=np.float64)
    common = np.asarray(common, dtype=bool)
    if not (a1.ndim == reward.ndim == common.ndim == 1 and len(a1) == len(reward) == len(common)):
        raise BadArgument("a1, reward, common", "1-d arrays of one length",
                          (a1.shape, reward.shape, common.shape))
    if len(a1) < 2:
        raise BadArgument("trials", "at least 2 trials", len(a1))
    return a1, reward > 0, common


def stay_flags(a1, reward, common) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(stay (n−1,), previous rewarded (n−1,), previous common (n−1,)) for trials 2..n."""
    a1, rewarded, common = _trials(a1, reward, common)
    return a1[1:] == a1[:-1], rewarded[:-1], common[:-1]


def wilson_interval(k: int, n: int, z: float = Z95) -> tuple[float, float]:
    """Wilson score interval of a proportion k/n ((nan, nan) when n = 0)."""
    if n == 0:
        return math.nan, math.nan
    p = k / n
    centre = (p + z * z / (2 * n)) / (1 + z * z / n)
    half = z * math.sqrt(p * (1 - p) / n + z * z / (4 * n * n)) / (1 + z * z / n)
    return max(0.0, centre - half), min(1.0, centre + half)


@dataclass(frozen=True)
class StayCell:
    rewarded: bool
    common: bool
    n: int
    stays: int
    p: float
    low: float
    high: float

    @property
    def label(self) -> str:
        return f"{'rewarded' if self.rewarded else 'unrewarded'}, {'common' if self.common else 'rare'}"


def stay_table(a1, reward, common) -> tuple[StayCell, ...]:
    """P(stay) after each (rewarded, common) outcome of the previous trial, with 95% intervals,
    in the order of ``CELLS``."""
    stay, rew, com = stay_flags(a1, reward, common)
    out = []
    for r, c in CELLS:
        sel = (rew == r) & (com == c)
        n, k = int(sel.sum()), int(stay[sel].sum())
        low, high = wilson_interval(k, n)
        out.append(StayCell(r, c, n, k, k / n if n else math.nan, low, high))
    return tuple(out)


def logistic_irls(X: np.ndarray, y: np.ndarray, max_iter: int = 100,
                  tol: float = 1e-10) -> tuple[np.ndarray, np.ndarray, bool]:
    """Maximum-likelihood logistic regression by IRLS: (coefficients, covariance, converged).

    X: (n, k) design with its intercept column; y: (n,) 0/1. Each step solves
    (Xᵀ W X) b' = Xᵀ W z with W = diag(μ(1 − μ)) and z = Xb + (y − μ)/(μ(1 − μ)).
    """
    X = np.asarray(X, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    b = np.zeros(X.shape[1])
    converged = False
    for _ in range(int(max_iter)):
        eta = X @ b
        mu = 1.0 / (1.0 + np.exp(-eta))
        wgt = np.clip(mu * (1.0 - mu), 1e-12, None)
        # Newton step: b' = b + (Xᵀ W X)⁻¹ Xᵀ (y − μ)
        H = X.T @ (wgt[:, None] * X)
        step = np.linalg.solve(H, X.T @ (y - mu))
        b = b + step
        if np.max(np.abs(step)) < tol * (1.0 + np.max(np.abs(b))):
            converged = True
            break
    eta = X @ b
    mu = 1.0 / (1.0 + np.exp(-eta))
    H = X.T @ ((mu * (1.0 - mu))[:, None] * X)
    return b, np.linalg.inv(H), converged


@dataclass(frozen=True)
class StayRegression:
    """coef, se, z, p_value: one per term of ``TERMS``; n: trials in the fit."""

    coef: np.ndarray
    se: np.ndarray
    z: np.ndarray
    p_value: np.ndarray
    n: int
    converged: bool

    def term(self, name: str) -> dict[str, float]:
        if name not in TERMS:
            raise BadArgument("term", f"one of {', '.join(TERMS)}", name)
        i = TERMS.index(name)
        return {"coef": float(self.coef[i]), "se": float(self.se[i]), "z": float(self.z[i]),
                "p_value": float(self.p_value[i])}


def design(a1, reward, common) -> tuple[np.ndarray, np.ndarray]:
    """(X (n−1, 4), stay (n−1,)): the regression's design, R and C coded ±1."""
    stay, rew, com = stay_flags(a1, reward, common)
    r = np.where(rew, 1.0, -1.0)
    c = np.where(com, 1.0, -1.0)
    return np.column_stack([np.ones_like(r), r, c, r * c]), stay.astype(np.float64)


def stay_regression(a1, reward, common) -> StayRegression:
    """The logistic regression of stay on reward, transition and their interaction."""
    X, y = design(a1, reward, common)
    if y.min() == y.max():
        raise BadArgument("trials", "both stays and switches (the regression is undefined "
                          "when the animal always stays or always switches)", int(y.sum()))
    b, cov, converged = logistic_irls(X, y)
    se = np.sqrt(np.diagonal(cov))
    z = b / se
    # two-sided p = erfc(|z| / √2)
    p = np.array([math.erfc(abs(v) / math.sqrt(2.0)) for v in z])
    return StayRegression(coef=b, se=se, z=z, p_value=p, n=len(y), converged=converged)
