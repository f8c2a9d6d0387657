"""``step`` for a simulation that stores nothing: the decision and the state it rests on, no more.

``decide_step(state, event, rules, learn=...)`` returns ``step``'s next state and
decision, bit for bit, without the per-trial quantities (values at onset, prediction
errors, surprise, the behaviour bands, p_model: they are stored and exported, and
nothing here stores). With ``learn=False`` the learner is not run either; that is only
right for a rule file whose decisions never read it (``support.learner_free``), and then
the learner in the returned state stays where it was (the prior, for a simulated animal).
``curves=False`` leaves the learning curves as they were in the same way, for a rule file
none of whose decisions reads them (``support.reads_curves``).
The view the rules read holds a stand-in that raises ``LearnerRead`` if anything asks
it for a value, so a rule file the check let through by mistake fails loudly instead of
deciding from a stale learner.

The event comes from a simulated animal answering the previous decision, so the checks
``step`` makes on events from a rig (subject, session, trial number, known cues) are
left out. What remains is ``step``'s own sequence, in its order: the response read for
the behaviour estimate, the learning curves, the behaviour estimate, the choice history,
the schedule's observation, the decision.
"""

from __future__ import annotations

from ...core import behaviour as B
from ...core.curve import LearningCurve, _updated_state
from ...core.experience import _action_cues, _is_go, _punishments, _scored
from ...core.quantities import _cue_ids
from ...core.step import _decide, _plan_of, _responses_seen
from ...core.subject import ALL, SubjectState


class LearnerRead(RuntimeError):
    """A decision read the learner on the path that does not run it (a bug in ``support``)."""


class _NoLearner:
    """What the rules' view holds instead of a learner that was not run."""

    __slots__ = ()

    def __getattr__(self, name):
        raise LearnerRead(f"a decision read the learner ({name}) on the simulation path that does not run it; "
                          "offline/lockstep/support.learner_free should have refused this rule file")


NO_LEARNER = _NoLearner()


def decide_step(state: SubjectState, event, rules, *, learn: bool = True, curves: bool = True):
    """(next state, decision) as ``step(state, event, rules)`` gives them (see the module docstring)."""
    ctx = state.context
    plan = _plan_of(rules)  # what step reads of the rule file each trial, formed once per file
    spec = plan.spec
    cue_ids = _cue_ids(event)
    scored_cue = cue_ids[0] if cue_ids else None
    choice_cues = plan.choice_cues
    kind = B.RIGHT if scored_cue in choice_cues else B.RESPOND
    did = None
    if scored_cue is not None:
        did = B.observed(event, kind)
        if did is None and event.response.value is None and kind == B.RESPOND:
            did = B.observed(event, kind, _is_go(spec, state.schedule, scored_cue))

    rep = plan.rep
    if learn:
        actions = plan.actions
        learner_cues = None if actions is None else _action_cues(event, kind, did)
        rows = rep._event_rows(event, plan.unit, learner_cues, _punishments(spec, event))
        learner, _, finite = state.learner._learned(rows.X, rows.r)
        seen = learner
    else:
        learner, finite, seen = state.learner, None, NO_LEARNER

    scored = _scored(event) if curves else None  # curves=False: they stay as they were
    curves = dict(state.curves) if curves else state.curves
    fresh: dict[str, LearningCurve] = {}
    if scored is not None:
        for cond in (ALL, *cue_ids):
            data = state.curves.get(cond)
            new = None if data is None else _updated_state(data, scored)
            if new is None:
                curve = LearningCurve(plan.chance, plan.sigma2) if data is None else LearningCurve.from_state(data)
                curve.update(scored)
                new = curve.state()
                fresh[cond] = curve
            curves[cond] = new

    behaviour, history = _responses_seen(state, event, plan, did, scored_cue)
    schedule = rules.observe(state.schedule, event)
    schedule, decision = _decide(state.subject, ctx, rules, rep, seen, curves, schedule, event.trial + 1,
                                 fresh_curves=fresh, finite=finite, behaviour=behaviour, step_plan=plan)
    next_state = SubjectState(state.subject, learner, state.learner_key, curves, schedule, ctx, event.trial,
                              state.trials_total + 1, state.notes, behaviour, history)
    return next_state, decision
