"""Cross-validated log-likelihood: each session's responses predicted by the parameters
fitted to the other sessions.

For a held-out session s the parameters are refitted to the responses of every other
session, the learner still running over all the trials in order (the animal lived
session s: its outcomes and, with the choice link, its choices shape what comes after);
then the log-likelihood of session s's responses is taken at those parameters. The sum
over sessions rewards a model for predicting responses it was not fitted to, so it
penalises flexibility without AIC's or BIC's asymptotics (leave-one-out by blocks;
Stone 1974, J R Stat Soc B 36:111, from memory). Needs at least two sessions.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from typing import Any

import numpy as np

from .data import FitData
from .likelihood import NegLogLik


def held_out_sessions(data: FitData) -> list[str]:
    """The sessions with at least one response in the likelihood, in order."""
    seen: dict[str, None] = {}
    for s, y in zip(data.sessions, data.responded, strict=True):
        if y == y:
            seen.setdefault(s, None)
    return list(seen)


def cross_validated(data: FitData, learner_name: str, free: Sequence[str],
                    pinned: Mapping[str, Any], refit: Callable[[NegLogLik], np.ndarray]
                    ) -> tuple[float, int] | None:
    """(Σ held-out log-likelihood, number of sessions), or None with fewer than two.

    refit(objective) returns the natural-scale free parameters minimising ``objective``
    (started at the full fit's estimate).
    """
    names = held_out_sessions(data)
    if len(names) < 2:
        return None
    sessions = np.array(data.sessions, dtype=object)
    total = 0.0
    for name in names:
        held = sessions == name
        train = np.where(held, np.nan, data.responded)
        test = np.where(held, data.responded, np.nan)
        theta = refit(NegLogLik(data, learner_name, free, pinned, responded=train))
        total += -NegLogLik(data, learner_name, free, pinned, responded=test)(theta)
    return total, len(names)
