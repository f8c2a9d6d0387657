"""ModelView: what a rule expression may read of one subject's models (the rules'
``SubjectView`` protocol) — the learner's values, the learning curves, and the animal's
own behaviour estimates — computed lazily and cached per decision."""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

from .behaviour import (
    DEFAULT_PRIOR_VAR,
    DEFAULT_SIGMA2,
    band,
    dprime_estimate,
    dprime_part,
    dprime_part_compared,
    logistic,
    p_difference_above,
    p_difference_compared,
)
from .curve import LearningCurve
from .learner_setup import action_cue


class ModelView:
    """What a rule expression may read from the model: the ``SubjectView`` protocol.

    Values are computed lazily and cached, so a rule that asks for one cue's value
    costs one small quadratic form.
    """

    __slots__ = ("_learner", "_rep", "_curves", "_chance", "_sigma2", "_values", "_held", "_read", "_finite",
                 "_behaviour", "_bsigma2", "_bprior", "_actions", "_choice")

    def __init__(self, learner, rep, curves: Mapping[str, Mapping[str, Any]], chance: float, sigma2: float,
                 finite: bool | None = None, held: dict[str, LearningCurve] | None = None,
                 behaviour: Mapping[str, tuple] | None = None, bsigma2: float = DEFAULT_SIGMA2,
                 bprior: float = DEFAULT_PRIOR_VAR, actions: Mapping[str, tuple[str, ...]] | None = None,
                 choice_cues: frozenset[str] = frozenset()):
        """``finite``: whether every entry of the learner's state is finite, if known;
        ``held``: curves equal to the ones their states give (a dict the view takes over);
        ``behaviour``: the per-cue behaviour estimates ``(x, var, n)`` with their random-walk
        and prior variances; ``actions``: cue -> its actions when the learner holds action
        values (None: cue values); ``choice_cues``: the two-choice cues."""
        self._learner = learner
        self._finite = finite
        self._rep = rep
        self._curves = curves
        self._chance = chance
        self._sigma2 = sigma2
        self._values: dict[str, tuple[float, float]] = {}  # cue -> (mean, sd)
        self._held: dict[str, LearningCurve] = {} if held is None else held  # condition -> its curve
        self._read = None  # the learner's onset reader, made on first use
        self._behaviour = {} if behaviour is None else behaviour
        self._bsigma2, self._bprior = bsigma2, bprior
        self._actions = actions
        self._choice = choice_cues

    def _value(self, cue: str) -> tuple[float, float]:
        hit = self._values.get(cue)
        if hit is None and self._actions is not None:
            hit = self._values[cue] = self._policy_value(cue)
        if hit is None:
            read = self._read
            if read is None:
                read = self._read = self._learner._onset_reader(self._finite)
            mean, var = read(*self._rep._onset_entry(cue))
            hit = (float(mean), math.sqrt(max(float(var), 0.0)))
            self._values[cue] = hit
        return hit

    def value_mean(self, cue: str) -> float:
        return self._value(cue)[0]

    def value_sd(self, cue: str) -> float:
        return self._value(cue)[1]

    def prob_value_above(self, cue: str, threshold: float) -> float:
        mean, sd = self._value(cue)
        if sd <= 0.0:
            return 1.0 if mean > threshold else 0.0
        # P(V > t) for V ~ N(mean, sd^2)
        return 0.5 * math.erfc((threshold - mean) / (sd * math.sqrt(2.0)))

    def _curve(self, cond: str) -> LearningCurve:
        hit = self._held.get(cond)
        if hit is None:
            data = self._curves.get(cond)
            hit = LearningCurve(self._chance, self._sigma2) if data is None else LearningCurve.from_state(data)
            self._held[cond] = hit
        return hit

    def p_correct(self, cond: str) -> float:
        return float(self._curve(cond).p())

    def p_interval(self, cond: str, level: float) -> tuple[float, float]:
        lo, hi = self._curve(cond).interval(level)
        return float(lo), float(hi)

    def prob_above_chance(self, cond: str) -> float:
        return float(self._curve(cond).prob_above_chance())

    def trials_in_condition(self, cond: str) -> int:
        return int(self._curve(cond).n)

    # -- action values ----------------------------------------------------------

    def action_probs(self, cue: str) -> tuple[float, ...]:
        """P(each of the cue's actions) by the animal's behaviour estimate: (respond,
        withhold) = (p, 1 - p), or (left, right) = (1 - p_right, p_right)."""
        p = self.p_behaviour(cue)
        return (1.0 - p, p) if cue in self._choice else (p, 1.0 - p)

    def q_value(self, cue: str, action: str) -> tuple[float, float]:
        """(mean, sd) of the value of doing ``action`` on ``cue`` (action-value learners)."""
        return self._value(action_cue(cue, action)) if self._actions is not None else (math.nan, math.nan)

    def _policy_value(self, cue: str) -> tuple[float, float] | None:
        """The value of a cue under the animal's own behaviour: the row sum_a p(a) x(cue:a),
        its mean and sd by the learner's prediction. None for a feature column of its own."""
        if cue not in self._actions:
            return None  # a "cue:action" column itself: read below
        rows = [self._rep._onset_entry(action_cue(cue, a))[0] for a in self._actions[cue]]
        x = sum(p * row for p, row in zip(self.action_probs(cue), rows))
        mean, var = self._learner.predict(x)
        return float(mean), math.sqrt(max(float(var), 0.0))

    # -- the animal's behaviour ---------------------------------------------------

    def behaviour_state(self, cue: str) -> tuple[float, float]:
        """(mean, variance) of the cue's logit behaviour state on its next trial."""
        hit = self._behaviour.get(cue)
        if hit is None:
            return 0.0, self._bprior + self._bsigma2
        return hit[0], hit[1] + self._bsigma2

    def p_behaviour(self, cue: str) -> float:
        """Estimated P(respond | cue), or P(right | cue) for a two-choice cue."""
        return logistic(self.behaviour_state(cue)[0])

    def behaviour_interval(self, cue: str, level: float) -> tuple[float, float]:
        return band(*self.behaviour_state(cue), level)

    def p_discriminates(self, a: str, b: str, margin: float) -> float:
        return p_difference_above(*self.behaviour_state(a), *self.behaviour_state(b), margin)

    def p_discriminates_compared(self, a: str, b: str, margin: float, op: str, c: float) -> bool:
        """``p_discriminates(a, b, margin) <op> c``, mostly without the quadrature
        (:func:`core.behaviour.p_difference_compared`)."""
        return p_difference_compared(*self.behaviour_state(a), *self.behaviour_state(b), margin, op, c)

    def dprime_between(self, a: str, b: str, level: float) -> tuple[float, float, float]:
        return dprime_estimate(*self.behaviour_state(a), *self.behaviour_state(b), level)

    def dprime_part(self, a: str, b: str, level: float, which: str) -> float:
        """One entry of :meth:`dprime_between` ("d", "lower" or "upper"), computing only it."""
        return dprime_part(*self.behaviour_state(a), *self.behaviour_state(b), level, which)

    def dprime_part_compared(self, a: str, b: str, level: float, which: str, op: str, c: float) -> bool:
        """``dprime_part(a, b, level, which) <op> c``, mostly without the quantile search
        (:func:`core.behaviour.dprime_part_compared`)."""
        return dprime_part_compared(*self.behaviour_state(a), *self.behaviour_state(b), level, which, op, c)

    def p_model_based(self, x: float) -> float:
        """P(w > x): the posterior, from the animal's own first-stage choices, that it weighs
        the task's model by more than x (two_step learner; NaN for any other)."""
        read = getattr(self._learner, "p_model_based", None)
        return float("nan") if read is None else float(read(x))

    def side_bias(self) -> float:
        """Mean of P(right | cue) over the two-choice cues, minus 1/2 (0 without such cues)."""
        if not self._choice:
            return 0.0
        cues = sorted(self._choice)
        return sum(self.p_behaviour(c) for c in cues) / len(cues) - 0.5
