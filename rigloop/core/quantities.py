"""The per-trial regressors ``step`` reports: the behaviour estimates with their bands,
the model-predicted response, the prediction errors at cue and outcome, the surprise."""

from __future__ import annotations

import math

import numpy as np

from . import behaviour as B
from .curve import _z_two_sided
from .derived import derived
from .learner_setup import action_cue
from .responses import p_respond, p_right
from .trial import TrialEvent

_Z95 = _z_two_sided(0.95)  # the z of the 95% bands


def _behaviour_names(spec) -> tuple[tuple[str, str, str, str], ...]:
    """(cue, estimate, lower, upper quantity names) for every cue of the file (made once per file)."""
    return derived(spec, "behaviour_names", _names_of)


def _names_of(spec) -> tuple[tuple[str, str, str, str], ...]:
    choice = spec.choice_cues()
    return tuple((cue, *B.quantity_names(cue, B.RIGHT if cue in choice else B.RESPOND)) for cue in spec.cues)


def _choice_cues(spec) -> frozenset[str]:
    return derived(spec, "choice_cues", lambda sp: sp.choice_cues())


def _behaviour_quantities(quantities: dict, spec, behaviour) -> None:
    """``p_respond[cue]`` / ``p_right[cue]`` and their 95% band, for every cue, before the trial."""
    beh = spec.behaviour
    prior, sigma2 = beh.prior_var, beh.sigma2
    z = _Z95
    sqrt, exp = math.sqrt, math.exp
    for cue, name, lo, hi in _behaviour_names(spec):
        est = behaviour.get(cue)
        mean, var = (0.0, prior) if est is None else (est[0], est[1])
        half = z * sqrt(var + sigma2)
        # B.logistic inline where its argument is >= 0 (1 / (1 + e^-a), the same bits): 1.35x the
        # reference's speed (tools/bench/step.py); _behaviour_quantities_reference is the plain form
        a, b = mean - half, mean + half
        quantities[name] = 1.0 / (1.0 + exp(-mean)) if mean >= 0.0 else B.logistic(mean)
        quantities[lo] = 1.0 / (1.0 + exp(-a)) if a >= 0.0 else B.logistic(a)
        quantities[hi] = 1.0 / (1.0 + exp(-b)) if b >= 0.0 else B.logistic(b)


def _behaviour_quantities_reference(quantities: dict, spec, behaviour) -> None:
    """:func:`_behaviour_quantities` written plainly (the tests hold the two to the same bits)."""
    beh, choice = spec.behaviour, spec.choice_cues()
    for cue in spec.cues:
        est = behaviour.get(cue)
        mean, var = (0.0, beh.prior_var) if est is None else (est[0], est[1])
        name, lo, hi = B.quantity_names(cue, B.RIGHT if cue in choice else B.RESPOND)
        quantities[name] = B.logistic(mean)
        quantities[lo], quantities[hi] = B.band(mean, var + beh.sigma2, 0.95)


def _p_model(spec, cue: str, choice_cues, quantities, history: float, actions) -> float | None:
    """What the learner and the response model predict for the trial's response to ``cue``:
    P(respond), or P(right) for a two-choice cue (action-value learners only)."""
    link = spec.response
    if cue in choice_cues:
        if actions is None:
            return None  # cue values say nothing about a side
        ql, qr = quantities[f"q[{action_cue(cue, 'left')}]"], quantities[f"q[{action_cue(cue, 'right')}]"]
        return float(p_right(ql, qr, link.beta, link.bias, link.lapse, link.persev, history))
    if actions is None:
        theta = 0.5 if link.theta is None else link.theta
        v = quantities[f"value[{cue}]"]
    else:
        theta = 0.0 if link.theta is None else link.theta
        v = quantities[f"q[{action_cue(cue, 'respond')}]"] - quantities[f"q[{action_cue(cue, 'withhold')}]"]
    return float(p_respond(v, link.beta, theta, link.lapse))


def _cue_ids(event: TrialEvent) -> list[str]:
    """``event.cue_ids`` as a list, by a plain loop (cheaper than a generator's tuple)."""
    ids = []
    for c in event.cues:
        ids.append(c.cue)
    return ids


def _delta_at(errors: list[float], step: int) -> float:
    return errors[min(max(step, 0), len(errors) - 1)]


def _surprise(errors: np.ndarray, variances: np.ndarray, noise: float) -> float | None:
    """The largest |δ_t| / sd_t of a trial, sd_t = sqrt(max(var_t, 0) + noise) (1 where that
    is not > 0); None without time steps. ``noise`` > 0 (a learner's checked variance).

    A loop over Python floats: a trial has a handful of time steps, where numpy's cost
    per call exceeds the arithmetic (3.9x faster than ``_surprise_reference``, its array
    form, tools/bench/step.py). Each term is computed as the array form computes
    it; only a NaN result (an infinite variance) is left to the array form, whose
    reduction decides which NaN comes out.
    """
    best = None
    sqrt = math.sqrt
    for delta, var in zip(errors.tolist(), variances.tolist(), strict=True):
        if delta:
            # max(var, 0.0) spelt out (var unless 0.0 > var, so NaN and -0.0 stay)
            sd = sqrt((0.0 if 0.0 > var else var) + noise)
            q = abs(delta) / (sd if sd > 0 else 1.0)
        else:
            q = 0.0  # |±0| / sd: +0 for any sd > 0 (inf included), and 0 / 1 otherwise
        if best is None or q > best or q != q:
            best = q
    if best is not None and best != best:
        sd = np.sqrt(np.maximum(variances, 0.0) + noise)
        best = float(np.max(np.abs(errors) / np.where(sd > 0, sd, 1.0)))
    return best


def _surprise_reference(errors: np.ndarray, variances: np.ndarray, noise: float) -> float | None:
    """:func:`_surprise` as array code: the readable form the tests hold it to, bit for bit."""
    if len(errors) == 0:
        return None
    sd = np.sqrt(np.maximum(variances, 0.0) + noise)
    return float(np.max(np.abs(errors) / np.where(sd > 0, sd, 1.0)))
