"""A subject's trials as the fit sees them: learner rows, the onset row of each trial and
whether the animal responded, computed once for every likelihood evaluation.

The rows are those the learner learns live (the same representation, rewards in units
of ``reward_unit_ul``). Trials without a cue or without an observed response (omitted,
or a response kind the link does not read) add nothing to the likelihood but still update
the learner.

Two links (``link_for`` picks one from the trials' response kinds):

* ``respond`` (go/no-go): a count response (licks, lever presses) > 0 is a response.
* ``choice`` (two sides): the learner holds action values, one column per cue and side
  (``cue:left``, ``cue:right``, as live with ``values = "cue_action"``), and each trial
  teaches the column of the side the animal chose; ``responded`` is 1 for right, 0 for
  left. An omitted trial teaches nothing (no action was taken).
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..core.features import Representation
from ..core.learners._shared import _Shown
from ..errors import BadArgument

COUNT_RESPONSES = ("licks", "lever")  # response kinds whose value is a count: respond = count > 0
CHOICE_RESPONSES = ("choice",)  # response kinds whose value is a side: "left" or "right"
SIDES = ("left", "right")
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
    link: str = "respond"
    # choice link: per trial, the (n,) onset rows of (cue:left, cue:right), None without a cue
    side_rows: tuple[tuple[np.ndarray, np.ndarray] | None, ...] | None = None
    # choice link: (N, 2) the onset column of (cue:left, cue:right) per trial, −1 without a cue
    side_columns: np.ndarray | None = None

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


def chose(event) -> str | None:
    """"left"/"right": the side the animal chose; None: no choice observed on this trial."""
    resp = event.response
    if not event.cues or resp.result == "omitted" or resp.kind not in CHOICE_RESPONSES:
        return None
    return resp.value if resp.value in SIDES else None


def link_for(events: Sequence) -> str:
    """The link the trials' response kinds call for: ``choice`` when more trials carry an
    observed side than an observed count, else ``respond``."""
    n_choice = sum(1 for e in events if chose(e) is not None)
    n_count = sum(1 for e in events if responded(e) is not None)
    return "choice" if n_choice > n_count else "respond"


def action_representation(representation: Representation) -> Representation:
    """The representation over ``cue:left`` and ``cue:right`` columns of the same kind; a
    representation whose columns are already sides is returned as it is."""
    cues = representation.cues.cues
    if all(c.rsplit(":", 1)[-1] in SIDES and ":" in c for c in cues):
        return representation
    from ..core.features import CueList, make_representation

    sided = CueList([f"{c}:{s}" for c in cues for s in SIDES])
    return make_representation(representation.kind, sided, dt=representation.dt,
                               n_bins=representation.n_bins, decay=representation.decay)


def prepare(events: Iterable, representation: Representation, *, reward_unit_ul: float,
            link: str | None = None) -> FitData:
    """Rows and responses of ``events`` (TrialEvents in the order the animal lived them).

    link: ``respond`` or ``choice``; None picks it from the trials (``link_for``). With
    ``choice`` the representation's cues become ``cue:left``/``cue:right`` columns.
    """
    if not isinstance(representation, Representation):
        raise BadArgument("representation", "a Representation (features.make_representation)",
                          representation)
    unit = _finite_positive("reward_unit_ul", reward_unit_ul)
    events = list(events)
    if link is None:
        link = link_for(events)
    elif link not in ("respond", "choice"):
        raise BadArgument("link", "'respond' (go/no-go) or 'choice' (two sides)", link)
    if link == "choice":
        representation = action_representation(representation)
    rows, onset, resp, sessions, trials, index = [], [], [], [], [], []
    side_rows: list | None = [] if link == "choice" else None
    first_row = 0
    for event in events:
        side = chose(event) if link == "choice" else None
        if link == "choice":
            # the chosen side's column learns; an omission teaches nothing
            cues = [(f"{c.cue}:{side}", c.onset, c.offset) for c in event.cues] if side else []
            if event.cues:
                first = event.cues[0].cue
                side_rows.append(tuple(_readonly(representation.onset_row(f"{first}:{s}"))
                                       for s in SIDES))
            else:
                side_rows.append(None)
        else:
            cues = [(c.cue, c.onset, c.offset) for c in event.cues]
        tr = representation.rows(cues, [(t, a / unit) for t, a in event.outcome_events()],
                                 event.duration)
        rows.append((tr.X, tr.r))
        if cues:
            step = tr.onset_steps[cues[0][0]]
            x = np.array(tr.X[step])
            x.setflags(write=False)
            onset.append(x)
            index.append(first_row + step)
        else:
            onset.append(None)
            index.append(-1)
        first_row += tr.steps
        seen = responded(event) if link == "respond" else (None if side is None else side == "right")
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
    columns = None
    if side_rows is not None:
        columns = np.array([[int(np.argmax(x)) for x in pair] if pair is not None else [-1, -1]
                            for pair in side_rows], dtype=np.intp).reshape(len(side_rows), 2)
        columns.setflags(write=False)
    return FitData(representation, unit, tuple(rows), tuple(onset), y, tuple(sessions),
                   tuple(trials), X_all, r_all, index, link,
                   None if side_rows is None else tuple(side_rows), columns)


def _readonly(x: np.ndarray) -> np.ndarray:
    x = np.array(x)
    x.setflags(write=False)
    return x


def as_fit_data(events, representation, reward_unit_ul, link: str | None = None) -> FitData:
    """``events`` itself when it is a FitData, else ``prepare`` of them (both arguments
    then required)."""
    if isinstance(events, FitData):
        if link is not None and link != events.link:
            raise BadArgument("link", f"the link the FitData was prepared for ({events.link!r}); "
                              "prepare the trials again with link=...", link)
        return events
    if representation is None:
        raise BadArgument("representation", "a Representation when events are given", None)
    if reward_unit_ul is None:
        raise BadArgument("reward_unit_ul", "the µL that count as reward 1.0 (e.g. the rule "
                          "file's reward_unit_ul)", None)
    return prepare(events, representation, reward_unit_ul=reward_unit_ul, link=link)


def check_enough_trials(data: FitData, n_free: int) -> None:
    """Refuse a fit of ``n_free`` parameters to fewer than max(20, 2 · n_free) observed trials."""
    need = max(MIN_SCORED_TRIALS, 2 * n_free)
    if data.n_observed < need:
        kinds = (f"kinds {', '.join(COUNT_RESPONSES)}" if data.link == "respond"
                 else f"kind {', '.join(CHOICE_RESPONSES)} with a side left or right")
        raise BadArgument(
            "events",
            f"at least {need} trials with a cue and an observed response ({kinds}, not "
            f"omitted); record more trials or fit more sessions",
            _Shown(f"{data.n_observed} of {data.n_events} trials"))


def _finite_positive(name: str, value: Any) -> float:
    """``value`` as a float if it is a finite number > 0 (not a bool)."""
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
        raise BadArgument(name, "a finite number > 0", value)
    value = float(value)
    if not math.isfinite(value) or value <= 0:
        raise BadArgument(name, "a finite number > 0", value)
    return value
