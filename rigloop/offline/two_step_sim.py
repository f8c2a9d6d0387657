"""Simulated animals on the two-stage task, trial by trial, reporting multi-step trials.

``TwoStepAnimal`` plays the task of ``examples/two_step.toml`` the way the agents of
``core/two_step`` do (model-free, model-based, hybrid with any w, successor
representation): a first choice by softmax with perseveration over the values its kind
uses, a transition (common 0.7 / rare 0.3), a second choice by softmax over Q2, a reward
drawn from the drifting probability of that (state, action), then learning. It is also
the task's environment: the drift of the reward probabilities is seeded from the
animal's seed, like the rig's task program seeds it from the session. ``trial`` answers
a decision with a ``TrialEvent`` carrying the two steps and the animal's truth in
``extra`` (its w and the current reward probabilities), like ``SimulatedAnimal``.

Presets (``TWO_STEP_PRESETS``): the four agent kinds, and the failing animals of
``offline/simulate.py`` under their names: ``non_discriminator`` / ``cue_blind`` choose
at random, ``side_biased`` mostly pokes left, ``lapsing`` chooses at random on 30% of
trials; the other names are hybrids (``typical``: w = 0.5).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..core.trial import CuePresentation, Decision, Outcome, Response, TrialEvent, TrialStep
from ..core.two_step import PRESETS as AGENT_PRESETS
from ..core.two_step import NAMES, TwoStepParams, TwoStepTask, TwoStepValues
from ..core.two_step.choice import first_stage_probabilities, second_stage_probabilities
from ..errors import BadArgument

ACTIONS = ("left", "right")

# name -> (learner kind, parameter changes from the kind's preset, side bias toward left (logit), lapse)
TWO_STEP_PRESETS: dict[str, tuple[str, dict, float, float]] = {
    "model_free": ("model_free", {}, 0.0, 0.0),
    "model_based": ("model_based", {}, 0.0, 0.0),
    "hybrid": ("hybrid", {}, 0.0, 0.0),
    "successor": ("successor", {}, 0.0, 0.0),
    "typical": ("hybrid", {"w": 0.5}, 0.0, 0.0),
    "fast_learner": ("hybrid", {"w": 0.5, "alpha1": 0.8, "alpha2": 0.8}, 0.0, 0.0),
    "slow_learner": ("hybrid", {"w": 0.5, "alpha1": 0.1, "alpha2": 0.1}, 0.0, 0.0),
    "non_discriminator": ("hybrid", {"beta1": 0.0, "beta2": 0.0}, 0.0, 0.0),
    "cue_blind": ("hybrid", {"beta1": 0.0, "beta2": 0.0}, 0.0, 0.0),
    "side_biased": ("model_free", {}, 2.5, 0.0),
    "lapsing": ("hybrid", {"w": 0.5}, 0.0, 0.3),
    "slow_reverser": ("model_free", {"alpha1": 0.1, "alpha2": 0.1}, 0.0, 0.0),
    "fast_reverser": ("model_free", {"alpha1": 0.8, "alpha2": 0.8}, 0.0, 0.0),
    "fatiguing": ("hybrid", {"w": 0.5}, 0.0, 0.0),
}


@dataclass
class TwoStepAnimal:
    """A simulated animal on the two-stage task; ``kind`` one of model_free, model_based,
    hybrid, successor; ``bias`` a logit toward the left first choice; ``lapse`` the share of
    trials chosen at random; ``devalued``: second-stage states whose outcome the animal no
    longer wants (a devaluation probe: its rewards there are worth 0 to it)."""

    subject: str
    kind: str = "hybrid"
    params: TwoStepParams = field(default_factory=TwoStepParams)
    seed: int = 0
    bias: float = 0.0
    lapse: float = 0.0
    task: TwoStepTask = field(default_factory=TwoStepTask)
    states: tuple[str, str, str] = ("centre_light", "port_a_light", "port_b_light")
    values: TwoStepValues = field(default_factory=TwoStepValues)

    def __post_init__(self):
        self._rng = np.random.default_rng(self.seed)
        self.probabilities = self._rng.uniform(self.task.low, self.task.high, size=(2, 2))

    def choose(self) -> tuple[int, int, int]:
        """(a1, s2, a2) for the next trial, before its reward."""
        rng, v, p = self._rng, self.values, self.params
        p_first = first_stage_probabilities(v.first_stage(self.kind, p.w), p.beta1, p.p, v.previous_a1)
        p_left = 1.0 / (1.0 + np.exp(-(np.log(p_first[0] + 1e-300) - np.log(p_first[1] + 1e-300) + self.bias)))
        if rng.random() < self.lapse:
            p_left = 0.5
        a1 = int(rng.random() >= p_left)
        s2, _ = self.task.transition(a1, rng)
        a2 = int(rng.random() >= second_stage_probabilities(v.q2[s2], p.beta2)[0])
        return a1, s2, a2

    def trial(self, decision: Decision, rig: str, wall_time: float) -> TrialEvent:
        """Run the trial ``decision`` asks for and report it with its two steps."""
        a1, s2, a2 = self.choose()
        paid = bool(self._rng.random() < self.probabilities[s2, a2])
        ul = decision.reward_ul if paid and decision.reward_armed else 0.0
        self.values = self.values.learned(a1, s2, a2, 1.0 if ul > 0 else 0.0, self.params)
        truth = {"true_w": self.params.w if self.kind == "hybrid" else {"model_based": 1.0}.get(self.kind, 0.0),
                 "true_p_a_left": float(self.probabilities[0, 0]), "true_p_b_left": float(self.probabilities[1, 0])}
        # the task's drift, after the trial: p <- reflect(p + N(0, sd^2)) within the bounds
        self.probabilities = self.task.reward_walk(2, self._rng, start=self.probabilities)[1]
        t1, t2 = 0.6, 1.5
        return TrialEvent(
            subject=self.subject, rig=rig, session=decision.session, trial=decision.trial,
            cues=(CuePresentation(self.states[0], 0.0, t1),),
            outcome=Outcome(ul, t2 + 0.1 if ul > 0 else None),
            # both choices made: the trial counts as completed ("correct"; the task has no wrong choice)
            response=Response("poke", 1.0, "correct", t1),
            wall_time=wall_time, extra=truth,
            steps=(TrialStep(self.states[0], ACTIONS[a1], t1), TrialStep(self.states[1 + s2], ACTIONS[a2], t2, ul)),
        )


OVERRIDES = NAMES + ("bias", "lapse")


def two_step_animal(preset: str, subject: str, seed: int, states: tuple[str, ...] | None = None,
                    **overrides: float) -> TwoStepAnimal:
    """A preset animal (``TWO_STEP_PRESETS``) for the two-stage task; ``overrides`` (the
    learner's parameters alpha1 ... w, ``bias``, ``lapse``) win over the preset's, so a
    population can draw them per animal. Another name is refused with the valid ones."""
    if preset not in TWO_STEP_PRESETS:
        raise BadArgument("preset", f"one of the two-step presets {', '.join(TWO_STEP_PRESETS)}", preset)
    unknown = sorted(set(overrides) - set(OVERRIDES))
    if unknown:
        raise BadArgument("parameter", f"a parameter of a two-step animal ({', '.join(OVERRIDES)})", unknown[0])
    kind, changes, bias, lapse = TWO_STEP_PRESETS[preset]
    drawn = {n: float(v) for n, v in overrides.items() if n in NAMES}
    params = AGENT_PRESETS[kind][1].with_(**{**changes, **drawn})
    bias = float(overrides.get("bias", bias))
    lapse = float(overrides.get("lapse", lapse))
    if not 0.0 <= lapse <= 1.0:
        raise BadArgument("lapse", "a share of trials in [0, 1]", lapse)
    extra = {} if states is None else {"states": tuple(states)[:3]}
    return TwoStepAnimal(subject, kind=kind, params=params, seed=seed, bias=bias, lapse=lapse, **extra)
