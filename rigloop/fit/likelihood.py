"""The likelihood of an animal's responses under a learner and the observation model.

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
an observed response add nothing to the likelihood but still update the learner. The
link and its log-likelihood are ``core.responses.p_respond`` and ``log_lik_respond``,
kept there so that live code can report the same numbers. That module also has the
two-choice softmax link (``p_right``); fitting it would use the same frame (a second
value, a bias term) but is not implemented yet.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from ..core.learners import make_learner
from ..core.responses import log_lik_respond, p_respond
from ..errors import BadArgument
from .data import FitData
from .params import OBSERVATION_PARAMS, in_domain, model_parameters
from .results import FittedTrials

_FAR_WORSE = 1e10  # the objective where the learner overflows: far worse than any fit


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
    (``core.responses.p_respond``: no overflow for any β (V − θ))."""
    return p_respond(V, beta, theta, lapse)


def _observed_sum(V: np.ndarray, mask: np.ndarray, y: np.ndarray,
                  beta: float, theta: float, lapse: float) -> float:
    """Σ log P(y_t) over the trials in ``mask`` (y: their responses, already masked)."""
    return float(np.sum(log_lik_respond(V[mask], y, beta, theta, lapse)))


def log_likelihood(data: FitData, learner_name: str, params: Mapping[str, Any]) -> float:
    """Σ_t log P(response_t | params) over the observed trials of ``data``.

    params: every learner parameter (defaults of the learner where missing) plus
    ``beta``, ``theta``, ``lapse`` (required).
    """
    learner, (beta, theta, lapse) = _build(data, learner_name, params)
    V = onset_values(data, learner)
    mask = ~np.isnan(data.responded)
    return _observed_sum(V, mask, data.responded[mask], beta, theta, lapse)


def fitted_trials(data: FitData, learner_name: str, params: Mapping[str, Any]) -> FittedTrials:
    """Per-trial value, sd and response probability at ``params``."""
    learner, (beta, theta, lapse) = _build(data, learner_name, params)
    V, sd = _values(data, learner, with_sd=True)
    p = response_probability(V, beta, theta, lapse)
    return FittedTrials(data.sessions, data.trials, V, sd, p, np.array(data.responded))


def _build(data: FitData, learner_name: str, params: Mapping[str, Any]):
    """A fresh learner at ``params`` and the checked (β, θ, lapse)."""
    names = model_parameters(learner_name)
    unknown = sorted(set(params) - set(names))
    if unknown:
        raise BadArgument("params", f"parameters of {learner_name} ({', '.join(names)})", unknown)
    missing = [p for p in OBSERVATION_PARAMS if p not in params]
    if missing:
        raise BadArgument("params", "a mapping including beta, theta and lapse", sorted(params))
    obs = tuple(in_domain(p, params[p]) for p in OBSERVATION_PARAMS)
    lparams = {k: v for k, v in params.items() if k not in OBSERVATION_PARAMS}
    learner = make_learner(learner_name, data.representation.n_features, **lparams)
    return learner, obs


class NegLogLik:
    """−Σ_t log P(response_t) as a function of the free parameters (natural scale, in the
    order of ``free``), the others pinned: what the optimiser minimises.

    Onset values are cached by learner parameters: a step in β, θ or lapse (most of a
    numerical gradient) does not rerun the learner. A point where the learner overflows,
    or the sum is not finite, scores 1e10.
    """

    def __init__(self, data: FitData, learner_name: str, free: Sequence[str],
                 pinned: Mapping[str, Any]):
        self.data = data
        self.learner_name = learner_name
        self.free = tuple(free)
        self.mask = ~np.isnan(data.responded)
        self.y_obs = data.responded[self.mask]
        self.lparams = [n for n in self.free if n not in OBSERVATION_PARAMS]
        self.oparams = {n: i for i, n in enumerate(self.free) if n in OBSERVATION_PARAMS}
        self.pinned_learner = {k: v for k, v in pinned.items() if k not in OBSERVATION_PARAMS}
        self.pinned_obs = {k: v for k, v in pinned.items() if k in OBSERVATION_PARAMS}
        self.cache: dict[tuple, np.ndarray] = {}

    def __call__(self, theta: np.ndarray) -> float:
        kw = dict(self.pinned_learner)
        kw.update({n: float(theta[self.free.index(n)]) for n in self.lparams})
        obs = {n: float(theta[i]) for n, i in self.oparams.items()}
        obs.update(self.pinned_obs)
        V = self._onset_values(kw)
        if V is None:
            return _FAR_WORSE
        total = -_observed_sum(V, self.mask, self.y_obs, obs["beta"], obs["theta"], obs["lapse"])
        return total if math.isfinite(total) else _FAR_WORSE

    def _onset_values(self, kw: dict[str, Any]) -> np.ndarray | None:
        """Onset values with the learner at ``kw`` (None: it overflows); 16 kept."""
        key = tuple(kw[n] for n in self.lparams)
        V = self.cache.get(key)
        if V is None:
            n_features = self.data.representation.n_features
            try:
                V = onset_values(self.data, make_learner(self.learner_name, n_features, **kw))
            except (BadArgument, FloatingPointError):
                return None
            if len(self.cache) >= 16:
                del self.cache[next(iter(self.cache))]
            self.cache[key] = V
        return V
