"""Run a rule file on many simulated animals, in parallel, and summarise what it did.

Each subject runs in its own task through any ``concurrent.futures`` executor (a
process pool by default; pass a cluster's executor where a lab has one). A task gets
the rule file's *text*, so it pickles cheaply and parses once per worker.

Simulated animals carry their truth with every trial (``simulate.py``), so each
subject's summary also says, from ``truth.py``, when it left each stage and how far
each block's end fell behind (or ran ahead of) the animal's true discrimination.
Without a store, a rule file whose decisions never read the learner runs its trials on
the decisions-only path (``offline/lockstep``): the same summaries, no learner.
"""

from __future__ import annotations

import re
import sys
from collections import Counter
from collections.abc import Callable, Sequence
from concurrent.futures import Executor
from dataclasses import dataclass, field

from ..errors import BadArgument
from . import truth
from .executors import run_ordered
from .lockstep import DECISIONS_ONLY, path_for
from .simulate import (PRESETS, SimulatedAnimal, open_simulated_session, preset_animal, preset_parameters,
                       simulate_session)


def animal_for(rules, subject: str, seed: int, task: str | None = None) -> SimulatedAnimal:
    """A typical simulated animal suited to the rule file's cues (two-choice if cues name sides)."""
    return preset_animal("typical", rules, subject, seed, task=task)


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
    animal: str = "typical"  # the preset
    left_stage: dict[str, int] = field(default_factory=dict)  # stage -> trial it was first left (truth.py)
    lags: list[int] = field(default_factory=list)  # per ended block the animal discriminated in
    early: int = 0  # ended blocks the animal had not yet discriminated
    judged: int = 0  # ended blocks with something to discriminate


def simulate_subject(rules_text: str, rules_source: str, subject: str, seed: int, sessions: int,
                     max_trials: int, task: str | None = None, db: str | None = None,
                     animal: str = "typical") -> SubjectSummary:
    """All sessions of one simulated ``animal`` (a preset); a top-level function so it pickles.

    Each session's trials are summarised (and with ``db`` stored, one transaction per
    session) as soon as it ends and then dropped, so memory stays flat in the number of
    sessions."""
    from ..rules import load_rules

    rules = _rules_for(rules_text, rules_source, load_rules)
    lean = path_for(rules, db)[0] == DECISIONS_ONLY  # the summary reads decisions and events only
    sim = preset_animal(animal, rules, subject, seed, task=task)
    out = SubjectSummary(subject, animal=animal)
    state = None
    total = 0
    store = None
    judged = []
    if db is not None:
        from ..store import Store

        store = Store(db)
    try:
        for k in range(sessions):
            kw = dict(session=f"sim{k + 1:02d}", state=state, start_time=1.8e9 + 86400 * k, max_trials=max_trials)
            run = simulate_session(rules, sim, store=store, decisions_only=lean, **kw)
            judged.extend(truth.truth_trials([run], start=total + 1))
            state = run.state
            prev = run.first
            for d in run.decisions:
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
            del run
    finally:
        if store is not None:
            store.close()
    _judge(out, judged, rules.spec)
    return out


_PARSED: dict = {}  # rule-file text -> parsed rules, once per worker process


def _rules_for(text: str, source: str, load):
    """The parsed rule file, parsed once per process (a worker runs many subjects)."""
    key = (text, source)
    if key not in _PARSED:
        _PARSED.clear()  # one rule file at a time is the common case; keep memory bounded
        _PARSED[key] = load(text, source=source)
    return _PARSED[key]


def simulate_item(args: tuple) -> SubjectSummary:
    """``simulate_subject(*args)``: one item of ``run_ordered`` (a top-level function so it pickles)."""
    return simulate_subject(*args)


def _judge(out: SubjectSummary, trials: list, spec) -> None:
    """Fill a summary's stage and block timing from the animal's truth."""
    out.left_stage = truth.trials_to_criterion(trials)
    timings = [t for t in truth.block_timing(trials, spec) if t.ended and t.judged]
    out.lags = truth.lags(timings)
    out.early = truth.ended_early(timings)
    out.judged = len(timings)


def _kind(message: str) -> str:
    """A message with its numbers blanked, so like messages count together; a long one
    cut at a word before 70 characters and marked so (its numbers vary, its start says
    what it is)."""
    text = re.sub(r"\d+(\.\d+)?", "#", message.split(" -> ")[0])
    if len(text) <= 70:
        return text
    return text[:70].rsplit(" ", 1)[0].rstrip(" ,;:(") + " …"


def simulate_many(rules, subjects: Sequence[str], *, seed: int = 1, sessions: int = 3, max_trials: int = 500,
                  task: str | None = None, executor: str | Executor | None = None, db: str | None = None,
                  animals: str | Sequence[str] = "typical", scheduler: str | None = None,
                  workers: int | None = None, progress: Callable[[int, int], None] | None = None):
    """Summaries for every subject, in order, computed through ``executors.run_ordered``
    (``executor`` "local" by default, "serial", "dask" or a ``scheduler`` address; each
    subject's seed is fixed by its position, so every executor gives the same summaries).

    With ``db`` all trials go to one store: each worker writes its subjects' sessions,
    one transaction per animal-day (SQLite lets one writer in at a time and the others
    wait). The subjects' first sessions are stored first, in order, so the store lists
    subjects in the order given whichever finishes first. ``animals`` is one preset for
    all subjects or one per subject. ``progress(done, total)`` counts finished subjects."""
    presets = [animals] * len(subjects) if isinstance(animals, str) else list(animals)
    if len(presets) != len(subjects):
        raise BadArgument("animals", f"one preset or one per subject ({len(subjects)})", len(presets))
    for p in set(presets):
        preset_parameters(p, "animals")  # an unknown name fails here, before any work
    args = [(rules.text, rules.source, s, seed * 1000 + i, sessions, max_trials, task, db, presets[i])
            for i, s in enumerate(subjects)]
    if db is not None:
        _store_first_sessions(db, rules, subjects)
    if executor is None:
        executor = "serial" if len(subjects) == 1 and scheduler is None else "local"
    return run_ordered(simulate_item, args, executor=executor, scheduler=scheduler, workers=workers,
                       progress=progress)


def _store_first_sessions(db: str, rules, subjects: Sequence[str]) -> None:
    """Open every subject's first simulated session in one transaction, in order (a store
    that already holds them is left as it is: its runs find their sessions and go on)."""
    from ..errors import StoreError
    from ..store import Store

    infos = [open_simulated_session(rules, s, "sim01", start_time=1.8e9)[2] for s in subjects]
    with Store(db) as store:
        try:
            store.import_sessions([(info, []) for info in infos])
        except StoreError:
            for info in infos:  # some are stored already (a second run into the same file)
                store.open_session(info)


def parse_mix(text: str) -> list[tuple[str, float]]:
    """``"typical=0.75,non_discriminator=0.25"`` -> [(preset, fraction)]; fractions sum to 1."""
    expected = f"PRESET=FRACTION,... with fractions > 0 summing to 1 (presets: {', '.join(PRESETS)})"
    out = []
    for item in text.split(","):
        name, sep, frac = item.strip().partition("=")
        try:
            value = float(frac)
        except ValueError:
            raise BadArgument("--mix", expected, item) from None
        if not sep or not value > 0:
            raise BadArgument("--mix", expected, item)
        name = name.strip()
        preset_parameters(name, "--mix")
        if any(name == other for other, _ in out):
            raise BadArgument("--mix", f"each preset at most once ({expected})", name)
        out.append((name, value))
    if abs(sum(f for _, f in out) - 1.0) > 1e-6:
        raise BadArgument("--mix", expected, text)
    return out


def mix_presets(mix: Sequence[tuple[str, float]], n: int) -> list[str]:
    """One preset per subject for ``n`` subjects in the mix's proportions (largest remainder), in order."""
    shares = [(name, f * n) for name, f in mix]
    counts = {name: int(share) for name, share in shares}
    rest = sorted(shares, key=lambda item: -(item[1] - int(item[1])))
    for name, _ in rest[:n - sum(counts.values())]:
        counts[name] += 1
    return [name for name, _ in mix for _ in range(counts[name])]


def print_simulation(rules, *, subjects: int, sessions: int, max_trials: int, task: str | None,
                     seed: int, db: str | None, out=None, animal: str = "typical", mix: str | None = None,
                     executor: str | None = None, scheduler: str | None = None, workers: int | None = None,
                     progress: Callable[[int, int], None] | None = None) -> int:
    """``rigloop simulate``: run, then print one line per subject and a summary, then the
    same subjects against their truth (stages left, block lag behind discrimination)."""
    out = out or sys.stdout
    names = [f"sim{i + 1:03d}" for i in range(subjects)]
    preset_parameters(animal, "--animal")
    animals = mix_presets(parse_mix(mix), subjects) if mix else [animal] * subjects
    print(f"rule file '{rules.name}': {subjects} simulated subjects x {sessions} sessions "
          f"(at most {max_trials} trials each)", file=out)
    results = simulate_many(rules, names, seed=seed, sessions=sessions, max_trials=max_trials, task=task, db=db,
                            animals=animals, executor=executor, scheduler=scheduler, workers=workers,
                            progress=progress)
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
    print_truth(rules, results, out)
    if db:
        print(f"every simulated trial is stored in {db}", file=out)
    return 0


def _spread(values) -> str:
    """``median [IQR q1–q3]`` of some trial counts, or ``-`` for none."""
    m = truth.median_iqr(values)
    return "-" if m is None else f"{m[0]:.0f} [IQR {m[1]:.0f}–{m[2]:.0f}]"


def print_truth(rules, results: Sequence[SubjectSummary], out) -> None:
    """Per subject and overall: trials to leave each stage, block lag behind the truth."""
    leavable = [name for name, st in rules.spec.stages.items() if st.advance or st.step_back]
    print(f"against each animal's truth (it discriminates from the first of {truth.HOLD} trials in a row with "
          f"true p(rewarded cue) - p(unrewarded cue) >= {truth.MARGIN:g}; choice tasks: p(right) to the "
          "right cue - to the left cue):", file=out)
    print(f"{'subject':<9}{'animal':<19}{'left stage at trial':<34}{'block lag':<26}{'ended early':>11}", file=out)
    for r in results:
        left = ", ".join(f"{s} {n}" for s, n in r.left_stage.items()) or "-"
        print(f"{r.subject:<9}{r.animal:<19}{left:<34}{_spread(r.lags):<26}{f'{r.early} of {r.judged}':>11}",
              file=out)
    for stage in leavable:
        at = [r.left_stage[stage] for r in results if stage in r.left_stage]
        if at:
            print(f"trials to leave {stage}: {_spread(at)}; {len(at)} of {len(results)} subjects left it", file=out)
        else:
            print(f"trials to leave {stage}: no subject left it", file=out)
    lags = [lag for r in results for lag in r.lags]
    early, judged = sum(r.early for r in results), sum(r.judged for r in results)
    print(f"block lag behind the truth (block end - first trial discriminating): {_spread(lags)} over "
          f"{len(lags)} blocks; {early} of {judged} ended blocks ended before the animal discriminated", file=out)
