"""Rules: a validated rule file, its exact text and digest, and the engine bound to it."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import engine
from .model import FeatureSpec, LearnerSpec, PerformanceSpec, Spec
from .state import ScheduleState
from .welfare import WelfareLimits


@dataclass(frozen=True, eq=False)
class Rules:
    """One loaded rule file. Build it with ``load_rules`` / ``load_rules_file`` /
    ``load_example``; ``text`` is stored with each session, ``sha256`` names it."""

    spec: Spec
    text: str
    sha256: str
    source: str = "<string>"

    @property
    def name(self) -> str:
        return self.spec.name

    @property
    def cues(self) -> tuple[str, ...]:
        """Every cue id the file declares, in declaration order."""
        return tuple(self.spec.cues)

    @property
    def learner(self) -> LearnerSpec:
        return self.spec.learner

    @property
    def features(self) -> FeatureSpec:
        return self.spec.features

    @property
    def reward_unit_ul(self) -> float:
        return self.spec.reward_unit_ul

    @property
    def performance(self) -> PerformanceSpec:
        return self.spec.performance

    @property
    def welfare(self) -> WelfareLimits:
        return self.spec.welfare

    def start_subject(self) -> ScheduleState:
        return engine.start_subject(self.spec)

    def open_session(self, sched: ScheduleState, session: str, wall_time: float) -> ScheduleState:
        return engine.open_session(self.spec, sched, session, wall_time)

    def observe(self, sched: ScheduleState, event) -> ScheduleState:
        return engine.observe(self.spec, sched, event)

    def decide(self, sched: ScheduleState, view, next_trial: int,
               rng: np.random.Generator) -> tuple[ScheduleState, engine.Plan]:
        return engine.decide(self.spec, sched, view, next_trial, rng)

    def check_profile(self, profile) -> list[str]:
        """Problems running this rule file on a rig of ``profile`` (empty when it fits)."""
        from .profile import check_rules_on_profile

        return check_rules_on_profile(self.spec, profile)

    def describe(self) -> str:
        """The plan in plain words (what ``rigloop check`` prints)."""
        from .plan import describe

        return describe(self)

    def __repr__(self) -> str:
        return f"Rules(name={self.name!r}, sha256={self.sha256[:12]}..., source={self.source!r})"
