"""The one step function, shared by the daemon, replay, simulation and fitting.

``step(state, event, rules) -> (state', decision, update)`` folds one finished trial
into a subject's state and decides the next trial. It is pure and deterministic: the
same state, event and rules give the same result bit for bit. Its only randomness is
a generator seeded by (session seed, trial number), so replaying a stored session
reproduces every live decision, and crash recovery is a replay.

``begin_session`` is the same for the moment a session opens: it resets the
session's counters and decides trial 1.
"""

from __future__ import annotations

import hashlib
import math
from collections.abc import Mapping
from dataclasses import dataclass, replace
from typing import Any

import numpy as np

from .errors import BadEvent
from .performance import LearningCurve, _z_two_sided
from .subject import (
    ALL,
    ModelView,
    SessionContext,
    SubjectState,
    _next_state,
    learner_key,
    new_learner,
    representation_for,
)
from .trial import Decision, TrialEvent
from .values import builder


@dataclass(frozen=True, slots=True)
class Update:
    """The per-trial model quantities: what the learner saw and how it changed.

    ``quantities`` is a flat map of regressors (stored and exported per trial):
    ``value[cue]`` / ``sd[cue]`` at onset before learning, ``delta_cue`` (prediction
    error at the first cue's onset), ``delta_outcome`` (at the reward, or at the time it
    was due), ``p_correct`` with its 95% band, and ``surprise`` (Bayesian learners: the
    largest |δ|/sd in the trial, sd from the value's variance plus the observation noise —
    exact for the Kalman filter, an approximation for Kalman TD, whose row is x − γx').
    ``values`` / ``errors`` are per time step (one entry for reward learners).
    """

    subject: str
    session: str
    trial: int
    quantities: Mapping[str, float | None]
    values: np.ndarray
    errors: np.ndarray

    def to_dict(self) -> dict[str, Any]:
        return {
            "subject": self.subject,
            "session": self.session,
            "trial": self.trial,
            "quantities": dict(self.quantities),
            "values": [float(v) for v in self.values],
            "errors": [float(e) for e in self.errors],
        }


_Z95 = _z_two_sided(0.95)  # the z of the 95% band step reports


# step builds an Update per trial without the frozen __init__ (see values.py)
_update = builder(Update)


def session_seed(subject: str, session: str) -> int:
    """A default seed when the rig gives none: stable across machines and runs."""
    digest = hashlib.sha256(f"{subject}\x00{session}".encode()).digest()
    return int.from_bytes(digest[:8], "big") >> 1


def trial_rng(seed: int, trial: int) -> np.random.Generator:
    """The generator for decisions about ``trial``: a function of (seed, trial) alone."""
    return np.random.default_rng([seed & 0xFFFFFFFFFFFFFFFF, trial])


class _LazyTrialRng:
    """``trial_rng(seed, trial)``, built on its first use.

    Building the generator (a SeedSequence) costs more than most decisions, and most
    decisions draw nothing; the draws, when made, are those of ``trial_rng``.
    """

    __slots__ = ("_seed", "_trial", "_rng")

    def __init__(self, seed: int, trial: int):
        self._seed, self._trial, self._rng = seed, trial, None

    def _generator(self) -> np.random.Generator:
        if self._rng is None:
            self._rng = trial_rng(self._seed, self._trial)
        return self._rng

    def random(self, *args, **kwargs):
        return self._generator().random(*args, **kwargs)

    def integers(self, *args, **kwargs):
        return self._generator().integers(*args, **kwargs)

    def permutation(self, *args, **kwargs):
        return self._generator().permutation(*args, **kwargs)

    def __getattr__(self, name: str):
        return getattr(self._generator(), name)


def _decide(subject: str, ctx: SessionContext, rules, rep, learner, curves, schedule, next_trial: int,
            extra_warnings=(), fresh_curves=None, finite=None):
    """The rules' decision about ``next_trial``, as a Decision (valve time included).

    ``fresh_curves`` (a dict the view takes over) are LearningCurve objects this step
    already holds for some conditions (equal to ``curves``' entries), so the view need
    not rebuild them; ``finite``: whether the learner's state is known to be finite.
    """
    perf = rules.spec.performance
    view = ModelView(learner, rep, curves, perf.chance, perf.sigma2, finite, fresh_curves)
    schedule, plan = rules.decide(schedule, view, next_trial, _LazyTrialRng(ctx.seed, next_trial))
    warnings = plan.warnings
    if extra_warnings:
        warnings = tuple(extra_warnings) + tuple(warnings)
    valve_ms = None
    if ctx.valve is not None and plan.reward_ul > 0:
        slope, offset = ctx.valve
        valve_ms = max(0.0, slope * plan.reward_ul + offset)
    decision = Decision(
        subject=subject, session=ctx.session, trial=next_trial, cue=plan.cue, reward_prob=plan.reward_prob,
        reward_ul=plan.reward_ul, reward_armed=plan.reward_armed, block=plan.block, stage=plan.stage,
        end_session=plan.end_session, difficulty=plan.difficulty, valve_ms=valve_ms, reasons=plan.reasons,
        overrides=plan.overrides, warnings=warnings,
    )
    return schedule, decision


def begin_session(
    state: SubjectState,
    rules,
    *,
    session: str,
    rig: str,
    wall_time: float,
    seed: int | None = None,
    valve: tuple[float, float] | None = None,
) -> tuple[SubjectState, Decision]:
    """Open a session: fix its seed, reset session counters, decide trial 1.

    If the rule file's learner or features differ from what the animal's learner was
    built for, the learner starts fresh and the decision carries a warning saying so.
    """
    if seed is None:
        seed = session_seed(state.subject, session)
    warnings = []
    learner = state.learner
    key = learner_key(rules)
    curves = state.curves
    if key != state.learner_key:
        learner = new_learner(rules)
        curves = {}
        warnings.append(
            "this rule file's learner or cue features differ from the ones this animal's model was "
            "built with: the model starts from its prior"
        )
    ctx = SessionContext(session=session, rig=rig, seed=int(seed), rules_sha256=rules.sha256, valve=valve)
    schedule = rules.open_session(state.schedule, session, float(wall_time))
    state = replace(state, learner=learner, learner_key=key, curves=curves, context=ctx, last_trial=0)
    schedule, decision = _decide(state.subject, ctx, rules, representation_for(rules), learner, curves, schedule, 1,
                                 warnings)
    state = replace(state, schedule=schedule, context=replace(ctx, first_decision=decision.to_dict()))
    return state, decision


def _scored(event: TrialEvent) -> bool | None:
    """True/False for a scored response; None for omitted or unscored trials.

    Omissions are left out of the learning curve (common practice for choice tasks);
    they count towards disengagement in the schedule instead.
    """
    result = event.response.result
    if result == "correct":
        return True
    if result == "incorrect":
        return False
    return None


def _cue_ids(event: TrialEvent) -> list[str]:
    """``event.cue_ids`` as a list, by a plain loop (cheaper than a generator's tuple)."""
    ids = []
    for c in event.cues:
        ids.append(c.cue)
    return ids


def _delta_at(errors: list[float], step: int) -> float:
    return errors[min(max(step, 0), len(errors) - 1)]


def _surprise(errors: np.ndarray, variances: np.ndarray, noise: float) -> float | None:
    """The largest |δ_t| / sd_t of a trial, sd_t = sqrt(max(var_t, 0) + noise) (1 where that
    is not > 0); None without time steps. ``noise`` > 0 (a learner's checked variance).

    A loop over Python floats: a trial has a handful of time steps, where numpy's cost
    per call exceeds the arithmetic. Each term is computed as the array form computes
    it; only a NaN result (an infinite variance) is left to the array form, whose
    reduction decides which NaN comes out.
    """
    best = None
    sqrt = math.sqrt
    for delta, var in zip(errors.tolist(), variances.tolist(), strict=True):
        if delta:
            # max(var, 0.0) spelt out (var unless 0.0 > var, so NaN and -0.0 stay)
            sd = sqrt((0.0 if 0.0 > var else var) + noise)
            q = abs(delta) / (sd if sd > 0 else 1.0)
        else:
            q = 0.0  # |±0| / sd: +0 for any sd > 0 (inf included), and 0 / 1 otherwise
        if best is None or q > best or q != q:
            best = q
    if best is not None and best != best:
        sd = np.sqrt(np.maximum(variances, 0.0) + noise)
        best = float(np.max(np.abs(errors) / np.where(sd > 0, sd, 1.0)))
    return best


def step(state: SubjectState, event: TrialEvent, rules) -> tuple[SubjectState, Decision, Update]:
    """Fold one finished trial into the state and decide the next trial.

    Raises BadEvent (nothing changed) when the event does not fit the session: wrong
    subject or session, a cue the rule file does not use, or a trial number that does
    not follow the last one.
    """
    ctx = state.context
    if ctx is None:
        raise BadEvent("session", "has not been opened for this subject", event.session)
    if event.subject != state.subject:
        raise BadEvent("subject", f"does not match this state's subject {state.subject!r}", event.subject)
    if event.session != ctx.session:
        raise BadEvent("session", f"is not the subject's open session {ctx.session!r}", event.session)
    if ctx.rules_sha256 != rules.sha256:
        raise BadEvent("session", "was opened with a different rule file than the one given", event.session)
    spec = rules.spec
    event.check_context(known_cues=spec.cues, last_trial=state.last_trial)

    rep = representation_for(rules)
    cue_ids = _cue_ids(event)

    rows = rep._event_rows(event, rules.reward_unit_ul)
    # the learner after this trial: a new one, the state's own stays as it was
    learner, result, finite = state.learner._learned(rows.X, rows.r)

    # value and sd of each presented cue at its onset, before this trial's learning
    # (the state's own learner)
    quantities: dict[str, float | None] = {}
    if cue_ids:
        read = state.learner._onset_reader(finite)
        for cue in cue_ids:
            mean, var = read(*rep._onset_entry(cue))
            quantities[f"value[{cue}]"] = float(mean)
            quantities[f"sd[{cue}]"] = math.sqrt(max(float(var), 0.0))
    values, errors = result.values, result.errors

    if rep.timed:
        errs = errors.tolist()
        cues = event.cues
        onset = rows.onset_steps.get(cues[0].cue, 0) if cues else 0
        gamma = float(getattr(learner, "gamma", 1.0))
        # the error on entering the onset step: from the step before, or from the ITI (value 0)
        quantities["delta_cue"] = _delta_at(errs, onset - 1) if onset > 0 else gamma * values.item(0)
        outcome = event.outcome
        if outcome.rewarded:
            due = outcome.reward_time
        else:  # the last cue's offset (None without cues)
            due = None
            for c in cues:
                if due is None or c.offset > due:
                    due = c.offset
        if due is None:
            quantities["delta_outcome"] = None
        else:
            quantities["delta_outcome"] = _delta_at(errs, int(math.floor(due / rep.dt + 1e-9)) - 1)
    else:
        quantities["delta_cue"] = float(values[0]) if len(values) else None
        quantities["delta_outcome"] = float(errors[0]) if len(errors) else None
    if result.variances is not None:
        quantities["surprise"] = _surprise(errors, result.variances, float(getattr(learner, "noise", 0.0)))

    # learning curves: every presented cue and the pooled condition
    scored = _scored(event)
    curves = dict(state.curves)
    fresh: dict[str, LearningCurve] = {}
    if scored is not None:
        perf = spec.performance
        for cond in (ALL, *cue_ids):
            data = state.curves.get(cond)
            curve = LearningCurve(perf.chance, perf.sigma2) if data is None else LearningCurve.from_state(data)
            curve.update(scored)
            curves[cond] = curve.state()
            fresh[cond] = curve
    all_curve = fresh.get(ALL)
    if all_curve is None and curves.get(ALL) is not None:
        all_curve = LearningCurve.from_state(curves[ALL])
    if all_curve is not None:
        lo, hi = all_curve._band(_Z95)  # interval(0.95)
        quantities["p_correct"] = all_curve.p()
        quantities["p_lo95"], quantities["p_hi95"] = lo, hi

    schedule = rules.observe(state.schedule, event)
    schedule, decision = _decide(state.subject, ctx, rules, rep, learner, curves, schedule, event.trial + 1,
                                 fresh_curves=fresh, finite=finite)
    next_state = _next_state(state.subject, learner, state.learner_key, curves, schedule, ctx, event.trial,
                             state.trials_total + 1, state.notes)
    update = _update(state.subject, ctx.session, event.trial, quantities, values, errors)
    return next_state, decision, update
