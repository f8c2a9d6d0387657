"""Posterior-predictive checks: does the fitted model reproduce the animal?

The fitted model (``fitted_animals.FittedModel``) is run R times on the animal's own
trial sequence: the same cues in the same order at the same times, the same decisions
(reward probability, armed reward, volume). Each run draws its own responses from the
model, and the outcomes that depend on a response follow the task: a go/no-go run is
rewarded when it responds on a trial whose decision armed a reward; a two-choice run
when it chooses the trial's correct side (the side the animal's scored result implies)
and a reward was armed. Each run learns from its own outcomes, so errors compound as they
would in an animal. Trials the animal omitted are omitted in every run (the model has no
engagement).

Summaries, the same for the animal and for every run:

* the learning curve per cue: P(respond) (go/no-go) or P(right) (choice) as a centred
  moving average over that cue's scored trials (window ``window``, common practice);
  the model's band is the pointwise 2.5–97.5% range over the runs, and the check
  reports the fraction of the animal's points outside it (about 5% for a model that
  reproduces the animal; neighbouring points share trials, so the fraction varies more
  than a binomial's);
* for choice, P(stay | rewarded) and P(stay | not rewarded): how often the next choice
  repeats the side of the previous one, after a reward or after none (within a session).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..core.trial import Decision
from ..errors import BadArgument
from .fitted_animals import SIDES, FittedModel, ModelRuns

COUNT_KINDS = ("licks", "lever")


@dataclass(frozen=True, slots=True, eq=False)
class PredictiveCheck:
    """The animal against R runs of its fitted model on its own trials.

    cue: (N,) the first cue of each trial ("" without one); session: (N,) its session.
    animal: (N,) 1/0 respond or right, nan not scored; model: (R, N) the same per run.
    animal_rewarded, model_rewarded: (N,), (R, N) reward delivered (1/0).
    curves: cue -> {"trial": indices, "animal", "lower", "upper", "median", "outside"}.
    stay: for choice, {"after_reward"/"after_no_reward": {"animal", "lower", "median", "upper"}}.
    """

    link: str
    runs: int
    window: int
    cue: np.ndarray
    session: np.ndarray
    animal: np.ndarray
    model: np.ndarray
    animal_rewarded: np.ndarray
    model_rewarded: np.ndarray
    curves: dict[str, dict[str, Any]]
    stay: dict[str, dict[str, float]] | None

    @property
    def outside_fraction(self) -> float:
        """The fraction of the animal's curve points (all cues) outside the model's band."""
        n = sum(len(c["animal"]) for c in self.curves.values())
        out = sum(int(np.sum(c["outside"])) for c in self.curves.values())
        return out / n if n else math.nan


def ran_under(store, subject: str, infos: Sequence[Any]) -> list[tuple[Any, Decision]]:
    """Each stored trial with the decision it ran under (the one after the trial before
    it in its session; the session's first decision for its first trial)."""
    out = []
    for info in infos:
        first = (info.meta or {}).get("first_decision")
        prev = Decision.from_dict(first) if first else None
        for event, decision in zip(store.trials(subject, info.session),
                                   store.decisions(subject, info.session), strict=True):
            out.append((event, prev if prev is not None else decision))
            prev = decision
    return out


def _animal_response(event, link: str) -> float:
    resp = event.response
    if not event.cues or resp.result == "omitted":
        return math.nan
    if link == "choice":
        return 1.0 if resp.value == "right" else 0.0 if resp.value == "left" else math.nan
    if resp.kind in COUNT_KINDS and isinstance(resp.value, float):
        return 1.0 if resp.value > 0 else 0.0
    return math.nan


def run_check(pairs: Sequence[tuple[Any, Decision]], model: FittedModel, *, runs: int = 200,
              window: int = 21, seed: int = 0, progress=None) -> PredictiveCheck:
    """Run ``model`` ``runs`` times on ``pairs`` (each trial with the decision it ran
    under) and summarise it against the animal (see the module docstring)."""
    runs_ = int(runs)
    if runs_ < 20:
        raise BadArgument("runs", "at least 20 runs (the band is their 2.5–97.5% range)", runs)
    if int(window) < 1:
        raise BadArgument("window", "a whole number of trials >= 1", window)
    sim = ModelRuns(model, runs_, seed)
    N = len(pairs)
    animal, a_rew = np.full(N, math.nan), np.zeros(N)
    Y, m_rew = np.full((runs_, N), math.nan), np.zeros((runs_, N))
    cues = np.array([e.cues[0].cue if e.cues else "" for e, _ in pairs], dtype=object)
    sessions = np.array([e.session for e, _ in pairs], dtype=object)
    for k, (event, decision) in enumerate(pairs):
        shown = [(c.cue, c.onset, c.offset) for c in event.cues]
        y_a = animal[k] = _animal_response(event, model.link)
        a_rew[k] = 1.0 if event.outcome.rewarded else 0.0
        amount = event.outcome.reward_ul if event.outcome.rewarded else decision.reward_ul
        armed = decision.reward_armed and amount > 0
        if not event.cues or y_a != y_a:
            # no cue or an omission: every run does as the animal did (no response)
            y = np.full(runs_, math.nan)
            reward = np.full(runs_, event.outcome.reward_ul if event.outcome.rewarded else 0.0)
        else:
            y = sim.draw(event.cues[0].cue)
            if model.link == "choice":
                correct = event.response.value if event.response.result == "correct" else \
                    SIDES[1 - SIDES.index(event.response.value)]
                win = y == float(SIDES.index(correct))
            else:
                win = (y == 1.0) & (decision.reward_prob > 0)
            reward = np.where(win & armed, amount, 0.0)
        Y[:, k] = y
        m_rew[:, k] = reward > 0
        t_reward = event.outcome.reward_time if event.outcome.rewarded else (
            event.response.latency if event.response.latency is not None else
            (event.cues[0].offset if event.cues else event.duration))
        t_reward = min(float(t_reward), float(event.duration))
        sim.learn(shown, event.duration, y, reward, t_reward)
        if progress is not None and (k + 1) % 50 == 0:
            progress(k + 1, N)
    curves = _curves(cues, animal, Y, int(window))
    stay = _stay(sessions, animal, a_rew, Y, m_rew) if model.link == "choice" else None
    return PredictiveCheck(model.link, runs_, int(window), cues, sessions, animal, Y, a_rew, m_rew, curves, stay)


def moving_average(y: np.ndarray, window: int) -> np.ndarray:
    """Centred moving average along the last axis (shorter windows at the ends)."""
    y = np.asarray(y, dtype=np.float64)
    n = y.shape[-1]
    half = window // 2
    c = np.concatenate([np.zeros(y.shape[:-1] + (1,)), np.cumsum(y, axis=-1)], axis=-1)
    lo = np.clip(np.arange(n) - half, 0, n)
    hi = np.clip(np.arange(n) + half + 1, 0, n)
    return (c[..., hi] - c[..., lo]) / (hi - lo)


def _curves(cues: np.ndarray, animal: np.ndarray, Y: np.ndarray, window: int) -> dict[str, dict[str, Any]]:
    out = {}
    for cue in sorted({c for c in cues if c}):
        idx = np.flatnonzero((cues == cue) & ~np.isnan(animal))
        if len(idx) < 2:
            continue
        a = moving_average(animal[idx], window)
        m = moving_average(np.nan_to_num(Y[:, idx]), window)
        lower, median, upper = np.percentile(m, [2.5, 50, 97.5], axis=0)
        out[cue] = {"trial": idx, "animal": a, "lower": lower, "median": median, "upper": upper,
                    "outside": (a < lower - 1e-12) | (a > upper + 1e-12)}
    return out


def stay_probabilities(sessions: np.ndarray, y: np.ndarray, rewarded: np.ndarray) -> tuple[float, float]:
    """P(stay | previous choice rewarded), P(stay | not rewarded) over consecutive choices
    of a session (omissions skipped); nan where there is no such pair."""
    stay = {True: [0, 0], False: [0, 0]}
    prev = None
    for k in range(len(y)):
        if y[k] != y[k]:
            continue
        if prev is not None and sessions[prev] == sessions[k]:
            cell = stay[bool(rewarded[prev])]
            cell[0] += y[k] == y[prev]
            cell[1] += 1
        prev = k
    return tuple(c[0] / c[1] if c[1] else math.nan for c in (stay[True], stay[False]))


def _stay(sessions, animal, a_rew, Y, m_rew) -> dict[str, dict[str, float]]:
    a = stay_probabilities(sessions, animal, a_rew)
    m = np.array([stay_probabilities(sessions, Y[r], m_rew[r]) for r in range(len(Y))])
    out = {}
    for j, name in enumerate(("after_reward", "after_no_reward")):
        col = m[:, j][~np.isnan(m[:, j])]
        lo, med, hi = (np.percentile(col, [2.5, 50, 97.5]) if len(col) else (math.nan,) * 3)
        out[name] = {"animal": float(a[j]), "lower": float(lo), "median": float(med), "upper": float(hi)}
    return out
