"""A multi-step trial -> the rows the two-step learner reads.

The representation of a rule file whose learner is ``two_step``: its first declared cue
is the first-stage state, the next two are the second-stage states, and each state has
the actions ``left`` and ``right``. Row 0 is one-hot on the first step's (state, action)
column, row 1 on the second step's; ``r`` holds each step's reward in reward units. A
trial whose steps do not fit (missing, unknown state, no action) gives one all-zero row,
from which the learner learns nothing.

It offers what ``step`` and the rules' view use of a representation: ``_event_rows``,
``_onset_entry`` (a state's value: the mean of its two actions' values), ``n_features``,
``timed`` (False) and ``feature_names``.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from .features import TrialRows

ACTIONS = ("left", "right")


def _locked(a: np.ndarray) -> np.ndarray:
    a.setflags(write=False)
    return a


class StepRows:
    """Rows of a two-step trial over the states ``(first, second_a, second_b)``."""

    kind = "steps"
    timed = False
    dt = 1.0
    n_bins = None
    decay = None

    def __init__(self, states: tuple[str, str, str]):
        from ..errors import BadArgument

        if len(states) != 3 or len(set(states)) != 3:
            raise BadArgument("cues", "three different cues for a two_step learner: the first-stage state, then "
                                      "the two second-stage states", states)
        self.states = tuple(states)
        self.cues = self.states
        self._column = {(s, a): 2 * i + j for i, s in enumerate(self.states) for j, a in enumerate(ACTIONS)}
        self._onsets: dict[str, tuple[np.ndarray, int]] = {}
        self._empty = TrialRows(_locked(np.zeros((1, self.n_features))), _locked(np.zeros(1)), {})

    @property
    def n_features(self) -> int:
        return 2 * len(self.states)

    @property
    def feature_names(self) -> tuple[str, ...]:
        return tuple(f"{s}:{a}" for s in self.states for a in ACTIONS)

    def _onset_entry(self, cue: str) -> tuple[np.ndarray, int]:
        hit = self._onsets.get(cue)
        if hit is None:
            x = np.zeros(self.n_features)
            i = 2 * self.states.index(cue)
            x[i:i + 2] = 0.5
            hit = self._onsets[cue] = (_locked(x), i)
        return hit

    def onset_row(self, cue: str) -> np.ndarray:
        return self._onset_entry(cue)[0].copy()

    def step_columns(self, event: Any) -> tuple[int, int] | None:
        """The (first, second) step columns of a trial, or None when its steps do not fit."""
        steps = event.steps
        if len(steps) < 2:
            return None
        first = self._column.get((steps[0].state, steps[0].action))
        second = self._column.get((steps[1].state, steps[1].action))
        if first is None or second is None or first >= 2 or second < 2:
            return None
        return first, second

    def _event_rows(self, event: Any, reward_unit: float, cues=None, punishments=()) -> TrialRows:
        cols = self.step_columns(event)
        if cols is None:
            return self._empty
        X = np.zeros((2, self.n_features))
        X[0, cols[0]] = 1.0
        X[1, cols[1]] = 1.0
        r = np.zeros(2)
        r[0] = event.steps[0].reward_ul / reward_unit
        r[1] = sum(s.reward_ul for s in event.steps[1:]) / reward_unit
        for _, value in punishments:
            r[1] += value
        return TrialRows(_locked(X), _locked(r), {})
