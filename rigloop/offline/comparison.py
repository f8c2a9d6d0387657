"""``rigloop compare``'s work: every rule file on the same drawn animals, then the numbers.

``run_comparison`` draws the cohort once, runs each (rule file, animal) through
``compare.run_animal`` with ``executors.run_ordered`` (serial, a local pool or Dask:
results in order, identical everywhere), and builds the document ``--json`` prints::

    {"rules": {name: {measure: summary}},
     "pairs": [{"a", "b", "differences": {measure: {"estimate", "lo95", "hi95", "n"}}, "verdict"}]}

Pairs are every rule file against the first (the baseline). ``csv_rows`` gives one row
per animal and rule file.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass

from ..errors import BadArgument
from .compare import AnimalResult, AnimalTask, first_session_info, run_animal
from .compare_stats import pair_differences, stage_targets, summarise, verdict
from .population import Population, draw_animals


@dataclass
class Comparison:
    names: list[str]
    stages: list[str]  # the stages whose leaving is measured (those with an advance), in file order
    targets: dict[str, str]
    results: dict[str, list[AnimalResult]]  # name -> one per animal, in draw order
    days: int
    population: str

    def document(self, seed: int = 0) -> dict:
        rules = {n: summarise(self.results[n], self.stages) for n in self.names}
        pairs = []
        base = self.names[0]
        for i, other in enumerate(self.names[1:], start=1):
            diffs = pair_differences(self.results[base], self.results[other], self.stages, seed=seed + 1000 * i)
            pairs.append({"a": base, "b": other, "differences": diffs,
                          "verdict": verdict(base, other, diffs, self.targets, rules[base], rules[other])})
        return {"population": self.population, "animals": len(self.results[base]), "days": self.days,
                "rules": rules, "pairs": pairs}


def unique_names(names: Sequence[str]) -> list[str]:
    """Names as given, a repeated one numbered (``name#2``), so identical files can be compared."""
    out, seen = [], {}
    for n in names:
        seen[n] = seen.get(n, 0) + 1
        out.append(n if seen[n] == 1 else f"{n}#{seen[n]}")
    return out


def run_comparison(entries: Sequence[tuple[str, object]], population: Population, *, animals: int, days: int,
                   seed: int, sessions_per_day: int = 1, db: str | None = None, executor: str = "local",
                   scheduler: str | None = None, workers: int | None = None,
                   progress: Callable[[int, int], None] | None = None) -> Comparison:
    """Run every (name, rules) of ``entries`` on the same ``animals`` drawn from ``population``."""
    from .executors import run_ordered

    if len(entries) < 2:
        raise BadArgument("rule files", "at least two to compare (or one with --vary)", len(entries))
    if isinstance(days, bool) or not isinstance(days, int) or days < 1:
        raise BadArgument("--days", "a whole number of days >= 1", days)
    draws = draw_animals(population, animals, seed)
    first = entries[0][1]
    kinds = {_task_kind(r) for _, r in entries}
    if len(kinds) > 1:
        raise BadArgument("rule files", "rule files of one task (all lick or all two-choice), so the same "
                          "animals can run each", ", ".join(f"{n}: {_task_kind(r)}" for n, r in entries))
    tasks = []
    for k, (name, rules) in enumerate(entries):
        # each rule file's animals are their own subjects in a store; without one the names stay plain
        for d in draws:
            tasks.append(AnimalTask(name, rules.text, rules.source, d, days, sessions_per_day, db,
                                    subject=f"r{k + 1}-{d.subject}" if db is not None and k else None,
                                    first_stored=db is not None))
    if db is not None:
        _store_first_sessions(db, tasks)
    got = run_ordered(run_animal, tasks, executor=executor, scheduler=scheduler, workers=workers,
                      progress=progress)
    results = {name: got[k * len(draws):(k + 1) * len(draws)] for k, (name, _) in enumerate(entries)}
    targets = stage_targets(first.spec)
    return Comparison([n for n, _ in entries], list(targets), targets, results, days, population.name)


def _store_first_sessions(db: str, tasks: Sequence[AnimalTask]) -> None:
    """Every task's first session in one transaction, in task order, before any worker
    writes: the store then lists subjects in cohort order whichever animal finishes first.
    A store that holds any of them already is refused (compare writes new subjects only)."""
    from ..errors import StoreError
    from ..store import Store

    infos = [first_session_info(t) for t in tasks]
    with Store(db) as store:
        held = [i.subject for i in infos if i.subject in set(store.subjects())]
        if held:
            raise BadArgument("--db", "a new store file, or one without the cohort's simulated subjects",
                              f"{db}, which holds {', '.join(held[:3])}{' ...' if len(held) > 3 else ''} already")
        try:
            store.import_sessions([(info, []) for info in infos])
        except StoreError as exc:  # another run wrote them meanwhile
            raise BadArgument("--db", "a store no other run writes the same subjects into", str(exc)) from None


def _task_kind(rules) -> str:
    return "choice" if rules.spec.choice_cues() else "lick"


CSV_COLUMNS = ("rules", "subject", "group", "preset", "days", "trials", "stage", "trials_to_leave", "days_to_leave",
               "water_per_day_ul", "days_below_min", "interventions", "sessions", "disengaged_sessions",
               "median_reversal_lag", "early_block_ends", "judged_blocks")


def csv_rows(c: Comparison):
    """One row per rule file, animal and measured stage (one row with no stage if none)."""
    for name in c.names:
        for r in c.results[name]:
            for stage in c.stages or [""]:
                yield {"rules": name, "subject": r.subject, "group": r.group, "preset": r.preset, "days": r.days,
                       "trials": r.trials, "stage": stage, "trials_to_leave": r.stage_trial.get(stage, ""),
                       "days_to_leave": r.stage_day.get(stage, ""),
                       "water_per_day_ul": round(sum(r.water_ul) / max(len(r.water_ul), 1), 1),
                       "days_below_min": r.days_below_min, "interventions": r.interventions,
                       "sessions": r.sessions, "disengaged_sessions": r.disengaged,
                       "median_reversal_lag": "" if r.median_lag is None else r.median_lag,
                       "early_block_ends": r.early, "judged_blocks": r.judged}


def format_text(doc: dict) -> str:
    """The printed report: per rule file the main measures, then each pair's verdict."""
    lines = [f"{doc['animals']} animals from population '{doc['population']}', {doc['days']} days each, "
             "on every rule file (the same animals and random streams)"]
    for name, s in doc["rules"].items():
        lines.append(f"\n{name}")
        for key, v in s.items():
            if key.startswith("days_to_leave:"):
                never = "" if v["never"] is None else f"; {100 * v['never']:.0f}% never left it"
                lines.append(f"  days to leave {key.split(':', 1)[1]}: {_mid(v)}{never}")
            elif key.startswith("trials_to_leave:"):
                lines.append(f"  trials to leave {key.split(':', 1)[1]}: {_mid(v)}")
        w = s["water_per_day_ul"]
        lines.append(f"  water per day (µL): {_mid(w)}; {w['animal_days_below_min']} animal-days below the daily "
                     f"minimum {w['daily_min_ul']:.0f} µL")
        lines.append(f"  welfare interventions: {s['interventions_per_100_days']['total']} "
                     f"({_mid(s['interventions_per_100_days'])} per 100 animal-days)")
        lines.append(f"  sessions ended by disengagement: {s['disengaged_sessions_per_100']['total']}")
        lag = _mid(s["reversal_lag_trials"])
        lines.append(f"  block ends (reversals among them) behind the animal's learning, trials: {lag}")
        lines.append(f"  blocks ended before the animal had learned them, per animal: {_mid(s['early_block_ends'])}")
    if doc["pairs"]:
        lines.append("")
    for p in doc["pairs"]:
        lines.append(p["verdict"])
    return "\n".join(lines) + "\n"


def _mid(v: dict) -> str:
    if v.get("median") is None:
        return "-"
    return f"median {v['median']:g} [IQR {v['q1']:g}–{v['q3']:g}], n {v['n']}"
