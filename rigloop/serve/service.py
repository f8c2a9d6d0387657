"""The protocol: one decoded request in, its reply out (or a trial stepped into the
batch, answered once its commit returned). Open sessions, order checks, dedup, ``step``.

No sockets here: requests come from ``ports`` as ``(source, request, received_ns)``,
replies go back through the batch (``pipeline``); the store is read for sessions and
retries, and written directly only to open and close sessions (after the trials
stepped before them were committed).

Retries: a trial already stored is answered with the stored decision and
``duplicate=True``; nothing is counted twice. A trial number that skips ahead or a
trial for a session that is not open gets an error naming what was expected.

Opening a session that is already open (a rig that restarted and re-sent its open)
is answered with the session's *current* next decision (its first decision if no
trial was stored yet), marked ``duplicate=True``, so the rig can resume; an open
that names another rig, rule file, seed or profile for it is a ``conflict``.
"""

from __future__ import annotations

from dataclasses import replace
from typing import Any

from .. import wire
from ..core.step import begin_session, step
from ..core.subject import SubjectState, new_subject
from ..core.trial import Decision, TrialEvent
from ..errors import BadArgument, BadEvent, ConflictingTrial, RuleError, StoreError, WireError
from ..links.curve import OPERATOR
from ..store import SessionInfo, Store
from .metrics import Metrics
from .observers import Publisher
from .pipeline import CommitPipeline, Out, Pending
from .ports import StatusReply, StatusRequest, ZmqSource
from .rulebook import RuleBook
from .subjects import Subjects
from .summary import summary


class Service:
    """Answers requests for the loop thread; see the module docstring.

    ``status()`` builds the daemon's status map (the daemon's); ``clock()`` gives wall
    times for sessions opened or closed without one and trials sent without a start."""

    def __init__(self, store: Store, subjects: Subjects, rulebook: RuleBook, pipeline: CommitPipeline,
                 metrics: Metrics, publisher: Publisher | None, *, snapshot_every: int,
                 profiles: dict[str, str], clock: Any, status: Any, log: Any):
        self.store = store
        self.subjects = subjects
        self.rulebook = rulebook
        self.pipeline = pipeline
        self.metrics = metrics
        self.counts = metrics.counts
        self._error = metrics.error
        self.publisher = publisher
        self.snapshot_every = snapshot_every
        self.profiles = profiles  # rig -> rig profile, for valve calibration
        self.clock = clock
        self.status = status
        self.log = log
        # CURVE rigs whose key left the allow-list while connected: their messages get no
        # answer, so the rig reconnects and ZAP refuses it (set by the daemon on reload)
        self.revoked: frozenset[str] = frozenset()

    def handle(self, src: Any, req: Any, t: int) -> Any:
        """The reply to ``req``, or None for a trial stepped into the batch (its reply
        comes from its commit). Every error becomes an error reply naming its field."""
        if self.revoked and src.rig in self.revoked and type(src) is ZmqSource:
            self.counts["revoked_dropped"] = self.counts.get("revoked_dropped", 0) + 1
            return None  # as ZAP would: no answer to a rig whose key was removed
        try:
            if isinstance(req, WireError):
                self.metrics.count_error(req.code)
                return wire.ErrorReply.from_error(req)
            if isinstance(req, wire.TrialReport):
                pending = self._trial(src, req, t)
                if isinstance(pending, Pending):
                    self.pipeline.cur.out.append(Out(src, None, t, pending))
                    return None
                return pending
            if isinstance(req, wire.Ping):
                return wire.Pong(req.id)
            if isinstance(req, StatusRequest):
                if src.rig is not None and src.rig != OPERATOR:
                    return self._error(req.id, "bad_field", f"status is for the operator, not for rig {src.rig!r}: "
                                                            "ask from the daemon's machine with its own key "
                                                            "(server.key_secret)", "type")
                return StatusReply(req.id, self.status())
            if isinstance(req, wire.OpenSession):
                self.pipeline.flush()
                return self._open_session(src, req)
            if isinstance(req, wire.CloseSession):
                self.pipeline.flush()
                return self._close_session(src, req)
            if isinstance(req, wire.QueryState):
                return self._query_state(src, req)
            return self._error(req_id(req), "unknown_type", f"request type {type(req).__name__} is not served here")
        except WireError as err:
            return self._error(req_id(req), err.code if err.code in wire.ERROR_CODES else "bad_message",
                               str(err), err.field)
        except BadEvent as err:
            return self._error(req_id(req), "bad_field", str(err), err.field)
        except (RuleError, BadArgument) as err:
            return self._error(req_id(req), "bad_field", str(err), getattr(err, "argument", None))
        except ConflictingTrial as err:
            return self._error(req_id(req), "conflict", str(err), "trial")
        except StoreError as err:
            return self._error(req_id(req), "internal", f"the store refused the request: {err}")

    # -- trials -----------------------------------------------------------------------

    def _trial(self, src: Any, req: Any, t: int) -> Any:
        ev: TrialEvent = req.event
        bad = self._check_rig(src, ev.rig, req.id)
        if bad is not None:
            return bad
        key = ev.key
        cur = self.pipeline.cur
        earlier = cur.keys.get(key)
        if earlier is not None:
            if not _same_trial(ev, earlier.event):
                return self._error(req.id, "conflict", str(ConflictingTrial(*key)), "trial")
            return Pending(src, req.id, t, ev, earlier.decision, None, None, earlier.state, echo_of=earlier)
        info = self.subjects.open.get(ev.subject)
        state = self._state(ev.subject) if info is not None and info.session == ev.session else None
        if state is None or state.context is None or state.context.session != ev.session:
            if self.pipeline.settle_for(ev.subject):  # the store must answer for the trials in flight
                return self._trial(src, req, t)
            stored = self.store.lookup(ev.subject, ev.session, ev.trial)
            if stored is not None:  # a retry for a session that has since closed
                return self._duplicate(req.id, ev, stored)
            known = self.store.session(ev.subject, ev.session)
            if known is not None and known.closed_at is not None:
                return self._error(req.id, "unknown_session", f"session {ev.session!r} of subject {ev.subject!r} "
                                                             "is closed; open a new session", "session")
            return self._error(req.id, "unknown_session", f"subject {ev.subject!r} has no open session "
                                                          f"{ev.session!r}; open it first", "session")
        if ev.trial <= state.last_trial:
            if self.pipeline.settle_for(ev.subject):  # a retry of a trial in flight: answer from the store
                return self._trial(src, req, t)
            stored = self.store.lookup(ev.subject, ev.session, ev.trial)
            if stored is None:
                return self._error(req.id, "out_of_order", f"trial {ev.trial} is not stored and is behind the "
                                                           f"session (expected {state.last_trial + 1})", "trial")
            return self._duplicate(req.id, ev, stored)
        if ev.trial != state.last_trial + 1:
            return self._error(req.id, "out_of_order", f"trial {ev.trial} of session {ev.session!r} arrived "
                                                       f"before trial {state.last_trial + 1} (expected "
                                                       f"{state.last_trial + 1})", "trial")
        if info.rig != ev.rig:
            return self._error(req.id, "bad_field", f"session {ev.session!r} runs on rig {info.rig!r}, not on "
                                                    f"{ev.rig!r}", "rig")
        rules = self.rulebook.for_session(info)
        if ev.wall_time == 0.0:
            # the rig sent no start time: stamp ours before step, so the stored event (and
            # so replay) has the time the schedule saw; retries match it by _same_trial
            ev = replace(ev, wall_time=float(self.clock()))
        new_state, decision, update = step(state, ev, rules)
        snapshot = None
        if new_state.trials_total % self.snapshot_every == 0 or decision.end_session:
            snapshot = new_state.to_bytes()
        pending = Pending(src, req.id, t, ev, decision, update, snapshot, new_state)
        cur.overlay[ev.subject] = new_state
        cur.trials.append(pending)
        cur.keys[key] = pending
        return pending

    def _duplicate(self, req_id: Any, ev: TrialEvent, stored: tuple[TrialEvent, Decision]) -> Any:
        stored_event, decision = stored
        if not _same_trial(ev, stored_event):
            return self._error(req_id, "conflict", str(ConflictingTrial(*ev.key)), "trial")
        self.counts["duplicates"] += 1
        return wire.DecisionReply(req_id, decision, True)

    def _state(self, subject: str) -> SubjectState | None:
        """The subject's newest state: stepped in this batch, else in the batch in flight,
        else committed, else recovered from the store (a subject with no trial in flight)."""
        pipeline = self.pipeline
        state = pipeline.cur.overlay.get(subject)
        busy = pipeline.busy
        if state is None and busy is not None:
            state = busy.overlay.get(subject)
        if state is None:
            state = self.subjects.states.get(subject)
        if state is None:
            state = self.subjects.recover(subject)
        return state

    # -- sessions ---------------------------------------------------------------------

    def _open_session(self, src: Any, req: Any) -> Any:
        bad = self._check_rig(src, req.rig, req.id)
        if bad is not None:
            return bad
        subject, session = req.subject, req.session
        stored = self.store.session(subject, session)
        if stored is not None:
            if stored.closed_at is not None:
                return self._error(req.id, "unknown_session", f"session {session!r} of subject {subject!r} was "
                                                             "closed; use a new session id", "session")
            differs = _open_differs(stored, req)
            if differs is not None:
                name, was, came = differs
                return self._error(req.id, "conflict", f"session {session!r} of subject {subject!r} is already "
                                                       f"open with {name} {was!r}, and this open says {came!r}; "
                                                       "resend the original open, or use a new session id", name)
            return wire.DecisionReply(req.id, self._current_decision(stored), True)
        served = self.rulebook.named
        rules = served.get(req.rules)
        if rules is None:
            return self._error(req.id, "bad_field", f"no rule file named {req.rules!r} is served here "
                                                        f"(served: {', '.join(sorted(served))})", "rules")
        profile_name = getattr(req, "profile", None) or self.profiles.get(req.rig)
        try:
            valve = _valve(profile_name)
        except RuleError as err:
            return self._error(req.id, "bad_field", _profile_problem(profile_name, err), "profile")
        state = self._state(subject)
        previous = self.subjects.open.get(subject)
        if previous is not None:
            self._close(previous, self.clock(), reason="replaced by a new session")
            state = self._state(subject)
        if state is None:
            state = new_subject(subject, rules)
        opened_at = float(getattr(req, "wall_time", None) or self.clock())
        state, first = begin_session(state, rules, session=session, rig=req.rig, wall_time=opened_at,
                                     seed=getattr(req, "seed", None), valve=valve)
        meta: dict[str, Any] = {"first_decision": first.to_dict()}
        if valve is not None:
            meta["valve"] = list(valve)
        name = req.rules
        info = SessionInfo.new(subject, session, req.rig, name, rules.text, state.context.seed, opened_at,
                               profile=profile_name, meta=meta)
        info = self.store.open_session(info)
        self.store.save_snapshot(subject, session, 0, state.to_bytes())
        self.subjects.snapshot_at[subject] = (session, 0)
        self.subjects.states[subject] = state
        self.subjects.open[subject] = info
        self.counts["sessions_opened"] += 1
        self.log.info("session_opened", subject=subject, session=session, rig=req.rig, rules=name)
        if self.publisher is not None:
            self.publisher.session_opened(subject, session, req.rig, first, state, rules)
        return wire.DecisionReply(req.id, first, False)

    def _current_decision(self, info: SessionInfo) -> Decision:
        last = self.store.last_trial(info.subject, info.session)
        if last == 0:
            return Decision.from_dict(info.meta["first_decision"])
        return self.store.lookup(info.subject, info.session, last)[1]

    def _close(self, info: SessionInfo, closed_at: float, reason: str) -> None:
        state = self._state(info.subject)
        if state is not None and state.context is not None and state.context.session == info.session:
            self.subjects.save_snapshot(info.subject, state)
        self.store.close_session(info.subject, info.session, closed_at)
        open_ = self.subjects.open
        if open_.get(info.subject) is info or (open_.get(info.subject) or info).session == info.session:
            open_.pop(info.subject, None)
        self.counts["sessions_closed"] += 1
        self.log.info("session_closed", subject=info.subject, session=info.session, reason=reason)

    def _close_session(self, src: Any, req: Any) -> Any:
        info = self.store.session(req.subject, req.session)
        if info is None:
            return self._error(req.id, "unknown_session", f"subject {req.subject!r} has no session "
                                                          f"{req.session!r}", "session")
        bad = self._check_rig(src, info.rig, req.id)
        if bad is not None:
            return bad
        if info.closed_at is None:
            self._close(info, float(getattr(req, "wall_time", None) or self.clock()), reason="closed by the rig")
            if self.publisher is not None:
                self.publisher.session_closed(req.subject, req.session)
        return wire.Ack(req.id, "close")

    def _query_state(self, src: Any, req: Any) -> Any:
        rig = src.rig if type(src) is ZmqSource else None
        if rig is not None and rig != OPERATOR and all(i.rig != rig for i in self.store.sessions(req.subject)):
            # the same answer whether or not the subject exists: a rig learns nothing of others
            return self._error(req.id, "bad_field", f"rig {rig!r} has run no session of subject {req.subject!r}; "
                                                    "a rig's key may query only subjects whose sessions ran on "
                                                    "that rig", "subject")
        state = self._state(req.subject)
        if state is None:
            return self._error(req.id, "unknown_session", f"no subject {req.subject!r} in this store", "subject")
        info = self.subjects.open.get(req.subject)
        if info is None:
            infos = self.store.sessions(req.subject)
            last = infos[-1] if infos else None
            rules = self.rulebook.for_session(last) if last is not None else None
        else:
            rules = self.rulebook.for_session(info)
        out = summary(state, rules, None) if rules is not None else {"subject": req.subject}
        out["open_session"] = info.session if info is not None else None
        return wire.StateReply(req.id, req.subject, out)

    def _check_rig(self, src: Any, claimed: str, req_id: Any) -> Any:
        """An error reply when the payload's rig is not the connection's rig, else None."""
        if src.rig is not None and claimed != src.rig:
            return self._error(req_id, "bad_field", f"this connection belongs to rig {src.rig!r}; a message for "
                                                    f"rig {claimed!r} cannot come from it", "rig")
        return None


def _valve(profile_name: str | None) -> tuple[float, float] | None:
    """The rig profile's valve calibration as (ms per ul, ms offset), or None."""
    if not profile_name:
        return None
    from ..rules import load_profile

    profile = load_profile(profile_name)
    if not profile.slope:
        return None
    # ul = intercept + slope * ms  =>  ms = ul / slope - intercept / slope
    return (1.0 / profile.slope, -profile.intercept / profile.slope)


def _open_differs(stored: SessionInfo, req: Any) -> tuple[str, Any, Any] | None:
    """(field, stored value, requested value) of the first way a repeated open differs
    from the session already open (rig, rule file, seed, profile), else None. A seed or
    profile left out of the repeat asks for nothing, so it differs from nothing."""
    if req.rig != stored.rig:
        return "rig", stored.rig, req.rig
    if req.rules != stored.rules_name:
        return "rules", stored.rules_name, req.rules
    if req.seed is not None and req.seed != stored.seed:
        return "seed", stored.seed, req.seed
    if req.profile is not None and req.profile != stored.profile:
        return "profile", stored.profile, req.profile
    return None


def _profile_problem(name: str, err: RuleError) -> str:
    """One sentence on a rig profile that cannot be used: the host's file is at fault."""
    problems = "; ".join(err.problems)
    return (f"rig profile {name!r} cannot be used: {problems} (fix the profile file on the rigloop host, "
            "or name another profile)")


def _same_trial(incoming: TrialEvent, stored: TrialEvent) -> bool:
    """A retry matches the stored trial; one sent without a start time matches the
    stored trial that the daemon stamped on its first arrival."""
    if incoming == stored:
        return True
    return incoming.wall_time == 0.0 and incoming == replace(stored, wall_time=0.0)


def req_id(req: Any) -> Any:
    """The request's id, wherever its type keeps it (None if it has none)."""
    rid = getattr(req, "id", None)
    return rid if rid is not None else getattr(req, "request_id", None)
