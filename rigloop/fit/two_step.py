"""Maximum-likelihood fits of the two-step learners, a profile-likelihood interval on w,
and model comparison (model-free vs model-based vs hybrid vs successor).

The likelihood is that of every choice, both stages (Daw et al. 2011, Neuron 69:1204):
P(a1) from the first-stage values the learner uses with β1 and perseveration p, P(a2)
from Q2(s2, ·) with β2. Learning does not depend on β1, β2, p or w, so the value
trajectories are computed once per (α1, α2, λ) — a plain loop over trials
(``value_paths``, held equal to ``core.two_step.values`` by the tests) — and the choice
part is vectorised over trials; the search's finite differences in β1, β2, p and w
reuse the cached trajectories.

The interval on w inverts the likelihood-ratio test: {w : 2 [ℓ(ŵ) − ℓ_p(w)] ≤ χ²₁(0.95)},
ℓ_p(w) the log-likelihood maximised over the other parameters at that w (Pawitan 2001,
In All Likelihood, §2.6 and §3.4). It is found on a grid of w (each point a fit of the
other six, started from its neighbour) and the crossings are interpolated linearly; at
a bound of [0, 1] the interval stops there. Model comparison uses AIC = 2k − 2ℓ and
BIC = k ln n − 2ℓ (Burnham & Anderson 2002), with n the number of choices (two per trial).

scipy's optimiser comes through ``search._scipy_optimize`` (the one scipy import).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from ..core.two_step.params import BOUNDS, KINDS, NAMES, TwoStepParams, check_kind
from ..errors import BadArgument

CHI2_1_95 = 3.841458820694124  # the 95% point of χ² with 1 degree of freedom
PROFILE_GRID = np.linspace(0.0, 1.0, 11)
DEFAULT_START = TwoStepParams()
_EDGE = 1e-6  # searched bounds sit this far inside the natural ones (softmax stays smooth)


@dataclass(frozen=True)
class TwoStepData:
    """One animal's two-step trials: a1, s2, a2 (0/1 ints) and reward (0/1), length n."""

    a1: np.ndarray
    s2: np.ndarray
    a2: np.ndarray
    reward: np.ndarray

    @classmethod
    def of(cls, a1, s2, a2, reward) -> TwoStepData:
        arrays = [np.asarray(x) for x in (a1, s2, a2, reward)]
        n = len(arrays[0])
        for name, x in zip(("a1", "s2", "a2", "reward"), arrays):
            if x.ndim != 1 or len(x) != n:
                raise BadArgument(name, f"a 1-d array of {n} trials", x.shape)
            if not np.all((x == 0) | (x == 1)):
                raise BadArgument(name, "0 or 1 on every trial", x[(x != 0) & (x != 1)][:3])
        if n < 20:
            raise BadArgument("trials", "at least 20 trials for a fit", n)
        a1, s2, a2 = (x.astype(np.int64) for x in arrays[:3])
        return cls(a1=a1, s2=s2, a2=a2, reward=arrays[3].astype(np.float64))

    @property
    def n_trials(self) -> int:
        return len(self.a1)

    @property
    def common(self) -> np.ndarray:
        return self.a1 == self.s2


def _transition_paths(data: TwoStepData) -> tuple[np.ndarray, np.ndarray]:
    """P(state 0 | action 0) and P(state 0 | action 1) before each trial, from the counts
    with a Dirichlet(1, 1) prior: (n(a, 0) + 1) / (n(a) + 2). They depend on no parameter."""
    out = []
    for a in (0, 1):
        took = data.a1 == a
        to0 = np.concatenate([[0.0], np.cumsum(took & (data.s2 == 0))[:-1]])
        n_a = np.concatenate([[0.0], np.cumsum(took)[:-1]])
        out.append((to0 + 1.0) / (n_a + 2.0))
    return out[0], out[1]


def _repeat_path(data: TwoStepData) -> np.ndarray:
    """rep(0) − rep(1) per trial: +1 after a first choice of 0, −1 after 1, 0 on the first."""
    rep = np.zeros(data.n_trials)
    rep[1:] = np.where(data.a1[:-1] == 0, 1.0, -1.0)
    return rep


def value_paths(data: TwoStepData, alpha1: float, alpha2: float, lam: float) -> dict[str, np.ndarray]:
    """Per trial, before its learning, the differences (action 0 − action 1) of the model-free
    (mf), model-based (mb) and successor (sr) first-stage values and of Q2 in the state
    reached (q2); rep: rep(0) − rep(1) (see ``_repeat_path``)."""
    n = data.n_trials
    a1s, s2s, a2s, rs = data.a1.tolist(), data.s2.tolist(), data.a2.tolist(), data.reward.tolist()
    p0, p1 = _transition_paths(data)
    q1 = [0.0, 0.0]
    q2 = [[0.0, 0.0], [0.0, 0.0]]
    m = [[0.0, 0.0], [0.0, 0.0]]
    rst = [0.0, 0.0]
    d_mf, best_gap, d_sr, d_q2 = [0.0] * n, [0.0] * n, [0.0] * n, [0.0] * n
    for t in range(n):
        a1, s2, a2, r = a1s[t], s2s[t], a2s[t], rs[t]
        row = q2[s2]
        d_mf[t] = q1[0] - q1[1]
        # max Q2(0, ·) − max Q2(1, ·); Q_MB(0) − Q_MB(1) = (P(0|0) − P(0|1)) · that gap
        best_gap[t] = max(q2[0]) - max(q2[1])
        d_sr[t] = (m[0][0] - m[1][0]) * rst[0] + (m[0][1] - m[1][1]) * rst[1]
        d_q2[t] = row[0] - row[1]
        # model-free: δ1 = Q2(s2, a2) − Q1(a1), δ2 = r − Q2(s2, a2)
        d1 = row[a2] - q1[a1]
        d2 = r - row[a2]
        q1[a1] += alpha1 * d1 + alpha1 * lam * d2
        row[a2] += alpha2 * d2
        # successor: M(a1, ·) toward 1_{s2}; R(s2) toward r
        ma = m[a1]
        ma[s2] += alpha1 * (1.0 - ma[s2])
        ma[1 - s2] -= alpha1 * ma[1 - s2]
        rst[s2] += alpha2 * (r - rst[s2])
    return {"mf": np.array(d_mf), "mb": (p0 - p1) * np.array(best_gap), "sr": np.array(d_sr),
            "q2": np.array(d_q2), "rep": _repeat_path(data)}


class TwoStepLikelihood:
    """−log-likelihood of one learner kind on one animal's trials, as a function of the
    parameters (a TwoStepParams or a dict of all seven); value paths cached per (α1, α2, λ)."""

    def __init__(self, data: TwoStepData, kind: str):
        self.data, self.kind = data, check_kind(kind)
        self._cache: dict[tuple[float, float, float], dict[str, np.ndarray]] = {}
        self._sign1 = np.where(data.a1 == 0, 1.0, -1.0)
        self._sign2 = np.where(data.a2 == 0, 1.0, -1.0)

    def paths(self, alpha1: float, alpha2: float, lam: float) -> dict[str, np.ndarray]:
        key = (float(alpha1), float(alpha2), float(lam))
        hit = self._cache.get(key)
        if hit is None:
            if len(self._cache) > 64:
                self._cache.clear()
            hit = self._cache[key] = value_paths(self.data, *key)
        return hit

    def first_stage_difference(self, prm: dict[str, float]) -> np.ndarray:
        """z(0) − z(1) per trial: β1 [ΔQ + p·Δrep] with the kind's first-stage values."""
        v = self.paths(prm["alpha1"], prm["alpha2"], prm["lam"])
        if self.kind == "model_free":
            dq = v["mf"]
        elif self.kind == "model_based":
            dq = v["mb"]
        elif self.kind == "successor":
            dq = v["sr"]
        else:
            dq = prm["w"] * v["mb"] + (1.0 - prm["w"]) * v["mf"]
        return prm["beta1"] * (dq + prm["p"] * v["rep"])

    def __call__(self, params: TwoStepParams | dict[str, float]) -> float:
        prm = params.as_dict() if isinstance(params, TwoStepParams) else params
        d1 = self.first_stage_difference(prm)
        v = self.paths(prm["alpha1"], prm["alpha2"], prm["lam"])
        d2 = prm["beta2"] * v["q2"]
        # −log P(a) = log(1 + exp(−sign·d)) for a two-way softmax with difference d
        return float(np.logaddexp(0.0, -self._sign1 * d1).sum()
                     + np.logaddexp(0.0, -self._sign2 * d2).sum())


@dataclass(frozen=True)
class TwoStepFit:
    """A fit: the kind, all seven parameters (unused ones at their defaults), the free ones,
    log-likelihood, n (choices), AIC, BIC; w_interval: the 95% profile interval (hybrid)."""

    kind: str
    params: dict[str, float]
    free: tuple[str, ...]
    log_likelihood: float
    n_choices: int
    converged: bool
    w_interval: tuple[float, float] | None = None
    profile: tuple[tuple[float, float], ...] = field(default=())

    @property
    def k(self) -> int:
        return len(self.free)

    @property
    def aic(self) -> float:
        return 2.0 * self.k - 2.0 * self.log_likelihood

    @property
    def bic(self) -> float:
        return self.k * math.log(self.n_choices) - 2.0 * self.log_likelihood


def _free_of(kind: str, fixed: dict[str, float]) -> tuple[str, ...]:
    return tuple(n for n in KINDS[kind] if n not in fixed)


def _minimise(nll: Callable[[dict[str, float]], float], free: tuple[str, ...],
              base: dict[str, float], starts: list[dict[str, float]]):
    """The lowest L-BFGS-B result over ``starts``: (params, nll, converged)."""
    from .search import _scipy_optimize

    optimize = _scipy_optimize()
    bounds = [(BOUNDS[n][0] + _EDGE, BOUNDS[n][1] - _EDGE) for n in free]

    def f(x: np.ndarray) -> float:
        prm = dict(base)
        prm.update(zip(free, (float(v) for v in x)))
        return nll(prm)

    best = None
    for start in starts:
        x0 = np.clip([start[n] for n in free], [b[0] for b in bounds], [b[1] for b in bounds])
        # ftol 1e-8 relative: a few 1e-6 in ℓ, far below the 1.92 the interval is read at
        res = optimize.minimize(f, x0, method="L-BFGS-B", bounds=bounds,
                                options={"ftol": 1e-8, "gtol": 1e-5})
        if best is None or res.fun < best.fun:
            best = res
    prm = dict(base)
    prm.update(zip(free, (float(v) for v in best.x)))
    return prm, float(best.fun), bool(best.success)


def _starts(free: tuple[str, ...], start: dict[str, float], count: int, seed: int) -> list[dict]:
    """The given start, then seeded draws inside the bounds (rates 0.2–0.8, betas 1–8, p ±0.3)."""
    rng = np.random.default_rng(seed)
    out = [dict(start)]
    ranges = {"alpha1": (0.2, 0.8), "alpha2": (0.2, 0.8), "lam": (0.2, 0.8), "beta1": (1.0, 8.0),
              "beta2": (1.0, 8.0), "p": (-0.3, 0.3), "w": (0.1, 0.9)}
    for _ in range(count - 1):
        s = dict(start)
        s.update({n: float(rng.uniform(*ranges[n])) for n in free})
        out.append(s)
    return out


def fit_two_step(data: TwoStepData, kind: str = "hybrid", *, starts: int = 3, seed: int = 0,
                 profile: bool = True, fixed: dict[str, float] | None = None) -> TwoStepFit:
    """Maximum-likelihood fit of ``kind`` (all its parameters free unless ``fixed``).

    For the hybrid (with w free and ``profile``), also the 95% profile-likelihood interval
    on w; a profile point better than the search's optimum replaces it.
    """
    check_kind(kind)
    if int(starts) < 1:
        raise BadArgument("starts", "a whole number >= 1", starts)
    fixed = dict(fixed or {})
    unknown = set(fixed) - set(NAMES)
    if unknown:
        raise BadArgument("fixed", f"parameters among {', '.join(NAMES)}", sorted(unknown))
    base = DEFAULT_START.as_dict()
    if kind == "model_free":
        base["w"] = 0.0
    elif kind == "model_based":
        base["w"] = 1.0
    base.update(fixed)
    free = _free_of(kind, fixed)
    nll = TwoStepLikelihood(data, kind)
    prm, best, converged = _minimise(nll, free, base, _starts(free, base, int(starts), seed))
    n_choices = 2 * data.n_trials
    if not (kind == "hybrid" and "w" in free and profile):
        return TwoStepFit(kind, prm, free, -best, n_choices, converged)
    points, prm, best = _profile_w(nll, free, prm, best)
    interval = _profile_interval(points, best)
    return TwoStepFit(kind, prm, free, -best, n_choices, converged, interval, tuple(points))


def _profile_w(nll: TwoStepLikelihood, free: tuple[str, ...], prm: dict[str, float], best: float):
    """(w, profile −log-likelihood) on ``PROFILE_GRID``, each point started from its neighbour
    nearer ŵ; returns the points, and the best parameters found anywhere."""
    others = tuple(n for n in free if n != "w")
    w_hat = prm["w"]
    grid = PROFILE_GRID
    profile: dict[float, float] = {}
    best_prm, best_val = prm, best
    up = [w for w in grid if w >= w_hat]
    down = [w for w in grid[::-1] if w < w_hat]
    for side in (up, down):
        start = dict(prm)
        for w in side:
            base = dict(start)
            base["w"] = float(w)
            fitted, val, _ = _minimise(nll, others, base, [base])
            profile[float(w)] = val
            start = fitted
            if val < best_val:
                best_prm, best_val = fitted, val
            # beyond the threshold (with room for a bump) the interval is decided
            if val - best_val > CHI2_1_95 / 2.0 + 3.0:
                break
    return sorted(profile.items()), best_prm, best_val


def _profile_interval(points: list[tuple[float, float]], best: float) -> tuple[float, float]:
    """The w values where the profile crosses best + χ²₁(0.95)/2, interpolated; a bound of
    [0, 1] (or of the grid searched) where it does not cross."""
    ws = np.array([p[0] for p in points])
    dev = np.array([p[1] for p in points]) - best - CHI2_1_95 / 2.0
    inside = np.flatnonzero(dev <= 0.0)
    if len(inside) == 0:  # the grid misses the optimum's neighbourhood: nearest point only
        i = int(np.argmin(dev))
        return float(ws[i]), float(ws[i])
    lo_i, hi_i = inside[0], inside[-1]
    low = ws[lo_i] if lo_i == 0 else _cross(ws[lo_i - 1], dev[lo_i - 1], ws[lo_i], dev[lo_i])
    high = ws[hi_i] if hi_i == len(ws) - 1 else _cross(ws[hi_i], dev[hi_i], ws[hi_i + 1], dev[hi_i + 1])
    return float(low), float(high)


def _cross(x0: float, y0: float, x1: float, y1: float) -> float:
    """Where the line through (x0, y0), (x1, y1) crosses 0."""
    return x0 + (x1 - x0) * (0.0 - y0) / (y1 - y0) if y1 != y0 else x0


def compare_two_step(data: TwoStepData, kinds=("model_free", "model_based", "hybrid", "successor"),
                     *, starts: int = 3, seed: int = 0, profile: bool = True) -> list[TwoStepFit]:
    """Fits of each kind, ordered by BIC (best first)."""
    fits = [fit_two_step(data, k, starts=starts, seed=seed, profile=profile) for k in kinds]
    return sorted(fits, key=lambda f: f.bic)
