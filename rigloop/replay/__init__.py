"""Replay stored sessions through ``step``, and recover a subject's state.

Replay feeds stored trials, in order, through the same ``begin_session`` and ``step``
the daemon uses. With each session's own rule file it must reproduce every stored
decision exactly; with another rule file it reports where decisions would differ.
Recovery is replay from the newest valid snapshot: the state it reaches is
bit-identical to that of a run that was never interrupted.
"""

from __future__ import annotations

import warnings
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass, field
from typing import Any

from ..core.names import UnknownName, check_name
from ..core.step import begin_session, step
from ..core.subject import SubjectState, new_subject
from ..rules import ScheduleState, load_rules

# Decision fields compared by replay (all of them: identity is the contract).
COMPARED = ("trial", "cue", "reward_prob", "reward_ul", "reward_armed", "block", "stage", "end_session",
            "difficulty", "valve_ms", "reasons", "overrides", "warnings")


@dataclass(frozen=True, slots=True)
class Difference:
    session: str
    trial: int  # the trial the decision is for
    field: str
    stored: Any
    replayed: Any


@dataclass
class ReplayResult:
    subject: str
    trials: int = 0
    decisions: int = 0
    identical: int = 0
    differences: list[Difference] = field(default_factory=list)
    state: SubjectState | None = None

    @property
    def differing(self) -> int:
        return self.decisions - self.identical

    def summary(self) -> str:
        if self.differing == 0:
            return f"{self.trials:,} trials, {self.decisions:,} decisions identical"
        first = self.differences[0]
        return (f"{self.trials:,} trials, {self.differing:,} of {self.decisions:,} decisions differ "
                f"(first: session {first.session!r}, trial {first.trial})")


class RulesCache:
    """Parsed rule files by sha256: a session's stored text is parsed once."""

    def __init__(self):
        self._by_sha: dict[str, Any] = {}

    def get(self, text: str, sha256: str, source: str):
        rules = self._by_sha.get(sha256)
        if rules is None:
            rules = load_rules(text, source=source)
            self._by_sha[sha256] = rules
        return rules


def session_rules(info, cache: RulesCache, override=None):
    if override is not None:
        return override
    return cache.get(info.rules_text, info.rules_sha256, f"session {info.session} rule file {info.rules_name}")


def open_stored_session(state: SubjectState, info, rules):
    """``begin_session`` with exactly what the daemon used when it opened ``info``."""
    valve = info.meta.get("valve") if info.meta else None
    return begin_session(
        state,
        rules,
        session=info.session,
        rig=info.rig,
        wall_time=info.opened_at,
        seed=info.seed,
        valve=tuple(valve) if valve else None,
    )


def _compare(result: ReplayResult, session: str, stored, replayed) -> None:
    result.decisions += 1
    if stored is None:
        result.identical += 1  # nothing stored to differ from
        return
    a, b = stored.to_dict(), replayed.to_dict()
    diffs = [Difference(session, replayed.trial, name, a[name], b[name]) for name in COMPARED if a[name] != b[name]]
    if diffs:
        result.differences.extend(diffs)
    else:
        result.identical += 1


def stored_sessions(store, subject: str, session: str | None = None) -> list:
    """The subject's stored sessions in order; ``UnknownName`` (with the known subjects, or
    the subject's sessions, and the nearest name) when the subject or ``session`` is not stored."""
    infos = store.sessions(subject)
    if not infos:
        raise UnknownName("subject", "a stored subject", subject, store.subjects())
    if session is not None:
        check_name("session", f"a stored session of subject {subject!r}", session, [i.session for i in infos])
    return infos


def replay_subject(
    store,
    subject: str,
    *,
    session: str | None = None,
    rules=None,
    progress: Callable[[int, int], None] | None = None,
) -> ReplayResult:
    """Replay a subject's stored sessions (all, or up to and including ``session``).

    ``rules`` replaces every session's own rule file (to see where another would
    differ). ``progress(done, total)`` is called as trials are replayed.
    """
    infos = stored_sessions(store, subject, session)
    if session is not None:
        infos = infos[: [i.session for i in infos].index(session) + 1]
    total = sum(store.last_trial(subject, i.session) for i in infos)
    result = ReplayResult(subject)
    cache = RulesCache()
    state: SubjectState | None = None
    stored_decisions = {}
    for info in infos:
        r = session_rules(info, cache, rules)
        if state is None:
            state = new_subject(subject, r)
        state, first = open_stored_session(state, info, r)
        stored_first = info.meta.get("first_decision") if info.meta else None
        if stored_first is not None:
            from ..core.trial import Decision

            _compare(result, info.session, Decision.from_dict(stored_first), first)
        stored_decisions = {d.trial - 1: d for d in store.decisions(subject, info.session)}
        for event in store.trials(subject, info.session):
            state, decision, _ = step(state, event, r)
            result.trials += 1
            _compare(result, info.session, stored_decisions.get(event.trial), decision)
            if progress is not None:
                progress(result.trials, total)
    result.state = state
    return result


def recover(store, subject: str, rules_for=None) -> SubjectState | None:
    """The subject's state after its last stored trial: newest valid snapshot + replay.

    A snapshot that fails its checksum or cannot be read is skipped with a warning,
    falling back to an older one or to a full replay. Returns None for a subject with
    no sessions.
    """
    infos = store.sessions(subject)
    if not infos:
        return None
    order = {info.session: n for n, info in enumerate(infos)}
    start: SubjectState | None = None
    for snap in store.snapshots(subject):
        if not snap.ok:
            warnings.warn(f"snapshot of {subject!r} after trial {snap.trial} of session {snap.session!r} "
                          "failed its checksum; trying an older one", RuntimeWarning, stacklevel=2)
            continue
        try:
            start = SubjectState.from_bytes(snap.blob, ScheduleState)
        except Exception as err:  # a snapshot of an older format, or damaged beyond the checksum
            warnings.warn(f"snapshot of {subject!r} after trial {snap.trial} of session {snap.session!r} "
                          f"is unreadable ({err}); trying an older one", RuntimeWarning, stacklevel=2)
            continue
        if snap.session in order:
            break
        start = None
    cache = RulesCache()
    if start is None:
        state = None
        todo: Iterable = infos
        resume_after = 0
    else:
        state = start
        k = order[start.context.session]
        todo = infos[k:]
        resume_after = start.last_trial
    for n, info in enumerate(todo):
        r = session_rules(info, cache, rules_for(info) if rules_for else None)
        if state is None:
            state = new_subject(subject, r)
        if n == 0 and start is not None:
            events: Iterator = (e for e in store.trials(subject, info.session) if e.trial > resume_after)
        else:
            state, _ = open_stored_session(state, info, r)
            events = store.trials(subject, info.session)
        for event in events:
            state, _, _ = step(state, event, r)
    return state


def format_differences(result: ReplayResult, limit: int = 20) -> str:
    """A plain table of the first ``limit`` differing fields."""
    if not result.differences:
        return ""
    lines = [f"{'session':<14}{'trial':>7}  {'field':<14}{'stored':<28}{'replayed':<28}"]
    for d in result.differences[:limit]:
        lines.append(f"{d.session:<14}{d.trial:>7}  {d.field:<14}{_short(d.stored):<28}{_short(d.replayed):<28}")
    more = len(result.differences) - limit
    if more > 0:
        lines.append(f"... and {more:,} more differing fields")
    return "\n".join(lines)


def _short(value: Any, width: int = 26) -> str:
    text = repr(value)
    return text if len(text) <= width else text[: width - 3] + "..."
