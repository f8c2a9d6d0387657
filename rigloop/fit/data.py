"""A subject's trials as the fit sees them: learner rows, the onset row of each trial and
whether the animal responded, computed once for every likelihood evaluation.

The rows are those the learner learns live (the same representation, rewards in units
of ``reward_unit_ul``). Trials without a cue or without an observed response (omitted,
or a response kind that is not a count) add nothing to the likelihood but still update
the learner.
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..core.features import Representation
from ..core.learners._shared import _Shown
from ..errors import BadArgument

COUNT_RESPONSES = ("licks", "lever")  # response kinds whose value is a count: respond = count > 0
MIN_SCORED_TRIALS = 20


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


def as_fit_data(events, representation, reward_unit_ul) -> FitData:
    """``events`` itself when it is a FitData, else ``prepare`` of them (both arguments
    then required)."""
    if isinstance(events, FitData):
        return events
    if representation is None:
        raise BadArgument("representation", "a Representation when events are given", None)
    if reward_unit_ul is None:
        raise BadArgument("reward_unit_ul", "the µL that count as reward 1.0 (e.g. the rule "
                          "file's reward_unit_ul)", None)
    return prepare(events, representation, reward_unit_ul=reward_unit_ul)


def check_enough_trials(data: FitData, n_free: int) -> None:
    """Refuse a fit of ``n_free`` parameters to fewer than max(20, 2 · n_free) observed trials."""
    need = max(MIN_SCORED_TRIALS, 2 * n_free)
    if data.n_observed < need:
        raise BadArgument(
            "events",
            f"at least {need} trials with a cue and an observed response (kinds "
            f"{', '.join(COUNT_RESPONSES)}, not omitted); record more trials or fit more sessions",
            _Shown(f"{data.n_observed} of {data.n_events} trials"))


def _finite_positive(name: str, value: Any) -> float:
    """``value`` as a float if it is a finite number > 0 (not a bool)."""
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
        raise BadArgument(name, "a finite number > 0", value)
    value = float(value)
    if not math.isfinite(value) or value <= 0:
        raise BadArgument(name, "a finite number > 0", value)
    return value
