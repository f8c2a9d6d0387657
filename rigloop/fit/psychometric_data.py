"""A stored subject's graded-difficulty trials, as a psychometric fit reads them.

A trial's level is the ``difficulty`` of the decision it ran under (the decision made
after the trial before it in its session; a session's first trial runs under the first
decision kept with the session). Two kinds of data:

* n-AFC (choice responses): y = 1 when the trial was scored correct; the guess rate is
  1/n, n the number of sides the task's cues name (2 for left/right).
* yes/no (lick or lever counts): y = 1 when the animal responded, on the trials whose
  decision offered reward (a signal to detect); the guess rate is fitted.

Omitted trials and trials without a cue or a level are left out. The staircase that set
the levels (if any) is read from the session's rule file, for the comparison with its
convergence point.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..core.trial import Decision
from ..errors import BadArgument
from .psychometric import convergence_level, fit_psychometric, levitt_target

COUNT_KINDS = ("licks", "lever")


@dataclass(frozen=True, slots=True, eq=False)
class GradedTrials:
    """One subject's scored trials at their levels, in order.

    kind: "afc" or "yes_no"; guess: 1/n for n-AFC, None (free) for yes/no.
    staircase: the rule file's staircase spec the levels came from (None if none).
    track: the level of every staircase trial, in order (for its reversals).
    """

    subject: str
    kind: str
    guess: float | None
    x: np.ndarray
    y: np.ndarray
    staircase: Any
    track: np.ndarray
    n_events: int


def ran_under(store, subject: str, infos: Sequence[Any]) -> list[tuple[Any, Decision]]:
    """Each stored trial with the decision it ran under, in order."""
    out = []
    for info in infos:
        first = (info.meta or {}).get("first_decision")
        prev = Decision.from_dict(first) if first else None
        for event, decision in zip(store.trials(subject, info.session),
                                   store.decisions(subject, info.session), strict=True):
            out.append((event, prev if prev is not None else decision))
            prev = decision
    return out


def graded_trials(store, subject: str, session: str | None = None) -> GradedTrials:
    """The subject's trials that carry a level, scored for a psychometric fit."""
    from ..replay import RulesCache, stored_sessions

    infos = stored_sessions(store, subject, session)
    if session is not None:
        infos = [i for i in infos if i.session == session]
    cache = RulesCache()
    rules = {i.session: cache.get(i.rules_text, i.rules_sha256, f"session {i.session} rule file {i.rules_name}")
             for i in infos}
    pairs = ran_under(store, subject, infos)
    kinds = {e.response.kind for e, d in pairs if e.cues and d.difficulty is not None
             and e.response.result != "omitted"}
    if not kinds:
        raise BadArgument("subject", "a subject with trials at graded levels (a decision difficulty, "
                          "e.g. from a staircase block)", subject)
    if len(kinds) > 1:
        raise BadArgument("subject", "trials of one response kind (fit the sessions separately with "
                          "--session)", sorted(kinds))
    kind = kinds.pop()
    x, y, track = [], [], []
    staircase = None
    for event, decision in pairs:
        if decision.difficulty is None:
            continue
        spec = _staircase_of(rules.get(event.session), decision)
        if spec is not None:
            staircase = staircase or spec
            track.append(decision.difficulty)
        if not event.cues or event.response.result == "omitted":
            continue
        if kind == "choice":
            if event.response.result not in ("correct", "incorrect"):
                continue
            x.append(decision.difficulty)
            y.append(1.0 if event.response.result == "correct" else 0.0)
        elif kind in COUNT_KINDS:
            if decision.reward_prob <= 0 or not isinstance(event.response.value, float):
                continue
            x.append(decision.difficulty)
            y.append(1.0 if event.response.value > 0 else 0.0)
        else:
            raise BadArgument("subject", "choice, lick or lever responses", kind)
    guess = None
    if kind == "choice":
        r = next(iter(rules.values()))
        sides = {c.role for c in r.spec.cues.values() if c.role in ("left", "right")}
        guess = 1.0 / max(len(sides), 2)
    return GradedTrials(subject, "afc" if kind == "choice" else "yes_no", guess,
                        np.array(x, dtype=np.float64), np.array(y, dtype=np.float64), staircase,
                        np.array(track, dtype=np.float64), len(pairs))


def _staircase_of(rules, decision: Decision):
    """The staircase spec of the block ``decision`` ran in, or None."""
    if rules is None:
        return None
    stage = rules.spec.stages.get(decision.stage)
    block = stage.blocks.get(decision.block) if stage is not None else None
    return getattr(block, "staircase", None)


def staircase_comparison(data, fit) -> dict | None:
    """The track's convergence point against its rule's Levitt target and the fitted curve."""
    spec = data.staircase
    if spec is None:
        return None
    target = levitt_target(spec.down, spec.up)
    converged, reversals = convergence_level(data.track)
    out = {"rule": f"{spec.up}-up-{spec.down}-down", "target": target, "level": converged,
           "reversals": reversals, "p_fit_at_level": None, "threshold_at_target": None,
           "threshold_at_target_ci95": None, "equal_steps": spec.step_harder == spec.step_easier}
    if converged is not None:
        out["p_fit_at_level"] = float(fit.predict([converged])[0])
    if target is not None and fit.params["guess"] < target < 1 - fit.bounds["lapse"][1]:
        at = fit_psychometric(fit.x.repeat(fit.n.astype(int)), _ys(fit), function=fit.function, level=target,
                              guess=fit.params["guess"] if "guess" in fit.fixed else None,
                              direction=fit.direction, band_runs=0, intervals=("threshold",))
        out["threshold_at_target"] = at.params["threshold"]
        out["threshold_at_target_ci95"] = list(at.ci95["threshold"])
    return out


def _ys(fit):
    """The 1/0 scores behind the fit's counts, level by level (the order ``repeat`` gives)."""
    return np.concatenate([np.r_[np.ones(int(k)), np.zeros(int(n - k))] for k, n in zip(fit.k, fit.n)])
