"""Fit learner parameters to an animal's behaviour by maximum likelihood.

The learner runs over the animal's trials exactly as it does live (the same
representation rows, the same ``learn_trial``), and a behavioural observation model
links the value it holds to what the animal did.

Observation model (go/no-go tasks; response kinds in ``COUNT_RESPONSES``): on trial t
the animal responds (lick or press count > 0) with probability

    p_t = lapse/2 + (1 − lapse) · logistic(β · (V_t − θ))

where V_t is the learner's value of the row at the trial's first cue onset (for a
single cue, that cue's value at onset) *before* the trial's update: β is the
steepness, θ the value at which the animal responds half of the engaged time, lapse
the fraction of trials on which it responds at random. Trials without a cue or without
an observed response (omitted, or a response kind that is not a count) add nothing to
the likelihood but still update the learner. The link and its log-likelihood are
``response_models.p_respond`` and ``log_lik_respond``, kept there so that live code can
report the same numbers. That module also has the two-choice softmax link (``p_right``);
fitting it would use the same frame (a second value, a bias term) but is not
implemented yet.

Parameters are found with ``scipy.optimize.minimize`` (L-BFGS-B) inside bounds, from
several starts (the default point and a seeded draw from a grid), because the
likelihood of learning models often has local optima. Each parameter is searched on a
unit box: linearly for rates, probabilities and θ; on a log scale for variances and β
(``PARAMETERS`` lists the default bounds). Standard errors come from a numerical
Hessian of the negative log-likelihood at the optimum, taken in the same unit-box
coordinates and mapped back by the delta method (equal to the natural-scale Hessian at
a stationary point).

Identifiability, pinned by default (``DEFAULT_FIXED``): the Kalman learners' mean
depends on diffusion/noise and prior_var/noise only, so behaviour cannot tell all three
apart; ``noise`` is pinned (at 1.0, or the rule file's value in ``fit_from_store``).
With one-row-per-trial ("identity") features, TD's ``gamma`` and ``lam`` and Kalman
TD's ``gamma`` have no effect (the next row is the terminal zero row) and are pinned too.

scipy is an optional dependency (the ``fit`` extra) and is imported here only, when a
fit runs.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ..core.features import Representation
from ..core.learners import LEARNERS, make_learner
from ..core.responses import log_lik_respond, p_respond
from ..errors import BadArgument, RigloopError

COUNT_RESPONSES = ("licks", "lever")  # response kinds whose value is a count: respond = count > 0
OBSERVATION_PARAMS = ("beta", "theta", "lapse")
MIN_SCORED_TRIALS = 20
_HESSIAN_STEP = 1e-4  # in unit-box coordinates: about eps**(1/4), common practice


class MissingDependency(RigloopError, ImportError):
    """An optional dependency that this feature needs is not installed."""


def _scipy_optimize():
    try:
        from scipy import optimize
    except ImportError:  # pragma: no cover - depends on the environment
        raise MissingDependency(
            "fitting needs scipy, which is not installed; install the 'fit' extra "
            "(pip install 'rigloop[fit]')"
        ) from None
    return optimize


# --------------------------------------------------------------------------- parameters


@dataclass(frozen=True, slots=True)
class ParamSpec:
    """One fitted parameter: default search bounds, scale, start, and its hard domain."""

    name: str
    lo: float
    hi: float
    log: bool
    default: float
    domain: tuple[float, float]  # values any bound or pin must respect


PARAMETERS: dict[str, ParamSpec] = {p.name: p for p in (
    ParamSpec("alpha", 0.0, 1.0, False, 0.2, (0.0, math.inf)),
    ParamSpec("gamma", 0.0, 1.0, False, 0.9, (0.0, 1.0)),
    ParamSpec("lam", 0.0, 1.0, False, 0.5, (0.0, 1.0)),
    ParamSpec("diffusion", 1e-6, 1.0, True, 0.01, (0.0, math.inf)),
    ParamSpec("noise", 1e-3, 10.0, True, 1.0, (0.0, math.inf)),
    ParamSpec("prior_var", 1e-3, 10.0, True, 1.0, (0.0, math.inf)),
    ParamSpec("beta", 0.1, 100.0, True, 5.0, (0.0, math.inf)),
    ParamSpec("theta", -3.0, 3.0, False, 0.3, (-math.inf, math.inf)),
    ParamSpec("lapse", 0.0, 0.5, False, 0.05, (0.0, 1.0)),
)}


def model_parameters(learner_name: str) -> tuple[str, ...]:
    """Every parameter of the fitted model: the learner's, then β, θ, lapse."""
    cls = LEARNERS.get(learner_name) if isinstance(learner_name, str) else None
    if cls is None:
        raise BadArgument("learner", f"one of {', '.join(map(repr, LEARNERS))}", learner_name)
    return (*cls._param_names, *OBSERVATION_PARAMS)


def default_fixed(learner_name: str, representation: Representation) -> dict[str, float]:
    """The parameters pinned when ``fixed`` is None (see the module docstring)."""
    out: dict[str, float] = {}
    if LEARNERS[learner_name].bayesian:
        out["noise"] = 1.0
    if not representation.timed:
        if learner_name == "td":
            out.update(gamma=0.9, lam=0.0)
        elif learner_name == "kalman_td":
            out["gamma"] = 0.9
    return out


# --------------------------------------------------------------------------- data


@dataclass(frozen=True, slots=True, eq=False)
class FitData:
    """A subject's trials as learner input, computed once for every likelihood evaluation.

    rows:      per trial, (X (T, n), r (T,)) from the representation, rewards in units
               of ``reward_unit_ul``.
    onset:     per trial, the (n,) row at the first cue onset, or None for a cueless trial.
    responded: (N,) 1.0 respond, 0.0 withhold, nan not observed (skipped in the likelihood).
    sessions, trials: the trial keys, for the per-trial output.
    X_all, r_all: every trial's rows stacked (ΣT, n), (ΣT,); onset_index: (N,) the row of
               each trial's onset in X_all (−1 for a cueless trial). A reward learner treats
               each row as an observation of its own, so one ``learn_trial`` over the stack
               is the per-trial loop, operation for operation (value learners need the loop:
               their trace and next row end with the trial).
    """

    representation: Representation
    reward_unit_ul: float
    rows: tuple[tuple[np.ndarray, np.ndarray], ...]
    onset: tuple[np.ndarray | None, ...]
    responded: np.ndarray
    sessions: tuple[str, ...]
    trials: tuple[int, ...]
    X_all: np.ndarray
    r_all: np.ndarray
    onset_index: np.ndarray

    @property
    def n_events(self) -> int:
        return len(self.rows)

    @property
    def n_observed(self) -> int:
        return int(np.count_nonzero(~np.isnan(self.responded)))


def responded(event) -> bool | None:
    """True/False: the animal responded or withheld; None: not observed on this trial."""
    resp = event.response
    if not event.cues or resp.result == "omitted" or resp.kind not in COUNT_RESPONSES:
        return None
    if not isinstance(resp.value, float):
        return None
    return resp.value > 0


def prepare(events: Iterable, representation: Representation, *, reward_unit_ul: float) -> FitData:
    """Rows and responses of ``events`` (TrialEvents in the order the animal lived them)."""
    if not isinstance(representation, Representation):
        raise BadArgument("representation", "a Representation (features.make_representation)",
                          representation)
    unit = _finite_positive("reward_unit_ul", reward_unit_ul)
    rows, onset, resp, sessions, trials, index = [], [], [], [], [], []
    first_row = 0
    for event in events:
        cues = [(c.cue, c.onset, c.offset) for c in event.cues]
        tr = representation.rows(cues, [(t, a / unit) for t, a in event.outcome_events()],
                                 event.duration)
        rows.append((tr.X, tr.r))
        if event.cues:
            step = tr.onset_steps[event.cues[0].cue]
            x = np.array(tr.X[step])
            x.setflags(write=False)
            onset.append(x)
            index.append(first_row + step)
        else:
            onset.append(None)
            index.append(-1)
        first_row += tr.steps
        seen = responded(event)
        resp.append(math.nan if seen is None else float(seen))
        sessions.append(event.session)
        trials.append(event.trial)
    y = np.array(resp, dtype=np.float64)
    n = representation.n_features
    X_all = np.concatenate([X for X, _ in rows]) if rows else np.zeros((0, n))
    r_all = np.concatenate([r for _, r in rows]) if rows else np.zeros(0)
    index = np.array(index, dtype=np.intp)
    for arr in (y, X_all, r_all, index):
        arr.setflags(write=False)
    return FitData(representation, unit, tuple(rows), tuple(onset), y, tuple(sessions),
                   tuple(trials), X_all, r_all, index)


# --------------------------------------------------------------------------- likelihood


def onset_values(data: FitData, learner) -> np.ndarray:
    """(N,) value at each trial's first cue onset before the trial's update (nan: no cue).

    Reward learners learn the stacked rows in one ``learn_trial``; value learners one
    trial at a time. Either way ``learner`` ends after the last trial.
    """
    if learner.kind != "reward":
        return _values(data, learner)[0]
    values = learner.learn_trial(data.X_all, data.r_all).values
    idx = data.onset_index
    # rows before a trial's first onset are all zero, so they leave the mean unchanged:
    # values[onset row] is the value before the trial's update
    return np.where(idx >= 0, values[np.maximum(idx, 0)] if len(values) else 0.0, math.nan)


def _values(data: FitData, learner, with_sd: bool = False) -> tuple[np.ndarray, np.ndarray | None]:
    """(N,) onset values before each trial's update (nan for cueless trials), and sds;
    one ``learn_trial`` per trial."""
    N = data.n_events
    V = np.full(N, math.nan)
    sd = np.full(N, math.nan) if with_sd and learner.bayesian else None
    for k in range(N):
        x = data.onset[k]
        if x is not None:
            # V_t = x_onsetᵀw, before this trial's learning
            V[k] = float(x @ learner.w)
            if sd is not None:
                # sd_t = √(x_onsetᵀ Σ x_onset)
                sd[k] = math.sqrt(max(float(x @ learner.cov @ x), 0.0))
        X, r = data.rows[k]
        learner.learn_trial(X, r)
    return V, sd


def response_probability(V: np.ndarray, beta: float, theta: float, lapse: float) -> np.ndarray:
    """p = lapse/2 + (1 − lapse) · logistic(β (V − θ)), elementwise
    (``response_models.p_respond``: no overflow for any β (V − θ))."""
    return p_respond(V, beta, theta, lapse)


def log_likelihood(data: FitData, learner_name: str, params: Mapping[str, Any]) -> float:
    """Σ_t log P(response_t | params) over the observed trials of ``data``.

    params: every learner parameter (defaults of the learner where missing) plus
    ``beta``, ``theta``, ``lapse`` (required).
    """
    learner, (beta, theta, lapse) = _build(data, learner_name, params)
    V = onset_values(data, learner)
    mask = ~np.isnan(data.responded)
    return float(np.sum(log_lik_respond(V[mask], data.responded[mask], beta, theta, lapse)))


def _build(data: FitData, learner_name: str, params: Mapping[str, Any]):
    names = model_parameters(learner_name)
    unknown = sorted(set(params) - set(names))
    if unknown:
        raise BadArgument("params", f"parameters of {learner_name} ({', '.join(names)})", unknown)
    missing = [p for p in OBSERVATION_PARAMS if p not in params]
    if missing:
        raise BadArgument("params", "a mapping including beta, theta and lapse", sorted(params))
    obs = tuple(_in_domain(p, params[p]) for p in OBSERVATION_PARAMS)
    lparams = {k: v for k, v in params.items() if k not in OBSERVATION_PARAMS}
    learner = make_learner(learner_name, data.representation.n_features, **lparams)
    return learner, obs


# --------------------------------------------------------------------------- results


@dataclass(frozen=True, slots=True, eq=False)
class FittedTrials:
    """Per-trial model quantities at the fitted parameters (regressors for other data).

    value:     (N,) V_t, the value at the first cue onset before the trial's update
               (nan for a trial without a cue).
    sd:        (N,) its posterior sd for Bayesian learners, else None.
    p_respond: (N,) the model's probability of a response.
    responded: (N,) 1 respond, 0 withhold, nan not in the likelihood.
    """

    sessions: tuple[str, ...]
    trials: tuple[int, ...]
    value: np.ndarray
    sd: np.ndarray | None
    p_respond: np.ndarray
    responded: np.ndarray

    def __post_init__(self) -> None:
        for arr in (self.value, self.sd, self.p_respond, self.responded):
            if arr is not None:
                arr.setflags(write=False)

    def __len__(self) -> int:
        return len(self.trials)

    def rows(self) -> list[dict[str, Any]]:
        """One plain dict per trial (for CSV/JSONL export); nan becomes None."""
        out = []
        for k in range(len(self.trials)):
            row = {"session": self.sessions[k], "trial": self.trials[k],
                   "value": _plain(self.value[k]),
                   "sd": _plain(self.sd[k]) if self.sd is not None else None,
                   "p_respond": _plain(self.p_respond[k]), "responded": _plain(self.responded[k])}
            out.append(row)
        return out


@dataclass(frozen=True, slots=True, eq=False)
class FitResult:
    """The maximum-likelihood fit of one learner to one animal.

    params:  every model parameter (fitted and fixed) by name.
    free:    the fitted ones, in order; ``fixed`` the pinned ones.
    se:      standard error per fitted parameter (None for one at a bound), or None when
             the Hessian is not positive definite; ``se_note`` says why something is missing.
    aic, bic: Akaike (1974) and Schwarz (1978) criteria with k = len(free) and
             n = n_trials (the trials in the likelihood).
    """

    learner: str
    representation: str
    params: dict[str, float]
    free: tuple[str, ...]
    fixed: dict[str, Any]
    log_likelihood: float
    n_trials: int
    n_events: int
    converged: bool
    message: str
    se: dict[str, float | None] | None
    se_note: str
    starts: int
    trials: FittedTrials | None = field(default=None, repr=False)

    @property
    def k(self) -> int:
        return len(self.free)

    @property
    def aic(self) -> float:
        return aic(self.log_likelihood, self.k)

    @property
    def bic(self) -> float:
        return bic(self.log_likelihood, self.k, self.n_trials)

    def to_dict(self) -> dict[str, Any]:
        """Plain data (no per-trial arrays) for JSON."""
        return {"learner": self.learner, "representation": self.representation,
                "params": dict(self.params), "free": list(self.free), "fixed": dict(self.fixed),
                "se": None if self.se is None else dict(self.se), "se_note": self.se_note,
                "log_likelihood": self.log_likelihood, "aic": self.aic, "bic": self.bic,
                "n_trials": self.n_trials, "n_events": self.n_events, "k": self.k,
                "converged": self.converged, "message": self.message, "starts": self.starts}


def aic(log_likelihood: float, k: int) -> float:
    """AIC = 2k − 2 ln L (Akaike 1974, IEEE Trans Autom Control 19:716–723)."""
    return 2.0 * k - 2.0 * log_likelihood


def bic(log_likelihood: float, k: int, n: int) -> float:
    """BIC = k ln n − 2 ln L (Schwarz 1978, Ann Stat 6:461–464)."""
    return k * math.log(n) - 2.0 * log_likelihood


# --------------------------------------------------------------------------- the search


class _Box:
    """Map between natural parameters and the unit box s ∈ [0, 1]^k the optimiser sees."""

    def __init__(self, names: Sequence[str], bounds: Mapping[str, tuple[float, float]]):
        self.names = tuple(names)
        self.log = np.array([PARAMETERS[n].log for n in self.names])
        lo = np.array([bounds[n][0] for n in self.names], dtype=np.float64)
        hi = np.array([bounds[n][1] for n in self.names], dtype=np.float64)
        # u = log θ for log-scale parameters, θ otherwise; s = (u − u_lo) / (u_hi − u_lo)
        self.ulo = np.where(self.log, np.log(np.where(self.log, lo, 1.0)), lo)
        self.uhi = np.where(self.log, np.log(np.where(self.log, hi, 1.0)), hi)
        self.width = self.uhi - self.ulo
        self.lo, self.hi = lo, hi

    def natural(self, s: np.ndarray) -> np.ndarray:
        u = self.ulo + np.asarray(s) * self.width
        theta = np.where(self.log, np.exp(u), u)
        # rounding in exp/log must not step outside the bounds
        return np.clip(theta, self.lo, self.hi)

    def unit(self, theta: np.ndarray) -> np.ndarray:
        theta = np.asarray(theta, dtype=np.float64)
        u = np.where(self.log, np.log(np.where(self.log, theta, 1.0)), theta)
        return np.clip((u - self.ulo) / self.width, 0.0, 1.0)

    def jacobian(self, theta: np.ndarray) -> np.ndarray:
        """dθ/ds per parameter at θ."""
        return np.where(self.log, theta * self.width, self.width)


def fit_subject(
    events: Iterable | FitData,
    learner_name: str,
    representation: Representation | None = None,
    *,
    reward_unit_ul: float | None = None,
    fixed: Mapping[str, Any] | None = None,
    start: Mapping[str, float] | None = None,
    bounds: Mapping[str, tuple[float, float]] | None = None,
    starts: int = 4,
    seed: int = 0,
    hessian: bool = True,
    progress: Callable[[int, int], None] | None = None,
) -> FitResult:
    """Maximum-likelihood fit of ``learner_name`` and the observation model to ``events``.

    events: TrialEvents in order (or a ``FitData`` from ``prepare``, to fit several
    learners on rows computed once); representation, reward_unit_ul: how trials become
    rows and reward units (required with events).
    fixed: parameters pinned at a value; None pins ``default_fixed`` (a mapping replaces
    it entirely, so ``{}`` frees every parameter).
    start: starting values for some free parameters (the first start); the others come
    from ``PARAMETERS`` defaults. bounds: (low, high) per parameter, replacing the default.
    starts: number of starts (the first, then a seeded draw from a 3-level grid).
    progress(done, total) is called after each start.
    """
    optimize = _scipy_optimize()
    if isinstance(events, FitData):
        data = events
    else:
        data = _prepared(events, representation, reward_unit_ul)
    names = model_parameters(learner_name)
    pinned = dict(default_fixed(learner_name, data.representation) if fixed is None else fixed)
    _check_names("fixed", pinned, names)
    for name, value in pinned.items():
        if not isinstance(value, (list, tuple, np.ndarray)):
            pinned[name] = _in_domain(name, value, f"fixed[{name}]")
    free = tuple(n for n in names if n not in pinned)
    if not free:
        raise BadArgument("fixed", "a mapping that leaves at least one parameter free",
                          sorted(pinned))
    box_bounds = _bounds(free, bounds or {}, names)
    n_obs = data.n_observed
    if n_obs < max(MIN_SCORED_TRIALS, 2 * len(free)):
        need = max(MIN_SCORED_TRIALS, 2 * len(free))
        raise BadArgument(
            "events",
            f"at least {need} trials with a cue and an observed response (kinds "
            f"{', '.join(COUNT_RESPONSES)}, not omitted); record more trials or fit more sessions",
            _Shown(f"{n_obs} of {data.n_events} trials"))
    starts = int(starts)
    if starts < 1:
        raise BadArgument("starts", "a whole number >= 1", starts)

    box = _Box(free, box_bounds)
    if start:
        _check_names("start", start, free)
    first = np.array([_start_value(n, start, box_bounds) for n in free])
    points = [box.unit(first)] + _grid_points(len(free), starts - 1, seed)
    y = data.responded
    mask = ~np.isnan(y)
    y_obs = y[mask]
    lparams = [n for n in free if n not in OBSERVATION_PARAMS]
    oparams = {n: i for i, n in enumerate(free) if n in OBSERVATION_PARAMS}
    pinned_learner = {k: v for k, v in pinned.items() if k not in OBSERVATION_PARAMS}
    pinned_obs = {k: v for k, v in pinned.items() if k in OBSERVATION_PARAMS}
    n_features = data.representation.n_features
    # values by learner parameters: a step in β, θ or lapse (most of a numerical gradient)
    # does not rerun the learner
    cache: dict[tuple, np.ndarray] = {}

    def nll(s: np.ndarray) -> float:
        theta = box.natural(s)
        kw = dict(pinned_learner)
        kw.update({n: float(theta[free.index(n)]) for n in lparams})
        obs = {n: float(theta[i]) for n, i in oparams.items()}
        obs.update(pinned_obs)
        key = tuple(kw[n] for n in lparams)
        V = cache.get(key)
        if V is None:
            try:
                V = onset_values(data, make_learner(learner_name, n_features, **kw))
            except (BadArgument, FloatingPointError):
                return 1e10  # a point where the learner overflows: far worse than any fit
            if len(cache) >= 16:
                del cache[next(iter(cache))]
            cache[key] = V
        terms = log_lik_respond(V[mask], y_obs, obs["beta"], obs["theta"], obs["lapse"])
        total = -float(np.sum(terms))
        return total if math.isfinite(total) else 1e10

    best = None
    for i, s0 in enumerate(points):
        res = optimize.minimize(nll, s0, method="L-BFGS-B", bounds=[(0.0, 1.0)] * len(free))
        if best is None or res.fun < best.fun:
            best = res
        if progress is not None:
            progress(i + 1, len(points))

    s_hat = np.clip(best.x, 0.0, 1.0)
    theta_hat = box.natural(s_hat)
    params: dict[str, Any] = {}
    for n in names:
        params[n] = pinned[n] if n in pinned else float(theta_hat[free.index(n)])
    se, note = (_standard_errors(nll, s_hat, theta_hat, box) if hessian
                else (None, "standard errors not computed (hessian=False)"))
    trials = fitted_trials(data, learner_name, params)
    message = best.message if isinstance(best.message, str) else best.message.decode()
    return FitResult(
        learner=learner_name, representation=data.representation.kind, params=params, free=free,
        fixed=pinned, log_likelihood=-float(best.fun), n_trials=n_obs, n_events=data.n_events,
        converged=bool(best.success), message=message, se=se, se_note=note, starts=len(points),
        trials=trials)


def fitted_trials(data: FitData, learner_name: str, params: Mapping[str, Any]) -> FittedTrials:
    """Per-trial value, sd and response probability at ``params``."""
    learner, (beta, theta, lapse) = _build(data, learner_name, params)
    V, sd = _values(data, learner, with_sd=True)
    p = response_probability(V, beta, theta, lapse)
    return FittedTrials(data.sessions, data.trials, V, sd, p, np.array(data.responded))


def _standard_errors(nll, s_hat: np.ndarray, theta_hat: np.ndarray, box: _Box):
    """SEs from the Hessian of the NLL in unit-box coordinates, mapped to θ (delta method)."""
    h = _HESSIAN_STEP
    inside = [i for i, s in enumerate(s_hat) if 2 * h < s < 1 - 2 * h]
    at_bound = [box.names[i] for i in range(len(s_hat)) if i not in inside]
    se: dict[str, float | None] = {n: None for n in box.names}
    notes = []
    if at_bound:
        notes.append(f"{', '.join(at_bound)} at a bound: no standard error there "
                     "(consider fixing it or widening its bounds)")
    if not inside:
        return se, "; ".join(notes)
    H = _hessian(nll, s_hat, inside, h)
    try:
        np.linalg.cholesky(H)
    except np.linalg.LinAlgError:
        notes.insert(0, "the Hessian of the negative log-likelihood is not positive definite "
                        "(a parameter may not be identifiable from these trials; try fixing one)")
        return None, "; ".join(notes)
    cov_s = np.linalg.inv(H)
    J = box.jacobian(theta_hat)[inside]
    # Cov(θ) = J Cov(s) J, J = diag(dθ/ds)
    var = J * np.diagonal(cov_s) * J
    for j, i in enumerate(inside):
        se[box.names[i]] = float(math.sqrt(var[j]))
    return se, "; ".join(notes)


def _hessian(f, x: np.ndarray, idx: Sequence[int], h: float) -> np.ndarray:
    """Central-difference Hessian of f at x over the coordinates ``idx``."""
    m = len(idx)
    H = np.empty((m, m))
    f0 = f(x)

    def at(*steps: tuple[int, float]) -> float:
        y = np.array(x, dtype=np.float64)
        for i, d in steps:
            y[i] += d
        return f(y)

    for a, i in enumerate(idx):
        # ∂²f/∂x_i² ≈ (f(x + h e_i) − 2 f(x) + f(x − h e_i)) / h²
        H[a, a] = (at((i, h)) - 2 * f0 + at((i, -h))) / h**2
        for b in range(a):
            j = idx[b]
            # ∂²f/∂x_i∂x_j ≈ (f(++) − f(+−) − f(−+) + f(−−)) / 4h²
            H[a, b] = H[b, a] = (at((i, h), (j, h)) - at((i, h), (j, -h))
                                 - at((i, -h), (j, h)) + at((i, -h), (j, -h))) / (4 * h**2)
    return H


def _grid_points(k: int, count: int, seed: int) -> list[np.ndarray]:
    """``count`` distinct points of the 3-level grid {0.15, 0.5, 0.85}^k, drawn with ``seed``."""
    if count <= 0:
        return []
    levels = np.array([0.15, 0.5, 0.85])
    rng = np.random.default_rng(seed)
    total = 3**k
    picks = rng.choice(total, size=min(count, total), replace=False)
    out = []
    for code in picks:
        digits = [(int(code) // 3**d) % 3 for d in range(k)]
        out.append(levels[digits])
    return out


# --------------------------------------------------------------------------- many learners


@dataclass(frozen=True, slots=True)
class ModelSpec:
    """A candidate model for ``compare_learners``: a learner on a representation."""

    learner: str
    representation: Representation
    reward_unit_ul: float
    fixed: Mapping[str, Any] | None = None
    start: Mapping[str, float] | None = None


def spec_from_rules(rules, learner: str | None = None) -> ModelSpec:
    """The rule file's learner (or ``learner``) on its representation, started at its
    parameters; Bayesian learners keep the file's ``noise`` (see the module docstring).

    A learner of the other target than the file's gets the matching representation of
    the same cues (as the rule-file loader requires): a reward learner one row per trial
    (``identity``), a value learner ``presence`` rows at the file's ``dt``.
    """
    from ..core.features import CueList, make_representation
    from ..core.subject import representation_for

    rep = representation_for(rules)
    if rules.learner.values == "cue_action":
        # the fitted model links cue values to responding (go/no-go); a rule file's
        # action values (cue:action columns) are fitted as the cue values they pool
        f = rules.features
        rep = make_representation(f.kind, CueList(rules.cues), dt=f.dt, n_bins=f.n_bins, decay=f.decay)
    name = learner or rules.learner.name
    model_parameters(name)  # unknown name: a clear error now
    reward_learner = LEARNERS[name].kind == "reward"
    if reward_learner and rep.timed:
        rep = make_representation("identity", rep.cues)
    elif not reward_learner and not rep.timed:
        rep = make_representation("presence", rep.cues, dt=rules.features.dt)
    fixed = default_fixed(name, rep)
    start: dict[str, float] = {}
    if name == rules.learner.name:
        for key, value in rules.learner.params.items():
            if key in fixed:
                fixed[key] = value
            elif isinstance(value, (int, float)) and not isinstance(value, bool):
                spec = PARAMETERS[key]
                start[key] = min(max(float(value), spec.lo), spec.hi)
    return ModelSpec(name, rep, rules.reward_unit_ul, fixed, start or None)


def compare_learners(
    events: Iterable,
    models: Sequence[Any],
    *,
    starts: int = 4,
    seed: int = 0,
    progress: Callable[[int, int], None] | None = None,
) -> list[FitResult]:
    """Fit each candidate in ``models`` to the same trials; the results ranked by AIC.

    models: ``ModelSpec`` values, or loaded ``Rules`` (their learner and representation).
    Rows are computed once per distinct representation and reward unit. The likelihoods
    are of the same responses, so their AICs compare whatever the representations.
    progress(done, total) counts starts over all the models.
    """
    specs = [m if isinstance(m, ModelSpec) else spec_from_rules(m) for m in models]
    if not specs:
        raise BadArgument("models", "at least one ModelSpec or Rules", list(models))
    events = list(events)
    prepared: dict[tuple, FitData] = {}
    results = []
    for i, spec in enumerate(specs):
        key = (spec.representation, spec.reward_unit_ul)
        if key not in prepared:
            prepared[key] = prepare(events, spec.representation, reward_unit_ul=spec.reward_unit_ul)
        each = None
        if progress is not None:
            def each(done: int, total: int, i: int = i) -> None:
                progress(i * total + done, len(specs) * total)
        results.append(fit_subject(prepared[key], spec.learner, fixed=spec.fixed, start=spec.start,
                                   starts=starts, seed=seed, progress=each))
    return sorted(results, key=lambda r: r.aic)


def fit_from_store(
    store,
    subject: str,
    learner: str | Sequence[str] | None = None,
    session: str | None = None,
    *,
    starts: int = 4,
    seed: int = 0,
    progress: Callable[[int, int], None] | None = None,
) -> FitResult | list[FitResult]:
    """Fit a subject's stored trials (every session, or only ``session``).

    The representation, reward unit and default learner come from the rule file of the
    sessions (they must agree on representation and reward unit). One learner name (or
    None: the rule file's) gives a FitResult; a sequence of names gives the results
    ranked by AIC. The learner starts naive and carries across the sessions in order.
    """
    from ..replay import RulesCache

    infos = store.sessions(subject)
    if not infos:
        known = ", ".join(store.subjects()) or "none"
        raise BadArgument("subject", f"a subject with stored sessions (subjects: {known})", subject)
    if session is not None:
        names = [i.session for i in infos]
        if session not in names:
            raise BadArgument("session", f"one of {subject!r}'s sessions ({', '.join(names)})",
                              session)
        infos = [i for i in infos if i.session == session]
    cache = RulesCache()
    rules = [cache.get(i.rules_text, i.rules_sha256,
                       f"session {i.session} rule file {i.rules_name}") for i in infos]
    from ..core.subject import representation_for

    first_rep, unit = representation_for(rules[0]), rules[0].reward_unit_ul
    for info, r in zip(infos, rules, strict=True):
        if representation_for(r) != first_rep or r.reward_unit_ul != unit:
            raise BadArgument(
                "session", f"a session whose rule file has the features and reward unit of "
                f"session {infos[0].session!r} (fit the sessions separately with --session)",
                info.session)
    events = [e for info in infos for e in store.trials(subject, info.session)]
    if learner is None or isinstance(learner, str):
        spec = spec_from_rules(rules[-1], learner)
        return fit_subject(events, spec.learner, spec.representation,
                           reward_unit_ul=spec.reward_unit_ul, fixed=spec.fixed, start=spec.start,
                           starts=starts, seed=seed, progress=progress)
    specs = [spec_from_rules(rules[-1], name) for name in learner]
    return compare_learners(events, specs, starts=starts, seed=seed, progress=progress)


# --------------------------------------------------------------------------- text


def format_fit(result: FitResult) -> str:
    """The parameter table with log-likelihood, AIC and BIC, as the CLI prints it."""
    lines = [f"learner {result.learner} on {result.representation} features: "
             f"{result.n_trials:,} of {result.n_events:,} trials in the likelihood, "
             f"{result.starts} starts",
             f"  {'parameter':<12}{'estimate':>12}{'SE':>12}"]
    for name, value in result.params.items():
        if name in result.fixed:
            shown = value if isinstance(value, (list, tuple)) else f"{float(value):.4g}"
            lines.append(f"  {name:<12}{shown!s:>12}{'(fixed)':>12}")
            continue
        se = result.se.get(name) if result.se else None
        lines.append(f"  {name:<12}{value:>12.4g}{(f'{se:.3g}' if se is not None else '-'):>12}")
    lines.append(f"  log-likelihood {result.log_likelihood:.3f}   AIC {result.aic:.3f}   "
                 f"BIC {result.bic:.3f}   k = {result.k}")
    state = "converged" if result.converged else "NOT converged"
    lines.append(f"  optimiser: {state} ({result.message})")
    if result.se_note:
        lines.append(f"  note: {result.se_note}")
    return "\n".join(lines)


def format_ranking(results: Sequence[FitResult]) -> str:
    """The AIC ranking of several fits (best first), with ΔAIC from the best."""
    best = min(r.aic for r in results)
    lines = [f"  {'rank':<6}{'learner':<18}{'k':>3}{'log-lik':>12}{'AIC':>12}{'dAIC':>9}"
             f"{'BIC':>12}"]
    for i, r in enumerate(sorted(results, key=lambda r: r.aic)):
        lines.append(f"  {i + 1:<6}{r.learner:<18}{r.k:>3}{r.log_likelihood:>12.3f}{r.aic:>12.3f}"
                     f"{r.aic - best:>9.2f}{r.bic:>12.3f}")
    return "\n".join(lines)


# --------------------------------------------------------------------------- checks


class _Shown:
    """Text shown verbatim after 'got' in an error message."""

    __slots__ = ("text",)

    def __init__(self, text: str):
        self.text = text

    def __repr__(self) -> str:
        return self.text


def _plain(x: float) -> float | None:
    x = float(x)
    return None if math.isnan(x) else x


def _finite_positive(name: str, value: Any) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
        raise BadArgument(name, "a finite number > 0", value)
    value = float(value)
    if not math.isfinite(value) or value <= 0:
        raise BadArgument(name, "a finite number > 0", value)
    return value


def _prepared(events, representation, reward_unit_ul) -> FitData:
    if representation is None:
        raise BadArgument("representation", "a Representation when events are given", None)
    if reward_unit_ul is None:
        raise BadArgument("reward_unit_ul", "the µL that count as reward 1.0 (e.g. the rule "
                          "file's reward_unit_ul)", None)
    return prepare(events, representation, reward_unit_ul=reward_unit_ul)


def _check_names(what: str, given: Mapping[str, Any], allowed: Sequence[str]) -> None:
    unknown = sorted(set(given) - set(allowed))
    if unknown:
        raise BadArgument(what, f"a mapping of parameter names from {', '.join(allowed)}", unknown)


def _in_domain(name: str, value: Any, shown: str | None = None) -> float:
    spec = PARAMETERS[name]
    lo, hi = spec.domain
    ok = isinstance(value, (int, float, np.integer, np.floating)) and not isinstance(value, bool)
    if not ok or not math.isfinite(float(value)) or not lo <= float(value) <= hi:
        raise BadArgument(shown or name, f"a finite number in [{lo:g}, {hi:g}]", value)
    return float(value)


def _bounds(free: Sequence[str], given: Mapping[str, Any], names: Sequence[str]) -> dict:
    _check_names("bounds", given, names)
    out = {}
    for name in free:
        spec = PARAMETERS[name]
        if name not in given:
            out[name] = (spec.lo, spec.hi)
            continue
        pair = given[name]
        where = f"bounds[{name}]"
        lo_d, hi_d = spec.domain
        floor = "0 < low" if spec.log else f"{lo_d:g} <= low"
        ceiling = f" <= {hi_d:g}" if math.isfinite(hi_d) else ""
        expected = f"a pair (low, high) of finite numbers with {floor} < high{ceiling}"
        if spec.log:
            expected += (f" ({name} is searched on a log scale; to fit it at 0 pin it with "
                         f"fixed={{'{name}': 0.0}})")
        try:
            lo, hi = (float(v) for v in pair)
        except (TypeError, ValueError):
            raise BadArgument(where, expected, pair) from None
        valid = (math.isfinite(lo) and math.isfinite(hi) and lo < hi and lo >= lo_d and hi <= hi_d
                 and (lo > 0 or not spec.log))
        if not valid:
            raise BadArgument(where, expected, pair)
        out[name] = (lo, hi)
    return out


def _start_value(name: str, start: Mapping[str, float] | None, bounds: Mapping) -> float:
    lo, hi = bounds[name]
    if start and name in start:
        value = _in_domain(name, start[name], f"start[{name}]")
        if not lo <= value <= hi:
            raise BadArgument(f"start[{name}]", f"a value within its bounds [{lo:g}, {hi:g}]",
                              value)
        return value
    return min(max(PARAMETERS[name].default, lo), hi)
