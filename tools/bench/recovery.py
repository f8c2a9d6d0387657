"""Parameter recovery: how often the 95% profile intervals of ``rigloop fit`` contain the
parameters the data were generated with, and why they miss when they do.

Data come from the fitted model itself (``rigloop.fit.synthetic``): a two-tone
discrimination with a reversal, Rescorla–Wagner values, the go/no-go link (α, β, θ,
lapse) and the two-choice link (α, β, bias, lapse, persev), over a grid of true values.
Each data set is fitted with the default pins and profile intervals; coverage per
parameter is the fraction of fits whose interval contains the truth, printed with its
95% binomial interval (Wilson 1927, JASA 22:209: the score interval). Target: 93–97%
for every parameter.

With ``--diagnose`` each fit is also checked against the truth directly, to tell the
causes of a miss apart:

* ``lr``: the likelihood-ratio statistic at the truth, 2·(ℓ̂ − ℓ_p(θ_j = truth)), with
  the profile at the truth re-fitted from the estimate and from the truth. The fraction
  with lr ≤ 3.84 is the coverage an exact inversion of the χ²(1) test would give: below
  93% means the χ² approximation itself fails at this amount of data.
* ``local``: a refit started at the truth found a higher likelihood than the fit (the
  interval was built around a local optimum).
* ``narrow``: lr ≤ 3.84 but the interval excludes the truth (the profile's re-fit of the
  other parameters was incomplete, or an end was placed wrongly).

With ``--calibrate B`` each fit also gets calibrated intervals (``rigloop.fit.calibrate``:
the 3.84 cutoff times the mean likelihood ratio at the generating value over B data sets
simulated at the estimate), and the table prints their coverage beside the plain one; PASS
then judges the calibrated figures. ``--trials 500,1000,2000`` measures coverage against
the amount of data; ``--lr-only`` skips the profiles and counts the truth as covered when
its likelihood ratio is below the cutoff (3.84, or 3.84 × factor calibrated): the same
verdict as the profile interval, whose ends sit on that crossing, at a fraction of the cost.

    python tools/bench/recovery.py [--json] [--reps R] [--trials N[,N...]] [--jobs J]
                                   [--diagnose] [--lr-only] [--calibrate B]
                                   [--lines FILE]      # each fit's result as it ends
    python tools/bench/recovery.py --summarise FILE    # the table of a (partial) --lines run

    # the measured campaign (README "Fitting"): 160 fits per task and trial count
    python tools/bench/recovery.py --lr-only --tasks gonogo --reps 10 --trials 500,1000,2000
    python tools/bench/recovery.py --lr-only --tasks choice --reps 5 --trials 500,1000,2000
    python tools/bench/recovery.py --lr-only --tasks gonogo --reps 10 --calibrate 30
    python tools/bench/recovery.py --lr-only --tasks choice --reps 5 --calibrate 30
    # the target (93-97% for every parameter) at 1,000 trials, calibrated: PASS for both tasks
    python tools/bench/recovery.py --lr-only --tasks choice --reps 5 --calibrate 30 --trials 1000
    python tools/bench/recovery.py --lr-only --tasks gonogo --reps 10 --calibrate 30 --trials 1000

Default: 2 repetitions per grid point (a quick look; coverage too noisy to judge); the
full grid with RIGLOOP_FULL=1 (25 repetitions: 400 fits per task).
"""

from __future__ import annotations

import argparse
import itertools
import json
import math
import os
import sys
import time
from concurrent.futures import ProcessPoolExecutor

# one BLAS thread per process: L-BFGS-B's small vector operations on OpenBLAS threads that
# wait on a busy machine cost four times the CPU of the whole calibration (measured)
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

from rigloop import fit  # noqa: E402 (after the thread setting, before numpy loads)
from rigloop.fit import synthetic as sy  # noqa: E402
from rigloop.fit.calibrate import factor_of  # noqa: E402

GONOGO = {"alpha": (0.1, 0.3), "beta": (5.0, 10.0), "theta": (0.3, 0.5), "lapse": (0.05, 0.15)}
CHOICE = {"alpha": (0.1, 0.3), "beta": (3.0, 6.0), "bias": (-0.5, 0.5), "lapse": (0.05, 0.15),
          "persev": (0.0, 1.0)}
LOW, HIGH = 0.93, 0.97
CHI2_1_95 = 3.841458820694124  # χ²(1) 95% quantile (scipy.stats.chi2.ppf(0.95, 1))
RW = "rescorla_wagner"


def grid(space: dict) -> list[dict]:
    names = list(space)
    return [dict(zip(names, values, strict=True)) for values in itertools.product(*space.values())]


def wilson(k: int, n: int, z: float = 1.959963984540054) -> tuple[float, float]:
    """The 95% Wilson score interval of a binomial proportion k/n (Wilson 1927)."""
    if n == 0:
        return 0.0, 1.0
    p = k / n
    centre = (p + z * z / (2 * n)) / (1 + z * z / n)
    half = z * math.sqrt(p * (1 - p) / n + z * z / (4 * n * n)) / (1 + z * z / n)
    return max(0.0, centre - half), min(1.0, centre + half)


def events_for(task: str, truth: dict, seed: int, n: int) -> list:
    if task == "gonogo":
        return sy.gonogo_trials({"alpha": truth["alpha"]}, truth["beta"], truth["theta"],
                                truth["lapse"], n=n, seed=seed)
    return sy.choice_trials({"alpha": truth["alpha"]}, truth["beta"], truth["bias"],
                            truth["lapse"], truth["persev"], n=n, seed=seed)


def one(job: tuple) -> dict:
    """Fit one data set; which true values its intervals contain (and, diagnosing, why not).

    mode "profile": the fit's profile intervals (and, with ``calibrate`` replicates, the
    calibrated ones); mode "lr": no intervals, only the likelihood ratio at the truth (an
    interval contains the truth exactly when that ratio is below its cutoff, so this is the
    coverage the profile intervals have, at a tenth of the cost).
    """
    task, truth, seed, n, starts, diagnose = job[:6]
    mode, calibrate = (job[6], job[7]) if len(job) > 6 else ("profile", 0)
    events = events_for(task, truth, seed, n)
    r = fit.fit_subject(events, RW, sy.IDENTITY, reward_unit_ul=sy.UNIT_UL, starts=starts,
                        seed=seed, intervals=mode == "profile")
    out = {"task": task, "trials": n, "mode": mode,
           "at_bound": [k for k, iv in r.ci95.items() if iv.one_sided],
           "cut": [k for k, iv in r.ci95.items() if "search bound" in (iv.lo_end, iv.hi_end)]}
    if mode == "profile":
        out["covered"] = {k: bool(r.ci95[k].lo <= v <= r.ci95[k].hi) for k, v in truth.items()}
    if diagnose or mode == "lr":
        out.update(_diagnose(events, truth, r))
    if mode == "lr":
        out["covered"] = {k: out["lr"][k] <= CHI2_1_95 for k in truth}
        out["at_bound"] = [k for k in truth if _on_bound(r, k)]
    if calibrate:
        out.update(_calibrated(events, truth, r, calibrate, seed, mode, out.get("lr")))
    return out


def _calibrated(events: list, truth: dict, r, replicates: int, seed: int, mode: str,
                lr: dict | None) -> dict:
    """Which true values the calibrated intervals contain: the intervals themselves (mode
    "profile"), or the likelihood ratio at the truth against 3.84 × the factor ("lr")."""
    from rigloop.fit.calibrate import bartlett_factors, calibrated_fit
    from rigloop.fit.data import prepare

    t0 = time.process_time()
    if mode == "profile":
        c = calibrated_fit(events, r, replicates, seed=seed, representation=sy.IDENTITY,
                           reward_unit_ul=sy.UNIT_UL)
        cal = c.calibration
        covered = {k: bool(c.ci95[k].lo <= v <= c.ci95[k].hi) for k, v in truth.items()}
    else:
        data = prepare(events, sy.IDENTITY, reward_unit_ul=sy.UNIT_UL)
        cal = bartlett_factors(data, r, replicates, seed=seed, events=events)
        covered = {k: lr[k] <= cal.cutoff(k) for k in truth}
    return {"calibrate_cpu_s": time.process_time() - t0, "factor": dict(cal.factor),
            "mean_lr_replicates": dict(cal.mean_lr), "covered_cal": covered}


def _on_bound(r, name: str) -> bool:
    lo, hi = r.bounds[name]
    v = r.params[name]
    return abs(v - lo) <= 1e-4 * (hi - lo) or abs(v - hi) <= 1e-4 * (hi - lo)


def _diagnose(events: list, truth: dict, r) -> dict:
    """The likelihood-ratio statistic at each true value, and whether the fit was local."""
    pins = dict(r.fixed)
    kw = {"reward_unit_ul": sy.UNIT_UL, "hessian": False, "intervals": False, "starts": 1}
    from_truth = fit.fit_subject(events, RW, sy.IDENTITY, fixed=pins, start=truth, **kw)
    ll_best = max(r.log_likelihood, from_truth.log_likelihood)
    lr = {}
    for name, value in truth.items():
        others = {k: v for k, v in truth.items() if k != name}
        near = {k: min(max(r.params[k], r.bounds[k][0]), r.bounds[k][1]) for k in others}
        fixed = {**pins, name: value}
        ll = max(fit.fit_subject(events, RW, sy.IDENTITY, fixed=fixed, start=s, **kw).log_likelihood
                 for s in (others, near))
        lr[name] = max(0.0, 2.0 * (ll_best - ll))
    return {"lr": lr, "local": bool(from_truth.log_likelihood > r.log_likelihood + 0.01),
            "gap": ll_best - r.log_likelihood}


def summarise(results: list[dict], tasks: list[str], diagnose: bool) -> dict:
    """Coverage per task, trial count and parameter (plain intervals, and calibrated ones
    where the fits carry them), with Wilson intervals and the diagnosis columns."""
    table = {}
    counts = sorted({r.get("trials", 0) for r in results})
    for task in tasks:
        for trials in counts:
            mine = [r for r in results if r["task"] == task and r.get("trials", 0) == trials]
            if not mine:
                continue
            prefix = task if len(counts) == 1 else f"{task}@{trials}"
            for name in (GONOGO if task == "gonogo" else CHOICE):
                table[f"{prefix}.{name}"] = _row(mine, name, diagnose)
    return table


def _row(mine: list[dict], name: str, diagnose: bool) -> dict:
    n = len(mine)
    k = sum(r["covered"][name] for r in mine)
    lo, hi = wilson(k, n)
    row = {"coverage": k / n, "ci95": [lo, hi], "fits": n,
           "one_sided": sum(name in r["at_bound"] for r in mine) / n,
           "cut": sum(name in r["cut"] for r in mine) / n}
    cal = [r for r in mine if "covered_cal" in r]
    if cal:
        kc = sum(_covered_calibrated(r, name) for r in cal)
        row["calibrated"] = kc / len(cal)
        row["calibrated_ci95"] = list(wilson(kc, len(cal)))
        row["calibrated_fits"] = len(cal)
        row["mean_factor"] = sum(factor_of(r["mean_lr_replicates"][name]) for r in cal) / len(cal)
    if diagnose:
        lr_ok = sum(r["lr"][name] <= CHI2_1_95 for r in mine)
        row["lr_coverage"] = lr_ok / n
        row["lr_ci95"] = list(wilson(lr_ok, n))
        row["missed_local"] = sum((not r["covered"][name]) and r["local"] for r in mine)
        row["missed_narrow"] = sum((not r["covered"][name]) and r["lr"][name] <= CHI2_1_95
                                   and not r["local"] for r in mine)
        row["mean_lr"] = sum(r["lr"][name] for r in mine) / n
    return row


def _covered_calibrated(r: dict, name: str) -> bool:
    """Whether the calibrated interval of one fit contains the truth: as recorded from the
    interval (mode "profile"), or the ratio at the truth against 3.84 × the factor the
    library makes of the replicates' mean ratio (mode "lr", so a --lines file follows
    ``calibrate.factor_of``)."""
    if r.get("mode") == "lr":
        return r["lr"][name] <= CHI2_1_95 * factor_of(r["mean_lr_replicates"][name])
    return r["covered_cal"][name]


def main() -> int:
    full = os.environ.get("RIGLOOP_FULL") == "1"
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--reps", type=int, default=25 if full else 2, help="data sets per grid point")
    p.add_argument("--trials", default="500", help="trials per data set (a comma list, e.g. "
                   "500,1000,2000, measures coverage against the amount of data)")
    p.add_argument("--starts", type=int, default=3, help="optimiser starts per fit")
    p.add_argument("--jobs", type=int, default=2, help="worker processes")
    p.add_argument("--tasks", default="gonogo,choice", help="gonogo, choice or both")
    p.add_argument("--diagnose", action="store_true",
                   help="also the likelihood ratio at the truth and local optima (slower)")
    p.add_argument("--lr-only", action="store_true",
                   help="no profile intervals: coverage from the likelihood ratio at the truth "
                        "against 3.84 (what the intervals give, at a fraction of the cost)")
    p.add_argument("--calibrate", type=int, default=0, metavar="B",
                   help="also calibrated intervals from B parametric-bootstrap replicates per "
                        "fit (fit.calibrate; slow: about B/5 s a fit)")
    p.add_argument("--lines", metavar="FILE", help="also write each fit's result to FILE as "
                   "it ends (one JSON line; --summarise FILE reads a partial run)")
    p.add_argument("--summarise", metavar="FILE", help="print the table of a --lines FILE "
                   "instead of fitting")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    args = p.parse_args()
    tasks = args.tasks.split(",")
    if args.summarise:
        with open(args.summarise) as fh:
            results = [json.loads(line) for line in fh if line.strip()]
        tasks = [t for t in ("gonogo", "choice") if any(r["task"] == t for r in results)]
        diagnose = bool(results) and all("lr" in r for r in results)
        trials = sorted({r.get("trials", 0) for r in results})
        return report(results, tasks, diagnose, trials, None, args.json)
    try:
        counts = [int(t) for t in args.trials.split(",")]
    except ValueError:
        p.error(f"--trials takes whole numbers separated by commas (got {args.trials!r})")
    bad = sorted(set(tasks) - {"gonogo", "choice"})
    if (bad or args.reps < 1 or min(counts) < 50 or args.jobs < 1 or args.starts < 1
            or args.calibrate < 0):
        p.error("--tasks takes gonogo and/or choice; --reps, --jobs, --starts >= 1; "
                "--trials >= 50; --calibrate >= 0")
    if args.calibrate and args.calibrate < 20:
        p.error("--calibrate takes at least 20 replicates (the factor is a mean of that many "
                "likelihood ratios)")
    mode = "lr" if args.lr_only else "profile"
    # repetitions outermost, so a partial run (--lines) spans the whole grid
    jobs = [(task, truth, 1000 * i + rep, n, args.starts, args.diagnose, mode, args.calibrate)
            for rep in range(args.reps) for n in counts for task in tasks
            for i, truth in enumerate(grid(GONOGO if task == "gonogo" else CHOICE))]
    t0 = time.monotonic()
    results = []
    lines = open(args.lines, "w") if args.lines else None  # noqa: SIM115 (closed below)
    with ProcessPoolExecutor(args.jobs) as pool:
        for k, res in enumerate(pool.map(one, jobs, chunksize=1)):
            results.append(res)
            if lines is not None:
                print(json.dumps(res), file=lines, flush=True)
            if sys.stderr.isatty():
                print(f"\rfits {k + 1}/{len(jobs)}", end="", file=sys.stderr)
    if lines is not None:
        lines.close()
    if sys.stderr.isatty():
        print(file=sys.stderr)
    return report(results, tasks, args.diagnose or args.lr_only, counts,
                  time.monotonic() - t0, args.json)


def report(results: list[dict], tasks: list[str], diagnose: bool, trials: list[int],
           seconds: float | None, as_json: bool) -> int:
    """Print the coverage table (or one JSON object) of ``results``; PASS when every
    parameter's coverage (the calibrated one, where fits carry it) is within the target."""
    table = summarise(results, tasks, diagnose)
    judged = {k: row.get("calibrated", row["coverage"]) for k, row in table.items()}
    met = bool(table) and all(LOW <= v <= HIGH for v in judged.values())
    cal_s = [r["calibrate_cpu_s"] for r in results if "calibrate_cpu_s" in r]
    out = {"coverage": table, "fits": len(results), "trials": trials,
           "seconds": seconds, "target": [LOW, HIGH], "met": met,
           "calibrate_cpu_s": sum(cal_s) / len(cal_s) if cal_s else None}
    if as_json:
        print(json.dumps(out))
        return 0
    took = "" if seconds is None else f" in {seconds:.0f} s"
    lr_only = bool(results) and all(r.get("mode") == "lr" for r in results)
    print(f"parameter recovery: {len(results)} fits of {', '.join(map(str, trials))} trials{took} "
          f"(target coverage {LOW:.0%}-{HIGH:.0%} per parameter; [binomial 95% interval])")
    if lr_only:
        print("  coverage from the likelihood ratio at the truth against 3.84 (--lr-only)")
    cal = any("calibrated" in row for row in table.values())
    head = f"  {'parameter':<20}{'coverage':>9} {'[95% interval]':<16}"
    if cal:
        head += f"{'calibrated':>11} {'[95% interval]':<16}{'factor':>7}"
    head += f"{'one-sided':>10}{'cut':>6}{'fits':>6}"
    if diagnose:
        head += f"{'LR<=3.84':>10}{'mean LR':>9}{'local':>7}{'narrow':>8}"
    print(head)
    for key, row in table.items():
        lo, hi = row["ci95"]
        line = f"  {key:<20}{row['coverage']:>9.1%} [{lo:5.1%}, {hi:5.1%}]  "
        if cal:
            clo, chi = row.get("calibrated_ci95", (math.nan, math.nan))
            line += (f"{row.get('calibrated', math.nan):>10.1%} [{clo:5.1%}, {chi:5.1%}] "
                     f"{row.get('mean_factor', math.nan):>7.2f}")
        line += f"{row['one_sided']:>9.1%}{row['cut']:>6.1%}{row['fits']:>6}"
        if diagnose:
            line += (f"{row['lr_coverage']:>10.1%}{row['mean_lr']:>9.2f}"
                     f"{row['missed_local']:>7}{row['missed_narrow']:>8}")
        print(line + ("" if LOW <= judged[key] <= HIGH else "  outside the target"))
    if cal_s:
        print(f"  a calibrated fit's replicates and intervals: {sum(cal_s) / len(cal_s):.1f} s CPU "
              f"on average ({len(cal_s)} fits)")
    print("PASS" if met else "FAIL")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
