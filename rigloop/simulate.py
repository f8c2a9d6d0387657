"""Simulated animals, so a rule file can be tried before it touches a real one.

A ``SimulatedAnimal`` plays the part of the animal *and* its rig: given rigloop's
decision for the next trial it presents the cue, draws a response from a simple
learning animal, scores it, delivers the reward the decision armed, and reports the
finished ``TrialEvent``. Its own learning is a Rescorla–Wagner learner over cue
values (for lick tasks) or cue × side values (for two-choice tasks), deliberately
different from the model rigloop fits, as a real animal would be.

``simulate_session`` runs one session offline through the very ``step`` the daemon
uses; the result is what the daemon would have decided, trial for trial.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np

from .step import begin_session, session_seed, step
from .store import SessionInfo
from .subject import SubjectState, new_subject
from .trial import CuePresentation, Decision, Outcome, Response, TrialEvent

SIDES = ("left", "right")


@dataclass
class SimulatedAnimal:
    """A stand-in animal with its own learning, responses and lapses.

    task: ``"lick"`` (go/no-go style: respond = lick in the anticipation window) or
    ``"choice"`` (two ports; ``sides`` maps each cue to its correct side).
    alpha: its learning rate; beta, threshold: response steepness and value threshold;
    lick_cost: the value an unrewarded lick teaches (effort, timeout), so false alarms fade;
    lapse: probability of a random response; bias: preference for the right side in
    choice tasks (log-odds); engagement: trials before it starts to tire (then misses
    grow), None for a tireless animal.
    """

    subject: str
    task: str = "lick"
    alpha: float = 0.15
    beta: float = 8.0
    threshold: float = 0.05
    lick_cost: float = -0.3
    lapse: float = 0.05
    bias: float = 0.0
    engagement: int | None = None
    harder: str = "higher"
    sides: Mapping[str, str] = field(default_factory=dict)
    cue_s: float = 1.0
    onset_s: float = 0.5
    seed: int = 0
    values: dict = field(default_factory=dict)

    def __post_init__(self):
        self._rng = np.random.default_rng(self.seed)
        self._n = 0

    # -- responding -----------------------------------------------------------

    def _engaged(self) -> bool:
        if self.engagement is None or self._n <= self.engagement:
            return True
        tired = (self._n - self.engagement) / max(self.engagement, 1)
        return self._rng.random() > min(0.95, tired)

    def _respond_lick(self, cue: str) -> bool:
        v = self.values.get(cue, 0.0)
        p = 1.0 / (1.0 + math.exp(-self.beta * (v - self.threshold)))
        p = self.lapse / 2 + (1 - self.lapse) * p
        return bool(self._rng.random() < p)

    def _choose_side(self, cue: str, difficulty: float | None) -> str:
        correct = self.sides.get(cue, "left")
        wrong = "right" if correct == "left" else "left"
        # a hard trial makes the cue harder to tell apart: perceived correctly with prob q,
        # a Weibull psychometric function of the ease (threshold 0.2, slope 1.5)
        if difficulty is None:
            q = 1.0
        else:
            ease = max(float(difficulty) if self.harder == "lower" else 1.0 - float(difficulty), 0.0)
            q = 0.5 + 0.5 * (1.0 - math.exp(-((ease / 0.2) ** 1.5)))
        others = [c for c, s in self.sides.items() if s == wrong]
        perceived = cue if (self._rng.random() < q or not others) else others[0]
        qv = {s: self.values.get((perceived, s), 0.0) for s in SIDES}
        logit = self.beta * (qv["right"] - qv["left"]) + self.bias
        p_right = 1.0 / (1.0 + math.exp(-logit))
        p_right = self.lapse / 2 + (1 - self.lapse) * p_right
        self._last_perceived = perceived
        return "right" if self._rng.random() < p_right else "left"

    def trial(self, decision: Decision, rig: str, wall_time: float) -> TrialEvent:
        """Run the trial ``decision`` asks for and report it."""
        self._n += 1
        cue = decision.cue
        onset, offset = self.onset_s, self.onset_s + self.cue_s
        engaged = self._engaged()
        reward_ul, reward_time = 0.0, None
        latency = None
        if cue is None:
            cues = ()
            response = Response(kind="none")
        elif self.task == "choice":
            correct_side = self.sides.get(cue, "left")
            if not engaged:
                response = Response(kind="choice", value=None, result="omitted")
            else:
                side = self._choose_side(cue, decision.difficulty)
                latency = float(offset + 0.2 + self._rng.gamma(2.0, 0.15))
                ok = side == correct_side
                response = Response(kind="choice", value=side, result="correct" if ok else "incorrect", latency=latency)
                if ok and decision.reward_armed:
                    reward_ul, reward_time = decision.reward_ul, latency
                r = 1.0 if reward_ul > 0 else 0.0
                key = (self._last_perceived, side)
                self.values[key] = self.values.get(key, 0.0) + self.alpha * (r - self.values.get(key, 0.0))
            cues = (CuePresentation(cue, onset, offset),)
        else:
            go = decision.reward_prob > 0
            licked = engaged and self._respond_lick(cue)
            licks = int(self._rng.poisson(1.0 + 4.0 * max(self.values.get(cue, 0.0), 0.0))) if licked else 0
            licked = licks > 0
            if licked:
                latency = float(onset + 0.15 + self._rng.gamma(2.0, 0.1))
            if not engaged:
                result = "omitted"
            else:
                result = "correct" if licked == go else "incorrect"
            response = Response(kind="licks", value=float(licks), result=result, latency=latency)
            if go and licked and decision.reward_armed:
                reward_ul, reward_time = decision.reward_ul, offset
            if licked:  # it learns from what its licks bring
                r = 1.0 if reward_ul > 0 else self.lick_cost
                self.values[cue] = self.values.get(cue, 0.0) + self.alpha * (r - self.values.get(cue, 0.0))
            cues = (CuePresentation(cue, onset, offset),)
        times = [offset + 1.0] + ([latency] if latency else []) + ([reward_time] if reward_time else [])
        return TrialEvent(
            subject=self.subject,
            rig=rig,
            session=decision.session,
            trial=decision.trial,
            cues=cues,
            outcome=Outcome(reward_ul=reward_ul, reward_time=reward_time),
            response=response,
            duration=max(times),
            wall_time=wall_time,
        )


@dataclass
class SessionRun:
    """What one simulated session produced, trial by trial."""

    state: SubjectState
    first: Decision
    events: list[TrialEvent] = field(default_factory=list)
    decisions: list[Decision] = field(default_factory=list)
    updates: list = field(default_factory=list)


def simulate_session(
    rules,
    animal: SimulatedAnimal,
    *,
    session: str,
    state: SubjectState | None = None,
    rig: str = "sim-rig",
    start_time: float = 1.8e9,
    trial_s: float = 8.0,
    max_trials: int = 500,
    store=None,
    snapshot_every: int = 0,
) -> SessionRun:
    """One session of ``animal`` under ``rules``, through ``begin_session`` and ``step``.

    The session ends when a decision says so or after ``max_trials``. With ``store``,
    every trial is stored as the daemon would store it: the session row carries the
    first decision, each trial commits with its decision and quantities, and with
    ``snapshot_every`` = N > 0 the state after every N-th trial (and the last) is kept.
    """
    if state is None:
        state = new_subject(animal.subject, rules)
    seed = session_seed(animal.subject, session)
    state, decision = begin_session(state, rules, session=session, rig=rig, wall_time=start_time, seed=seed)
    if store is not None:
        store.open_session(SessionInfo.new(animal.subject, session, rig, rules.name, rules.text, seed, start_time,
                                           meta={"first_decision": decision.to_dict()}))
    run = SessionRun(state=state, first=decision)
    t = start_time
    while not decision.end_session and len(run.events) < max_trials:
        event = animal.trial(decision, rig, t)
        state, decision, update = step(state, event, rules)
        if store is not None:
            last = decision.end_session or len(run.events) + 1 >= max_trials
            snap = state.to_bytes() if snapshot_every and (event.trial % snapshot_every == 0 or last) else None
            store.commit_trial(event, decision, update.quantities, snap)
        run.events.append(event)
        run.decisions.append(decision)
        run.updates.append(update)
        t += trial_s
    run.state = state
    return run


def record_session(store, rules, animal: SimulatedAnimal, **kwargs) -> SessionRun:
    """``simulate_session`` storing every trial in ``store`` (see there)."""
    return simulate_session(rules, animal, store=store, **kwargs)
