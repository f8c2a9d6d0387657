"""Frozen specifications a rule file loads into.

These are plain values: the loader (``load.py``) builds and validates them, the engine
(``engine.py``) reads them. Learner and feature kinds are names only; this package
never imports the learners or features modules.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from ..core.performance import SEQUENTIAL_TESTS  # noqa: F401  (the loader reads the test names here)
from .expr import Expr

LEARNERS = ("rescorla_wagner", "kalman_filter", "td", "kalman_td", "two_step")
REWARD_LEARNERS = ("rescorla_wagner", "kalman_filter", "two_step")
FEATURE_KINDS = ("identity", "presence", "serial_compound", "trace")
CUE_ROLES = ("go_nogo", "go", "nogo", "left", "right", "plain")
SIDES = ("left", "right")


VALUE_KINDS = ("cue", "cue_action")
RESPOND_ACTIONS = ("respond", "withhold")  # what an animal can do on a go/no-go cue
CHOICE_ACTIONS = ("left", "right")  # ... and on a two-choice cue


@dataclass(frozen=True, slots=True)
class LearnerSpec:
    """The learner: ``name`` in LEARNERS; ``params`` floats (or per-cue lists).

    ``values``: ``cue`` (Pavlovian: the value of each cue) or ``cue_action`` (operant:
    the value of each (cue, action) pair, learned from what the animal did and got).
    """

    name: str
    params: dict[str, Any]
    values: str = "cue"


@dataclass(frozen=True, slots=True)
class BehaviourSpec:
    """The per-cue behaviour estimate (rigloop.behaviour): random-walk variance of the
    logit state per cue trial (forgetting) and its variance before the first trial."""

    sigma2: float = 0.2
    prior_var: float = 2.0


@dataclass(frozen=True, slots=True)
class OutcomeValues:
    """What each punishment is worth to the learner, in reward units (negative: aversive).

    A trial with ``punishment`` set (or ``timeout_s`` > 0 and none named, a timeout) adds
    its value at ``punishment_time`` (without one: at the response, else the last cue's end).
    """

    timeout: float = -0.5
    airpuff: float = -1.0
    noise: float = -0.25

    def value_of(self, punishment: str) -> float:
        return float(getattr(self, punishment))


@dataclass(frozen=True, slots=True)
class ResponseSpec:
    """The response model that turns learner values into a predicted response
    probability (``p_model[cue]``; rigloop.response_models, shared with ``fit``).

    go/no-go: p = lapse/2 + (1 - lapse) logistic(beta (V - theta)), V the cue's value (with
    action values: Q(respond) - Q(withhold)); two-choice (action values):
    p_right = lapse/2 + (1 - lapse) logistic(beta (Q_right - Q_left) + bias + persev h), h the
    choice-history kernel (decay per trial).
    """

    beta: float = 5.0
    theta: float | None = None  # None: 0.5 with cue values, 0 with action values
    lapse: float = 0.05
    bias: float = 0.0
    persev: float = 0.0
    decay: float = 0.7


@dataclass(frozen=True, slots=True)
class FeatureSpec:
    """How trials become features: ``kind`` in FEATURE_KINDS, bin width ``dt`` (s)."""

    kind: str
    dt: float = 0.25
    n_bins: int | None = None
    decay: float | None = None


@dataclass(frozen=True, slots=True)
class PerformanceSpec:
    """The state-space learning curve: chance level and random-walk variance."""

    chance: float = 0.5
    sigma2: float = 0.05


@dataclass(frozen=True, slots=True)
class CueSpec:
    """A cue the file uses. ``role``: ``go_nogo`` (a go cue in blocks that reward it, a
    no-go cue in blocks that do not: right for reversals), ``go`` / ``nogo`` (fixed),
    ``left`` / ``right`` (the correct side in a two-choice task), or ``plain``."""

    name: str
    role: str = "plain"
    label: str = ""


@dataclass(frozen=True, slots=True)
class Contingency:
    """What a cue earns in a block: reward probability ``p`` and volume ``ul`` (µL)."""

    p: float
    ul: float

    @property
    def rewarded(self) -> bool:
        return self.p > 0 and self.ul > 0


@dataclass(frozen=True, slots=True)
class NextCue:
    """The next-cue policy of a block.

    kinds: ``sequence`` (fixed order, cycled), ``balanced`` (shuffled mini-blocks, each
    cue ``repeats`` times, runs at most ``max_run``), ``weighted`` (independent draws),
    ``uncertain`` (the cue whose value sd is largest; ties at random), ``counter_bias``
    (two-choice: favour the side the animal under-chooses; ``anti_bias`` for a file that
    still says the old name, so its stored reasons replay word for word).
    """

    kind: str
    sequence: tuple[str, ...] = ()
    repeats: int = 1
    max_run: int = 3
    weights: tuple[tuple[str, float], ...] = ()
    window: int = 10
    max_p: float = 0.8


@dataclass(frozen=True, slots=True)
class RewardPolicy:
    """The reward-probability policy: ``fixed`` (the block's contingency) or ``thinning``
    (p falls from the contingency toward ``floor`` as ``certainty`` rises from 0 to 1)."""

    kind: str = "fixed"
    floor: float = 0.0
    certainty: Expr | None = None


@dataclass(frozen=True, slots=True)
class Staircase:
    """A transformed up-down staircase on a difficulty parameter (Levitt 1971).

    ``down`` correct in a row make it harder by ``step_harder``; ``up`` errors in a row
    make it easier by ``step_easier``. ``harder`` says which direction is harder
    (``lower`` for contrast or tone distance, ``higher`` for a delay).
    """

    parameter: str
    start: float
    down: int = 2
    up: int = 1
    step_harder: float = 0.05
    step_easier: float = 0.05
    lo: float = 0.0
    hi: float = 1.0
    harder: str = "lower"

    def target(self) -> float:
        """P(correct) the rule converges on with equal steps and up == 1: 0.5 ** (1/down)."""
        return 0.5 ** (1.0 / self.down)


@dataclass(frozen=True, slots=True)
class Sprt:
    """A block's sequential criterion on correct/incorrect trials of ``cond`` (a cue id or
    ``all``): does the animal perform at p1 rather than p0?

    ``test`` in SEQUENTIAL_TESTS: ``cusum`` (Page's CUSUM; false passes within ``horizon``
    trials at most ``alpha``), ``power_one`` (Robbins; false passes ever at most ``alpha``),
    ``wald`` (Wald's SPRT, restarting when it accepts p0; ``beta`` is its miss rate).
    ``beta`` is read by wald only, ``horizon`` by cusum only.
    """

    p0: float
    p1: float
    test: str = "cusum"
    alpha: float = 0.05
    beta: float = 0.2
    horizon: int = 2000
    cond: str = "all"


@dataclass(frozen=True, slots=True)
class BlockEnd:
    """When a block ends and where it goes: ``when`` is checked once ``min_trials`` are
    done; ``max_trials`` ends it regardless; ``then`` is the next block of the stage."""

    when: Expr | None
    min_trials: int
    max_trials: int | None
    then: str


@dataclass(frozen=True, slots=True)
class Block:
    name: str
    contingency: dict[str, Contingency]
    next_cue: NextCue
    reward: RewardPolicy
    end: BlockEnd | None
    staircase: Staircase | None = None
    sprt: Sprt | None = None

    @property
    def cues(self) -> tuple[str, ...]:
        return tuple(self.contingency)

    def rewarded_cues(self) -> tuple[str, ...]:
        return tuple(c for c, k in self.contingency.items() if k.rewarded)


@dataclass(frozen=True, slots=True)
class Move:
    """A stage transition: go to stage ``to`` when ``when`` holds."""

    when: Expr
    to: str


@dataclass(frozen=True, slots=True)
class Stage:
    name: str
    blocks: dict[str, Block]
    first_block: str
    advance: Move | None = None
    step_back: Move | None = None
    new_session: str = "continue"  # or "first_block"


@dataclass(frozen=True, slots=True)
class SessionEnd:
    """A named session-end criterion."""

    name: str
    when: Expr


@dataclass(frozen=True, slots=True)
class Spec:
    """Everything a rule file says, validated. ``Rules`` wraps it with the engine."""

    name: str
    description: str
    reward_unit_ul: float
    learner: LearnerSpec
    features: FeatureSpec
    performance: PerformanceSpec
    cues: dict[str, CueSpec]
    stages: dict[str, Stage]
    first_stage: str
    session_end: tuple[SessionEnd, ...]
    welfare: Any  # welfare.WelfareLimits
    choice_window: int = 10
    extra: dict[str, Any] = field(default_factory=dict)
    behaviour: BehaviourSpec = field(default_factory=BehaviourSpec)
    outcomes: OutcomeValues = field(default_factory=OutcomeValues)
    response: ResponseSpec = field(default_factory=ResponseSpec)
    notes: tuple[str, ...] = ()  # the loader's warnings (e.g. a deprecated name), shown by `rigloop check`

    def choice_cues(self) -> frozenset[str]:
        """The two-choice cues (roles left and right)."""
        return frozenset(c for c, k in self.cues.items() if k.role in SIDES)

    def actions_of(self, cue: str) -> tuple[str, ...]:
        """What the animal can do on ``cue``: choose a side, or respond / withhold."""
        return CHOICE_ACTIONS if self.cues[cue].role in SIDES else RESPOND_ACTIONS
