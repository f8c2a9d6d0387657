"""A subject's stored two-step trials as ``TwoStepData`` (what ``rigloop fit`` and
``rigloop two-step --db`` read).

Sessions count as two-step when their rule file's learner is ``two_step``; its first
three cues are the first-stage state and the two second-stage states, each with the
actions ``left`` and ``right`` (``core/step_rows.StepRows``, the rows the live learner
reads). A trial gives (a1, s2, a2, reward) from its first two steps: a1 the first poke,
s2 which second-stage state followed, a2 the second poke, reward 1 when any step paid.
Trials whose steps do not fit (no steps, an omitted choice, an unknown state) are left
out and counted, as the live learner learns nothing from them. Sessions are read in
order and joined: the fitted learner carries across them, as it did live.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from ..errors import BadArgument
from .compare import stored_sessions
from .two_step import TwoStepData

TWO_STEP_LEARNER = "two_step"


@dataclass(frozen=True)
class StoredTwoStep:
    """The trials read: ``data``, the sessions they came from, the states, and how many
    stored trials were left out because their steps did not fit."""

    data: TwoStepData
    sessions: tuple[str, ...]
    states: tuple[str, str, str]
    n_stored: int
    n_left_out: int

    def notes(self) -> list[str]:
        """Sentences about what was read, for the fit's warnings."""
        if not self.n_left_out:
            return []
        return [f"{self.n_left_out} of {self.n_stored} stored trials have no complete first and second "
                f"step over the states {', '.join(self.states)} (an omitted choice, or no steps) and are "
                "left out, as the live learner learned nothing from them"]


def session_learners(infos: Sequence) -> list:
    """The loaded rule file of each session (parsed once per distinct file)."""
    from ..replay import RulesCache

    cache = RulesCache()
    return [cache.get(i.rules_text, i.rules_sha256, f"session {i.session} rule file {i.rules_name}")
            for i in infos]


def is_two_step(store, subject: str, session: str | None = None) -> bool:
    """Whether the subject's sessions (or ``session``) are two-step sessions; a mix of
    two-step and one-step sessions is refused (fit them separately with --session)."""
    infos = stored_sessions(store, subject, session, options=("--subject", "--session"))
    rules = session_learners(infos)
    kinds = [r.learner.name == TWO_STEP_LEARNER for r in rules]
    if all(kinds):
        return True
    if not any(kinds):
        return False
    two = [i.session for i, k in zip(infos, kinds, strict=True) if k]
    one = [i.session for i, k in zip(infos, kinds, strict=True) if not k]
    raise BadArgument("--session", f"sessions of one kind: {subject!r} has two-step sessions "
                      f"({', '.join(two)}) and one-step sessions ({', '.join(one)}); fit them "
                      "separately with --session", "all sessions")


def read_two_step(store, subject: str, session: str | None = None) -> StoredTwoStep:
    """The subject's two-step trials (every session in order, or only ``session``)."""
    from ..core.step_rows import StepRows

    infos = stored_sessions(store, subject, session, options=("--subject", "--session"))
    rules = session_learners(infos)
    states = None
    for info, r in zip(infos, rules, strict=True):
        if r.learner.name != TWO_STEP_LEARNER:
            raise BadArgument("--subject", f"a subject whose sessions ran a two_step rule file (session "
                              f"{info.session} ran {info.rules_name!r}, learner {r.learner.name}; its "
                              "trials are fitted by the cue-value learners of `rigloop fit`)", subject)
        these = tuple(r.cues)[:3]
        if states is None:
            states = these
        elif these != states:
            raise BadArgument("--session", f"sessions over the same states ({', '.join(states)}); session "
                              f"{info.session} has {', '.join(these)} (read it separately with --session)",
                              info.session)
    rows = StepRows(states)
    a1, s2, a2, reward = [], [], [], []
    n_stored = 0
    for info in infos:
        for event in store.trials(subject, info.session):
            n_stored += 1
            cols = rows.step_columns(event)
            if cols is None:
                continue
            first, second = cols
            a1.append(first)
            s2.append(second // 2 - 1)
            a2.append(second % 2)
            reward.append(1.0 if sum(s.reward_ul for s in event.steps) > 0 else 0.0)
    if len(a1) < 20:
        raise BadArgument("--subject", f"at least 20 stored trials with both steps to fit (found {len(a1)} "
                          f"of {n_stored} stored trials)", subject)
    data = TwoStepData.of(np.array(a1), np.array(s2), np.array(a2), np.array(reward))
    return StoredTwoStep(data, tuple(i.session for i in infos), states, n_stored, n_stored - len(a1))
