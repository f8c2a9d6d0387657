"""Data sets simulated from a fitted model on the animal's own trial sequence: the
replicates of the calibration (``calibrate.py``).

What stays as recorded and what is redrawn:

* go/no-go link: the trials, their cues and outcomes stay; each replicate redraws the
  responses from the fitted probabilities (the learner's values depend on the outcomes
  alone, so the replicate is an exact draw of the fitted model given them; the same
  replicate as ``bootstrap.py``'s).
* choice link: the chosen side decides what the animal learns and earns, so each
  replicate re-runs the task with the fitted model as the animal (``ModelRuns``, all
  replicates at once): the same cues in the same order; a trial scored correct or
  incorrect keeps its correct side (the side the animal's result implies). A replicate
  that chooses as the animal did gets the animal's outcome; one that chooses the other
  side gets that side's reward with the rate the animal met there (the fraction of the
  animal's correct — or incorrect — choices that were rewarded), at the trial's reward
  volume. A trial without a correct side (unscored) pays only the side the animal chose.
  Omitted and cueless trials stay as the animal's. Each replicate's trials are then read
  into a FitData exactly as the animal's were (``data.prepare``).
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Iterator, Sequence

import numpy as np

from ..core.features import CueList, make_representation
from ..core.trial import Outcome
from ..errors import BadArgument
from ..offline.fitted_animals import SIDES, FittedModel, ModelRuns, split_params
from .data import FitData, chose, prepare
from .likelihood import NegLogLik, fitted_trials


def replicate_objectives(data: FitData, result, replicates: int, seed: int,
                         events: Sequence | None) -> Iterator[NegLogLik]:
    """The negative log-likelihood of each of ``replicates`` data sets simulated at
    ``result``'s parameters, over its free parameters with its pins."""
    rng = np.random.default_rng([int(seed), 0x0CA1])
    if data.link == "respond":
        p = fitted_trials(data, result.learner, result.params).p_respond
        observed = ~np.isnan(data.responded)
        for _ in range(replicates):
            y = np.full(data.n_events, np.nan)
            y[observed] = (rng.random(int(observed.sum())) < p[observed]).astype(np.float64)
            yield NegLogLik(data, result.learner, result.free, result.fixed, responded=y)
        return
    if events is None or len(events) != data.n_events:
        raise BadArgument("events", "the trials of the choice fit (its replicates re-run the task: "
                          "the chosen side decides what is learned and earned)", None)
    for replicate in choice_replicates(events, data, result, replicates, rng):
        yield NegLogLik(replicate, result.learner, result.free, result.fixed)


def choice_replicates(events: Sequence, data: FitData, result, replicates: int,
                      rng: np.random.Generator) -> list[FitData]:
    """``replicates`` two-choice data sets from the fitted model on ``events`` (see the
    module docstring), each prepared as the fit prepares the animal's trials."""
    lp, obs = split_params(result.learner, "choice", result.params)
    model = FittedModel(result.learner, "choice", lp, obs,
                        plain_representation(data.representation), data.reward_unit_ul)
    runs = ModelRuns(model, replicates, int(rng.integers(2**32)))
    rates = _reward_rates(events)
    volume = _typical_volume(events)
    R, N = replicates, len(events)
    sides = np.full((R, N), np.nan)
    paid = np.zeros((R, N))
    times = np.zeros(N)
    for k, event in enumerate(events):
        shown = [(c.cue, c.onset, c.offset) for c in event.cues]
        own = chose(event)
        amount = event.outcome.reward_ul if event.outcome.rewarded else 0.0
        t_reward = _reward_time(event)
        times[k] = t_reward
        if own is None:
            y = np.full(R, np.nan)
            reward = np.full(R, amount)
        else:
            y = runs.draw(event.cues[0].cue)
            same = y == float(SIDES.index(own))
            result_kind = event.response.result
            if result_kind in ("correct", "incorrect"):
                # the other side's reward: drawn at the rate the animal met on that kind of choice
                other_rate = rates["incorrect" if result_kind == "correct" else "correct"]
                other = rng.random(R) < other_rate
                reward = np.where(same, amount, np.where(other, amount or volume, 0.0))
            else:
                reward = np.where(same, amount, 0.0)
        sides[:, k] = y
        paid[:, k] = reward
        runs.learn(shown, event.duration, y, reward, t_reward)
    out = []
    for b in range(R):
        trials = [_as_replicate(e, sides[b, k], paid[b, k], times[k]) for k, e in enumerate(events)]
        out.append(prepare(trials, data.representation, reward_unit_ul=data.reward_unit_ul,
                           link="choice"))
    return out


def plain_representation(rep):
    """The representation over the plain cues of a ``cue:left``/``cue:right`` one."""
    cues = list(dict.fromkeys(c.rsplit(":", 1)[0] for c in rep.cues.cues))
    return make_representation(rep.kind, CueList(cues), dt=rep.dt, n_bins=rep.n_bins,
                               decay=rep.decay)


def _reward_rates(events: Sequence) -> dict[str, float]:
    """The fraction of the animal's correct and of its incorrect choices that were rewarded."""
    out = {}
    for kind in ("correct", "incorrect"):
        mine = [e for e in events if chose(e) is not None and e.response.result == kind]
        out[kind] = sum(e.outcome.rewarded for e in mine) / len(mine) if mine else 0.0
    return out


def _typical_volume(events: Sequence) -> float:
    """The median reward volume the animal received (µL), 0.0 when it never was rewarded."""
    got = [e.outcome.reward_ul for e in events if e.outcome.rewarded]
    return float(np.median(got)) if got else 0.0


def _reward_time(event) -> float:
    """When a reward on this trial arrives: the animal's own, else its response, else the
    end of the first cue (never after the trial's end)."""
    if event.outcome.rewarded and event.outcome.reward_time is not None:
        t = event.outcome.reward_time
    elif event.response.latency is not None:
        t = event.response.latency
    else:
        t = event.cues[0].offset if event.cues else event.duration
    return min(float(t), float(event.duration))


def _as_replicate(event, side: float, reward: float, t_reward: float):
    """The animal's trial with the replicate's choice and reward (an omission as it was)."""
    if side != side:  # nan: no choice, the trial as the animal lived it
        return event
    chosen = SIDES[int(side)]
    own = chose(event)
    if chosen == own:  # the animal's choice: its trial, outcome and all
        return event
    result = event.response.result
    if result in ("correct", "incorrect") and chosen != own:
        result = "incorrect" if result == "correct" else "correct"
    response = dataclasses.replace(event.response, value=chosen, result=result)
    paid = reward > 0 and math.isfinite(reward)
    outcome = Outcome(reward_ul=float(reward), reward_time=t_reward) if paid else Outcome()
    return dataclasses.replace(event, response=response, outcome=outcome)
