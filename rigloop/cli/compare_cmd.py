"""``rigloop compare``: rule files (or variants of one) on the same simulated cohort."""

from __future__ import annotations

import argparse

from .args import Count, add_json, rules_name


def add_compare(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("compare", help="run rule files on the same simulated cohort and compare what they do")
    p.add_argument("rules", nargs="+", metavar="RULES",
                   help="two or more rule files (paths or example names); with --vary, one is enough")
    p.add_argument("--population", default="spring_cohort", metavar="P",
                   help="a population file (path, or a shipped one: spring_cohort, failing_animals)")
    p.add_argument("--animals", type=Count(1, 100_000), default=200, help="animals drawn from the population")
    p.add_argument("--days", type=Count(1, 1_000), default=20, help="simulated days of training per animal")
    p.add_argument("--sessions-per-day", type=Count(1, 4), default=1, help="sessions per simulated day")
    p.add_argument("--seed", type=Count(0), default=1, help="the cohort's seed (same seed, same animals)")
    p.add_argument("--vary", action="append", default=[], metavar="PATH=V1,V2,...",
                   help="variants of the first rule file: a dotted key path and values, e.g. "
                        "stages.reversal.blocks.reversed.end.min_trials=20,40; PATH[K] is the K-th number of an "
                        "expression, e.g. stages.acquisition.advance.when[3]=0.9,0.95 (repeat for a grid; default: none)")
    p.add_argument("--db", default=None, help="store every simulated trial in this SQLite file (default: none)")
    p.add_argument("--csv", default=None, help="write one row per animal, rule file and stage here (default: none)")
    p.add_argument("--out", default=None, help="the cohort figure (.png, .pdf or .svg; default: none); with "
                                               "--vary also the trade-off plot beside it (NAME-tradeoff.png)")
    p.add_argument("--executor", choices=("serial", "local", "dask"), default="local",
                   help="where the animals run: this process, a local process pool, or a Dask cluster")
    p.add_argument("--scheduler", default=None, metavar="tcp://HOST:8786",
                   help="a Dask scheduler address (implies --executor dask; default: none, so --executor dask "
                        "starts a local cluster)")
    p.add_argument("--workers", type=Count(1, 1024), default=None, help="worker processes (default: one per core)")
    add_json(p, "print the comparison as JSON (keys: rules, pairs; see README)")
    p.set_defaults(func=_run_compare)


def _run_compare(args: argparse.Namespace) -> int:
    return run_compare(args.rules, population=args.population, animals=args.animals, days=args.days,
                       sessions_per_day=args.sessions_per_day, seed=args.seed, vary=args.vary, db=args.db,
                       csv_path=args.csv, out=args.out, executor=args.executor, scheduler=args.scheduler,
                       workers=args.workers, as_json=args.json)


def run_compare(rules: list[str], *, population: str, animals: int, days: int, seed: int, vary=(),
                sessions_per_day: int = 1, db: str | None = None, csv_path: str | None = None,
                out: str | None = None, executor: str = "local", scheduler: str | None = None,
                workers: int | None = None, as_json: bool = False, stdout=None) -> int:
    import csv
    import json
    import pathlib
    import sys

    from ..errors import BadArgument
    from ..offline.comparison import CSV_COLUMNS, csv_rows, format_text, run_comparison, unique_names
    from ..offline.population import load_population
    from ..offline.rule_variants import parse_vary, variants
    from ..rules.load import load_any, load_rules
    from .progress import Progress

    stdout = stdout or sys.stdout
    if out is not None:
        from ..outputs.report import check_out

        check_out(out)
    pop = load_population(population)
    loaded = [load_any(rules_name(r)) for r in rules]
    if vary:
        if len(loaded) != 1:
            raise BadArgument("--vary", "one rule file to make the variants of", f"{len(loaded)} rule files")
        base = loaded[0]
        grid = variants(base.text, [parse_vary(v) for v in vary])
        entries = [(f"{base.name} {label}", load_rules(text, source=f"{base.source} ({label})"))
                   for label, text in grid]
    else:
        entries = list(zip(unique_names([r.name for r in loaded]), loaded, strict=True))
    if len(entries) < 2:
        raise BadArgument("rules", "two or more rule files, or one with --vary and two or more values",
                          " ".join(rules))
    bar = Progress(0, f"{len(entries)} rule files x {animals} animals x {days} days")
    try:
        comparison = run_comparison(entries, pop, animals=animals, days=days, seed=seed,
                                    sessions_per_day=sessions_per_day, db=db, executor=executor,
                                    scheduler=scheduler, workers=workers, progress=bar)
    finally:
        bar.close()
    doc = comparison.document(seed)
    if csv_path:
        with open(csv_path, "w", newline="", encoding="utf-8") as f:
            w = csv.DictWriter(f, fieldnames=CSV_COLUMNS)
            w.writeheader()
            w.writerows(csv_rows(comparison))
    figures = []
    if out:
        from ..outputs.compare_figure import cohort_figure, tradeoff_figure

        figures.append(cohort_figure(out, comparison, doc))
        if vary:
            p = pathlib.Path(out)
            figures.append(tradeoff_figure(str(p.with_name(p.stem + "-tradeoff" + p.suffix)), comparison, doc))
    if as_json:
        print(json.dumps({"rules": doc["rules"], "pairs": doc["pairs"], "population": doc["population"],
                          "animals": doc["animals"], "days": doc["days"]}, indent=2, ensure_ascii=False),
              file=stdout)
        return 0
    print(format_text(doc), end="", file=stdout)
    print(_paths_line(entries, db), file=stdout)
    for f in figures:
        print(f"figure: {f}", file=stdout)
    if csv_path:
        print(f"per-animal table: {csv_path}", file=stdout)
    if db:
        print(f"every simulated trial is stored in {db}", file=stdout)
    return 0


def _paths_line(entries, db) -> str:
    """Which simulation path each rule file took and why (offline/lockstep.path_for), one line."""
    from ..offline.lockstep import path_for

    groups: dict[tuple[str, str], list[str]] = {}
    for name, rules in entries:
        groups.setdefault(path_for(rules, db), []).append(name)
    return "simulated with: " + "; ".join(f"{path} for {', '.join(names)} ({why})"
                                          for (path, why), names in groups.items())
