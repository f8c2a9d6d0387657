"""One animal's days under one rule file, reduced to the measures ``rigloop compare`` reports.

``run_animal(task)`` is a top-level function (it pickles to any executor): it rebuilds
the rule file from its text, builds the drawn animal and runs ``days`` simulated days of
``sessions_per_day`` sessions each. A session ends when a decision says so (the rule
file's session ends and welfare limits) or, as a safety cap, after the trials its
welfare ``max_session_min`` allows at ``TRIAL_S`` seconds a trial.

Common random numbers: the animal's own random stream comes from its drawn seed and
the schedule's from ``session_seed(animal, session)``, never from the rule file, so
two identical rule files give identical results, and two different ones differ only
by what the rules did.

The judge reads each trial's truth from the animal itself (``SimulatedAnimal.last_truth``);
without a store the events carry no truth in ``extra`` (``step`` never reads it), so
no map is built and checked per trial. With a store they carry it, as ``simulate``'s do.

Without a store, a rule file whose decisions never read the learner (every shipped
lick and choice example) runs each trial through ``lockstep.decide_step`` instead of
``step``: the same decisions and schedule bit for bit, without the learner and the
per-trial quantities nothing here keeps (and without the learning curves when no decision reads them) (``lockstep.path_for`` says which path and why).

Memory stays flat in the number of days: a session's trials are reduced as they come
(``RunningTruth`` judges blocks against the truth on the fly, as ``truth.block_timing``
does over a whole history) and only per-day numbers are kept. With ``db``, each
animal-day's sessions are stored in one transaction; workers write in parallel (SQLite's
busy timeout lets one writer in at a time), and ``first_session_info`` lets the caller
store every animal's first session up front so the store lists subjects in cohort order.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

from ..core.step import begin_session, session_seed, step
from ..core.subject import new_subject
from . import truth
from .lockstep import DECISIONS_ONLY, decide_step, path_for, reads_curves

TRIAL_S = 8.0  # seconds from one trial's start to the next (the simulate default)
DAY_S = 86400.0
START = 1.8e9  # the first day's first session, 08:00 UTC
SESSION_GAP_S = 4 * 3600.0  # between sessions of one day


@dataclass(frozen=True)
class AnimalTask:
    """Everything a worker needs for one animal under one rule file (picklable)."""

    label: str
    rules_text: str
    rules_source: str
    draw: object  # population.AnimalDraw
    days: int
    sessions_per_day: int = 1
    db: str | None = None
    subject: str | None = None  # the name in a store (default: the drawn animal's); never its seeds
    first_stored: bool = False  # the first session is in the store already (stored up front, in cohort order)


@dataclass
class AnimalResult:
    """One animal under one rule file: the numbers the comparison is made of."""

    label: str
    subject: str
    group: str
    preset: str
    days: int
    trials: int = 0
    stage_trial: dict[str, int] = field(default_factory=dict)  # stage -> trial n it was first left
    stage_day: dict[str, float] = field(default_factory=dict)  # stage -> training days until it was first left
    water_ul: list[float] = field(default_factory=list)  # per day
    daily_min_ul: float = 1000.0
    interventions: int = 0  # decisions a welfare limit changed
    sessions: int = 0
    disengaged: int = 0  # sessions ended by a criterion on missed trials
    lags: list[int] = field(default_factory=list)  # block end - first trial the animal discriminated
    early: int = 0  # blocks ended before the animal discriminated
    judged: int = 0

    @property
    def days_below_min(self) -> int:
        return sum(1 for w in self.water_ul if w < self.daily_min_ul)

    @property
    def median_lag(self) -> float | None:
        return float(sorted(self.lags)[len(self.lags) // 2]) if self.lags else None


class RunningTruth:
    """``truth.block_timing``'s lags and early ends, one trial at a time (memory flat in trials).

    Pending blocks share the direction of the current block (a change of direction
    settles them all: a block never discriminated by then ended early); each counts its
    own run of discriminating trials from its own first trial."""

    def __init__(self, spec, margin: float = truth.MARGIN, hold: int = truth.HOLD):
        self.spec, self.margin, self.hold = spec, margin, hold
        self.key = None
        self.direction = None
        self.pending: list[dict] = []  # {"run", "d", "last"} of blocks in the current direction
        self.lags: list[int] = []
        self.early = 0
        self.judged = 0
        self.kind = None

    def add(self, n: int, stage: str, block: str, extra) -> None:
        """Trial ``n`` ran in ``stage``/``block`` with the truth in its event's ``extra``."""
        kind, p = truth.truth_of(extra)
        self.add_truth(n, stage, block, kind, p)

    def add_truth(self, n: int, stage: str, block: str, kind: str | None, p) -> None:
        """``add`` with the truth given as (kind, cue -> p), as the simulated animal holds it."""
        if self.kind is None and kind:
            self.kind = kind
        closing = False
        if (stage, block) != self.key:
            closing = True  # the block that ended may be judged already
            if self.pending:
                self.pending[-1]["last"] = n - 1  # the running block ended
            direction = truth.block_direction(self.spec, stage, block, self.kind or "lick")
            if direction != self.direction:
                self._settle()
            self.key, self.direction = (stage, block), direction
            if direction is not None:
                self.pending.append({"run": 0, "d": None, "last": None})
        if self.direction is None:
            return
        v = truth.discrimination(p, self.direction)
        up = v is not None and v >= self.margin
        for b in self.pending:
            if b["d"] is None:
                b["run"] = b["run"] + 1 if up else 0
                if b["run"] == self.hold:
                    b["d"] = n - self.hold + 1
                    closing = closing or b["last"] is not None
        if closing:  # a block that ended earlier is discriminated now: judge it
            for b in self.pending:
                if b["d"] is not None and b["last"] is not None:
                    self._close(b)
            self.pending = [b for b in self.pending if not (b["d"] is not None and b["last"] is not None)]

    def _close(self, b: dict) -> None:
        self.judged += 1
        if b["d"] is None:
            self.early += 1
            return
        lag = b["last"] - b["d"]
        self.lags.append(lag)
        self.early += lag < 0

    def _settle(self) -> None:
        for b in self.pending:
            if b["last"] is not None:  # ended blocks only; a running one is not judged
                self._close(b)
        self.pending = []

    def finish(self) -> None:
        """The trials ran out: blocks that ended are settled; the running one is not judged."""
        self._settle()


def max_trials(rules) -> int:
    """The safety cap on a session's trials: what welfare's max_session_min allows, plus a margin."""
    return int(math.ceil(rules.spec.welfare.max_session_min * 60.0 / TRIAL_S)) + 10


def disengagement_ends(rules) -> frozenset[str]:
    """Names of the rule file's session ends that read missed trials (``misses_in_row``)."""
    return frozenset(e.name for e in rules.spec.session_end if any("miss" in n for n in e.when.names_used()))


_PARSED: dict = {}  # (rule-file text, source) -> parsed rules: parsed once per worker process, a few kept


def _rules_for(text: str, source: str):
    """The parsed rule file (a worker runs many animals under each of a few rule files)."""
    key = (text, source)
    rules = _PARSED.get(key)
    if rules is None:
        from ..rules import load_rules

        if len(_PARSED) >= 4:
            _PARSED.clear()
        rules = _PARSED[key] = load_rules(text, source=source)
    return rules


def run_animal(task: AnimalTask) -> AnimalResult:
    """All days of one drawn animal under one rule file (see the module docstring)."""
    rules = _rules_for(task.rules_text, task.rules_source)
    draw = task.draw
    name = task.subject or draw.subject
    animal = draw.build(rules, name)
    held = hasattr(animal, "last_truth")  # the animal holds each trial's truth: read it there
    if held and task.db is None:
        animal.record_truth = False  # nothing reads extra then (step does not), so it is not built
    res = AnimalResult(task.label, draw.subject, draw.group, draw.preset, task.days,
                       daily_min_ul=rules.spec.welfare.daily_min_ml * 1000.0)
    judge = RunningTruth(rules.spec)
    disengage = disengagement_ends(rules)
    cap = max_trials(rules)
    store = None
    if task.db is not None:
        from ..store import Store

        store = Store(task.db)
    state = new_subject(name, rules)
    lean = path_for(rules, task.db)[0] == DECISIONS_ONLY  # no learner, no quantities (offline/lockstep)
    keep_curves = reads_curves(rules)
    n = 0
    stage_now = None
    try:
        for day in range(1, task.days + 1):
            water = 0.0
            stored = []
            day_start, left_today = n, []
            for k in range(task.sessions_per_day):
                session = f"d{day:03d}" + (f"s{k + 1}" if task.sessions_per_day > 1 else "")
                t = t0 = START + DAY_S * (day - 1) + SESSION_GAP_S * k
                seed = session_seed(draw.subject, session)
                state, decision = begin_session(state, rules, session=session, rig="sim-rig", wall_time=t, seed=seed)
                first = decision
                items = []
                trials = 0
                while not decision.end_session and trials < cap:
                    event = animal.trial(decision, "sim-rig", t)
                    under = decision
                    if lean:
                        state, decision = decide_step(state, event, rules, learn=False, curves=keep_curves)
                    else:
                        state, decision, update = step(state, event, rules)
                    trials += 1
                    n += 1
                    if stage_now is not None and under.stage != stage_now and stage_now not in res.stage_trial:
                        res.stage_trial[stage_now] = n - 1
                        left_today.append((stage_now, n - 1 - day_start))
                    stage_now = under.stage
                    if held:
                        kind, p = animal.last_truth
                        judge.add_truth(n, under.stage, under.block, kind, p)
                    else:
                        judge.add(n, under.stage, under.block, event.extra)
                    water += event.outcome.reward_ul
                    res.interventions += bool(decision.overrides)
                    if store is not None:
                        items.append((event, decision, update.quantities, None))
                    t += TRIAL_S
                if decision.stage != stage_now and stage_now is not None and stage_now not in res.stage_trial:
                    # the decision after the last trial moved on: the stage was left at trial n
                    res.stage_trial[stage_now] = n
                    left_today.append((stage_now, n - day_start))
                    stage_now = decision.stage
                res.sessions += 1
                res.disengaged += bool(decision.end_session and decision.reasons
                                       and _ended_by(decision.reasons[0]) in disengage)
                if store is not None:
                    stored.append((_session_info(name, session, rules, seed, first, t0), items))
                    if items:
                        last_event, last_decision, q, _ = items[-1]
                        items[-1] = (last_event, last_decision, q, state.to_bytes())
            res.water_ul.append(water)
            for stage, k in left_today:  # days of training: whole days before, and the share of this one
                res.stage_day[stage] = (day - 1) + k / max(n - day_start, 1)
            if store is not None:
                _store_day(store, stored, first=task.first_stored and day == 1)
    finally:
        if store is not None:
            store.close()
    judge.finish()
    res.trials = n
    res.lags, res.early, res.judged = judge.lags, judge.early, judge.judged
    return res


def _store_day(store, stored: list, *, first: bool) -> None:
    """One animal-day's sessions and trials in one transaction. The day whose first
    session was stored up front commits that session's trials into it (and, with more
    sessions a day, imports the others in a second transaction)."""
    if not first:
        store.import_sessions(stored)
        return
    (_, items), rest = stored[0], stored[1:]
    for result in store.commit_batch(items):
        if result.error is not None:
            raise result.error
    if rest:
        store.import_sessions(rest)


def first_session_info(task: AnimalTask):
    """The SessionInfo of the task's first session, as ``run_animal`` will open it (no trial run)."""
    rules = _rules_for(task.rules_text, task.rules_source)
    name = task.subject or task.draw.subject
    session = "d001" + ("s1" if task.sessions_per_day > 1 else "")
    seed = session_seed(task.draw.subject, session)
    _, first = begin_session(new_subject(name, rules), rules, session=session, rig="sim-rig", wall_time=START,
                             seed=seed)
    return _session_info(name, session, rules, seed, first, START)


def _ended_by(reason: str) -> str:
    """The session-end name in ``"session ends (NAME): ..."``, else ''."""
    head = "session ends ("
    return reason[len(head):reason.find(")")] if reason.startswith(head) else ""


def _session_info(subject, session, rules, seed, first, start):
    from ..store import SessionInfo

    return SessionInfo.new(subject, session, "sim-rig", rules.name, rules.text, seed, start,
                           meta={"first_decision": first.to_dict()})
