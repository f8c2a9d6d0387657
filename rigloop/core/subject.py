"""SubjectState: everything one animal carries from trial to trial.

The state is the animal's learner (weights and, for Bayesian learners, their
covariance), one learning curve per condition, the estimate of its own behaviour per
cue (``behaviour``: what it does, rigloop.behaviour), its choice-history kernel, and the
schedule (stage, block, counters, staircase, welfare tallies) owned by the rules package. It is a value:
``step`` never changes a state it is given, it returns a new one.

``to_bytes`` / ``from_bytes`` give an exact, deterministic byte round trip (msgpack),
used for snapshots: ``to_bytes(from_bytes(b)) == b``.
"""

from __future__ import annotations

import hashlib
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import msgpack
import numpy as np

from ..errors import BadArgument, StoreError
from .learners import LEARNERS
from .quick_init import quick_init

STATE_FORMAT = 2  # 2: behaviour estimates and the choice kernel (a format-1 snapshot is replayed past)
ALL = "all"  # the condition that pools every scored trial


@quick_init
@dataclass(frozen=True, slots=True)
class SessionContext:
    """The session a subject is in: its id, rig, seed and the rule file's hash."""

    session: str
    rig: str
    seed: int
    rules_sha256: str
    valve: tuple[float, float] | None = None  # (ms per µL, ms offset) from the rig profile's fit
    first_decision: Mapping[str, Any] | None = None


@quick_init
@dataclass(frozen=True, slots=True)
class SubjectState:
    """One animal's whole state between trials.

    ``learner`` is owned by this value: never mutate it; ``step`` works on a copy.
    ``curves`` maps a condition (a cue id, or ``"all"``) to its LearningCurve state dict.
    ``schedule`` is the rules package's ScheduleState. ``behaviour`` maps a cue to its
    behaviour estimate ``(x, var, n)`` (rigloop.behaviour.CueEstimate); ``choice_history``
    is the animal's recent-choice kernel h in [-1, 1] (+1 right).
    """

    subject: str
    learner: Any
    learner_key: str
    curves: Mapping[str, Mapping[str, Any]]
    schedule: Any
    context: SessionContext | None = None
    last_trial: int = 0
    trials_total: int = 0
    notes: tuple[str, ...] = field(default=())
    behaviour: Mapping[str, tuple[float, float, int]] = field(default_factory=dict)
    choice_history: float = 0.0

    # -- bytes ----------------------------------------------------------------

    def to_bytes(self) -> bytes:
        ctx = self.context
        doc = {
            "format": STATE_FORMAT,
            "subject": self.subject,
            "learner": {"name": self.learner.name, "key": self.learner_key, "state": _pack_arrays(self.learner.state())},
            "curves": {k: dict(sorted(v.items())) for k, v in sorted(self.curves.items())},
            "schedule": self.schedule.to_dict(),
            "context": None
            if ctx is None
            else {
                "session": ctx.session,
                "rig": ctx.rig,
                "seed": ctx.seed,
                "rules_sha256": ctx.rules_sha256,
                "valve": list(ctx.valve) if ctx.valve else None,
                "first_decision": dict(ctx.first_decision) if ctx.first_decision else None,
            },
            "last_trial": self.last_trial,
            "trials_total": self.trials_total,
            "notes": list(self.notes),
            "behaviour": {k: list(v) for k, v in sorted(self.behaviour.items())},
            "choice_history": self.choice_history,
        }
        return msgpack.packb(doc, use_bin_type=True)

    @classmethod
    def from_bytes(cls, blob: bytes, schedule_type) -> SubjectState:
        """Rebuild a state; ``schedule_type`` is the rules package's ScheduleState class."""
        try:
            doc = msgpack.unpackb(blob, raw=False, strict_map_key=True)
        except Exception as err:  # msgpack's errors share no base class
            raise StoreError(f"subject state snapshot is unreadable ({type(err).__name__}: {err})") from None
        if not isinstance(doc, dict) or doc.get("format") != STATE_FORMAT:
            raise StoreError(f"subject state snapshot has format {doc.get('format') if isinstance(doc, dict) else '?'}, "
                             f"this rigloop reads format {STATE_FORMAT}")
        learner_cls = LEARNERS[doc["learner"]["name"]]
        learner = learner_cls.from_state(_unpack_arrays(doc["learner"]["state"]))
        c = doc["context"]
        context = None
        if c is not None:
            context = SessionContext(
                session=c["session"],
                rig=c["rig"],
                seed=c["seed"],
                rules_sha256=c["rules_sha256"],
                valve=tuple(c["valve"]) if c["valve"] else None,
                first_decision=c["first_decision"],
            )
        return cls(
            subject=doc["subject"],
            learner=learner,
            learner_key=doc["learner"]["key"],
            curves=doc["curves"],
            schedule=schedule_type.from_dict(doc["schedule"]),
            context=context,
            last_trial=doc["last_trial"],
            trials_total=doc["trials_total"],
            notes=tuple(doc["notes"]),
            behaviour={k: (v[0], v[1], v[2]) for k, v in doc["behaviour"].items()},
            choice_history=doc["choice_history"],
        )

    def digest(self) -> str:
        """sha256 of the bytes: two states are identical exactly when digests are."""
        return hashlib.sha256(self.to_bytes()).hexdigest()




def _pack_arrays(state: Mapping[str, Any]) -> dict[str, Any]:
    out: dict[str, Any] = {}
    for key in sorted(state):
        value = state[key]
        if isinstance(value, np.ndarray):
            arr = np.ascontiguousarray(value)
            out[key] = {"nd": arr.dtype.str, "shape": list(arr.shape), "data": arr.tobytes()}
        elif isinstance(value, np.generic):
            out[key] = value.item()
        else:
            out[key] = value
    return out


def _unpack_arrays(state: Mapping[str, Any]) -> dict[str, Any]:
    out: dict[str, Any] = {}
    for key, value in state.items():
        if isinstance(value, dict) and "nd" in value:
            out[key] = np.frombuffer(value["data"], dtype=np.dtype(value["nd"])).reshape(value["shape"]).copy()
        else:
            out[key] = value
    return out


from .learner_setup import action_cue, feature_cues, learner_key, new_learner, representation_for  # noqa: F401
from .view import ModelView  # noqa: F401  (step and the daemon read it here)


def new_subject(subject: str, rules) -> SubjectState:
    """A subject that has never trained: prior learner, no curves, the rules' start."""
    if not isinstance(subject, str) or not subject:
        raise BadArgument("subject", "a non-empty string", subject)
    return SubjectState(
        subject=subject,
        learner=new_learner(rules),
        learner_key=learner_key(rules),
        curves={},
        schedule=rules.start_subject(),
    )


def resident(state: SubjectState) -> SubjectState:
    """``state`` kept compact while it waits for its subject's next trial (the daemon's
    cache of thousands of subjects): the learner drops its working buffers and rebuilds
    them, the same bits, when next used. Returns ``state`` itself."""
    state.learner._rest()
    return state
