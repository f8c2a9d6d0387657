"""SubjectView: what the rules may read from the subject's models.

The subject layer implements it over the learner and the learning curves; the rules
never see either. ``StaticView`` is a fixed view for tests and for ``rigloop check``.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Protocol, runtime_checkable

from ..core import behaviour as B


@runtime_checkable
class SubjectView(Protocol):
    def value_mean(self, cue: str) -> float:
        """Posterior mean value of the cue at its onset."""

    def value_sd(self, cue: str) -> float:
        """Posterior sd of that value (0 for point learners)."""

    def prob_value_above(self, cue: str, threshold: float) -> float:
        """P(value > threshold) under the Gaussian posterior (a 0/1 step for point learners)."""

    def p_correct(self, cond: str) -> float:
        """State-space estimate of P(correct); ``cond`` is a cue id or ``"all"``."""

    def p_interval(self, cond: str, level: float) -> tuple[float, float]:
        """Two-sided credible interval of P(correct) at ``level``."""

    def prob_above_chance(self, cond: str) -> float:
        """P(response probability > chance)."""

    def p_behaviour(self, cue: str) -> float:
        """Estimated P(respond | cue), or P(right | cue) for a two-choice cue (rigloop.behaviour)."""

    def behaviour_interval(self, cue: str, level: float) -> tuple[float, float]:
        """Two-sided credible interval of ``p_behaviour``."""

    def p_discriminates(self, a: str, b: str, margin: float) -> float:
        """P(p_behaviour(a) - p_behaviour(b) > margin) under the estimates. (A view may add
        ``p_discriminates_compared(a, b, margin, op, c)``, that compared with a constant,
        which a criterion's test then asks instead.)"""

    def dprime_between(self, a: str, b: str, level: float) -> tuple[float, float, float]:
        """Behavioural d' of a against b from the estimates, and its credible interval.
        (A view may add ``dprime_part(a, b, level, which)``, one entry of these, "d", "lower"
        or "upper": the engine then asks for only the entry a rule reads; and
        ``dprime_part_compared(a, b, level, which, op, c)``, that entry compared with a
        constant, which a criterion's test then asks instead.)"""

    def p_model_based(self, x: float) -> float:
        """P(w > x) of the two_step learner's posterior over its model-based weight w."""

    def side_bias(self) -> float:
        """Mean estimated P(right | cue) over the two-choice cues, minus 1/2."""


class StaticView:
    """A view with fixed numbers: ``mean``/``sd`` per cue, ``correct`` per condition.

    The interval is ``correct ± halfwidth`` clipped to [0, 1] (any level);
    ``above_chance`` defaults to 1 when correct > 0.5, else 0. ``behaviour`` gives a
    cue's behaviour estimate as (mean, variance) of its logit state (default (0, 1):
    an animal about which nothing is known); ``choice_cues`` are the two-choice cues.
    """

    def __init__(
        self,
        mean: Mapping[str, float] | None = None,
        sd: Mapping[str, float] | None = None,
        correct: Mapping[str, float] | None = None,
        halfwidth: float = 0.1,
        above_chance: Mapping[str, float] | None = None,
        behaviour: Mapping[str, tuple[float, float]] | None = None,
        choice_cues: frozenset[str] = frozenset(),
    ):
        self.mean = dict(mean or {})
        self.sd = dict(sd or {})
        self.correct = dict(correct or {})
        self.halfwidth = float(halfwidth)
        self.above_chance = dict(above_chance or {})
        self.behaviour = dict(behaviour or {})
        self.choice_cues = frozenset(choice_cues)

    def _state(self, cue: str) -> tuple[float, float]:
        return self.behaviour.get(cue, (0.0, 1.0))

    def p_behaviour(self, cue: str) -> float:
        return B.logistic(self._state(cue)[0])

    def behaviour_interval(self, cue: str, level: float) -> tuple[float, float]:
        return B.band(*self._state(cue), level)

    def p_discriminates(self, a: str, b: str, margin: float) -> float:
        return B.p_difference_above(*self._state(a), *self._state(b), margin)

    def p_discriminates_compared(self, a: str, b: str, margin: float, op: str, c: float) -> bool:
        return B.p_difference_compared(*self._state(a), *self._state(b), margin, op, c)

    def dprime_between(self, a: str, b: str, level: float) -> tuple[float, float, float]:
        return B.dprime_estimate(*self._state(a), *self._state(b), level)

    def dprime_part(self, a: str, b: str, level: float, which: str) -> float:
        return B.dprime_part(*self._state(a), *self._state(b), level, which)

    def dprime_part_compared(self, a: str, b: str, level: float, which: str, op: str, c: float) -> bool:
        return B.dprime_part_compared(*self._state(a), *self._state(b), level, which, op, c)

    def p_model_based(self, x: float) -> float:
        return 1.0 - float(x)  # the uniform prior over w: nothing known yet

    def side_bias(self) -> float:
        cues = sorted(self.choice_cues)
        return sum(self.p_behaviour(c) for c in cues) / len(cues) - 0.5 if cues else 0.0

    def value_mean(self, cue: str) -> float:
        return float(self.mean.get(cue, 0.0))

    def value_sd(self, cue: str) -> float:
        return float(self.sd.get(cue, 0.0))

    def prob_value_above(self, cue: str, threshold: float) -> float:
        m, s = self.value_mean(cue), self.value_sd(cue)
        if s <= 0:
            return 1.0 if m > threshold else 0.0
        # P(V > t) for V ~ N(m, s^2)
        return 0.5 * math.erfc((threshold - m) / (s * math.sqrt(2.0)))

    def p_correct(self, cond: str) -> float:
        return float(self.correct.get(cond, 0.5))

    def p_interval(self, cond: str, level: float) -> tuple[float, float]:
        p = self.p_correct(cond)
        return max(0.0, p - self.halfwidth), min(1.0, p + self.halfwidth)

    def prob_above_chance(self, cond: str) -> float:
        if cond in self.above_chance:
            return float(self.above_chance[cond])
        return 1.0 if self.p_correct(cond) > 0.5 else 0.0
