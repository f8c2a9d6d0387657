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

from ..errors import BadEvent
from . import behaviour as B
from .derived import derived
from .curve import LearningCurve, _z_two_sided
from .responses import choice_code, history_step, p_respond, p_right
from .subject import (
    ALL,
    ModelView,
    SessionContext,
    SubjectState,
    _next_state,
    action_cue,
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
    """``trial_rng(seed, trial)``, built on its first use (58x cheaper than building it for a
    decision that draws nothing, tools/bench/step.py; test_fast_paths: the same draws).

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


def view_of(rules, rep, learner, curves, behaviour, finite=None, fresh_curves=None) -> ModelView:
    """What the rules read: the learner, the learning curves and the behaviour estimates."""
    spec = rules.spec
    perf, beh = spec.performance, spec.behaviour
    actions = _actions_table(rules)
    return ModelView(learner, rep, curves, perf.chance, perf.sigma2, finite, fresh_curves, behaviour, beh.sigma2,
                     beh.prior_var, actions, _choice_cues(spec))


def _actions_table(rules) -> dict[str, tuple[str, ...]] | None:
    """cue -> its actions when the learner holds action values, else None (kept per rule file)."""
    hit = _ACTIONS.get(id(rules))
    if hit is not None and hit[0] is rules:
        return hit[1]
    table = None
    if rules.learner.values == "cue_action":
        table = {c: rules.spec.actions_of(c) for c in rules.cues}
    if len(_ACTIONS) > 64:
        _ACTIONS.clear()
    _ACTIONS[id(rules)] = (rules, table)
    return table


_ACTIONS: dict[int, tuple] = {}


def _decide(subject: str, ctx: SessionContext, rules, rep, learner, curves, schedule, next_trial: int,
            extra_warnings=(), fresh_curves=None, finite=None, behaviour=None):
    """The rules' decision about ``next_trial``, as a Decision (valve time included).

    ``fresh_curves`` (a dict the view takes over) are LearningCurve objects this step
    already holds for some conditions (equal to ``curves``' entries), so the view need
    not rebuild them; ``finite``: whether the learner's state is known to be finite;
    ``behaviour``: the behaviour estimates after this trial.
    """
    view = view_of(rules, rep, learner, curves, behaviour, finite, fresh_curves)
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
                                 warnings, behaviour=state.behaviour)
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


def _is_go(spec, schedule, cue: str) -> bool | None:
    """Whether the current block rewards ``cue`` (None: the cue is not in the block)."""
    stage = spec.stages.get(schedule.stage)
    block = stage.blocks.get(schedule.block) if stage is not None else None
    if block is None or cue not in block.contingency:
        return None
    return block.contingency[cue].rewarded


def _action_cues(event: TrialEvent, kind: str, did: bool | None) -> list[tuple[str, float, float]]:
    """The trial's cues as the action-value learner's columns: ``cue:action`` for the
    action the animal took; none when it took none that was observed (an omission)."""
    if did is None:
        return []
    if kind == B.RIGHT:
        action = "right" if did else "left"
    else:
        action = "respond" if did else "withhold"
    return [(action_cue(c.cue, action), c.onset, c.offset) for c in event.cues]


def _punishments(spec, event: TrialEvent) -> list[tuple[float, float]]:
    """The trial's punishment as a learner outcome ``(time, value in reward units)``.

    A named punishment, or a timeout (``timeout_s`` > 0 with none named), counts once at
    its time: ``punishment_time``, else the response's latency, else the last cue's end.
    """
    out = event.outcome
    kind = out.punishment
    if kind is None:
        if not out.timeout_s > 0.0:
            return []
        kind = "timeout"
    value = spec.outcomes.value_of(kind)
    if value == 0.0:
        return []
    t = out.punishment_time
    if t is None:
        t = event.response.latency
    if t is None:
        t = max((c.offset for c in event.cues), default=0.0)
    return [(min(t, event.duration), value)]


def _behaviour_names(spec) -> tuple[tuple[str, str, str, str], ...]:
    """(cue, estimate, lower, upper quantity names) for every cue of the file (made once per file)."""
    choice = spec.choice_cues()
    return derived(spec, "behaviour_names", lambda sp: tuple(
        (cue, *B.quantity_names(cue, B.RIGHT if cue in choice else B.RESPOND)) for cue in sp.cues))


def _choice_cues(spec) -> frozenset[str]:
    return derived(spec, "choice_cues", lambda sp: sp.choice_cues())


def _behaviour_quantities(quantities: dict, spec, behaviour) -> None:
    """``p_respond[cue]`` / ``p_right[cue]`` and their 95% band, for every cue, before the trial."""
    beh = spec.behaviour
    prior, sigma2 = beh.prior_var, beh.sigma2
    z = _Z95
    sqrt, exp = math.sqrt, math.exp
    for cue, name, lo, hi in _behaviour_names(spec):
        est = behaviour.get(cue)
        mean, var = (0.0, prior) if est is None else (est[0], est[1])
        half = z * sqrt(var + sigma2)
        # B.logistic inline where its argument is >= 0 (1 / (1 + e^-a), the same bits): 1.35x the
        # reference's speed (tools/bench/step.py); _behaviour_quantities_reference is the plain form
        a, b = mean - half, mean + half
        quantities[name] = 1.0 / (1.0 + exp(-mean)) if mean >= 0.0 else B.logistic(mean)
        quantities[lo] = 1.0 / (1.0 + exp(-a)) if a >= 0.0 else B.logistic(a)
        quantities[hi] = 1.0 / (1.0 + exp(-b)) if b >= 0.0 else B.logistic(b)


def _behaviour_quantities_reference(quantities: dict, spec, behaviour) -> None:
    """:func:`_behaviour_quantities` written plainly (the tests hold the two to the same bits)."""
    beh, choice = spec.behaviour, spec.choice_cues()
    for cue in spec.cues:
        est = behaviour.get(cue)
        mean, var = (0.0, beh.prior_var) if est is None else (est[0], est[1])
        name, lo, hi = B.quantity_names(cue, B.RIGHT if cue in choice else B.RESPOND)
        quantities[name] = B.logistic(mean)
        quantities[lo], quantities[hi] = B.band(mean, var + beh.sigma2, 0.95)


def _p_model(spec, cue: str, choice_cues, quantities, history: float, actions) -> float | None:
    """What the learner and the response model predict for the trial's response to ``cue``:
    P(respond), or P(right) for a two-choice cue (action-value learners only)."""
    link = spec.response
    if cue in choice_cues:
        if actions is None:
            return None  # cue values say nothing about a side
        ql, qr = quantities[f"q[{action_cue(cue, 'left')}]"], quantities[f"q[{action_cue(cue, 'right')}]"]
        return float(p_right(ql, qr, link.beta, link.bias, link.lapse, link.persev, history))
    if actions is None:
        theta = 0.5 if link.theta is None else link.theta
        v = quantities[f"value[{cue}]"]
    else:
        theta = 0.0 if link.theta is None else link.theta
        v = quantities[f"q[{action_cue(cue, 'respond')}]"] - quantities[f"q[{action_cue(cue, 'withhold')}]"]
    return float(p_respond(v, link.beta, theta, link.lapse))


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
    per call exceeds the arithmetic (3.9x faster than ``_surprise_reference``, its array
    form, tools/bench/step.py). Each term is computed as the array form computes
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


def _surprise_reference(errors: np.ndarray, variances: np.ndarray, noise: float) -> float | None:
    """:func:`_surprise` as array code: the readable form the tests hold it to, bit for bit."""
    if len(errors) == 0:
        return None
    sd = np.sqrt(np.maximum(variances, 0.0) + noise)
    return float(np.max(np.abs(errors) / np.where(sd > 0, sd, 1.0)))


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
    actions = _actions_table(rules)

    # what the animal did: the response to the trial's first cue, as its behaviour estimate reads it
    scored_cue = cue_ids[0] if cue_ids else None
    choice_cues = _choice_cues(spec)
    kind = B.RIGHT if scored_cue in choice_cues else B.RESPOND
    did = None
    if scored_cue is not None:
        did = B.observed(event, kind)
        if did is None and event.response.value is None and kind == B.RESPOND:  # only the result says it
            did = B.observed(event, kind, _is_go(spec, state.schedule, scored_cue))

    learner_cues = None if actions is None else _action_cues(event, kind, did)
    rows = rep._event_rows(event, rules.reward_unit_ul, learner_cues, _punishments(spec, event))
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
            quantities[f"value[{cue}]"] = float(mean)
            quantities[f"sd[{cue}]"] = math.sqrt(max(float(var), 0.0))
    elif cue_ids:
        before = view_of(rules, rep, state.learner, state.curves, state.behaviour)
        for cue in cue_ids:
            quantities[f"value[{cue}]"], quantities[f"sd[{cue}]"] = before.value_mean(cue), before.value_sd(cue)
            for a in actions[cue]:
                quantities[f"q[{action_cue(cue, a)}]"] = before.q_value(cue, a)[0]
    _behaviour_quantities(quantities, spec, state.behaviour)
    for cue in cue_ids:
        quantities[f"p_model[{cue}]"] = _p_model(spec, cue, choice_cues, quantities, state.choice_history, actions)
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

    behaviour = state.behaviour
    if did is not None:
        beh = spec.behaviour
        behaviour = dict(behaviour)
        behaviour[scored_cue] = B.updated(behaviour.get(scored_cue), did, beh.sigma2, beh.prior_var)
    history = state.choice_history
    side = event.response.value
    if side == "left" or side == "right":
        history = float(history_step(history, choice_code(side), spec.response.decay))

    schedule = rules.observe(state.schedule, event)
    schedule, decision = _decide(state.subject, ctx, rules, rep, learner, curves, schedule, event.trial + 1,
                                 fresh_curves=fresh, finite=finite, behaviour=behaviour)
    next_state = _next_state(state.subject, learner, state.learner_key, curves, schedule, ctx, event.trial,
                             state.trials_total + 1, state.notes, behaviour, history)
    update = _update(state.subject, ctx.session, event.trial, quantities, values, errors)
    return next_state, decision, update
