"""Simulated animals, so a rule file can be tried before it touches a real one.

A ``SimulatedAnimal`` plays the part of the animal *and* its rig: given rigloop's
decision for the next trial it presents the cue, draws a response from a simple
learning animal, scores it, delivers the reward the decision armed, and reports the
finished ``TrialEvent``. Its own learning is a Rescorla–Wagner learner over cue
values (for lick tasks) or cue × side values (for two-choice tasks), deliberately
different from the model rigloop fits, as a real animal would be.

Every simulated trial carries the animal's truth in the event's ``extra`` map, so a
schedule can be judged against what the animal really knew (``truth.py``):
``true_p_respond[CUE]`` (lick tasks) or ``true_p_right[CUE]`` (choice tasks) for every
cue of the task — the probability it would respond (lick at least once) or choose
right if that cue were shown on this trial and it were engaged, lapses included,
before this trial's learning — and ``true_engaged`` (1.0 or 0.0).

Named presets (``PRESETS``, built by ``preset_animal``) are the ways real animals
differ. Parameters a preset does not set keep ``preset_animal``'s per-subject values
(learning rate 0.08–0.18 and, in choice tasks, a side bias between −1 and 1 in
log-odds, both from the seed) or the ``SimulatedAnimal`` defaults:

| preset | parameters | what it does |
| --- | --- | --- |
| ``typical`` | (none) | learns at its per-subject rate; what ``animal_for`` builds |
| ``fast_learner`` | ``alpha = 0.35`` | learns a contingency in a few dozen trials |
| ``slow_learner`` | ``alpha = 0.03`` | needs several hundred trials |
| ``non_discriminator`` | ``fixed_p_respond = 0.9``, ``cue_blind = True`` | lick tasks: licks on 90% of trials whatever the cue and whatever it learns; choice tasks: chooses from side values alone, ignoring the cue |
| ``cue_blind`` | ``cue_blind = True`` | cannot tell the cues apart: one value for all cues (lick) or per side only (choice) |
| ``side_biased`` | ``bias = 2.0``, ``beta = 3.0`` | choice tasks: prefers the right port (p(right) ≈ 0.86 at equal values; once trained it still chooses right on about 28% of left-cue trials); no effect on lick tasks |
| ``lapsing`` | ``lapse = 0.3`` | responds at random on 30% of trials |
| ``slow_reverser`` | ``alpha = 0.15``, ``alpha_down = 0.015`` | values fall ten times slower than they rise, so it keeps responding to a formerly rewarded cue |
| ``fast_reverser`` | ``alpha = 0.15``, ``alpha_down = 0.45`` | values fall three times faster than they rise |
| ``fatiguing`` | ``engagement = 150`` | after 150 trials of a session it starts to omit, more and more (trial count restarts each session) |

``simulate_session`` runs one session offline through the very ``step`` the daemon
uses; the result is what the daemon would have decided, trial for trial.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np

from ..core.step import begin_session, session_seed, step
from ..core.subject import SubjectState, new_subject
from ..core.trial import CuePresentation, Decision, Outcome, Response, TrialEvent
from ..core.two_step.params import NAMES as TWO_STEP_NAMES
from ..errors import BadArgument
from ..store import SessionInfo

SIDES = ("left", "right")
BLIND = "*"  # the one value key of a cue-blind animal
TRUE_RESPOND = "true_p_respond[{}]"
TRUE_RIGHT = "true_p_right[{}]"
TRUE_ENGAGED = "true_engaged"
_MAX_CUES = 31  # an event's extra map holds at most 32 entries; one is true_engaged


@dataclass
class SimulatedAnimal:
    """A stand-in animal with its own learning, responses and lapses.

    task: ``"lick"`` (go/no-go style: respond = lick in the anticipation window) or
    ``"choice"`` (two ports; ``sides`` maps each cue to its correct side).
    alpha: its learning rate; beta, threshold: response steepness and value threshold;
    lick_cost: the value an unrewarded lick teaches (effort, timeout), so false alarms fade;
    in choice tasks a wrong choice teaches it only when the rig punishes it (below), else 0;
    lapse: probability of a random response; bias: preference for the right side in
    choice tasks (log-odds); engagement: trials of a session before it starts to tire
    (then omissions grow), None for a tireless animal; the count restarts when a
    decision names a new session.

    fixed_p_respond: lick tasks: the probability of licking (at least once) on every
    trial it is engaged, whatever the cue and whatever it learns (lapse not added);
    None for a learning animal. Not used in choice tasks.
    cue_blind: it cannot tell the cues apart: lick tasks keep one value for all cues,
    choice tasks one value per side, so its choice ignores the cue.
    alpha_down: the learning rate when a value falls (outcome below it), None for
    ``alpha``: small for a slow reverser, large for a fast one.
    false_alarm_timeout_s: when set, the rig punishes a lick on a trial whose decision
    has reward_prob 0 (a false alarm) or a wrong choice with a timeout of this many
    seconds (``Outcome.punishment = "timeout"`` at the response latency), and the animal
    learns ``lick_cost`` from it.
    cues: the task's cues, each reported in the truth (``extra``) of every trial; empty
    for the cues it has met (choice tasks: those in ``sides``).
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
    fixed_p_respond: float | None = None
    cue_blind: bool = False
    alpha_down: float | None = None
    false_alarm_timeout_s: float | None = None
    cues: tuple[str, ...] = ()
    record_truth: bool = True  # False: events carry no truth in extra (as a real rig's; the benchmarks)

    def __post_init__(self):
        self._check()
        self.cues = tuple(self.cues)
        self._rng = np.random.default_rng(self.seed)
        self._n = 0  # trials in the current session
        self._session = None
        self.last_truth: tuple[str, dict[str, float]] = ("", {})  # (kind, cue -> p) of the last trial run
        self._parts: dict = {}  # cue -> its CuePresentation, (µL, s) -> Outcome: frozen values, reused
        self._keys: dict = {}  # cue -> its truth key in extra
        self._terms: dict = {}  # value key -> _lick_terms of its current value

    def _check(self) -> None:
        """Refuse parameters the animal cannot use, naming the field."""
        if self.task not in ("lick", "choice"):
            raise BadArgument("task", "'lick' or 'choice'", self.task)
        if self.fixed_p_respond is not None and not 0.0 <= self.fixed_p_respond <= 1.0:
            raise BadArgument("fixed_p_respond", "a probability in [0, 1] or None", self.fixed_p_respond)
        if self.alpha_down is not None and not 0.0 < self.alpha_down <= 1.0:
            raise BadArgument("alpha_down", "a learning rate in (0, 1] or None", self.alpha_down)
        if self.false_alarm_timeout_s is not None and not self.false_alarm_timeout_s >= 0.0:
            raise BadArgument("false_alarm_timeout_s", "a duration >= 0 s or None", self.false_alarm_timeout_s)
        if len(self.cues) > _MAX_CUES:
            raise BadArgument("cues", f"at most {_MAX_CUES} cues (the truth of each goes in a trial's extra map)",
                              len(self.cues))

    # -- values and learning --------------------------------------------------

    def _key(self, cue: str) -> str:
        """The value key a cue is learned under: the cue, or one key for a cue-blind animal."""
        return BLIND if self.cue_blind else cue

    def _learn(self, key, r: float) -> None:
        """One Rescorla–Wagner step toward ``r``, at ``alpha_down`` when the value falls."""
        v = self.values.get(key, 0.0)
        rate = self.alpha if self.alpha_down is None or r >= v else self.alpha_down
        self.values[key] = v + rate * (r - v)

    # -- response probabilities ------------------------------------------------

    def _lick_terms(self, cue: str) -> tuple[float, float, float, float]:
        """(value, P(it decides to lick), lick rate, P(at least one lick)) of ``cue`` now.

        Kept per value key while the value stays the same (a trial reads them for every cue
        and moves at most one value), computed exactly as written out in the methods below."""
        key = self._key(cue)
        v = self.values.get(key, 0.0)
        hit = self._terms.get(key)
        if hit is not None and hit[0] == v:
            return hit
        p = 1.0 / (1.0 + math.exp(-self.beta * (v - self.threshold)))
        drawn = self.lapse / 2 + (1 - self.lapse) * p
        rate = 1.0 + 4.0 * max(v, 0.0)
        if len(self._terms) > 4 * _MAX_CUES:
            self._terms.clear()  # bounded: cues come from the rule file, but a caller may pass any
        hit = self._terms[key] = (v, drawn, rate, drawn * (1.0 - math.exp(-rate)))
        return hit

    def _p_lick_drawn(self, cue: str) -> float:
        """P(it decides to lick) for a learning animal: logistic in value, with lapses."""
        return self._lick_terms(cue)[1]

    def _lick_rate(self, cue: str) -> float:
        """Mean of the Poisson lick count once it decides to lick (vigour grows with value)."""
        return self._lick_terms(cue)[2]

    def p_respond(self, cue: str) -> float:
        """P(at least one lick) to ``cue`` now, if engaged: the lick-task truth
        (``_p_lick_drawn(cue) * (1 - exp(-_lick_rate(cue)))``)."""
        if self.fixed_p_respond is not None:
            return float(self.fixed_p_respond)
        return self._lick_terms(cue)[3]

    def _perception(self, cue: str, difficulty: float | None) -> tuple[float, str | None]:
        """P(the cue is perceived as itself) and the cue it is mistaken for otherwise.

        A hard trial makes the cue harder to tell apart: perceived correctly with prob q,
        a Weibull psychometric function of the ease (threshold 0.2, slope 1.5)."""
        correct = self.sides.get(cue, "left")
        wrong = "right" if correct == "left" else "left"
        if difficulty is None:
            q = 1.0
        else:
            ease = max(float(difficulty) if self.harder == "lower" else 1.0 - float(difficulty), 0.0)
            q = 0.5 + 0.5 * (1.0 - math.exp(-((ease / 0.2) ** 1.5)))
        others = [c for c, s in self.sides.items() if s == wrong]
        return q, (others[0] if others else None)

    def _p_right_seen(self, perceived: str) -> float:
        """P(right) once ``perceived`` is what it saw: logistic in side values plus bias, with lapses."""
        key = self._key(perceived)
        qv = {s: self.values.get((key, s), 0.0) for s in SIDES}
        logit = self.beta * (qv["right"] - qv["left"]) + self.bias
        p_right = 1.0 / (1.0 + math.exp(-logit))
        return self.lapse / 2 + (1 - self.lapse) * p_right

    def p_right(self, cue: str, difficulty: float | None = None) -> float:
        """P(choosing right) when ``cue`` is shown at ``difficulty``, if engaged: the choice-task truth."""
        q, other = self._perception(cue, difficulty)
        if other is None:
            return self._p_right_seen(cue)
        return q * self._p_right_seen(cue) + (1.0 - q) * self._p_right_seen(other)

    def task_cues(self, cue: str | None = None) -> tuple[str, ...]:
        """The cues the truth reports: ``cues`` (or those met so far), plus ``cue``."""
        if self.cues:
            known = self.cues
        elif self.task == "choice":
            known = tuple(self.sides)
        else:
            known = tuple(sorted(k for k in self.values if isinstance(k, str) and k != BLIND))
        return known if cue is None or cue in known else (*known, cue)

    def truth(self, decision: Decision) -> dict[str, float]:
        """The true response probability to every cue on the trial ``decision`` asks for."""
        return self._extra_of(self.true_p(decision))

    def true_p(self, decision: Decision) -> dict[str, float]:
        """Cue -> its true p_respond (lick tasks) or p_right (choice tasks) on this trial."""
        cues = self.task_cues(decision.cue)
        if self.task == "choice":
            return {c: self.p_right(c, decision.difficulty) for c in cues}
        if self.fixed_p_respond is not None:
            return {c: self.p_respond(c) for c in cues}
        terms = self._lick_terms  # p_respond(c) without its call: the terms' last entry
        return {c: terms(c)[3] for c in cues}

    def _extra_of(self, p: Mapping[str, float]) -> dict[str, float]:
        """The truth as an event's extra keys (``true_p_respond[CUE]`` / ``true_p_right[CUE]``)."""
        keys = self._keys
        if len(keys) > 4 * _MAX_CUES:
            keys.clear()  # bounded: cues come from the rule file, but a caller may pass any
        form = TRUE_RIGHT if self.task == "choice" else TRUE_RESPOND
        out = {}
        for c, v in p.items():
            k = keys.get(c)
            if k is None:
                k = keys[c] = form.format(c)
            out[k] = v
        return out

    # -- responding -----------------------------------------------------------

    def _engaged(self) -> bool:
        if self.engagement is None or self._n <= self.engagement:
            return True
        tired = (self._n - self.engagement) / max(self.engagement, 1)
        return self._rng.random() > min(0.95, tired)

    def _respond_lick(self, cue: str) -> int:
        """The lick count on an engaged trial (0 = no response)."""
        if self.fixed_p_respond is not None:
            if self._rng.random() >= self.fixed_p_respond:
                return 0
            return 1 + int(self._rng.poisson(self._lick_rate(cue) - 1.0))
        _, drawn, rate, _ = self._lick_terms(cue)  # _p_lick_drawn(cue), _lick_rate(cue) in one lookup
        if not self._rng.random() < drawn:
            return 0
        return int(self._rng.poisson(rate))

    def _choose_side(self, cue: str, difficulty: float | None) -> str:
        q, other = self._perception(cue, difficulty)
        perceived = cue if (self._rng.random() < q or other is None) else other
        self._last_perceived = perceived
        return "right" if self._rng.random() < self._p_right_seen(perceived) else "left"

    def _punish(self, latency: float) -> Outcome:
        """The rig's timeout for a false alarm or a wrong choice."""
        return Outcome(punishment="timeout", punishment_time=latency, timeout_s=float(self.false_alarm_timeout_s))

    def _new_trial(self, decision: Decision) -> None:
        """Count the trial within its session (fatigue restarts with each session)."""
        if decision.session != self._session:
            self._session, self._n = decision.session, 0
        self._n += 1

    def trial(self, decision: Decision, rig: str, wall_time: float) -> TrialEvent:
        """Run the trial ``decision`` asks for and report it, with the animal's truth in ``extra``."""
        self._new_trial(decision)
        cue = decision.cue
        p = self.true_p(decision)  # before this trial's learning
        onset, offset = self.onset_s, self.onset_s + self.cue_s
        engaged = self._engaged()
        self.last_truth = ("choice" if self.task == "choice" else "lick", p)
        reward_ul, reward_time = 0.0, None
        latency = None
        punished = False
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
                response = Response("choice", side, "correct" if ok else "incorrect", latency)
                if ok and decision.reward_armed:
                    reward_ul, reward_time = decision.reward_ul, latency
                punished = not ok and self.false_alarm_timeout_s is not None
                r = 1.0 if reward_ul > 0 else (self.lick_cost if punished else 0.0)
                self._learn((self._key(self._last_perceived), side), r)
            cues = self._shown(cue, onset, offset)
        else:
            go = decision.reward_prob > 0
            licks = self._respond_lick(cue) if engaged else 0
            licked = licks > 0
            if licked:
                latency = float(onset + 0.15 + self._rng.gamma(2.0, 0.1))
            if not engaged:
                result = "omitted"
            else:
                result = "correct" if licked == go else "incorrect"
            response = self._no_lick(result) if latency is None else Response("licks", float(licks), result, latency)
            if go and licked and decision.reward_armed:
                reward_ul, reward_time = decision.reward_ul, offset
            punished = licked and not go and self.false_alarm_timeout_s is not None
            if licked:  # it learns from what its licks bring
                r = 1.0 if reward_ul > 0 else self.lick_cost
                self._learn(self._key(cue), r)
            cues = self._shown(cue, onset, offset)
        outcome = self._punish(latency) if punished else self._paid(reward_ul, reward_time)
        extra = {}
        if self.record_truth:
            extra = self._extra_of(p)
            extra[TRUE_ENGAGED] = 1.0 if engaged else 0.0
        times = [offset + 1.0] + ([latency] if latency else []) + ([reward_time] if reward_time else [])
        # TrialEvent(...) of these checked parts, without its checks (equal: tests/test_simulate_animals.py)
        return TrialEvent._assembled(self.subject, rig, decision.session, decision.trial, cues, outcome, response,
                                     max(times), float(wall_time), extra)

    def _shown(self, cue: str, onset: float, offset: float) -> tuple[CuePresentation, ...]:
        """The trial's one cue presentation (a frozen value, built once per cue and times)."""
        key = (cue, onset, offset)
        got = self._parts.get(key)
        if got is None:
            got = self._parts[key] = (CuePresentation(cue, onset, offset),)
        return got

    def _no_lick(self, result: str) -> Response:
        """The response of a trial without a lick (a frozen value, one per result, reused)."""
        key = ("no lick", result)
        got = self._parts.get(key)
        if got is None:
            got = self._parts[key] = Response(kind="licks", value=0.0, result=result, latency=None)
        return got

    def _paid(self, reward_ul: float, reward_time: float | None) -> Outcome:
        """The trial's outcome without punishment (a frozen value, built once per volume and time)."""
        key = (reward_ul, reward_time)
        got = self._parts.get(key)
        if got is None:
            if len(self._parts) > 256:
                self._parts.clear()  # bounded: a staircase on the volume makes many
            got = self._parts[key] = Outcome(reward_ul=reward_ul, reward_time=reward_time)
        return got


# --------------------------------------------------------------------------- presets

PRESETS: dict[str, dict] = {
    "typical": {},
    "fast_learner": {"alpha": 0.35},
    "slow_learner": {"alpha": 0.03},
    "non_discriminator": {"fixed_p_respond": 0.9, "cue_blind": True},
    "cue_blind": {"cue_blind": True},
    "side_biased": {"bias": 2.0, "beta": 3.0},
    "lapsing": {"lapse": 0.3},
    "slow_reverser": {"alpha": 0.15, "alpha_down": 0.015},
    "fast_reverser": {"alpha": 0.15, "alpha_down": 0.45},
    "fatiguing": {"engagement": 150},
}


def preset_parameters(preset: str, argument: str = "preset") -> dict:
    """The parameters of a named preset; an unknown name is an error (naming ``argument``) listing the presets."""
    if preset not in PRESETS:
        from .two_step_sim import TWO_STEP_PRESETS

        if preset in TWO_STEP_PRESETS:  # an agent of the two-stage task: preset_animal checks the rule file
            return {"two_step_only": True}
        raise BadArgument(argument, f"one of the presets {', '.join(PRESETS)} (two-stage task also "
                                    f"{', '.join(p for p in TWO_STEP_PRESETS if p not in PRESETS)})", preset)
    return dict(PRESETS[preset])


def preset_animal(preset: str, rules, subject: str, seed: int, **overrides) -> SimulatedAnimal:
    """A ``preset`` animal suited to the rule file's cues (two-choice if cues name sides).

    Learning rate and (choice tasks) side bias vary with ``seed`` unless the preset sets
    them, so many subjects differ; ``overrides`` (any SimulatedAnimal field, ``task``
    among them) win over both. A rule file whose learner is ``two_step`` gets a
    ``TwoStepAnimal`` instead (offline/two_step_sim.py: multi-step trials)."""
    if rules.learner.name == "two_step":
        from .two_step_sim import OVERRIDES, two_step_animal

        own = {name: value for name, value in overrides.items() if name in OVERRIDES}  # not the cue task's
        return two_step_animal(preset, subject, seed, states=tuple(rules.spec.cues), **own)
    overrides = {name: value for name, value in overrides.items() if name not in TWO_STEP_NAMES}
    params = preset_parameters(preset)
    if params.pop("two_step_only", False):
        raise BadArgument("preset", f"an animal for this rule file's task ({', '.join(PRESETS)}); {preset!r} plays "
                                    "the two-stage task, whose rule files use the two_step learner", preset)
    roles = {name: spec.role for name, spec in rules.spec.cues.items()}
    sides = {c: r for c, r in roles.items() if r in ("left", "right")}
    kind = overrides.pop("task", None) or ("choice" if sides else "lick")
    rng_alpha = 0.08 + 0.1 * ((seed * 7919) % 100) / 100  # animals differ in learning rate
    bias = 0.0 if kind == "lick" else (((seed * 104729) % 100) / 100 - 0.5) * 2.0
    harder = next((b.staircase.harder for st in rules.spec.stages.values() for b in st.blocks.values()
                   if b.staircase is not None), "higher")
    f = rules.features
    cue_s = f.n_bins * f.dt if f.n_bins else 1.0  # a serial compound spans the cue
    fitted = dict(task=kind, alpha=rng_alpha, bias=bias, sides=sides, seed=seed, cue_s=cue_s, harder=harder,
                  cues=tuple(rules.spec.cues))
    return SimulatedAnimal(subject, **{**fitted, **params, **overrides})


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
    decisions_only: bool = False,
) -> SessionRun:
    """One session of ``animal`` under ``rules``, through ``begin_session`` and ``step``.

    The session ends when a decision says so or after ``max_trials``. With ``store``,
    every trial is stored as the daemon would store it: the session row carries the
    first decision, each trial is stored with its decision and quantities, and with
    ``snapshot_every`` = N > 0 the state after every N-th trial (and the last) is kept.
    No rig waits for a reply here, so the session's trials are committed together, one
    transaction for the animal-day (the stored rows are those of trial-by-trial commits).

    ``decisions_only``: each trial runs ``lockstep.decide_step`` without the learner, so
    the run's ``updates`` stay empty and its state keeps the learner it started with (and
    the learning curves, when no decision reads them); the
    decisions are ``step``'s bit for bit. Only for a rule file none of whose decisions read
    the learner, and without a store (``lockstep.path_for`` says when).
    """
    if decisions_only:
        from .lockstep import DECISIONS_ONLY, decide_step, path_for, reads_curves

        path, why = path_for(rules, store)
        if path != DECISIONS_ONLY:
            raise BadArgument("decisions_only", "False for this run (it needs the per-subject step)", why)
        keep_curves = reads_curves(rules)
    state, decision, info = open_simulated_session(rules, animal.subject, session, state=state, rig=rig,
                                                   start_time=start_time)
    if store is not None:
        store.open_session(info)
    run = SessionRun(state=state, first=decision)
    items = []
    t = start_time
    while not decision.end_session and len(run.events) < max_trials:
        event = animal.trial(decision, rig, t)
        if decisions_only:
            state, decision = decide_step(state, event, rules, learn=False, curves=keep_curves)
            run.events.append(event)
            run.decisions.append(decision)
            t += trial_s
            continue
        state, decision, update = step(state, event, rules)
        if store is not None:
            last = decision.end_session or len(run.events) + 1 >= max_trials
            snap = state.to_bytes() if snapshot_every and (event.trial % snapshot_every == 0 or last) else None
            items.append((event, decision, update.quantities, snap))
        run.events.append(event)
        run.decisions.append(decision)
        run.updates.append(update)
        t += trial_s
    if items:
        commit_day(store, items)
    run.state = state
    return run


def open_simulated_session(rules, subject: str, session: str, *, state: SubjectState | None = None,
                           rig: str = "sim-rig", start_time: float = 1.8e9):
    """``begin_session`` for a simulated session: (state, first decision, the SessionInfo to store).

    One place builds the session row, so a caller may store it ahead of the run (to fix
    the order subjects are listed in) and the run's own ``open_session`` finds it as is."""
    if state is None:
        state = new_subject(subject, rules)
    seed = session_seed(subject, session)
    state, decision = begin_session(state, rules, session=session, rig=rig, wall_time=start_time, seed=seed)
    info = SessionInfo.new(subject, session, rig, rules.name, rules.text, seed, start_time,
                           meta={"first_decision": decision.to_dict()})
    return state, decision, info


def commit_day(store, items) -> None:
    """One transaction for a simulated animal-day's trials; the first trial refused is an error."""
    for result in store.commit_batch(items):
        if result.error is not None:
            raise result.error


def record_session(store, rules, animal: SimulatedAnimal, **kwargs) -> SessionRun:
    """``simulate_session`` storing every trial in ``store`` (see there)."""
    return simulate_session(rules, animal, store=store, **kwargs)
