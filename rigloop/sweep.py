"""Run a rule file on many simulated animals, in parallel, and summarise what it did.

Each subject runs in its own task through any ``concurrent.futures`` executor (a
process pool by default; pass a cluster's executor where a lab has one). A task gets
the rule file's *text*, so it pickles cheaply and parses once per worker.
"""

from __future__ import annotations

import re
import sys
from collections import Counter
from collections.abc import Sequence
from concurrent.futures import Executor, ProcessPoolExecutor
from dataclasses import dataclass, field

from .simulate import SimulatedAnimal, simulate_session


def animal_for(rules, subject: str, seed: int, task: str | None = None) -> SimulatedAnimal:
    """A simulated animal suited to the rule file's cues (two-choice if cues name sides)."""
    roles = {name: spec.role for name, spec in rules.spec.cues.items()}
    sides = {c: r for c, r in roles.items() if r in ("left", "right")}
    kind = task or ("choice" if sides else "lick")
    rng_alpha = 0.08 + 0.1 * ((seed * 7919) % 100) / 100  # animals differ in learning rate
    bias = 0.0 if kind == "lick" else (((seed * 104729) % 100) / 100 - 0.5) * 2.0
    harder = next((b.staircase.harder for st in rules.spec.stages.values() for b in st.blocks.values()
                   if b.staircase is not None), "higher")
    f = rules.features
    cue_s = f.n_bins * f.dt if f.n_bins else 1.0  # a serial compound spans the cue
    return SimulatedAnimal(subject, task=kind, alpha=rng_alpha, bias=bias, sides=sides, seed=seed, cue_s=cue_s,
                           harder=harder)


@dataclass
class SubjectSummary:
    subject: str
    trials: list[int] = field(default_factory=list)  # per session
    ul: list[float] = field(default_factory=list)  # per session
    blocks: list[str] = field(default_factory=list)  # block changes, "trial: from -> to"
    stages: list[str] = field(default_factory=list)
    overrides: Counter = field(default_factory=Counter)
    warnings: Counter = field(default_factory=Counter)
    end_reasons: list[str] = field(default_factory=list)


def simulate_subject(rules_text: str, rules_source: str, subject: str, seed: int, sessions: int,
                     max_trials: int, task: str | None = None, db: str | None = None) -> SubjectSummary:
    """All sessions of one simulated subject; a top-level function so it pickles."""
    from .rules import load_rules

    rules = load_rules(rules_text, source=rules_source)
    animal = animal_for(rules, subject, seed, task)
    out = SubjectSummary(subject)
    state = None
    total = 0
    store = None
    if db is not None:
        from .store import Store

        store = Store(db)
    try:
        for k in range(sessions):
            kw = dict(session=f"sim{k + 1:02d}", state=state, start_time=1.8e9 + 86400 * k, max_trials=max_trials)
            run = simulate_session(rules, animal, store=store, **kw)
            state = run.state
            prev = run.first
            for event, d in zip(run.events, run.decisions, strict=True):
                total += 1
                if d.block != prev.block:
                    out.blocks.append(f"{total}: {prev.block} -> {d.block}")
                if d.stage != prev.stage:
                    out.stages.append(f"{total}: {prev.stage} -> {d.stage}")
                out.overrides.update(_kind(o) for o in d.overrides)
                out.warnings.update(_kind(w) for w in d.warnings)
                prev = d
            out.trials.append(len(run.events))
            out.ul.append(sum(e.outcome.reward_ul for e in run.events))
            last = run.decisions[-1] if run.decisions else run.first
            out.end_reasons.append(last.reasons[0] if last.end_session and last.reasons else f"{max_trials} trials")
    finally:
        if store is not None:
            store.close()
    return out


def _kind(message: str) -> str:
    """A message with its numbers blanked, so like messages count together."""
    return re.sub(r"\d+(\.\d+)?", "#", message.split(" -> ")[0])[:70]


def simulate_many(rules, subjects: Sequence[str], *, seed: int = 1, sessions: int = 3, max_trials: int = 500,
                  task: str | None = None, executor: Executor | None = None, db: str | None = None):
    """Summaries for every subject, in order. With ``db`` all trials go to one store
    (then subjects run one after another: SQLite has one writer)."""
    args = [(rules.text, rules.source, s, seed * 1000 + i, sessions, max_trials, task, db)
            for i, s in enumerate(subjects)]
    if db is not None or len(subjects) == 1:
        return [simulate_subject(*a) for a in args]
    own = executor is None
    executor = executor or ProcessPoolExecutor()
    try:
        futures = [executor.submit(simulate_subject, *a) for a in args]
        return [f.result() for f in futures]
    finally:
        if own:
            executor.shutdown()


def print_simulation(rules, *, subjects: int, sessions: int, max_trials: int, task: str | None,
                     seed: int, db: str | None, out=None) -> int:
    """``rigloop simulate``: run, then print one line per subject and a summary."""
    out = out or sys.stdout
    names = [f"sim{i + 1:03d}" for i in range(subjects)]
    print(f"rule file '{rules.name}': {subjects} simulated subjects x {sessions} sessions "
          f"(at most {max_trials} trials each)", file=out)
    results = simulate_many(rules, names, seed=seed, sessions=sessions, max_trials=max_trials, task=task, db=db)
    print(f"{'subject':<9}{'trials/session':<22}{'µL/session':<26}{'block changes':>14}{'stages':>8}", file=out)
    for r in results:
        trials = " ".join(f"{t}" for t in r.trials)
        ul = " ".join(f"{u:.0f}" for u in r.ul)
        print(f"{r.subject:<9}{trials:<22}{ul:<26}{len(r.blocks):>14}{len(r.stages):>8}", file=out)
    over, warn = Counter(), Counter()
    for r in results:
        over.update(r.overrides)
        warn.update(r.warnings)
    if over:
        print("welfare overrides: " + ", ".join(f"{k} x{v}" for k, v in over.most_common()), file=out)
    if warn:
        print("warnings: " + ", ".join(f"{k} x{v}" for k, v in warn.most_common()), file=out)
    ends = Counter(reason.split(":")[0] for r in results for reason in r.end_reasons)
    print("sessions ended by: " + ", ".join(f"{k} x{v}" for k, v in ends.most_common()), file=out)
    for r in results[:3]:
        if r.stages:
            print(f"{r.subject} stage changes at trial " + "; ".join(r.stages), file=out)
    if db:
        print(f"every simulated trial is stored in {db}", file=out)
    return 0
