"""The learner and feature representation a rule file asks for: their columns (cues, or
``cue:action`` pairs for action values), the key that says whether an animal's learner
carries over to a session's rule file, and a fresh learner."""

from __future__ import annotations

from typing import Any

from .features import make_representation
from .learners import make_learner


def representation_for(rules):
    """The feature representation a rule file asks for (cached per rule file)."""
    hit = _REP_BY_RULES.get(id(rules))
    if hit is not None and hit[0] is rules:
        return hit[1]
    if rules.learner.name == "two_step":  # multi-step trials: the rows of core/step_rows
        from .step_rows import StepRows

        rep = StepRows(tuple(rules.cues)[:3])
        _REP_BY_RULES[id(rules)] = (rules, rep)
        return rep
    rep = _representation(rules.features.kind, feature_cues(rules), rules.features.dt,
                          rules.features.n_bins, rules.features.decay)
    if len(_REP_BY_RULES) > 64:
        _REP_BY_RULES.clear()
    _REP_BY_RULES[id(rules)] = (rules, rep)  # holding rules keeps its id from being reused
    return rep


_REP_BY_RULES: dict[int, tuple[Any, Any]] = {}


_REP_CACHE: dict[tuple, Any] = {}


def _representation(kind, cues, dt, n_bins, decay):
    key = (kind, cues, dt, n_bins, decay)
    rep = _REP_CACHE.get(key)
    if rep is None:
        from .features import CueList

        rep = make_representation(kind, CueList(cues), dt=dt, n_bins=n_bins, decay=decay)
        if len(_REP_CACHE) > 64:
            _REP_CACHE.clear()
        _REP_CACHE[key] = rep
    return rep


def feature_cues(rules) -> tuple[str, ...]:
    """The learner's column blocks: each cue, or with action values each ``cue:action`` pair."""
    if rules.learner.values != "cue_action":
        return tuple(rules.cues)
    return tuple(action_cue(c, a) for c in rules.cues for a in rules.spec.actions_of(c))


def action_cue(cue: str, action: str) -> str:
    """The feature name of doing ``action`` on ``cue``."""
    return f"{cue}:{action}"


def learner_key(rules) -> str:
    """What the learner's weights mean: learner, parameters, features and cue columns.

    Two rule files with the same key can hand an animal's learner from one session to
    the next; otherwise the learner starts fresh (and the decision says so).
    """
    f = rules.features
    params = ",".join(f"{k}={v!r}" for k, v in sorted(rules.learner.params.items()))
    return f"{rules.learner.name}({params})|{f.kind}:dt={f.dt!r}:bins={f.n_bins!r}:decay={f.decay!r}|" \
           f"{','.join(feature_cues(rules))}"


def new_learner(rules):
    rep = representation_for(rules)
    return make_learner(rules.learner.name, rep.n_features, **dict(rules.learner.params))
