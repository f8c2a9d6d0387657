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
kept there so that live code can report the same numbers.

Two-choice tasks (``data.link == "choice"``): the learner holds one value per cue and
side, and the animal chooses right with probability

    p_t = lapse/2 + (1 − lapse) · logistic(β (Q_R − Q_L) + bias + persev · h_t)

(``core.responses.p_right``), Q_L, Q_R the values of the trial's first cue with each side
before the trial's update, h_t the choice-history kernel before trial t (``history``:
h ← decay·h + (1 − decay)·c, c = +1 right, −1 left, unchanged by an omission; from 0 at
the first trial, carried across sessions as live).
"""

from __future__ import annotations

import contextlib
import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from ..core.learners import make_learner
from ..core.responses import log_lik_respond, log_lik_right, p_respond, p_right
from ..errors import BadArgument
from .data import FitData
from ..offline.batch.onsets import respond_points, respond_terms
from .fast import batch_values, onset_values_fast, side_values_fast
from .params import LINK_PARAMETER_NAMES, in_domain, link_parameters, model_parameters
from .results import FittedTrials

_FAR_WORSE = 1e10  # the objective where the learner overflows: far worse than any fit
_CACHE_SIZE = 16  # learner value paths a NegLogLik keeps (a batch keeps all of its own)
_VALUES_SIZE = 64  # whole points' objective values a NegLogLik keeps (a batch keeps all of its own)


def onset_values(data: FitData, learner) -> np.ndarray:
    """(N,) value at each trial's first cue onset before the trial's update (nan: no cue).

    Reward learners learn the stacked rows in one ``learn_trial``; value learners one
    trial at a time. Either way ``learner`` ends after the last trial. The compiled
    engine (``fast.onset_values_fast``) runs it when it can; this is the reference.
    """
    fast = onset_values_fast(data, learner)
    if fast is not None:
        return fast[0]
    if learner.kind != "reward":
        return _values(data, learner)[0]
    values = learner.learn_trial(data.X_all, data.r_all).values
    idx = data.onset_index
    # rows before a trial's first onset are all zero, so they leave the mean unchanged:
    # values[onset row] is the value before the trial's update
    return np.where(idx >= 0, values[np.maximum(idx, 0)] if len(values) else 0.0, math.nan)


def _values(data: FitData, learner, with_sd: bool = False) -> tuple[np.ndarray, np.ndarray | None]:
    """(N,) onset values before each trial's update (nan for cueless trials), and sds;
    one ``learn_trial`` per trial (the reference; ``fast.onset_values_fast`` when it can)."""
    fast = onset_values_fast(data, learner, with_sd)
    if fast is not None:
        return fast
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


def side_values(data: FitData, learner) -> tuple[np.ndarray, np.ndarray]:
    """(N,) Q_L and Q_R of each trial's first cue before the trial's update (nan: no cue);
    through the compiled kernels when they run (``fast.side_values_fast``), else
    ``_side_values_one_hot`` when it applies, else one ``learn_trial`` per trial (the
    reference)."""
    fast = side_values_fast(data, learner)
    if fast is not None:
        return fast
    fast = _side_values_one_hot(data, learner)
    if fast is not None:
        return fast
    N = data.n_events
    QL, QR = np.full(N, math.nan), np.full(N, math.nan)
    for k in range(N):
        pair = data.side_rows[k]
        if pair is not None:
            # Q_side = x_(cue:side)ᵀ w, before this trial's learning
            QL[k] = float(pair[0] @ learner.w)
            QR[k] = float(pair[1] @ learner.w)
        X, r = data.rows[k]
        learner.learn_trial(X, r)
    return QL, QR


def _side_values_one_hot(data: FitData, learner) -> tuple[np.ndarray, np.ndarray] | None:
    """Q_L, Q_R from one stacked ``learn_trial``, for a reward learner on one row per trial
    with at most one column on (identity features, one cue): None otherwise.

    With one-hot rows and a diagonal prior, a column's weight changes only on a trial
    that has it on (Rescorla–Wagner: Δw = α δ x; the Kalman filter's covariance stays
    diagonal, so its gain is zero off the active column). So the value of column j
    before trial t is the stacked value at the next trial that has j on, or the final
    weight when none does: one backward pass.
    """
    X = data.X_all
    if (learner.kind != "reward" or data.representation.kind != "identity"
            or len(X) != data.n_events or not np.all(np.count_nonzero(X, axis=1) <= 1)
            or not np.all((X == 0) | (X == 1))):
        return None
    values = learner.learn_trial(X, data.r_all).values
    N = len(X)
    active = np.where(X.any(axis=1), np.argmax(X, axis=1), -1)
    final = np.asarray(learner.w, dtype=np.float64)
    Q = np.empty_like(X)
    t = np.arange(N)
    for j in range(X.shape[1]):
        on = np.flatnonzero(active == j)
        if len(on) == 0:
            Q[:, j] = final[j]
            continue
        # the first trial at or after t that has column j on
        nxt = np.searchsorted(on, t)
        Q[:, j] = np.where(nxt < len(on), values[on[np.minimum(nxt, len(on) - 1)]], final[j])
    cols = data.side_columns
    has = cols[:, 0] >= 0
    QL = np.where(has, Q[t, np.maximum(cols[:, 0], 0)], math.nan)
    QR = np.where(has, Q[t, np.maximum(cols[:, 1], 0)], math.nan)
    return QL, QR


def history(responded: np.ndarray, decay: float) -> np.ndarray:
    """(N,) the choice-history kernel h before each trial: h ← decay·h + (1 − decay)·c with
    c = +1 right (responded 1), −1 left (0); a trial without a choice leaves h unchanged."""
    h = np.empty(len(responded))
    cur = 0.0
    for k, y in enumerate(responded):
        h[k] = cur
        if y == y:  # not nan
            cur = decay * cur + (1 - decay) * (2.0 * y - 1.0)
    return h


def response_probability(V: np.ndarray, beta: float, theta: float, lapse: float) -> np.ndarray:
    """p = lapse/2 + (1 − lapse) · logistic(β (V − θ)), elementwise
    (``core.responses.p_respond``: no overflow for any β (V − θ))."""
    return p_respond(V, beta, theta, lapse)


def _observed_sum(V: np.ndarray, mask: np.ndarray, y: np.ndarray,
                  beta: float, theta: float, lapse: float) -> float:
    """Σ log P(y_t) over the trials in ``mask`` (y: their responses, already masked)."""
    return float(np.sum(log_lik_respond(V[mask], y, beta, theta, lapse)))


def _choice_sum(QL: np.ndarray, QR: np.ndarray, h: np.ndarray, mask: np.ndarray,
                y: np.ndarray, obs: Mapping[str, float]) -> float:
    """Σ log P(choice_t) over the trials in ``mask`` (y: 1 right, 0 left, already masked)."""
    chose = 2.0 * y - 1.0
    return float(np.sum(log_lik_right(QL[mask], QR[mask], chose, obs["beta"], obs["bias"],
                                      obs["lapse"], obs["persev"], h[mask])))


def log_likelihood(data: FitData, learner_name: str, params: Mapping[str, Any]) -> float:
    """Σ_t log P(response_t | params) over the observed trials of ``data``.

    params: every learner parameter (defaults of the learner where missing) plus the
    link's (required): ``beta``, ``theta``, ``lapse`` (go/no-go) or ``beta``, ``bias``,
    ``lapse``, ``persev``, ``decay`` (choice).
    """
    learner, obs = _build(data, learner_name, params)
    mask = ~np.isnan(data.responded)
    if data.link == "choice":
        QL, QR = side_values(data, learner)
        h = history(data.responded, obs["decay"])
        return _choice_sum(QL, QR, h, mask, data.responded[mask], obs)
    V = onset_values(data, learner)
    return _observed_sum(V, mask, data.responded[mask], obs["beta"], obs["theta"], obs["lapse"])


def fitted_trials(data: FitData, learner_name: str, params: Mapping[str, Any]) -> FittedTrials:
    """Per-trial value, sd and response probability at ``params``.

    Choice link: value is Q_R − Q_L, p_respond is P(right), responded 1 right / 0 left
    (sd: None).
    """
    learner, obs = _build(data, learner_name, params)
    if data.link == "choice":
        QL, QR = side_values(data, learner)
        h = history(data.responded, obs["decay"])
        p = np.asarray(p_right(QL, QR, obs["beta"], obs["bias"], obs["lapse"], obs["persev"], h))
        return FittedTrials(data.sessions, data.trials, QR - QL, None, p,
                            np.array(data.responded))
    V, sd = _values(data, learner, with_sd=True)
    p = response_probability(V, obs["beta"], obs["theta"], obs["lapse"])
    return FittedTrials(data.sessions, data.trials, V, sd, p, np.array(data.responded))


def _build(data: FitData, learner_name: str, params: Mapping[str, Any]):
    """A fresh learner at ``params`` and the checked link parameters by name."""
    names = model_parameters(learner_name, data.link)
    unknown = sorted(set(params) - set(names))
    if unknown:
        raise BadArgument("params", f"parameters of {learner_name} ({', '.join(names)})", unknown)
    wanted = link_parameters(data.link)
    missing = [p for p in wanted if p not in params]
    if missing:
        raise BadArgument("params", f"a mapping including {', '.join(wanted)}", sorted(params))
    obs = {p: in_domain(p, params[p]) for p in wanted}
    lparams = {k: v for k, v in params.items() if k not in LINK_PARAMETER_NAMES}
    learner = make_learner(learner_name, data.representation.n_features, **lparams)
    return learner, obs


class NegLogLik:
    """−Σ_t log P(response_t) as a function of the free parameters (natural scale, in the
    order of ``free``), the others pinned: what the optimiser minimises.

    Learner values are cached by learner parameters: a step in a link parameter (most of
    a numerical gradient) does not rerun the learner. A point where the learner
    overflows, or the sum is not finite, scores 1e10. ``responded`` replaces the responses
    the sum runs over (nan: left out): a held-out session (``crossval``), or redrawn
    go/no-go responses (``bootstrap``); the learner and the choice kernel still follow
    the animal's own.

    Batches: inside ``with objective.collecting():`` a call only notes the learner
    parameters it would need (and returns 0.0); leaving the block runs every noted set
    not yet cached in one compiled call (``fast.batch_values``: the same numbers as one
    set at a time, bit for bit). The optimiser's wrappers (``search._minimize``) note the
    points of a numerical gradient first, so the learner runs once per gradient for all
    of them rather than once per point. On the go/no-go link the block also scores every
    noted point in one compiled pass (``onsets.respond_points``: each point's terms the
    bits ``_RespondSum`` gives, summed the same way) and keeps the values by point, so
    the calls that follow the block are look-ups.
    """

    def __init__(self, data: FitData, learner_name: str, free: Sequence[str],
                 pinned: Mapping[str, Any], responded: np.ndarray | None = None):
        self.data = data
        self.learner_name = learner_name
        self.free = tuple(free)
        y = data.responded if responded is None else np.asarray(responded, dtype=np.float64)
        self.y = y
        self.mask = ~np.isnan(y)
        self.y_obs = y[self.mask]
        self.link = data.link
        self.lparams = [n for n in self.free if n not in LINK_PARAMETER_NAMES]
        self.oparams = {n: i for i, n in enumerate(self.free) if n in LINK_PARAMETER_NAMES}
        self.pinned_learner = {k: v for k, v in pinned.items() if k not in LINK_PARAMETER_NAMES}
        self.pinned_obs = {k: v for k, v in pinned.items() if k in LINK_PARAMETER_NAMES}
        self.cache: dict[tuple, Any] = {}
        self.h_cache: dict[float, np.ndarray] = {}
        self._lindex = [self.free.index(n) for n in self.lparams]
        self._noted: dict[tuple, dict[str, Any]] | None = None
        self._respond = None if self.link == "choice" else _RespondSum(self.y_obs, self.mask)
        # objective values of whole points (by the bytes of θ), filled by a batch
        self.values: dict[bytes, float] = {}
        self._points: dict[bytes, tuple[tuple, dict[str, Any], dict[str, float]]] | None = None

    def __call__(self, theta: np.ndarray) -> float:
        theta = np.asarray(theta, dtype=np.float64)
        point = theta.tobytes()
        known = self.values.get(point)
        if known is not None:
            return known
        kw = dict(self.pinned_learner)
        kw.update({n: float(theta[i]) for n, i in zip(self.lparams, self._lindex, strict=True)})
        obs = {n: float(theta[i]) for n, i in self.oparams.items()}
        obs.update(self.pinned_obs)
        if self._noted is not None:
            key = tuple(kw[n] for n in self.lparams)
            if key not in self.cache:
                self._noted.setdefault(key, kw)
            self._points.setdefault(point, (key, kw, obs))
            return 0.0
        V = self._onset_values(kw)
        if V is None:
            return _FAR_WORSE
        if self.link == "choice":
            h = self._history(obs["decay"])
            total = -_choice_sum(V[0], V[1], h, self.mask, self.y_obs, obs)
        else:
            total = -self._respond(V, obs["beta"], obs["theta"], obs["lapse"])
        return total if math.isfinite(total) else _FAR_WORSE

    @contextlib.contextmanager
    def collecting(self):
        """Note the learner parameter sets of the calls inside; run them at the end, in
        one batch (nested blocks join the outer one)."""
        if self._noted is not None:
            yield self
            return
        self._noted, self._points = {}, {}
        try:
            yield self
        finally:
            noted, self._noted = self._noted, None
            points, self._points = self._points, None
        self._prefetch(noted)
        self._score(points)

    def _score(self, points: Mapping[bytes, tuple[tuple, dict[str, Any], dict[str, float]]]) -> None:
        """The go/no-go objective at every noted point in one compiled pass, kept in
        ``values`` (nothing on the choice link, for one point, or with the kernels off:
        each is then scored alone when it is called). The same numbers as ``__call__``
        computes one point at a time."""
        if self._respond is None or len(points) < 2:
            return
        rows: dict[tuple, int] = {}
        paths, which, scored = [], [], []
        for point, (key, kw, obs) in points.items():
            if key not in rows:
                V = self.cache.get(key)
                if V is None:
                    V = self._onset_values(kw)
                if V is None:
                    self._keep(point, _FAR_WORSE)  # the learner overflows there
                    continue
                rows[key] = len(paths)
                paths.append(V)
            which.append(rows[key])
            scored.append((point, obs))
        if len(scored) < 2 or any(V.dtype != np.float64 for V in paths):
            return
        beta = np.array([obs["beta"] for _, obs in scored])
        theta = np.array([obs["theta"] for _, obs in scored])
        lapse = [obs["lapse"] for _, obs in scored]
        # the lapse terms as _RespondSum forms them
        log_half = np.array([math.log(a / 2) if a > 0 else -math.inf for a in lapse])
        log_engaged = np.array([math.log1p(-a) if a < 1 else -math.inf for a in lapse])
        terms = respond_points(np.stack(paths), np.array(which, dtype=np.intp), beta, theta,
                               log_half, log_engaged, self._respond.idx, self._respond.neg_sign)
        if terms is None:
            return
        room = max(_VALUES_SIZE, len(points) + 8)
        for m, (point, _) in enumerate(scored):
            total = -float(np.sum(terms[m]))
            self._keep(point, total if math.isfinite(total) else _FAR_WORSE, room)

    def _keep(self, point: bytes, value: float, room: int = _VALUES_SIZE) -> None:
        while len(self.values) >= room:
            del self.values[next(iter(self.values))]
        self.values[point] = value

    def _prefetch(self, noted: Mapping[tuple, dict[str, Any]]) -> None:
        """Learner values of the ``noted`` sets, one compiled call for all (nothing when
        the kernels are off or a set is not a valid learner: each is then run alone
        when it is needed)."""
        if len(noted) < 2:
            return  # one set gains nothing from a batch
        probe = "sides" if self.link == "choice" else "onset"
        try:
            got = batch_values(self.data, self.learner_name, list(noted.values()), probe)
        except BadArgument:
            return
        if got is None:
            return
        V, ok = got
        room = max(_CACHE_SIZE, len(noted) + 4)
        for p, key in enumerate(noted):
            if not ok[p]:
                continue  # the learner raises there; _onset_values scores it alone
            value = (V[p, :, 0].copy(), V[p, :, 1].copy()) if probe == "sides" else V[p, :, 0].copy()
            while len(self.cache) >= room:
                del self.cache[next(iter(self.cache))]
            self.cache[key] = value

    def _history(self, decay: float) -> np.ndarray:
        h = self.h_cache.get(decay)
        if h is None:
            if len(self.h_cache) >= 16:
                del self.h_cache[next(iter(self.h_cache))]
            # the kernel follows every choice the animal made, in the likelihood or not
            h = self.h_cache[decay] = history(self.data.responded, decay)
        return h

    def _onset_values(self, kw: dict[str, Any]):
        """Onset values (choice: the pair Q_L, Q_R) with the learner at ``kw`` (None: it
        overflows); 16 kept."""
        key = tuple(kw[n] for n in self.lparams)
        V = self.cache.get(key)
        if V is None:
            n_features = self.data.representation.n_features
            try:
                learner = make_learner(self.learner_name, n_features, **kw)
                V = (side_values(self.data, learner) if self.link == "choice"
                     else onset_values(self.data, learner))
            except (BadArgument, FloatingPointError):
                return None
            while len(self.cache) >= _CACHE_SIZE:
                del self.cache[next(iter(self.cache))]
            self.cache[key] = V
        return V


class _RespondSum:
    """Σ log P(y_t) of ``_observed_sum`` over the trials in ``mask`` with responses
    ``y_obs``, into a buffer made once: one compiled pass when the kernels run
    (``onsets.respond_terms``), else the same ufuncs without their temporaries; either
    way the same operations in the same order and the same pairwise sum, so the same
    bits (tests/test_fit_fast.py pins both against ``core.responses.log_lik_respond``)."""

    def __init__(self, y_obs: np.ndarray, mask: np.ndarray):
        y = np.asarray(y_obs, dtype=np.float64)
        self.idx = np.flatnonzero(mask).astype(np.intp)
        if np.isnan(y).any() or len(y) != len(self.idx):
            raise BadArgument("y_obs", "one observed response (no nan) per trial in mask", y_obs)
        # log σ(±z) = −log(1 + e^(∓z)): −sign·z with sign +1 for a response, −1 without
        self.neg_sign = -np.where(y > 0.5, 1.0, -1.0)
        self.buf = np.empty(len(y))

    def __call__(self, V: np.ndarray, beta: float, theta: float, lapse: float) -> float:
        log_half_lapse = math.log(lapse / 2) if lapse > 0 else -math.inf
        log_engaged = math.log1p(-lapse) if lapse < 1 else -math.inf
        z = self.buf
        if V.dtype == np.float64 and respond_terms(V, self.idx, self.neg_sign, beta, theta,
                                                   log_half_lapse, log_engaged, z):
            return float(np.sum(z))
        np.take(V, self.idx, out=z)
        # z = β(V − θ)
        np.subtract(z, theta, out=z)
        np.multiply(beta, z, out=z)
        np.multiply(self.neg_sign, z, out=z)
        np.logaddexp(0.0, z, out=z)
        # log p = log(lapse/2 + (1 − lapse) σ(±z)) = logaddexp(log lapse/2, log(1 − lapse) − log(1 + e^(∓z)))
        np.subtract(log_engaged, z, out=z)
        np.logaddexp(log_half_lapse, z, out=z)
        return float(np.sum(z))
