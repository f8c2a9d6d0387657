"""What the watch table shows for one subject: a plain map built from its state, its
rule file and the newest decision (no I/O; the observer stream and the state query
both send it)."""

from __future__ import annotations

import math
from typing import Any

from ..core.subject import ModelView, SubjectState, representation_for
from ..core.trial import Decision


def summary(state: SubjectState, rules: Any, decision: Decision | None) -> dict[str, Any]:
    """What the watch table shows for one subject."""
    sched = state.schedule
    out: dict[str, Any] = {
        "subject": state.subject,
        "session": state.context.session if state.context else None,
        "trial": state.last_trial,
        "trials_total": state.trials_total,
        "block": getattr(sched, "block", None),
        "stage": getattr(sched, "stage", None),
        "ul_today": getattr(sched, "ul_today", None),
        "ul_session": getattr(sched, "ul_session", None),
    }
    try:
        rep = representation_for(rules)
        view = ModelView(state.learner, rep, state.curves, rules.performance.chance, rules.performance.sigma2)
        values = {cue: {"mean": _finite(view.value_mean(cue)), "sd": _finite(view.value_sd(cue))}
                  for cue in list(rules.cues)[:32]}
        if values:
            out["values"] = values
        lo, hi = view.p_interval("all", 0.95)
        out["p_correct"] = {"p": _finite(view.p_correct("all")), "lo": _finite(lo), "hi": _finite(hi)}
    except Exception as err:  # a summary must never stop serving
        out["summary_error"] = type(err).__name__
    if decision is not None:
        reason = decision.reasons[0] if decision.reasons else None
        out["decision"] = {"trial": decision.trial, "cue": decision.cue, "reward_prob": decision.reward_prob,
                           "reward_ul": decision.reward_ul, "end_session": decision.end_session,
                           "reason": reason[:250] if reason else None}
    return out


def _finite(x: Any) -> float | None:
    try:
        x = float(x)
    except (TypeError, ValueError):
        return None
    return x if math.isfinite(x) else None
