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
import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import msgpack
import numpy as np

from ..errors import BadArgument, StoreError
from .behaviour import (
    DEFAULT_PRIOR_VAR,
    DEFAULT_SIGMA2,
    band,
    dprime_estimate,
    logistic,
    p_difference_above,
)
from .curve import LearningCurve
from .features import make_representation
from .learners import LEARNERS, make_learner
from .values import builder

STATE_FORMAT = 2  # 2: behaviour estimates and the choice kernel (a format-1 snapshot is replayed past)
ALL = "all"  # the condition that pools every scored trial


@dataclass(frozen=True, slots=True)
class SessionContext:
    """The session a subject is in: its id, rig, seed and the rule file's hash."""

    session: str
    rig: str
    seed: int
    rules_sha256: str
    valve: tuple[float, float] | None = None  # (ms per µL, ms offset) from the rig profile's fit
    first_decision: Mapping[str, Any] | None = None


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


# step builds a SubjectState per trial without the frozen __init__ (see values.py)
_next_state = builder(SubjectState)


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


# --------------------------------------------------------------------------- model wiring


def representation_for(rules):
    """The feature representation a rule file asks for (cached per rule file)."""
    hit = _REP_BY_RULES.get(id(rules))
    if hit is not None and hit[0] is rules:
        return hit[1]
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


# --------------------------------------------------------------------------- the view rules read


class ModelView:
    """What a rule expression may read from the model: the ``SubjectView`` protocol.

    Values are computed lazily and cached, so a rule that asks for one cue's value
    costs one small quadratic form.
    """

    __slots__ = ("_learner", "_rep", "_curves", "_chance", "_sigma2", "_values", "_held", "_read", "_finite",
                 "_behaviour", "_bsigma2", "_bprior", "_actions", "_choice")

    def __init__(self, learner, rep, curves: Mapping[str, Mapping[str, Any]], chance: float, sigma2: float,
                 finite: bool | None = None, held: dict[str, LearningCurve] | None = None,
                 behaviour: Mapping[str, tuple] | None = None, bsigma2: float = DEFAULT_SIGMA2,
                 bprior: float = DEFAULT_PRIOR_VAR, actions: Mapping[str, tuple[str, ...]] | None = None,
                 choice_cues: frozenset[str] = frozenset()):
        """``finite``: whether every entry of the learner's state is finite, if known;
        ``held``: curves equal to the ones their states give (a dict the view takes over);
        ``behaviour``: the per-cue behaviour estimates ``(x, var, n)`` with their random-walk
        and prior variances; ``actions``: cue -> its actions when the learner holds action
        values (None: cue values); ``choice_cues``: the two-choice cues."""
        self._learner = learner
        self._finite = finite
        self._rep = rep
        self._curves = curves
        self._chance = chance
        self._sigma2 = sigma2
        self._values: dict[str, tuple[float, float]] = {}  # cue -> (mean, sd)
        self._held: dict[str, LearningCurve] = {} if held is None else held  # condition -> its curve
        self._read = None  # the learner's onset reader, made on first use
        self._behaviour = {} if behaviour is None else behaviour
        self._bsigma2, self._bprior = bsigma2, bprior
        self._actions = actions
        self._choice = choice_cues

    def _value(self, cue: str) -> tuple[float, float]:
        hit = self._values.get(cue)
        if hit is None and self._actions is not None:
            hit = self._values[cue] = self._policy_value(cue)
        if hit is None:
            read = self._read
            if read is None:
                read = self._read = self._learner._onset_reader(self._finite)
            mean, var = read(*self._rep._onset_entry(cue))
            hit = (float(mean), math.sqrt(max(float(var), 0.0)))
            self._values[cue] = hit
        return hit

    def value_mean(self, cue: str) -> float:
        return self._value(cue)[0]

    def value_sd(self, cue: str) -> float:
        return self._value(cue)[1]

    def prob_value_above(self, cue: str, threshold: float) -> float:
        mean, sd = self._value(cue)
        if sd <= 0.0:
            return 1.0 if mean > threshold else 0.0
        # P(V > t) for V ~ N(mean, sd^2)
        return 0.5 * math.erfc((threshold - mean) / (sd * math.sqrt(2.0)))

    def _curve(self, cond: str) -> LearningCurve:
        hit = self._held.get(cond)
        if hit is None:
            data = self._curves.get(cond)
            hit = LearningCurve(self._chance, self._sigma2) if data is None else LearningCurve.from_state(data)
            self._held[cond] = hit
        return hit

    def p_correct(self, cond: str) -> float:
        return float(self._curve(cond).p())

    def p_interval(self, cond: str, level: float) -> tuple[float, float]:
        lo, hi = self._curve(cond).interval(level)
        return float(lo), float(hi)

    def prob_above_chance(self, cond: str) -> float:
        return float(self._curve(cond).prob_above_chance())

    def trials_in_condition(self, cond: str) -> int:
        return int(self._curve(cond).n)

    # -- action values ----------------------------------------------------------

    def action_probs(self, cue: str) -> tuple[float, ...]:
        """P(each of the cue's actions) by the animal's behaviour estimate: (respond,
        withhold) = (p, 1 - p), or (left, right) = (1 - p_right, p_right)."""
        p = self.p_behaviour(cue)
        return (1.0 - p, p) if cue in self._choice else (p, 1.0 - p)

    def q_value(self, cue: str, action: str) -> tuple[float, float]:
        """(mean, sd) of the value of doing ``action`` on ``cue`` (action-value learners)."""
        return self._value(action_cue(cue, action)) if self._actions is not None else (math.nan, math.nan)

    def _policy_value(self, cue: str) -> tuple[float, float] | None:
        """The value of a cue under the animal's own behaviour: the row sum_a p(a) x(cue:a),
        its mean and sd by the learner's prediction. None for a feature column of its own."""
        if cue not in self._actions:
            return None  # a "cue:action" column itself: read below
        rows = [self._rep._onset_entry(action_cue(cue, a))[0] for a in self._actions[cue]]
        x = sum(p * row for p, row in zip(self.action_probs(cue), rows))
        mean, var = self._learner.predict(x)
        return float(mean), math.sqrt(max(float(var), 0.0))

    # -- the animal's behaviour ---------------------------------------------------

    def behaviour_state(self, cue: str) -> tuple[float, float]:
        """(mean, variance) of the cue's logit behaviour state on its next trial."""
        hit = self._behaviour.get(cue)
        if hit is None:
            return 0.0, self._bprior + self._bsigma2
        return hit[0], hit[1] + self._bsigma2

    def p_behaviour(self, cue: str) -> float:
        """Estimated P(respond | cue), or P(right | cue) for a two-choice cue."""
        return logistic(self.behaviour_state(cue)[0])

    def behaviour_interval(self, cue: str, level: float) -> tuple[float, float]:
        return band(*self.behaviour_state(cue), level)

    def p_discriminates(self, a: str, b: str, margin: float) -> float:
        return p_difference_above(*self.behaviour_state(a), *self.behaviour_state(b), margin)

    def dprime_between(self, a: str, b: str, level: float) -> tuple[float, float, float]:
        return dprime_estimate(*self.behaviour_state(a), *self.behaviour_state(b), level)

    def side_bias(self) -> float:
        """Mean of P(right | cue) over the two-choice cues, minus 1/2 (0 without such cues)."""
        if not self._choice:
            return 0.0
        cues = sorted(self._choice)
        return sum(self.p_behaviour(c) for c in cues) / len(cues) - 0.5
