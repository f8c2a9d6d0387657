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

import math
from collections.abc import Mapping
from dataclasses import dataclass, replace
from typing import Any

import numpy as np

from ..errors import BadEvent
from . import behaviour as B
from .curve import LearningCurve, _p_band, _updated_state
from .derived import derived
from .experience import _action_cues, _actions_table, _is_go, _punishments, _scored
from .learner_setup import action_cue, learner_key, new_learner, representation_for
from .quantities import (
    _Z95,
    _behaviour_quantities,
    _choice_cues,
    _cue_ids,
    _delta_at,
    _p_model,
    _surprise,
)
from .responses import choice_code, history_step
from .seeds import _LazyTrialRng, release, session_seed, trial_rng  # noqa: F401  (trial_rng: rigloop.step exports it)
from .subject import ALL, SessionContext, SubjectState
from .trial import Decision, TrialEvent
from .view import ModelView


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

    The animal's own behaviour, before this trial's response, for every cue of the rule
    file: ``p_respond[cue]`` with ``p_respond_lo95[cue]`` / ``p_respond_hi95[cue]`` (go/no-go
    cues), ``p_right[cue]`` with its band (two-choice cues); ``p_model[cue]`` is what the
    learner and the response model predict for the trial's cue (to set beside the animal's);
    action-value learners add ``q[cue:action]`` for the trial's cue.
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






class _Plan:
    """What ``step`` reads of a rule file on every trial, formed once per loaded file: its
    representation, action table, two-choice cues, the constants of its curves and
    behaviour estimates, and each cue's quantity names. One lookup instead of the half
    dozen ``derived`` calls and the f-strings of names a trial made (1.02-1.05x of a
    tone_reversal step, old and new alternating trial by trial in one process; the same
    objects, so the same bits: tests/test_step.py, the step digest)."""

    __slots__ = ("spec", "rep", "actions", "choice_cues", "chance", "sigma2", "beh_sigma2", "beh_prior_var",
                 "decay", "unit", "names")

    def __init__(self, rules):
        spec = self.spec = rules.spec
        self.rep = representation_for(rules)
        self.actions = _actions_table(rules)
        self.choice_cues = _choice_cues(spec)
        perf, beh = spec.performance, spec.behaviour
        self.chance, self.sigma2 = perf.chance, perf.sigma2
        self.beh_sigma2, self.beh_prior_var = beh.sigma2, beh.prior_var
        self.decay = spec.response.decay
        self.unit = rules.reward_unit_ul
        # cue -> (value[cue], sd[cue], p_model[cue])
        self.names = {c: (f"value[{c}]", f"sd[{c}]", f"p_model[{c}]") for c in spec.cues}


def _plan_of(rules) -> _Plan:
    """The rule file's :class:`_Plan` (kept per loaded file)."""
    return derived(rules, "step_plan", _Plan)


def view_of(rules, rep, learner, curves, behaviour, finite=None, fresh_curves=None, plan=None) -> ModelView:
    """What the rules read: the learner, the learning curves and the behaviour estimates
    (``plan``: the rule file's :class:`_Plan`, when the caller holds it)."""
    if plan is None:
        plan = _plan_of(rules)
    return ModelView(learner, rep, curves, plan.chance, plan.sigma2, finite, fresh_curves, behaviour, plan.beh_sigma2,
                     plan.beh_prior_var, plan.actions, plan.choice_cues)


def _decide(subject: str, ctx: SessionContext, rules, rep, learner, curves, schedule, next_trial: int,
            extra_warnings=(), fresh_curves=None, finite=None, behaviour=None, step_plan=None):
    """The rules' decision about ``next_trial``, as a Decision (valve time included).

    ``fresh_curves`` (a dict the view takes over) are LearningCurve objects this step
    already holds for some conditions (equal to ``curves``' entries), so the view need
    not rebuild them; ``finite``: whether the learner's state is known to be finite;
    ``behaviour``: the behaviour estimates after this trial; ``step_plan``: the rule file's
    :class:`_Plan`, when the caller holds it.
    """
    view = view_of(rules, rep, learner, curves, behaviour, finite, fresh_curves, step_plan)
    schedule, plan = rules.decide(schedule, view, next_trial, _LazyTrialRng(ctx.seed, next_trial))
    warnings = plan.warnings
    if extra_warnings:
        warnings = tuple(extra_warnings) + tuple(warnings)
    valve_ms = None
    if ctx.valve is not None and plan.reward_ul > 0:
        slope, offset = ctx.valve
        valve_ms = max(0.0, slope * plan.reward_ul + offset)
    # Decision(subject=..., session=..., ...) by position, in its field order (1.4x the keyword
    # call: 4.3 -> 3.0 µs)
    decision = Decision(subject, ctx.session, next_trial, plan.cue, plan.reward_prob, plan.reward_ul,
                        plan.reward_armed, plan.block, plan.stage, plan.end_session, plan.difficulty, valve_ms,
                        plan.reasons, plan.overrides, warnings)
    return schedule, decision


def _responses_seen(state: SubjectState, event: TrialEvent, plan: _Plan, did, scored_cue):
    """The animal's behaviour estimates and choice history after this trial's response:
    the scored cue's estimate updated with whether it responded (``did``; None: not scored)
    and the choice-history kernel stepped on a left/right choice. Shared with the
    decisions-only path (``offline/lockstep``), so both keep the same numbers."""
    behaviour = state.behaviour
    if did is not None:
        behaviour = dict(behaviour)
        behaviour[scored_cue] = B.updated(behaviour.get(scored_cue), did, plan.beh_sigma2, plan.beh_prior_var)
    history = state.choice_history
    side = event.response.value
    if side == "left" or side == "right":
        history = float(history_step(history, choice_code(side), plan.decay))
    return behaviour, history


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
    if state.context is not None and state.context.seed != int(seed):
        release(state.context.seed)  # the session before draws no more: its generator blocks go
    ctx = SessionContext(session=session, rig=rig, seed=int(seed), rules_sha256=rules.sha256, valve=valve)
    schedule = rules.open_session(state.schedule, session, float(wall_time))
    state = replace(state, learner=learner, learner_key=key, curves=curves, context=ctx, last_trial=0)
    schedule, decision = _decide(state.subject, ctx, rules, representation_for(rules), learner, curves, schedule, 1,
                                 warnings, behaviour=state.behaviour)
    state = replace(state, schedule=schedule, context=replace(ctx, first_decision=decision.to_dict()))
    return state, decision


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
    plan = _plan_of(rules)
    spec = plan.spec
    event.check_context(known_cues=spec.cues, last_trial=state.last_trial)

    rep = plan.rep
    cue_ids = _cue_ids(event)
    actions = plan.actions
    names = plan.names

    # what the animal did: the response to the trial's first cue, as its behaviour estimate reads it
    scored_cue = cue_ids[0] if cue_ids else None
    choice_cues = plan.choice_cues
    kind = B.RIGHT if scored_cue in choice_cues else B.RESPOND
    did = None
    if scored_cue is not None:
        did = B.observed(event, kind)
        if did is None and event.response.value is None and kind == B.RESPOND:  # only the result says it
            did = B.observed(event, kind, _is_go(spec, state.schedule, scored_cue))

    learner_cues = None if actions is None else _action_cues(event, kind, did)
    rows = rep._event_rows(event, plan.unit, learner_cues, _punishments(spec, event))
    # the learner after this trial: a new one, the state's own stays as it was
    learner, result, finite = state.learner._learned(rows.X, rows.r)

    # value and sd of each presented cue at its onset, before this trial's learning
    # (the state's own learner)
    quantities: dict[str, float | None] = {}
    before = None  # the view of the state before this trial (action-value learners)
    if cue_ids and actions is None:
        read = state.learner._onset_reader(finite)
        for cue in cue_ids:
            mean, var = read(*rep._onset_entry(cue))
            value_name, sd_name, _ = names[cue]
            quantities[value_name] = float(mean)
            quantities[sd_name] = math.sqrt(max(float(var), 0.0))
    elif cue_ids:
        before = view_of(rules, rep, state.learner, state.curves, state.behaviour)
        for cue in cue_ids:
            quantities[f"value[{cue}]"], quantities[f"sd[{cue}]"] = before.value_mean(cue), before.value_sd(cue)
            for a in actions[cue]:
                quantities[f"q[{action_cue(cue, a)}]"] = before.q_value(cue, a)[0]
    _behaviour_quantities(quantities, spec, state.behaviour)
    for cue in cue_ids:
        quantities[names[cue][2]] = _p_model(spec, cue, choice_cues, quantities, state.choice_history, actions)
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
        for cond in (ALL, *cue_ids):
            data = state.curves.get(cond)
            # a plain state is updated without a curve object (the view makes one if a rule reads it)
            new = None if data is None else _updated_state(data, scored)
            if new is None:
                curve = LearningCurve(plan.chance, plan.sigma2) if data is None else LearningCurve.from_state(data)
                curve.update(scored)
                new = curve.state()
                fresh[cond] = curve
            curves[cond] = new
    all_data = curves.get(ALL)
    if all_data is not None:
        summary = _p_band(all_data, _Z95)
        if summary is None:
            all_curve = fresh.get(ALL) or LearningCurve.from_state(all_data)
            summary = (all_curve.p(), *all_curve._band(_Z95))  # interval(0.95)
        quantities["p_correct"], quantities["p_lo95"], quantities["p_hi95"] = summary

    behaviour, history = _responses_seen(state, event, plan, did, scored_cue)
    schedule = rules.observe(state.schedule, event)
    schedule, decision = _decide(state.subject, ctx, rules, rep, learner, curves, schedule, event.trial + 1,
                                 fresh_curves=fresh, finite=finite, behaviour=behaviour, step_plan=plan)
    next_state = SubjectState(state.subject, learner, state.learner_key, curves, schedule, ctx, event.trial,
                             state.trials_total + 1, state.notes, behaviour, history)
    update = Update(state.subject, ctx.session, event.trial, quantities, values, errors)
    return next_state, decision, update
