"""Maximum-likelihood fits of the two-step learners, a profile-likelihood interval on w,
and model comparison (model-free vs model-based vs hybrid vs successor).

The likelihood is that of every choice, both stages (Daw et al. 2011, Neuron 69:1204):
P(a1) from the first-stage values the learner uses with β1 and perseveration p, P(a2)
from Q2(s2, ·) with β2. Learning does not depend on β1, β2, p or w, so the value
trajectories are computed once per (α1, α2, λ) — each learner is an exponential
average per cell, solved as a linear recurrence over all trials at once (``value_paths``;
the plain trial loop ``value_paths_reference`` and ``core.two_step.values`` are what the
tests hold it to) — and the choice part is vectorised over trials; the search's finite
differences in β1, β2, p and w reuse the cached trajectories.

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
        for name, x in zip(("a1", "s2", "a2", "reward"), arrays, strict=True):
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


def linear_scan(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """x with x[t] = a[t]·x[t−1] + b[t] along axis 0 (x[−1] = 0), by recursive doubling
    (a parallel prefix over the pairs (a, b); Blelloch 1990, "Prefix sums and their
    applications", CMU-CS-90-190): ⌈log2 n⌉ whole-array steps instead of n scalar ones.
    With 0 ≤ a ≤ 1 (here 1 − a learning rate, or 1) every product only shrinks, so it is
    as stable as the loop; sums are grouped differently (last-bit differences)."""
    A = np.array(a, dtype=np.float64)
    B = np.array(b, dtype=np.float64)
    n, s = len(B), 1
    while s < n:
        B[s:] = B[s:] + A[s:] * B[:-s]
        A[s:] = A[s:] * A[:-s]
        s *= 2
    return B


class _Visits:
    """What of the trials the value paths need that no parameter changes: per trial, which
    Q2 cell (2·s2 + a2), second-stage state and first action it visits, as masks."""

    def __init__(self, data: TwoStepData):
        n = data.n_trials
        t = np.arange(n)
        cell = 2 * data.s2 + data.a2
        self.cell, self.s2, self.a1 = cell, data.s2, data.a1
        self.reward = data.reward
        # columns 0-3: the Q2 cells; 4-5: the state rewards R(s) of the successor learner
        self.second = np.zeros((n, 6), dtype=bool)
        self.second[t, cell] = True
        self.second[t, 4 + data.s2] = True
        # columns 0-3: M(a, s) at 2·a + s; 4-5: Q1(a)
        self.first = np.zeros((n, 6), dtype=bool)
        self.first[t, 2 * data.a1] = True
        self.first[t, 2 * data.a1 + 1] = True
        self.first[t, 4 + data.a1] = True
        # the successor row M(a1, ·) moves toward the one-hot of s2
        self.m_target = np.zeros((n, 4))
        self.m_target[t, 2 * data.a1 + data.s2] = 1.0
        self.rep = _repeat_path(data)
        self.p_diff = None


def _before(after: np.ndarray) -> np.ndarray:
    """Values before each trial from the values after it (zero before the first)."""
    out = np.empty_like(after)
    out[0] = 0.0
    out[1:] = after[:-1]
    return out


def value_paths(data: TwoStepData, alpha1, alpha2, lam,
                visits: _Visits | None = None) -> dict[str, np.ndarray]:
    """Per trial, before its learning, the differences (action 0 − action 1) of the model-free
    (mf), model-based (mb) and successor (sr) first-stage values and of Q2 in the state
    reached (q2); rep: rep(0) − rep(1) (see ``_repeat_path``). Rates and λ may be arrays
    of P parameter sets: each path is then (n, P), all sets in one pass.

    Every learner here is an exponential average per cell, updated on the trials that
    visit it, so each is a linear recurrence solved by ``linear_scan``: first the second
    stage (Q2 and the successor's R, rate α2), then the first (Q1 toward
    (1 − λ)·Q2(s2, a2) + λ·r, and M(a1, ·) toward the one-hot of s2, rate α1). Equal to
    ``value_paths_reference`` (the trial loop) to rounding."""
    v = visits if visits is not None else _Visits(data)
    scalar = np.ndim(alpha1) == 0 and np.ndim(alpha2) == 0 and np.ndim(lam) == 0
    # parameter sets along a last axis (P of them; one for scalars)
    al1, al2, lm = (np.atleast_1d(np.asarray(x, dtype=np.float64)) for x in (alpha1, alpha2, lam))
    n = data.n_trials
    t = np.arange(n)
    r = v.reward[:, None, None]
    second_mask = v.second[:, :, None]
    second = _before(linear_scan(np.where(second_mask, 1.0 - al2, 1.0),
                                 np.where(second_mask, al2 * r, 0.0)))
    q2 = second[:, :4]
    q2_taken = q2[t, v.cell]  # (n, P)
    first_b = np.empty((n, 6, max(len(al1), len(al2), len(lm))))
    first_b[:, :4] = al1 * v.m_target[:, :, None]
    first_b[:, 4:] = (al1 * ((1.0 - lm) * q2_taken + lm * v.reward[:, None]))[:, None, :]
    first_mask = v.first[:, :, None]
    first = _before(linear_scan(np.where(first_mask, 1.0 - al1, 1.0),
                                np.where(first_mask, first_b, 0.0)))
    if v.p_diff is None:
        p0, p1 = _transition_paths(data)
        v.p_diff = p0 - p1
    best_gap = np.maximum(q2[:, 0], q2[:, 1]) - np.maximum(q2[:, 2], q2[:, 3])
    m, rst = first[:, :4], second[:, 4:]
    d_sr = (m[:, 0] - m[:, 2]) * rst[:, 0] + (m[:, 1] - m[:, 3]) * rst[:, 1]
    own = 2 * v.s2
    out = {"mf": first[:, 4] - first[:, 5], "mb": v.p_diff[:, None] * best_gap, "sr": d_sr,
           "q2": q2[t, own] - q2[t, own + 1]}
    if scalar:
        out = {k: x[:, 0] for k, x in out.items()}
    out["rep"] = v.rep
    return out


def value_paths_reference(data: TwoStepData, alpha1: float, alpha2: float,
                          lam: float) -> dict[str, np.ndarray]:
    """``value_paths`` as a plain loop over trials (the readable reference the tests hold it to)."""
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
        self._visits = _Visits(data)
        self._cache: dict[tuple[float, float, float], dict[str, np.ndarray]] = {}
        self._sign1 = np.where(data.a1 == 0, 1.0, -1.0)
        self._sign2 = np.where(data.a2 == 0, 1.0, -1.0)

    def paths(self, alpha1: float, alpha2: float, lam: float) -> dict[str, np.ndarray]:
        key = (float(alpha1), float(alpha2), float(lam))
        hit = self._cache.get(key)
        if hit is None:
            if len(self._cache) > 64:
                self._cache.clear()
            hit = self._cache[key] = value_paths(self.data, *key, visits=self._visits)
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
    """The lowest SLSQP result over ``starts`` (inside the bounds): (params, nll, converged)."""
    from .search import _scipy_optimize

    optimize = _scipy_optimize()
    bounds = [(BOUNDS[n][0] + _EDGE, BOUNDS[n][1] - _EDGE) for n in free]

    def f(x: np.ndarray) -> float:
        prm = dict(base)
        prm.update(zip(free, (float(v) for v in x), strict=True))
        return nll(prm)

    best = None
    for start in starts:
        x0 = np.clip([start[n] for n in free], [b[0] for b in bounds], [b[1] for b in bounds])
        # SLSQP: the optima of L-BFGS-B (to 1e-4 in ℓ on recovery data), several times faster
        # here (L-BFGS-B's inner linear algebra wakes BLAS threads on every iteration, which
        # a shared machine pays for); ftol 1e-8 in ℓ, far below the 1.92 the interval is read at
        res = optimize.minimize(f, x0, method="SLSQP", bounds=bounds,
                                options={"ftol": 1e-8, "maxiter": 500})
        if best is None or res.fun < best.fun:
            best = res
    prm = dict(base)
    prm.update(zip(free, (float(v) for v in best.x), strict=True))
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
                 profile: bool = True, fixed: dict[str, float] | None = None,
                 start: dict[str, float] | None = None) -> TwoStepFit:
    """Maximum-likelihood fit of ``kind`` (all its parameters free unless ``fixed``);
    ``start``: the first start of some free parameters (the others start at the defaults).

    For the hybrid (with w free and ``profile``), also the 95% profile-likelihood interval
    on w; a profile point better than the search's optimum replaces it.
    """
    check_kind(kind)
    if int(starts) < 1:
        raise BadArgument("starts", "a whole number >= 1", starts)
    fixed = dict(fixed or {})
    start = dict(start or {})
    for what, given in (("fixed", fixed), ("start", start)):
        unknown = set(given) - set(NAMES)
        if unknown:
            raise BadArgument(what, f"parameters among {', '.join(NAMES)}", sorted(unknown))
        for name, value in given.items():
            low, high = BOUNDS[name]
            if not (isinstance(value, (int, float)) and low <= value <= high):
                raise BadArgument(what, f"{name} in [{low:g}, {high:g}]", value)
    base = DEFAULT_START.as_dict()
    if kind == "model_free":
        base["w"] = 0.0
    elif kind == "model_based":
        base["w"] = 1.0
    base.update(fixed)
    base.update({n: float(v) for n, v in start.items() if n not in fixed})
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
    high = (ws[hi_i] if hi_i == len(ws) - 1
            else _cross(ws[hi_i], dev[hi_i], ws[hi_i + 1], dev[hi_i + 1]))
    return float(low), float(high)


def _cross(x0: float, y0: float, x1: float, y1: float) -> float:
    """Where the line through (x0, y0), (x1, y1) crosses 0."""
    return x0 + (x1 - x0) * (0.0 - y0) / (y1 - y0) if y1 != y0 else x0


def compare_two_step(data: TwoStepData, kinds=("model_free", "model_based", "hybrid", "successor"),
                     *, starts: int = 3, seed: int = 0, profile: bool = True) -> list[TwoStepFit]:
    """Fits of each kind, ordered by BIC (best first)."""
    fits = [fit_two_step(data, k, starts=starts, seed=seed, profile=profile) for k in kinds]
    return sorted(fits, key=lambda f: f.bic)


def standard_errors(data: TwoStepData, fit: TwoStepFit) -> tuple[dict[str, float | None], str | None]:
    """Standard errors of the free parameters from the observed information: the inverse
    of the Hessian of −ℓ at the estimate, by central differences on the natural scale
    (Pawitan 2001, In All Likelihood, §2.5 and §8.3; step 1e-4 of each range, common
    practice). A parameter within two steps of a bound gets None (no curvature to read
    there: its profile interval is one-sided); so do all when the Hessian of the others is
    not positive definite. The second value says why, or is None."""
    nll = TwoStepLikelihood(data, fit.kind)
    inner = [n for n in fit.free
             if BOUNDS[n][0] + 2e-4 * (BOUNDS[n][1] - BOUNDS[n][0]) < fit.params[n]
             < BOUNDS[n][1] - 2e-4 * (BOUNDS[n][1] - BOUNDS[n][0])]
    out: dict[str, float | None] = {n: None for n in fit.free}
    if not inner:
        return out, "every free parameter sits at a bound"
    h = np.array([1e-4 * (BOUNDS[n][1] - BOUNDS[n][0]) for n in inner])

    def at(shift: np.ndarray) -> float:
        prm = dict(fit.params)
        for n, d in zip(inner, shift, strict=True):
            prm[n] = fit.params[n] + float(d)
        return nll(prm)

    k = len(inner)
    f0 = at(np.zeros(k))
    hess = np.empty((k, k))
    for i in range(k):
        e_i = np.zeros(k)
        e_i[i] = h[i]
        hess[i, i] = (at(e_i) - 2.0 * f0 + at(-e_i)) / h[i] ** 2
        for j in range(i):
            e_j = np.zeros(k)
            e_j[j] = h[j]
            hess[i, j] = hess[j, i] = (at(e_i + e_j) - at(e_i - e_j) - at(e_j - e_i)
                                       + at(-e_i - e_j)) / (4.0 * h[i] * h[j])
    try:
        np.linalg.cholesky(hess)
    except np.linalg.LinAlgError:
        return out, ("the Hessian of the log-likelihood is not positive definite at the estimate "
                     "(parameters trade off against each other, or some no longer matter there, as "
                     "alpha1 and lam do not at w = 1): no standard errors; pin one with --fix, or fit "
                     "a learner with fewer parameters")
    cov = np.linalg.inv(hess)
    out.update({n: float(np.sqrt(cov[i, i])) for i, n in enumerate(inner)})
    at_bound = [n for n in fit.free if n not in inner]
    return out, (f"{', '.join(at_bound)} at a bound: no standard error there" if at_bound else None)
