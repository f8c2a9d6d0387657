"""Response models: the links from a learner's values to what the animal does.

One module for both users of the links: ``fit`` (the likelihood of an animal's
responses) and the daemon (the model-predicted probability it reports per trial), so
the two compute the same numbers.

* Go/no-go (``p_respond``, ``log_lik_respond``): the animal responds (licks, presses)
  with probability  p = lapse/2 + (1 − lapse)·σ(β(V − θ)),  V the learner's value of
  the cue, β the steepness, θ the value at which it responds half of the engaged time,
  lapse the fraction of trials on which it responds at random (a psychometric function
  with equal guess and lapse rates; Wichmann & Hill 2001, Percept Psychophys 63:1293).
* Two choices (``p_right``, ``log_lik_right``): it chooses the right side with
  probability  p = lapse/2 + (1 − lapse)·σ(β(Q_R − Q_L) + bias + persev·h),  a softmax
  over the two sides' values with a side bias (log-odds toward right) and a
  perseveration weight on the choice-history kernel h (``history_step``).

σ(z) = 1/(1 + e^−z). Values and observations are Python floats or numpy arrays of any
one shape (they broadcast; a float in gives a float out); the parameters β, θ, lapse,
bias, persev and decay are scalars. The functions do not check their parameters (``fit``
calls them inside its optimiser); ``ResponseLink`` holds checked ones.

Pure: standard library and numpy only.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..errors import BadArgument
from .checks import _number

# Defaults, for rule files that name a link without all its parameters. β and θ are in
# reward units (the rule file's reward_unit_ul is value 1.0).
DEFAULT_BETA = 5.0
DEFAULT_THETA = 0.5
DEFAULT_LAPSE = 0.05
DEFAULT_BIAS = 0.0
DEFAULT_PERSEV = 0.0
DEFAULT_DECAY = 0.7

KINDS = ("respond", "choice")

# Choice codes for log_lik_right and history_step; the sides are named as in simulate.SIDES.
RIGHT = 1.0
LEFT = -1.0
NO_CHOICE = 0.0
_SIDES = {"right": RIGHT, "left": LEFT}

_EXP_MAX = 700.0  # e^700 ≈ 1.0e304 is finite in float64; e^710 overflows


# --------------------------------------------------------------------------- go/no-go


def p_respond(value: Any, beta: float, theta: float, lapse: float) -> Any:
    """P(respond) = lapse/2 + (1 − lapse)·σ(β(V − θ)), elementwise over ``value``.

    Finite for every finite input (no overflow however large |β(V − θ)|); nan stays nan.
    A Python float in takes a scalar path (``step`` computes one per trial, where numpy's
    per-call cost exceeds the arithmetic); it agrees with the array path to one ulp
    (math.exp and numpy's exp may round the last bit differently).
    """
    if type(value) is float:
        return _lapse_logistic_scalar(beta * (value - theta), lapse)
    v = _floats("value", value)
    # z = β(V − θ)
    z = beta * (v - theta)
    return _plain(_lapse_logistic(z, lapse))


def log_lik_respond(value: Any, responded: Any, beta: float, theta: float, lapse: float) -> Any:
    """log P(responded) under ``p_respond``, elementwise, computed in log space.

    responded: 1 (or True) responded, 0 (or False) withheld; nan (not observed) gives nan.
    Stable for large |β(V − θ)|: log p stays finite where p itself rounds to 0 or 1.
    """
    v = _floats("value", value)
    # z = β(V − θ)
    z = beta * (v - theta)
    return _plain(_log_lik(z, responded, lapse))


# --------------------------------------------------------------------------- two choices


def p_right(q_left: Any, q_right: Any, beta: float, bias: float, lapse: float,
            persev: float = 0.0, history: Any = 0.0) -> Any:
    """P(right) = lapse/2 + (1 − lapse)·σ(β(Q_R − Q_L) + bias + persev·h), elementwise.

    bias > 0 favours the right side; history h ∈ [−1, 1] is the choice kernel of
    ``history_step`` (h > 0: recent choices were right), so persev > 0 repeats choices
    and persev < 0 alternates. Swapping the sides (Q_L ↔ Q_R, bias → −bias, h → −h) gives
    1 − P(right).
    """
    if type(q_left) is float and type(q_right) is float and type(history) is float:
        # z = β(Q_R − Q_L) + bias + persev·h, on floats (as p_respond's scalar path)
        return _lapse_logistic_scalar(beta * (q_right - q_left) + bias + persev * history, lapse)
    z = _choice_logit(q_left, q_right, beta, bias, persev, history)
    return _plain(_lapse_logistic(z, lapse))


def log_lik_right(q_left: Any, q_right: Any, chose: Any, beta: float, bias: float,
                  lapse: float, persev: float = 0.0, history: Any = 0.0) -> Any:
    """log P(chose) under ``p_right``, elementwise, computed in log space.

    chose: ``RIGHT`` (+1) or ``LEFT`` (−1); ``NO_CHOICE`` (0) or nan (an omitted trial)
    gives nan. Stable for large logits, as ``log_lik_respond``.
    """
    c = _floats("chose", chose)
    z = _choice_logit(q_left, q_right, beta, bias, persev, history)
    # y = 1 for a right choice, 0 for left, nan for none
    y = np.where(c == 0.0, math.nan, (c + 1.0) / 2.0)
    return _plain(_log_lik(z, y, lapse))


def history_step(h: Any, choice: Any, decay: float) -> Any:
    """The choice-history kernel after one more trial: h ← decay·h + (1 − decay)·c.

    choice c: ``RIGHT`` (+1) or ``LEFT`` (−1); ``NO_CHOICE`` (0) or nan leaves h unchanged
    (an omitted trial is no evidence of a side habit). From h = 0, k choices of one side
    give h = ±(1 − decay^k), so h stays in [−1, 1]. An exponentially weighted sum of past
    choices, the shape that fits the choice-history kernels of Lau & Glimcher (2005,
    J Exp Anal Behav 84:555; page from memory).
    """
    if type(h) is float and (choice == 1.0 or choice == -1.0):
        # one float and a side: the same formula without numpy's per-call cost
        return decay * h + (1 - decay) * choice
    c = _floats("choice", choice)
    chosen = np.abs(c) == 1.0
    if not np.all(chosen | (c == 0.0) | np.isnan(c)):
        raise BadArgument("choice", "+1 (right), -1 (left), or 0 or nan (no choice)", choice)
    hh = _floats("h", h)
    # h ← decay·h + (1 − decay)·c
    stepped = decay * hh + (1 - decay) * c
    return _plain(np.where(chosen, stepped, hh))


def choice_code(side: str | None) -> float:
    """``RIGHT`` for "right", ``LEFT`` for "left", ``NO_CHOICE`` for None (no choice made)."""
    if side is None:
        return NO_CHOICE
    code = _SIDES.get(side) if isinstance(side, str) else None
    if code is None:
        raise BadArgument("side", "'left', 'right' or None", side)
    return code


# --------------------------------------------------------------------------- a checked link


@dataclass(frozen=True, slots=True)
class ResponseLink:
    """A response model with checked parameters, as a rule file names one.

    kind "respond" (go/no-go) uses beta, theta and lapse; kind "choice" (two sides) uses
    beta, lapse, bias, persev and decay (the history kernel's). Defaults: the ``DEFAULT_*``
    constants.
    """

    kind: str = "respond"
    beta: float = DEFAULT_BETA
    theta: float = DEFAULT_THETA
    lapse: float = DEFAULT_LAPSE
    bias: float = DEFAULT_BIAS
    persev: float = DEFAULT_PERSEV
    decay: float = DEFAULT_DECAY

    def __post_init__(self) -> None:
        if self.kind not in KINDS:
            raise BadArgument("kind", f"one of {', '.join(map(repr, KINDS))}", self.kind)
        for name in ("beta", "theta", "bias", "persev"):
            object.__setattr__(self, name, _number(name, getattr(self, name)))
        object.__setattr__(self, "lapse", _unit_interval("lapse", self.lapse))
        object.__setattr__(self, "decay", _unit_interval("decay", self.decay))

    def probability(self, value: Any = None, *, q_left: Any = None, q_right: Any = None,
                    history: Any = 0.0) -> Any:
        """P(respond) from ``value`` (kind "respond"), or P(right) from ``q_left``,
        ``q_right`` and the kernel ``history`` (kind "choice")."""
        if self.kind == "respond":
            return p_respond(self._need("value", value), self.beta, self.theta, self.lapse)
        return p_right(self._need("q_left", q_left), self._need("q_right", q_right), self.beta,
                       self.bias, self.lapse, self.persev, history)

    def log_likelihood(self, observed: Any, value: Any = None, *, q_left: Any = None,
                       q_right: Any = None, history: Any = 0.0) -> Any:
        """log P(observed): responded 1/0 (kind "respond") or a choice code (kind "choice")."""
        if self.kind == "respond":
            return log_lik_respond(self._need("value", value), observed, self.beta, self.theta,
                                   self.lapse)
        return log_lik_right(self._need("q_left", q_left), self._need("q_right", q_right),
                             observed, self.beta, self.bias, self.lapse, self.persev, history)

    def next_history(self, h: Any, choice: Any) -> Any:
        """The choice kernel after ``choice``, with this link's decay (``history_step``)."""
        return history_step(h, choice, self.decay)

    def _need(self, name: str, quantity: Any) -> Any:
        if quantity is None:
            raise BadArgument(name, f"a model quantity (a {self.kind!r} link needs it)", None)
        return quantity


# --------------------------------------------------------------------------- the shared forms


def _lapse_logistic(z: np.ndarray, lapse: float) -> np.ndarray:
    """lapse/2 + (1 − lapse)·σ(z), elementwise, without overflow for any z."""
    # e^−z, with z clipped at −700 so it stays finite (the far tail is taken below)
    e = np.exp(-np.maximum(z, -_EXP_MAX))
    # p = lapse/2 + (1 − lapse)/(1 + e^−z)
    p = lapse / 2 + (1 - lapse) / (1 + e)
    far = z < -_EXP_MAX
    if far.any():
        ez = np.exp(np.where(far, z, 0.0))
        # far tail: σ(z) = e^z/(1 + e^z), with e^z < 1e−304
        p = np.where(far, lapse / 2 + (1 - lapse) * (ez / (1 + ez)), p)
    return p


def _lapse_logistic_scalar(z: float, lapse: float) -> float:
    """:func:`_lapse_logistic` of one float, by the same formula (nan stays nan)."""
    if z != z:
        return z
    if z < -_EXP_MAX:
        ez = math.exp(z)
        return lapse / 2 + (1 - lapse) * (ez / (1 + ez))
    return lapse / 2 + (1 - lapse) / (1 + math.exp(-z))


def _log_lik(z: np.ndarray, y: Any, lapse: float) -> np.ndarray:
    """log P(y) with P(y = 1) = lapse/2 + (1 − lapse)·σ(z), in log space; nan y gives nan."""
    y = _floats("responded", y)
    log_half_lapse = math.log(lapse / 2) if lapse > 0 else -math.inf
    log_engaged = math.log1p(-lapse) if lapse < 1 else -math.inf
    # log σ(±z) = −log(1 + e^(∓z))
    sign = np.where(y > 0.5, 1.0, -1.0)
    log_sig = -np.logaddexp(0.0, -sign * z)
    # log p = log(lapse/2 + (1 − lapse) σ(z)); log(1 − p) the same with σ(−z)
    out = np.logaddexp(log_half_lapse, log_engaged + log_sig)
    missing = np.isnan(y)
    if missing.any():
        out = np.where(missing, math.nan, out)
    return out


def _choice_logit(q_left: Any, q_right: Any, beta: float, bias: float, persev: float,
                  history: Any) -> np.ndarray:
    ql = _floats("q_left", q_left)
    qr = _floats("q_right", q_right)
    h = _floats("history", history)
    # z = β(Q_R − Q_L) + bias + persev·h
    return beta * (qr - ql) + bias + persev * h


def _floats(name: str, value: Any) -> np.ndarray:
    """``value`` as a float64 array; BadArgument naming it when it is not numbers."""
    try:
        return np.asarray(value, dtype=np.float64)
    except (TypeError, ValueError):
        raise BadArgument(name, "numbers (a float or an array of them)", value) from None


def _plain(x: np.ndarray) -> Any:
    """A 0-d result as a Python float; arrays as they are."""
    return float(x) if x.ndim == 0 else x


def _unit_interval(name: str, value: Any) -> float:
    value = _number(name, value)
    if not 0.0 <= value < 1.0:
        raise BadArgument(name, "a number in [0, 1)", value)
    return value
