"""Batched replay: 1,000 simulated subjects through BatchKalmanTD vs a per-subject loop.

The task is a serial-compound conditioning task at n = 32 (2 cues × 16 CSC bins of
0.25 s, built by ``rigloop.features``): each trial one cue, drawn at random, comes on
after a lead-in of 2–4 featureless bins, stays on for 16 bins, and for cue ``cs_plus``
a reward arrives at its offset; about 20 steps per trial, lengths varying by subject.
Each subject has its own Kalman TD parameters. Every side replays the same trials from
the prior: (a) ``KalmanTD.learn_trial`` subject by subject, trial by trial, and one
``BatchKalmanTD.learn_trials`` call per trial for all subjects on (b) the numpy path
(RIGLOOP_NO_NUMBA=1) and (c) the compiled kernel (numba, when installed), serial (the
default) and (d) with ``parallel=True`` over numba's threads. The script asserts every batch's final
weights agree with the loop's (max |Δw| ≤ 1e-9) and prints the largest difference.

The kernel is compiled (or loaded from numba's disk cache) by a warm-up call before any
timing; that one-off cost is printed separately and excluded from the figures.
Repetitions rotate which side runs first, so drift in machine load hits all; figures
are medians. ``speedup`` and ``subject_steps_per_s`` in the JSON refer to the fastest
available batch path (``best_path``); ``speedup_numpy`` / ``speedup_kernel`` give each.

Target (DESIGN.md): ≥ 30× faster and ≥ 1M subject-steps/s at n = 32.

    python tools/bench/replay_batch.py [--json] [--subjects 1000] [--trials 20] [--reps 3]
"""

from __future__ import annotations

import argparse
import gc
import json
import os
import statistics
import sys
import time

import numpy as np

from rigloop import batch as batch_module
from rigloop.batch import BatchKalmanTD
from rigloop.features import CueList, make_representation
from rigloop.learners import KalmanTD

CUES = ("cs_plus", "cs_minus")
N_BINS, DT = 16, 0.25
TARGET_SPEEDUP, TARGET_RATE, TOLERANCE = 30.0, 1e6, 1e-9


def make_task(subjects: int, trials: int, seed: int):
    """Per trial: padded Xs (S, T, n), rs (S, T), lengths (S,); and per-subject parameters."""
    rng = np.random.default_rng(seed)
    rep = make_representation("serial_compound", CueList(CUES), dt=DT, n_bins=N_BINS)
    # every (cue, lead-in) pair gives one trial shape: build each once with the real features
    shapes = {}
    for cue in CUES:
        for lead in (2, 3, 4):
            onset, offset = lead * DT, (lead + N_BINS) * DT
            outcomes = [(offset, 1.0)] if cue == "cs_plus" else []
            shapes[cue, lead] = rep.rows([(cue, onset, offset)], outcomes, offset + 2 * DT)
    T = max(rows.steps for rows in shapes.values())
    batch = []
    for _ in range(trials):
        cues = rng.integers(0, len(CUES), subjects)
        leads = rng.integers(2, 5, subjects)
        Xs = np.zeros((subjects, T, rep.n_features))
        rs = np.zeros((subjects, T))
        lengths = np.empty(subjects, dtype=np.intp)
        for s in range(subjects):
            rows = shapes[CUES[cues[s]], int(leads[s])]
            lengths[s] = rows.steps
            Xs[s, : rows.steps] = rows.X
            rs[s, : rows.steps] = rows.r
        batch.append((Xs, rs, lengths))
    params = {
        "gamma": rng.uniform(0.9, 0.99, subjects),
        "diffusion": rng.uniform(1e-4, 1e-2, subjects),
        "noise": rng.uniform(0.1, 1.0, subjects),
        "prior_var": rng.uniform(0.5, 2.0, subjects),
    }
    return rep.n_features, batch, params


def run_loop(n, batch, params) -> tuple[float, np.ndarray]:
    S = len(params["gamma"])
    learners = [KalmanTD(n, **{k: float(v[s]) for k, v in params.items()}) for s in range(S)]
    # each subject's own rows, cut to its length (as the daemon would hand them over)
    work = [[(X[:L], r[:L]) for X, r, L in zip(Xs, rs, lengths, strict=True)]
            for Xs, rs, lengths in batch]
    start = time.perf_counter()
    for trial in work:
        for learner, (X, r) in zip(learners, trial, strict=True):
            learner.learn_trial(X, r)
    elapsed = time.perf_counter() - start
    return elapsed, np.array([lr.w for lr in learners])


class Path:
    """A way to run the batch: the numpy path, or the compiled kernel (serial or threaded)."""

    def __init__(self, name: str, label: str, kernel: bool, parallel: bool = False):
        self.name, self.label, self.kernel, self.parallel = name, label, kernel, parallel

    def __enter__(self):
        self._env = os.environ.get("RIGLOOP_NO_NUMBA")
        if self.kernel:
            os.environ.pop("RIGLOOP_NO_NUMBA", None)
        else:
            os.environ["RIGLOOP_NO_NUMBA"] = "1"
        assert batch_module.backend() == ("numba" if self.kernel else "numpy"), self.name
        return self

    def __exit__(self, *exc):
        if self._env is None:
            os.environ.pop("RIGLOOP_NO_NUMBA", None)
        else:
            os.environ["RIGLOOP_NO_NUMBA"] = self._env


def available_paths() -> list[Path]:
    paths = [Path("numpy", "BatchKalmanTD, numpy", kernel=False)]
    with Path("probe", "", kernel=False):
        os.environ.pop("RIGLOOP_NO_NUMBA", None)
        has_kernel = batch_module.backend() == "numba"
    if has_kernel:
        import numba

        paths.append(Path("kernel", "BatchKalmanTD, kernel", kernel=True))
        if numba.get_num_threads() > 1:
            label = f"  parallel=True, {numba.get_num_threads()} threads"
            paths.append(Path("kernel_parallel", label, kernel=True, parallel=True))
    return paths


def run_batch(n, batch, params, path: Path) -> tuple[float, np.ndarray]:
    S = len(params["gamma"])
    learners = BatchKalmanTD(S, n, **params, parallel=path.parallel)
    with path:
        start = time.perf_counter()
        for Xs, rs, lengths in batch:
            learners.learn_trials(Xs, rs, lengths)
        elapsed = time.perf_counter() - start
    return elapsed, learners.w.copy()


def warm_up(n, batch, params, paths: list[Path]) -> float:
    """One untimed call per path (the kernel compiles, or loads from its disk cache, on
    its first call); returns the seconds that took in all."""
    start = time.perf_counter()
    for path in paths:
        run_batch(n, batch[:1], params, path)
    return time.perf_counter() - start


def measure(subjects: int, trials: int, reps: int, seed: int = 7) -> dict:
    n, batch, params = make_task(subjects, trials, seed)
    steps = int(sum(lengths.sum() for _, _, lengths in batch))
    paths = available_paths()
    warm_s = warm_up(n, batch, params, paths)
    sides = ["loop"] + [p.name for p in paths]
    times: dict[str, list[float]] = {side: [] for side in sides}
    diffs: dict[str, list[float]] = {p.name: [] for p in paths}
    by_name = {p.name: p for p in paths}
    gc.disable()
    try:
        for rep in range(reps):
            order = sides[rep % len(sides):] + sides[: rep % len(sides)]
            weights = {}
            for side in order:
                if side == "loop":
                    times[side].append((res := run_loop(n, batch, params))[0])
                else:
                    times[side].append((res := run_batch(n, batch, params, by_name[side]))[0])
                weights[side] = res[1]
                gc.collect()
            for p in paths:
                diffs[p.name].append(float(np.max(np.abs(weights["loop"] - weights[p.name]))))
    finally:
        gc.enable()
    max_diff = max(max(d) for d in diffs.values())
    assert max_diff <= TOLERANCE, f"batched weights differ from the loop's by {max_diff:.3g}"
    med = {side: statistics.median(t) for side, t in times.items()}
    tl = med["loop"]
    best = min((p.name for p in paths), key=lambda name: med[name])
    result = {
        "speedup": tl / med[best],
        "subject_steps_per_s": steps / med[best],
        "best_path": best,
        "speedup_numpy": tl / med["numpy"],
        "speedup_kernel": tl / med["kernel"] if "kernel" in med else None,
        "speedup_kernel_parallel": (tl / med["kernel_parallel"]
                                    if "kernel_parallel" in med else None),
        "subject_steps_per_s_by_path": {name: steps / med[name] for name in med},
        "seconds_by_path": med,
        "max_abs_diff": max_diff,
        "max_abs_diff_by_path": {name: max(d) for name, d in diffs.items()},
        "kernel_warmup_s_excluded": warm_s if "kernel" in med else None,
        "n": n,
        "subjects": subjects,
        "trials": trials,
        "subject_steps": steps,
        "loop_subject_steps_per_s": steps / tl,
        "loop_s": tl,
        "batch_s": med[best],
        "reps": reps,
        "target": {"speedup_min": TARGET_SPEEDUP, "subject_steps_per_s_min": TARGET_RATE,
                   "max_abs_diff": TOLERANCE},
        "labels": {p.name: p.label for p in paths},
    }
    result["met"] = bool(result["speedup"] >= TARGET_SPEEDUP and result["subject_steps_per_s"] >= TARGET_RATE)
    return result


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--json", action="store_true", help="print one JSON object")
    parser.add_argument("--subjects", type=int, default=1000, help="simulated subjects (default 1000)")
    parser.add_argument("--trials", type=int, default=20, help="trials per subject (default 20)")
    parser.add_argument("--reps", type=int, default=3, help="interleaved repetitions (default 3)")
    args = parser.parse_args(argv)
    result = measure(args.subjects, args.trials, args.reps)
    if args.json:
        print(json.dumps(result))
        return 0
    print(f"Kalman TD replay, n = {result['n']}, {result['subjects']} subjects × {result['trials']} trials "
          f"= {result['subject_steps']:,} subject-steps, median of {result['reps']}")
    print(f"{'':28}{'seconds':>10}{'subject-steps/s':>18}{'speedup':>10}")
    loop_rate = result["loop_subject_steps_per_s"]
    print(f"{'per-subject loop':28}{result['loop_s']:>10.3f}{loop_rate:>18,.0f}{'1.0×':>10}")
    for name, label in result["labels"].items():
        sec = result["seconds_by_path"][name]
        print(f"{label:28}{sec:>10.3f}{result['subject_steps_per_s_by_path'][name]:>18,.0f}"
              f"{result['loop_s'] / sec:>9.1f}×")
    if result["kernel_warmup_s_excluded"] is None:
        print("kernel: numba not installed (pip install rigloop[fast]); numpy path only")
    else:
        warm = result["kernel_warmup_s_excluded"]
        print(f"kernel compile / cache load before timing: {warm:.2f} s (excluded)")
    print(f"best: {result['labels'][result['best_path']]}, speedup {result['speedup']:.1f}× "
          f"(target ≥ {TARGET_SPEEDUP:.0f}×), {result['subject_steps_per_s']:,.0f} "
          f"subject-steps/s (target ≥ {TARGET_RATE:,.0f}/s); "
          f"max |Δw| = {result['max_abs_diff']:.2e} (≤ {TOLERANCE:g})")
    print("target met" if result["met"] else "target NOT met")
    return 0


if __name__ == "__main__":
    sys.exit(main())
