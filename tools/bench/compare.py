"""Speed and memory of ``rigloop compare``: animal-days per second, the target run, memory vs days.

The target: 2 rule files × 200 animals × 20 days of ~300 trials each (2.4 million
simulated trials) in ≤ 60 s on 2 cores. By default a smaller run of the same shape is
timed on the local process pool and the target run's time is projected from its rate
(animal-days per second); ``--full`` times the target run itself. Also printed:

- CPU seconds per animal-day, from serial runs in this process (``time.process_time``),
  so a busy machine (other work on the same cores) does not hide the engine's own cost;
  the CPU projection is that × the target's animal-days / the cores. Both simulation
  paths are timed, alternating A/B three times in one run: the per-subject ``step``
  (what ``--db`` runs), the decisions-only path (``offline/lockstep``, without a store) and
  the per-subject ``step`` storing every trial (``--db``); then per rule file over the
  animals the pool run draws (the cohort's presets differ in cost: this is the CPU the
  pool's rate rests on);
- the split of a trial's CPU time between the decision step and the loop around it
  (the simulated animal, the truth judge, bookkeeping);
- where one animal-day's time goes: the top functions of a cProfile of the serial run.
- peak Python memory (``tracemalloc``) of one animal run for 1 to 16 days, in a fresh
  process: flat when it grows by at most 2 kB per added day (the behaviour estimates' bounded
  node tables held small).

    python tools/bench/compare.py [--animals 12] [--days 3] [--workers 2] [--full] [--profile]

Rule files: the shipped ``tone_reversal`` and ``gonogo_shaping`` (both lick tasks); the
animals: the shipped ``spring_cohort`` population.
"""

from __future__ import annotations

import argparse
import os
import sys
import time
import tracemalloc

from rigloop.offline.comparison import run_comparison
from rigloop.offline.compare import AnimalTask, run_animal
from rigloop.offline.executors import cores
from rigloop.offline.population import draw_animals, load_population
from rigloop.rules.load import load_any

TARGET_S = 60.0
TARGET = dict(rule_files=2, animals=200, days=20)
RULES = ("tone_reversal", "gonogo_shaping")


def _entries():
    return [(name, load_any(name)) for name in RULES]


def timed_run(animals: int, days: int, executor: str, workers: int | None) -> tuple[float, int, float]:
    """(wall seconds, animal-days, trials) of a comparison run."""
    pop = load_population("spring_cohort")
    t0 = time.perf_counter()
    c = run_comparison(_entries(), pop, animals=animals, days=days, seed=7, executor=executor, workers=workers)
    wall = time.perf_counter() - t0
    trials = sum(r.trials for rs in c.results.values() for r in rs)
    return wall, len(RULES) * animals * days, trials


class _PerSubject:
    """Within it, every compare run takes the per-subject ``step`` (the path ``--db`` runs)."""

    def __enter__(self):
        from rigloop.offline import compare
        from rigloop.offline.lockstep import PER_SUBJECT

        self._real = compare.path_for
        compare.path_for = lambda rules, db=None: (PER_SUBJECT, "the benchmark's reference")

    def __exit__(self, *exc):
        from rigloop.offline import compare

        compare.path_for = self._real


def cpu_per_day(days: int, per_subject: bool = False, db: str | None = None) -> tuple[float, float]:
    """(CPU seconds per animal-day, trials per animal-day) of serial runs in this process
    (with ``db``: storing every trial there, one transaction per animal-day, as ``--db``)."""
    pop = load_population("spring_cohort")
    draws = draw_animals(pop, 2, 3)
    t0 = time.process_time()
    trials = 0
    for k, (name, rules) in enumerate(_entries()):
        for d in draws:
            task = AnimalTask(name, rules.text, rules.source, d, days, db=db,
                              subject=None if db is None else f"r{k}-{d.subject}")
            if per_subject:
                with _PerSubject():
                    trials += run_animal(task).trials
            else:
                trials += run_animal(task).trials
    n = len(RULES) * len(draws) * days
    return (time.process_time() - t0) / n, trials / n


def cpu_both(days: int, rounds: int = 3) -> dict[str, tuple[float, float]]:
    """The best (CPU s per animal-day, trials per animal-day) of each path over ``rounds``
    alternating runs (per-subject, decisions-only, with a store, per-subject, ...): the least
    disturbed. The store's own work (SQLite in the kernel, the fsyncs) counts only as far as
    this process does it."""
    import tempfile

    got: dict[str, list] = {"per-subject step": [], "decisions only": [], "storing every trial (--db)": []}
    with tempfile.TemporaryDirectory() as tmp:
        for k in range(rounds):
            got["per-subject step"].append(cpu_per_day(days, per_subject=True))
            got["decisions only"].append(cpu_per_day(days))
            got["storing every trial (--db)"].append(cpu_per_day(days, db=os.path.join(tmp, f"bench{k}.sqlite")))
    return {k: min(v) for k, v in got.items()}


def cpu_by_rules(animals: int, days: int) -> dict[str, tuple[float, float]]:
    """Per rule file, (CPU s per animal-day, trials per animal-day) of serial runs of the
    pool run's animals and days (``timed_run``: the same population, count and seed). The
    cohort's presets differ in cost, and so do the days (a later stage's criterion may need
    the d' interval on every trial), so this is the sample the pool's rate rests on, where
    ``cpu_both``'s two animals over two days only compare the paths."""
    pop = load_population("spring_cohort")
    draws = draw_animals(pop, animals, 7)
    out = {}
    for name, rules in _entries():
        t0, trials = time.process_time(), 0
        for d in draws:
            trials += run_animal(AnimalTask(name, rules.text, rules.source, d, days)).trials
        out[name] = ((time.process_time() - t0) / (len(draws) * days), trials / (len(draws) * days))
    return out


def step_share(days: int) -> tuple[float, float, int]:
    """(µs per trial inside the decision step, µs per trial outside it, trials) of serial runs on
    the path compare takes without a store: what the simulation loop (animal, truth,
    bookkeeping) costs beside the decisions themselves."""
    from rigloop.offline import compare

    pop = load_population("spring_cohort")
    draws = draw_animals(pop, 2, 11)
    inside = [0.0]
    real = compare.step

    def timed(*args):
        t = time.process_time()
        out = real(*args)
        inside[0] += time.process_time() - t
        return out

    real_lean = compare.decide_step

    def timed_lean(*args, **kw):
        t = time.process_time()
        out = real_lean(*args, **kw)
        inside[0] += time.process_time() - t
        return out

    compare.step, compare.decide_step = timed, timed_lean
    try:
        t0, trials = time.process_time(), 0
        for name, rules in _entries():
            for d in draws:
                trials += run_animal(AnimalTask(name, rules.text, rules.source, d, days)).trials
        total = time.process_time() - t0
    finally:
        compare.step, compare.decide_step = real, real_lean
    return inside[0] / trials * 1e6, (total - inside[0]) / trials * 1e6, trials


def profile_top(days: int, limit: int = 12) -> None:
    import cProfile
    import pstats

    pop = load_population("spring_cohort")
    d = draw_animals(pop, 1, 3)[0]
    rules = load_any(RULES[0])
    prof = cProfile.Profile()
    prof.enable()
    run_animal(AnimalTask(RULES[0], rules.text, rules.source, d, days))
    prof.disable()
    print(f"\nwhere the time goes (cProfile, one animal x {days} days under {RULES[0]}, by own time):")
    pstats.Stats(prof, stream=sys.stdout).strip_dirs().sort_stats("tottime").print_stats(limit)


MEMORY_DAYS = (1, 2, 4, 8, 16)
MAX_KB_PER_DAY = 2.0  # flat: the peak may grow by at most this per added day (16 days vs 2)


def peak_memory_fresh(days_list=MEMORY_DAYS) -> list[tuple[int, float]]:
    """:func:`peak_memory` in a new interpreter: in this one, what earlier measurements left in
    the process-wide caches moved the peak of a later run by tens of kB (8 days / 2 days read
    1.36x after the short pool run and 1.64x after the full one, 0.37x alone)."""
    import json
    import subprocess

    out = subprocess.run([sys.executable, __file__, "--memory-only", ",".join(map(str, days_list))],
                         capture_output=True, text=True, check=True).stdout
    return [tuple(x) for x in json.loads(out)]


def peak_memory(days_list) -> list[tuple[int, float]]:
    """Peak traced MB of one animal's run for each number of days.

    The behaviour estimates' node tables (core/behaviour.py) are process-wide and bounded,
    oldest entry out when full (~0.6 MB at their caps, which one animal fills over weeks and
    a daemon's many subjects at once); they hold the same numbers at any size, so they are
    held at 8 entries here: what the figure follows is what grows with an animal's days."""
    from rigloop.core import behaviour

    pop = load_population("spring_cohort")
    d = draw_animals(pop, 1, 5)[0]
    rules = load_any(RULES[0])
    caps = behaviour._A_NODES_MAX, behaviour._G_NODES_MAX
    behaviour._A_NODES_MAX = behaviour._G_NODES_MAX = 8
    behaviour._A_NODES.clear()
    behaviour._G_NODES.clear()
    try:
        run_animal(AnimalTask(RULES[0], rules.text, rules.source, d, 1))  # warm caches outside the measurement
        out = []
        for days in days_list:
            tracemalloc.start()
            run_animal(AnimalTask(RULES[0], rules.text, rules.source, d, days))
            out.append((days, tracemalloc.get_traced_memory()[1] / 1e6))
            tracemalloc.stop()
    finally:
        behaviour._A_NODES_MAX, behaviour._G_NODES_MAX = caps
    return out


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--animals", type=int, default=12, help="animals per rule file of the timed run (default 12)")
    ap.add_argument("--days", type=int, default=3, help="days of the timed run (default 3)")
    ap.add_argument("--workers", type=int, default=2, help="local pool processes (default 2)")
    ap.add_argument("--full", action="store_true", help="time the whole target run (several minutes)")
    ap.add_argument("--profile", action="store_true", help="also print a cProfile of one animal")
    ap.add_argument("--memory-only", metavar="DAYS", help=argparse.SUPPRESS)  # peak_memory_fresh's child
    args = ap.parse_args(argv)
    if args.memory_only:
        import json

        print(json.dumps(peak_memory([int(d) for d in args.memory_only.split(",")])))
        return 0
    if args.full:
        args.animals, args.days = TARGET["animals"], TARGET["days"]
    target_days = TARGET["rule_files"] * TARGET["animals"] * TARGET["days"]
    print(f"machine: {cores()} cores usable, load average {os.getloadavg()[0]:.1f} (other work slows the wall clock)")

    from rigloop.offline.lockstep import path_for

    paths = ", ".join(f"{name}: {path_for(rules)[0]}" for name, rules in _entries())
    print(f"paths without a store: {paths}")
    both = cpu_both(days=2)
    ref = both["per-subject step"][0]
    for label, (cpu, per_day) in both.items():
        cpu_proj = cpu * target_days / args.workers
        print(f"serial, this process, {label}: {cpu * 1000:.0f} ms CPU per animal-day ({per_day:.0f} trials; "
              f"{cpu / per_day * 1e6:.0f} µs per trial; {ref / cpu:.2f}x the per-subject step)")
        print(f"  target run projected from CPU time on {args.workers} cores: {cpu_proj:.0f} s "
              f"(goal <= {TARGET_S:.0f} s: {'PASS' if cpu_proj <= TARGET_S else 'FAIL'})")
    by_rules = cpu_by_rules(args.animals, args.days)
    mean_cpu = sum(cpu for cpu, _ in by_rules.values()) / len(by_rules)
    cpu_proj = mean_cpu * target_days / args.workers
    print(f"serial, the pool run's {args.animals} animals x {args.days} days, decisions only: " + ", ".join(
        f"{name} {cpu / per_day * 1e6:.0f} µs per trial ({cpu * 1000:.0f} ms per animal-day)"
        for name, (cpu, per_day) in by_rules.items()))
    print(f"  target run projected from their CPU time on {args.workers} cores: {cpu_proj:.0f} s "
          f"(goal <= {TARGET_S:.0f} s: {'PASS' if cpu_proj <= TARGET_S else 'FAIL'}; the pool's rate below rests "
          "on these animals)")
    inside, outside, _ = step_share(days=2)
    print(f"  per trial without a store: {inside:.0f} µs in the decision step, {outside:.0f} µs outside it (the "
          f"simulated animal, the truth judge, bookkeeping): {100 * outside / (inside + outside):.0f}% outside")

    wall, n_days, trials = timed_run(args.animals, args.days, "local", args.workers)
    rate = n_days / wall
    print(f"local pool, {args.workers} workers: {len(RULES)} rule files x {args.animals} animals x {args.days} days "
          f"= {n_days} animal-days, {trials:,} trials in {wall:.1f} s: {rate:.1f} animal-days/s "
          f"({trials / wall:,.0f} trials/s)")
    if args.full:
        target_s, how = wall, "measured"
    else:
        # a small run is mostly the pool's start (processes, imports, first-use caches): the run
        # with twice the days gives the rate of the days themselves, the difference the start
        wall2, n_days2, trials2 = timed_run(args.animals, 2 * args.days, "local", args.workers)
        marginal = (n_days2 - n_days) / max(wall2 - wall, 1e-9)
        start = max(wall - n_days / marginal, 0.0)
        print(f"  the same with {2 * args.days} days: {wall2:.1f} s; the added days ran at {marginal:.1f} "
              f"animal-days/s, the pool's start ~{start:.1f} s")
        target_s = start + target_days / marginal
        how = "projected: the start + the target's days at the added days' rate"
    print(f"target: 2 rule files x 200 animals x 20 days ({target_days} animal-days): {target_s:.0f} s ({how}); "
          f"goal <= {TARGET_S:.0f} s: {'PASS' if target_s <= TARGET_S else 'FAIL'} "
          f"({target_s / TARGET_S:.1f}x the goal)")

    mem = dict(peak_memory_fresh())
    print("peak traced memory of one animal vs days (a fresh process): "
          + ", ".join(f"{d} d {mb * 1000:.0f} kB" for d, mb in mem.items()))
    per_day = (mem[16] - mem[2]) * 1000 / 14
    print(f"  16 days vs 2 days: {per_day:+.1f} kB per added day (goal <= {MAX_KB_PER_DAY:g}) -> "
          f"{'PASS (flat)' if per_day <= MAX_KB_PER_DAY else 'FAIL (grows with days)'}")
    if args.profile:
        profile_top(days=2)
    return 0


if __name__ == "__main__":
    sys.exit(main())
