"""TrialEvent and Decision: the frozen values that flow between rig and rigloop.

A ``TrialEvent`` is one finished trial as the rig saw it; a ``Decision`` is what
rigloop tells the rig to do next. Both validate on construction, so a value that
exists is a value that is sane. Both convert to and from plain dicts of builtins
(``to_dict`` / ``from_dict``) for msgpack, JSON and the store; the round trip is exact.

Times are seconds from trial start; reward volumes are µL; probabilities are in [0, 1].
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from typing import Any

from ..errors import BadEvent
from .quick_init import quick_init

RESPONSE_RESULTS = ("correct", "incorrect", "omitted")
PUNISHMENTS = ("timeout", "airpuff", "noise")
_ID_MAX = 64
_EXTRA_MAX = 32
_INF = math.inf

Scalar = bool | int | float | str | None
_GOOD_IDS: set[str] = set()  # identifiers _ident has passed (cleared when full: any text may come in)
_GOOD_IDS_MAX = 4096


# --------------------------------------------------------------------------- checks


def _ident(name: str, value: Any) -> str:
    if type(value) is str:
        if value in _GOOD_IDS:
            return value  # subjects, rigs, sessions and cues repeat on every trial
        if 0 < len(value) <= _ID_MAX and value.isprintable() and value == value.strip():
            if len(_GOOD_IDS) >= _GOOD_IDS_MAX:
                _GOOD_IDS.clear()
            _GOOD_IDS.add(value)
            return value  # the checks below say what is wrong
    if not isinstance(value, str) or not value:
        raise BadEvent(name, "must be a non-empty string", value)
    if len(value) > _ID_MAX or not value.isprintable() or value != value.strip():
        raise BadEvent(name, f"must be printable, without surrounding spaces, at most {_ID_MAX} characters", value)
    return value


def _fine(value: Any) -> bool:
    """A plain float that is finite and >= 0: what most fields hold, passed in one test."""
    return type(value) is float and value >= 0.0 and value != _INF  # NaN fails the >=


def _number(name: str, value: Any, *, minimum: float | None = 0.0, optional: bool = False) -> float | None:
    if value is None and optional:
        return None
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise BadEvent(name, "must be a number", value)
    value = float(value)
    if not math.isfinite(value):
        raise BadEvent(name, "must be a finite number", value)
    if minimum is not None and value < minimum:
        raise BadEvent(name, f"must be a finite number >= {minimum:g}", value)
    return value


def _count(name: str, value: Any, minimum: int = 0) -> int:
    if isinstance(value, bool) or not isinstance(value, int):
        raise BadEvent(name, "must be a whole number", value)
    if value < minimum:
        raise BadEvent(name, f"must be a whole number >= {minimum}", value)
    return value


def _extra(name: str, value: Any) -> dict[str, Scalar]:
    if value is None or (type(value) is dict and not value):
        return {}
    if not isinstance(value, Mapping):
        raise BadEvent(name, "must be a map of names to numbers, strings or booleans", value)
    if len(value) > _EXTRA_MAX:
        raise BadEvent(name, f"may hold at most {_EXTRA_MAX} entries", len(value))
    out: dict[str, Scalar] = {}
    for key, item in value.items():
        _ident(f"{name} key", key)
        if isinstance(item, float) and not math.isfinite(item):
            raise BadEvent(f"{name}.{key}", "must be finite", item)
        if isinstance(item, str) and len(item) > 256:
            raise BadEvent(f"{name}.{key}", "must be at most 256 characters", item)
        if item is not None and not isinstance(item, (bool, int, float, str)):
            raise BadEvent(f"{name}.{key}", "must be a number, string, boolean or nil", item)
        out[key] = item
    return dict(sorted(out.items()))


# --------------------------------------------------------------------------- parts


@quick_init
@dataclass(frozen=True, slots=True)
class CuePresentation:
    """One cue shown during a trial, from ``onset`` to ``offset`` (s from trial start)."""

    cue: str
    onset: float
    offset: float

    def __post_init__(self) -> None:
        _ident("cue", self.cue)
        if not _fine(self.onset):
            object.__setattr__(self, "onset", _number(f"cues[{self.cue}].onset", self.onset))
        if not _fine(self.offset):
            object.__setattr__(self, "offset", _number(f"cues[{self.cue}].offset", self.offset))
        if self.offset < self.onset:
            raise BadEvent(f"cues[{self.cue}].offset", f"must not be before its onset {self.onset:g} s", self.offset)


@quick_init
@dataclass(frozen=True, slots=True)
class Outcome:
    """What the rig delivered: reward volume and time, and any punishment."""

    reward_ul: float = 0.0
    reward_time: float | None = None
    punishment: str | None = None
    punishment_time: float | None = None
    timeout_s: float = 0.0

    def __post_init__(self) -> None:
        if not _fine(self.reward_ul):
            object.__setattr__(self, "reward_ul", _number("outcome.reward_ul", self.reward_ul))
        if self.reward_time is not None and not _fine(self.reward_time):
            object.__setattr__(self, "reward_time", _number("outcome.reward_time", self.reward_time, optional=True))
        if self.punishment_time is not None and not _fine(self.punishment_time):
            object.__setattr__(self, "punishment_time", _number("outcome.punishment_time", self.punishment_time,
                                                                optional=True))
        if not _fine(self.timeout_s):
            object.__setattr__(self, "timeout_s", _number("outcome.timeout_s", self.timeout_s))
        if self.reward_ul > 0 and self.reward_time is None:
            raise BadEvent("outcome.reward_time", "is required when reward_ul > 0", None)
        if self.punishment is not None and self.punishment not in PUNISHMENTS:
            raise BadEvent("outcome.punishment", f"must be one of {', '.join(PUNISHMENTS)} or nil", self.punishment)

    @property
    def rewarded(self) -> bool:
        return self.reward_ul > 0


@quick_init
@dataclass(frozen=True, slots=True)
class Response:
    """What the animal did: ``kind`` (e.g. ``licks``, ``choice``, ``lever``), its ``value``
    (lick count, side, presses), the scored ``result`` and the ``latency`` in s."""

    kind: str = "none"
    value: float | str | None = None
    result: str | None = None
    latency: float | None = None

    def __post_init__(self) -> None:
        _ident("response.kind", self.kind)
        if isinstance(self.value, bool):
            raise BadEvent("response.value", "must be a number, a string or nil", self.value)
        if type(self.value) is float and math.isfinite(self.value):
            pass  # the common case: a finite float needs no conversion
        elif isinstance(self.value, (int, float)):
            object.__setattr__(self, "value", _number("response.value", self.value, minimum=None))
        elif self.value is not None:
            if not isinstance(self.value, str):
                raise BadEvent("response.value", "must be a number, a string or nil", self.value)
            _ident("response.value", self.value)
        if self.result is not None and self.result not in RESPONSE_RESULTS:
            raise BadEvent("response.result", f"must be one of {', '.join(RESPONSE_RESULTS)} or nil", self.result)
        if self.latency is not None and not _fine(self.latency):
            object.__setattr__(self, "latency", _number("response.latency", self.latency, optional=True))


@quick_init
@dataclass(frozen=True, slots=True)
class TrialStep:
    """One step of a multi-step trial: the ``state`` shown (a cue or a task state), the
    ``action`` the animal took there (None: none), its ``time`` (s from trial start) and
    the reward delivered at that step, ``reward_ul`` (µL, 0 for none).

    A trial's steps are in the order the animal went through them, so their times never
    decrease. A trial without steps is a one-step trial, read from its cues and response."""

    state: str
    action: str | None = None
    time: float = 0.0
    reward_ul: float = 0.0
    index: int = field(default=0, compare=False, repr=False)  # its place in the trial, for error messages

    def __post_init__(self) -> None:
        where = f"steps[{self.index}]"
        if not isinstance(self.state, str) or not self.state:
            raise BadEvent(f"{where}.state", "must be a non-empty string (the state or cue shown)", self.state)
        _ident(f"{where}.state", self.state)
        if self.action is not None:
            if not isinstance(self.action, str) or not self.action:
                raise BadEvent(f"{where}.action", "must be a non-empty string or nil (no action)", self.action)
            _ident(f"{where}.action", self.action)
        if not _fine(self.time):
            object.__setattr__(self, "time", _number(f"{where}.time", self.time))
        if not _fine(self.reward_ul):
            object.__setattr__(self, "reward_ul", _number(f"{where}.reward_ul", self.reward_ul))

    def to_dict(self) -> dict[str, Any]:
        return {"state": self.state, "action": self.action, "time": self.time, "reward_ul": self.reward_ul}


STEP_FIELDS = ("state", "action", "time", "reward_ul")
MAX_STEPS = 16


def _steps(value: Any) -> tuple[TrialStep, ...]:
    """A trial's steps checked: TrialStep values (or maps of their fields), at most
    ``MAX_STEPS``, times in order."""
    if not isinstance(value, (list, tuple)):
        raise BadEvent("steps", "must be a list of steps (state, action, time, reward_ul)", value)
    if len(value) > MAX_STEPS:
        raise BadEvent("steps", f"may hold at most {MAX_STEPS} steps", len(value))
    out = []
    for i, item in enumerate(value):
        if isinstance(item, TrialStep):
            item = TrialStep(item.state, item.action, item.time, item.reward_ul, i)
        elif isinstance(item, Mapping):
            unknown = sorted(set(map(str, item)) - set(STEP_FIELDS))
            if unknown:
                raise BadEvent(f"steps[{i}].{unknown[0]}", f"is not a step field (fields: {', '.join(STEP_FIELDS)})",
                               item[unknown[0]])
            if "state" not in item:
                raise BadEvent(f"steps[{i}].state", "is missing", None)
            item = TrialStep(item["state"], item.get("action"), item.get("time", 0.0), item.get("reward_ul", 0.0), i)
        else:
            raise BadEvent(f"steps[{i}]", "must be a map of state, action, time, reward_ul", item)
        if out and item.time < out[-1].time:
            raise BadEvent(f"steps[{i}].time", f"must not be before the previous step's time {out[-1].time:g} s",
                           item.time)
        out.append(item)
    return tuple(out)


# --------------------------------------------------------------------------- event


@quick_init
@dataclass(frozen=True, slots=True)
class TrialEvent:
    """One finished trial, as reported by a rig.

    ``wall_time`` is the trial's start on the wall clock (s since the Unix epoch),
    set by the rig or stamped by the daemon on receipt; the core reads time only from
    here, never from a clock, so replay sees what live saw.
    """

    subject: str
    rig: str
    session: str
    trial: int
    cues: tuple[CuePresentation, ...] = ()
    outcome: Outcome = field(default_factory=Outcome)
    response: Response = field(default_factory=Response)
    duration: float | None = None
    wall_time: float = 0.0
    extra: Mapping[str, Scalar] = field(default_factory=dict)
    steps: tuple[TrialStep, ...] = ()

    def __post_init__(self) -> None:
        _ident("subject", self.subject)
        _ident("rig", self.rig)
        _ident("session", self.session)
        if type(self.trial) is not int or self.trial < 1:
            _count("trial", self.trial, minimum=1)
        cues = self.cues
        if type(cues) is not tuple or len(cues) != 1 or type(cues[0]) is not CuePresentation:
            # (one cue, the common case, is already in order)
            cues = tuple(cues)
            if not all(isinstance(c, CuePresentation) for c in cues):
                raise BadEvent("cues", "must be CuePresentation values", self.cues)
            if len({c.cue for c in cues}) != len(cues):
                raise BadEvent("cues", "must name each cue at most once per trial", [c.cue for c in cues])
            object.__setattr__(self, "cues", tuple(sorted(cues, key=lambda c: (c.onset, c.cue))))
        if not isinstance(self.outcome, Outcome):
            raise BadEvent("outcome", "must be an Outcome", self.outcome)
        if not isinstance(self.response, Response):
            raise BadEvent("response", "must be a Response", self.response)
        if not _fine(self.wall_time):
            object.__setattr__(self, "wall_time", _number("wall_time", self.wall_time))
        object.__setattr__(self, "extra", _extra("extra", self.extra))
        if self.steps != ():
            steps = _steps(self.steps)
            object.__setattr__(self, "steps", steps)
            paid = math.fsum(s.reward_ul for s in steps)
            if paid > 0 and not math.isclose(paid, self.outcome.reward_ul, rel_tol=1e-9, abs_tol=1e-9):
                raise BadEvent("steps", f"rewards add up to {paid:g} uL but outcome.reward_ul is "
                                        f"{self.outcome.reward_ul:g} uL (the outcome holds the trial's total, "
                                        "which the water count uses)", paid)
        latest = max(self.event_times(), default=0.0)
        if self.duration is None:
            object.__setattr__(self, "duration", latest)
        else:
            duration = self.duration if _fine(self.duration) else _number("duration", self.duration)
            if duration < latest:
                raise BadEvent("duration", f"must cover every event in the trial (last at {latest:g} s)", duration)
            object.__setattr__(self, "duration", duration)

    @classmethod
    def _assembled(cls, subject: str, rig: str, session: str, trial: int, cues: tuple[CuePresentation, ...],
                   outcome: Outcome, response: Response, duration: float, wall_time: float,
                   extra: dict[str, Scalar]) -> TrialEvent:
        """The event ``TrialEvent(...)`` makes of these, without its checks: for parts that are
        already checked values, in order, with a duration that covers them (the simulated
        animal's, built from a checked decision). Its checks are a third of a simulated trial's
        own cost (tools/bench/compare.py); tests/test_simulate_animals.py holds every event of
        every preset equal to the checked construction."""
        new = object.__new__(cls)
        put = object.__setattr__
        put(new, "subject", subject)
        put(new, "rig", rig)
        put(new, "session", session)
        put(new, "trial", trial)
        put(new, "cues", cues)
        put(new, "outcome", outcome)
        put(new, "response", response)
        put(new, "duration", duration)
        put(new, "wall_time", wall_time)
        put(new, "extra", dict(sorted(extra.items())) if extra else {})
        put(new, "steps", ())
        return new

    # -- derived views ------------------------------------------------------

    def event_times(self) -> list[float]:
        times = [c.offset for c in self.cues]
        for t in (self.outcome.reward_time, self.outcome.punishment_time):
            if t is not None:
                times.append(t)
        if self.response.latency is not None:
            times.append(self.response.latency)
        if self.steps:
            times.append(self.steps[-1].time)
        return times

    @property
    def cue_ids(self) -> tuple[str, ...]:
        return tuple(c.cue for c in self.cues)

    @property
    def key(self) -> tuple[str, str, int]:
        return (self.subject, self.session, self.trial)

    def outcome_events(self) -> list[tuple[float, float]]:
        """``[(time, amount)]``: the reward as features.py wants it (amount in µL)."""
        if self.outcome.rewarded:
            return [(self.outcome.reward_time, self.outcome.reward_ul)]
        return []

    # -- context checks -------------------------------------------------------

    def check_context(
        self,
        *,
        known_cues: Iterable[str] | None = None,
        last_trial: int | None = None,
        outcome_before_cue_ok: bool = True,
    ) -> None:
        """Check the rules that need the session: cues it declares, numbering, timing.

        ``last_trial`` is the last trial stored for this session (0 or None if none).
        Raises BadEvent naming the field.
        """
        if known_cues is not None:
            allowed = set(known_cues)
            for c in self.cues:
                if c.cue not in allowed:
                    raise BadEvent(
                        "cues", f"names a cue this session does not use (allowed: {', '.join(sorted(allowed))})", c.cue
                    )
        if last_trial is not None and self.trial != last_trial + 1:
            raise BadEvent("trial", f"must follow the last stored trial {last_trial} (expected {last_trial + 1})", self.trial)
        if not outcome_before_cue_ok and self.outcome.rewarded:
            first = min((c.onset for c in self.cues), default=None)
            if first is None or self.outcome.reward_time < first:
                raise BadEvent("outcome.reward_time", "must not come before the first cue in this task", self.outcome.reward_time)

    # -- plain data -----------------------------------------------------------

    def to_dict(self) -> dict[str, Any]:
        """Plain data; ``steps`` appears only when the trial has steps, so a one-step
        trial's dict (and its stored text) is what it always was."""
        out = {
            "subject": self.subject,
            "rig": self.rig,
            "session": self.session,
            "trial": self.trial,
            "cues": [[c.cue, c.onset, c.offset] for c in self.cues],
            "outcome": {
                "reward_ul": self.outcome.reward_ul,
                "reward_time": self.outcome.reward_time,
                "punishment": self.outcome.punishment,
                "punishment_time": self.outcome.punishment_time,
                "timeout_s": self.outcome.timeout_s,
            },
            "response": {
                "kind": self.response.kind,
                "value": self.response.value,
                "result": self.response.result,
                "latency": self.response.latency,
            },
            "duration": self.duration,
            "wall_time": self.wall_time,
            "extra": dict(self.extra),
        }
        if self.steps:
            out["steps"] = [s.to_dict() for s in self.steps]
        return out

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> TrialEvent:
        """Build from plain data (a decoded message or a stored row); BadEvent names the fault."""
        if type(data) is not dict and not isinstance(data, Mapping):
            raise BadEvent("trial event", "must be a map", type(data).__name__, raw=data)
        allowed = _EVENT_FIELDS
        unknown = () if data.keys() <= allowed else sorted(set(map(str, data)) - allowed)
        if unknown:
            raise BadEvent(unknown[0], f"is not a trial field (fields: {', '.join(sorted(allowed))})", data[unknown[0]], raw=data)
        for name in ("subject", "rig", "session", "trial"):
            if name not in data:
                raise BadEvent(name, "is missing", None, raw=data)
        try:
            cues = tuple(_cue_from(item) for item in _seq("cues", data.get("cues", ())))
            outcome = Outcome(**_sub("outcome", data.get("outcome"), Outcome.__dataclass_fields__))
            response = Response(**_sub("response", data.get("response"), Response.__dataclass_fields__))
            return cls(
                subject=data["subject"],
                rig=data["rig"],
                session=data["session"],
                trial=data["trial"],
                cues=cues,
                outcome=outcome,
                response=response,
                duration=data.get("duration"),
                wall_time=data.get("wall_time", 0.0),
                extra=data.get("extra") or {},
                steps=data.get("steps") or (),
            )
        except BadEvent as err:
            err.raw = data
            raise


_EVENT_FIELDS = frozenset(
    {"subject", "rig", "session", "trial", "cues", "outcome", "response", "duration", "wall_time", "extra", "steps"}
)


# --------------------------------------------------------------------------- the plain event's fast path


def _plain_ident(value: Any) -> bool:
    """What ``_ident`` passes in its first line."""
    return type(value) is str and 0 < len(value) <= _ID_MAX and value.isprintable() and value == value.strip()


def _plain_time(value: Any) -> bool:
    """None or what ``_fine`` passes (an optional time)."""
    return value is None or (type(value) is float and value >= 0.0 and value != _INF)


_OUTCOME_FIELDS = frozenset({"reward_ul", "reward_time", "punishment", "punishment_time", "timeout_s"})
_RESPONSE_FIELDS = frozenset({"kind", "value", "result", "latency"})
_new = object.__new__
_set = object.__setattr__


def plain_event(data: Any) -> TrialEvent | None:
    """``TrialEvent.from_dict(data)`` for the trial a rig usually sends -- a dict of plain
    values, one-step, without extras, every time a float -- built with each value tested
    once; None for anything else, which the caller hands to ``from_dict`` (the reference,
    which converts it or names the fault, so every error stays the reference's own).

    Why: decoding a trial message checked each value twice (the frame's limits, then each
    constructor's checks) and built the parts through keyword dicts; this is the daemon's
    per-trial validation in one pass. ``tests/test_wire_fast.py`` holds the two equal:
    every value this returns equals ``from_dict``'s, field by field."""
    if type(data) is not dict or not data.keys() <= _EVENT_FIELDS or data.get("steps"):
        return None
    extra = data.get("extra")
    if extra is not None and (type(extra) is not dict or extra):
        return None
    subject, rig, session, trial = data.get("subject"), data.get("rig"), data.get("session"), data.get("trial")
    if not (_plain_ident(subject) and _plain_ident(rig) and _plain_ident(session)
            and type(trial) is int and trial >= 1):
        return None
    raw_cues = data.get("cues", ())
    if type(raw_cues) is not list or len(raw_cues) > 32:
        return None
    cues = []
    for item in raw_cues:
        if type(item) is not list or len(item) != 3:
            return None
        name, onset, offset = item
        if not (_plain_ident(name) and _fine(onset) and _fine(offset) and offset >= onset):
            return None
        c = _new(CuePresentation)
        _set(c, "cue", name)
        _set(c, "onset", onset)
        _set(c, "offset", offset)
        cues.append(c)
    if len(cues) > 1:
        if len({c.cue for c in cues}) != len(cues):
            return None
        cues.sort(key=lambda c: (c.onset, c.cue))
    times = [c.offset for c in cues]  # in the reference's order (event_times), so max picks the same value
    o = data.get("outcome")
    if o is None:
        o = {}
    elif type(o) is not dict or not o.keys() <= _OUTCOME_FIELDS:
        return None
    reward_ul, reward_time = o.get("reward_ul", 0.0), o.get("reward_time")
    punishment, punishment_time = o.get("punishment"), o.get("punishment_time")
    timeout_s = o.get("timeout_s", 0.0)
    if not (_fine(reward_ul) and _fine(timeout_s) and _plain_time(reward_time) and _plain_time(punishment_time)
            and (punishment is None or (type(punishment) is str and punishment in PUNISHMENTS))
            and (reward_ul == 0.0 or reward_time is not None)):
        return None
    r = data.get("response")
    if r is None:
        r = {}
    elif type(r) is not dict or not r.keys() <= _RESPONSE_FIELDS:
        return None
    kind, value, result, latency = r.get("kind", "none"), r.get("value"), r.get("result"), r.get("latency")
    if not (_plain_ident(kind) and _plain_time(latency)
            and (value is None or (type(value) is float and math.isfinite(value)) or _plain_ident(value))
            and (result is None or (type(result) is str and result in RESPONSE_RESULTS))):
        return None
    wall_time, duration = data.get("wall_time", 0.0), data.get("duration")
    if not (_fine(wall_time) and _plain_time(duration)):
        return None
    for t in (reward_time, punishment_time, latency):
        if t is not None:
            times.append(t)
    latest = max(times, default=0.0)
    if duration is None:
        duration = latest
    elif duration < latest:
        return None
    outcome = _new(Outcome)
    _set(outcome, "reward_ul", reward_ul)
    _set(outcome, "reward_time", reward_time)
    _set(outcome, "punishment", punishment)
    _set(outcome, "punishment_time", punishment_time)
    _set(outcome, "timeout_s", timeout_s)
    response = _new(Response)
    _set(response, "kind", kind)
    _set(response, "value", value)
    _set(response, "result", result)
    _set(response, "latency", latency)
    ev = _new(TrialEvent)
    _set(ev, "subject", subject)
    _set(ev, "rig", rig)
    _set(ev, "session", session)
    _set(ev, "trial", trial)
    _set(ev, "cues", tuple(cues))
    _set(ev, "outcome", outcome)
    _set(ev, "response", response)
    _set(ev, "duration", duration)
    _set(ev, "wall_time", wall_time)
    _set(ev, "extra", {})
    _set(ev, "steps", ())
    return ev


def _seq(name: str, value: Any) -> list:
    if not isinstance(value, (list, tuple)):
        raise BadEvent(name, "must be a list", value)
    if len(value) > 32:
        raise BadEvent(name, "may hold at most 32 entries", len(value))
    return list(value)


def _cue_from(item: Any) -> CuePresentation:
    if type(item) is list and len(item) == 3:  # the common case, before the ABC test below
        return CuePresentation(*item)
    if isinstance(item, Mapping):
        unknown = set(item) - {"cue", "onset", "offset"}
        if unknown or "cue" not in item:
            raise BadEvent("cues", "entries must be [cue, onset, offset] or {cue, onset, offset}", item)
        return CuePresentation(item["cue"], item.get("onset"), item.get("offset"))
    if isinstance(item, (list, tuple)) and len(item) == 3:
        return CuePresentation(*item)
    raise BadEvent("cues", "entries must be [cue, onset, offset] or {cue, onset, offset}", item)


def _sub(name: str, value: Any, fields: Mapping[str, Any]) -> dict[str, Any]:
    if value is None:
        return {}
    if type(value) is not dict and not isinstance(value, Mapping):
        raise BadEvent(name, "must be a map", value)
    if value.keys() <= fields.keys():
        return dict(value)
    unknown = sorted(set(map(str, value)) - set(fields))
    if unknown:
        raise BadEvent(f"{name}.{unknown[0]}", f"is not a field of {name} (fields: {', '.join(fields)})", value[unknown[0]])
    return dict(value)


# --------------------------------------------------------------------------- decision


@quick_init
@dataclass(frozen=True, slots=True)
class Decision:
    """What the rig should do on trial ``trial`` (the next one) of a session.

    ``reward_armed`` is rigloop's draw, from ``reward_prob`` with the per-trial seeded
    generator, of whether a correct response on that trial earns ``reward_ul``;
    ``valve_ms`` is the valve open time for that volume when the rig profile has a
    calibration. ``reasons`` say which rules fired and the numbers they saw;
    ``overrides`` name welfare limits that changed a policy's choice; ``warnings`` are
    for the people at the rig.
    """

    subject: str
    session: str
    trial: int
    cue: str | None
    reward_prob: float
    reward_ul: float
    reward_armed: bool
    block: str
    stage: str
    end_session: bool = False
    difficulty: float | None = None
    valve_ms: float | None = None
    reasons: tuple[str, ...] = ()
    overrides: tuple[str, ...] = ()
    warnings: tuple[str, ...] = ()

    def __post_init__(self) -> None:
        # each check passes a plain, valid value in one test; anything else takes the
        # full check, which converts it or says what is wrong
        _ident("subject", self.subject)
        _ident("session", self.session)
        if type(self.trial) is not int or self.trial < 1:
            _count("trial", self.trial, minimum=1)
        if self.cue is not None:
            _ident("cue", self.cue)
        p = self.reward_prob
        if not (_fine(p) and p <= 1.0):
            p = _number("reward_prob", p)
            if p > 1:
                raise BadEvent("reward_prob", "must be a probability in [0, 1]", p)
            object.__setattr__(self, "reward_prob", p)
        if not _fine(self.reward_ul):
            object.__setattr__(self, "reward_ul", _number("reward_ul", self.reward_ul))
        d = self.difficulty
        if d is not None and not (type(d) is float and math.isfinite(d)):
            object.__setattr__(self, "difficulty", _number("difficulty", d, minimum=None, optional=True))
        if self.valve_ms is not None and not _fine(self.valve_ms):
            object.__setattr__(self, "valve_ms", _number("valve_ms", self.valve_ms, optional=True))
        for name in ("reasons", "overrides", "warnings"):
            texts = getattr(self, name)
            # a tuple of str (what step passes) stays as it is; anything else becomes one
            if type(texts) is not tuple or (texts and not all(type(t) is str for t in texts)):
                object.__setattr__(self, name, tuple(map(str, texts)))
        if type(self.reward_armed) is not bool:
            object.__setattr__(self, "reward_armed", bool(self.reward_armed))
        if type(self.end_session) is not bool:
            object.__setattr__(self, "end_session", bool(self.end_session))

    def to_dict(self) -> dict[str, Any]:
        return {
            "subject": self.subject,
            "session": self.session,
            "trial": self.trial,
            "cue": self.cue,
            "reward_prob": self.reward_prob,
            "reward_ul": self.reward_ul,
            "reward_armed": self.reward_armed,
            "block": self.block,
            "stage": self.stage,
            "end_session": self.end_session,
            "difficulty": self.difficulty,
            "valve_ms": self.valve_ms,
            "reasons": list(self.reasons),
            "overrides": list(self.overrides),
            "warnings": list(self.warnings),
        }

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> Decision:
        fields = cls.__dataclass_fields__
        unknown = sorted(set(data) - set(fields))
        if unknown:
            raise BadEvent(unknown[0], "is not a decision field", data[unknown[0]], raw=data)
        return cls(**dict(data))
