"""Parameter recovery: how often the 95% profile intervals of ``rigloop fit`` contain the
parameters the data were generated with.

Data come from the fitted model itself (``rigloop.fit.synthetic``): a two-tone
discrimination with a reversal, Rescorla–Wagner values, the go/no-go link (α, β, θ,
lapse) and the two-choice link (α, β, bias, lapse, persev), over a grid of true values.
Each data set is fitted with the default pins and profile intervals; coverage per
parameter is the fraction of fits whose interval contains the truth. Target: 93–97% for
every parameter (a 95% interval; the band is about ±2 binomial SEs at 400 fits).

    python tools/bench/recovery.py [--json] [--reps R] [--trials N] [--jobs J]

Default: 2 repetitions per grid point (a quick look, coverage too noisy to judge); the
full grid with RIGLOOP_FULL=1 or --reps 25.
"""

from __future__ import annotations

import argparse
import itertools
import json
import os
import sys
import time
from concurrent.futures import ProcessPoolExecutor

from rigloop import fit
from rigloop.fit import synthetic as sy

GONOGO = {"alpha": (0.1, 0.3), "beta": (5.0, 10.0), "theta": (0.3, 0.5), "lapse": (0.05, 0.15)}
CHOICE = {"alpha": (0.1, 0.3), "beta": (3.0, 6.0), "bias": (-0.5, 0.5), "lapse": (0.05, 0.15),
          "persev": (0.0, 1.0)}
LOW, HIGH = 0.93, 0.97


def grid(space: dict) -> list[dict]:
    names = list(space)
    return [dict(zip(names, values, strict=True)) for values in itertools.product(*space.values())]


def one(job: tuple) -> dict:
    """Fit one data set; which true values its intervals contain."""
    task, truth, seed, n = job
    if task == "gonogo":
        events = sy.gonogo_trials({"alpha": truth["alpha"]}, truth["beta"], truth["theta"],
                                  truth["lapse"], n=n, seed=seed)
    else:
        events = sy.choice_trials({"alpha": truth["alpha"]}, truth["beta"], truth["bias"],
                                  truth["lapse"], truth["persev"], n=n, seed=seed)
    r = fit.fit_subject(events, "rescorla_wagner", sy.IDENTITY, reward_unit_ul=sy.UNIT_UL,
                        starts=3, seed=seed)
    return {"task": task, "covered": {k: bool(r.ci95[k].lo <= v <= r.ci95[k].hi)
                                      for k, v in truth.items()},
            "at_bound": [k for k, iv in r.ci95.items() if iv.one_sided]}


def main() -> int:
    full = os.environ.get("RIGLOOP_FULL") == "1"
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--reps", type=int, default=25 if full else 2, help="data sets per grid point")
    p.add_argument("--trials", type=int, default=500, help="trials per data set")
    p.add_argument("--jobs", type=int, default=2, help="worker processes")
    p.add_argument("--tasks", default="gonogo,choice", help="gonogo, choice or both")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    args = p.parse_args()
    tasks = args.tasks.split(",")
    jobs = [(task, truth, 1000 * i + rep, args.trials)
            for task in tasks for i, truth in enumerate(grid(GONOGO if task == "gonogo" else CHOICE))
            for rep in range(args.reps)]
    t0 = time.monotonic()
    results = []
    with ProcessPoolExecutor(args.jobs) as pool:
        for k, res in enumerate(pool.map(one, jobs, chunksize=2)):
            results.append(res)
            if sys.stderr.isatty():
                print(f"\rfits {k + 1}/{len(jobs)}", end="", file=sys.stderr)
    if sys.stderr.isatty():
        print(file=sys.stderr)
    table, met = {}, True
    for task in tasks:
        mine = [r for r in results if r["task"] == task]
        for name in (GONOGO if task == "gonogo" else CHOICE):
            cov = sum(r["covered"][name] for r in mine) / len(mine)
            on_bound = sum(name in r["at_bound"] for r in mine) / len(mine)
            table[f"{task}.{name}"] = {"coverage": cov, "one_sided": on_bound, "fits": len(mine)}
            met &= LOW <= cov <= HIGH
    out = {"coverage": table, "fits": len(results), "seconds": time.monotonic() - t0,
           "target": [LOW, HIGH], "met": met}
    if args.json:
        print(json.dumps(out))
        return 0
    print(f"parameter recovery: {len(results)} fits of {args.trials} trials in "
          f"{out['seconds']:.0f} s (target coverage {LOW:.0%}-{HIGH:.0%} per parameter)")
    print(f"  {'parameter':<18}{'coverage':>10}{'one-sided':>11}{'fits':>6}")
    for key, row in table.items():
        flag = "" if LOW <= row["coverage"] <= HIGH else "  outside the target"
        print(f"  {key:<18}{row['coverage']:>10.1%}{row['one_sided']:>11.1%}{row['fits']:>6}{flag}")
    print("PASS" if met else "FAIL")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
