"""Batched replay: 1,000 simulated subjects through BatchKalmanTD vs a per-subject loop.

The task is a serial-compound conditioning task at n = 32 (2 cues × 16 CSC bins of
0.25 s, built by ``rigloop.features``): each trial one cue, drawn at random, comes on
after a lead-in of 2–4 featureless bins, stays on for 16 bins, and for cue ``cs_plus``
a reward arrives at its offset; about 20 steps per trial, lengths varying by subject.
Each subject has its own Kalman TD parameters. Both sides replay the same trials from
the prior: (a) ``KalmanTD.learn_trial`` subject by subject, trial by trial, and (b) one
``BatchKalmanTD.learn_trials`` call per trial for all subjects. The script asserts the
final weights agree (max |Δw| ≤ 1e-9) and prints it. Repetitions alternate which side
runs first, so drift in machine load hits both; figures are medians.

Target (DESIGN.md): ≥ 30× faster and ≥ 1M subject-steps/s at n = 32.

    python tools/bench/replay_batch.py [--json] [--subjects 1000] [--trials 20] [--reps 3]
"""

from __future__ import annotations

import argparse
import gc
import json
import statistics
import sys
import time

import numpy as np

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


def run_batch(n, batch, params) -> tuple[float, np.ndarray]:
    S = len(params["gamma"])
    learners = BatchKalmanTD(S, n, **params)
    start = time.perf_counter()
    for Xs, rs, lengths in batch:
        learners.learn_trials(Xs, rs, lengths)
    elapsed = time.perf_counter() - start
    return elapsed, learners.w.copy()


def measure(subjects: int, trials: int, reps: int, seed: int = 7) -> dict:
    n, batch, params = make_task(subjects, trials, seed)
    steps = int(sum(lengths.sum() for _, _, lengths in batch))
    loop_t, batch_t, diffs = [], [], []
    gc.disable()
    try:
        for rep in range(reps):
            order = (run_loop, run_batch) if rep % 2 == 0 else (run_batch, run_loop)
            results = {f: f(n, batch, params) for f in order}
            (tl, wl), (tb, wb) = results[run_loop], results[run_batch]
            loop_t.append(tl)
            batch_t.append(tb)
            diffs.append(float(np.max(np.abs(wl - wb))))
            gc.collect()
    finally:
        gc.enable()
    max_diff = max(diffs)
    assert max_diff <= TOLERANCE, f"batched weights differ from the loop's by {max_diff:.3g}"
    tl, tb = statistics.median(loop_t), statistics.median(batch_t)
    result = {
        "speedup": tl / tb,
        "subject_steps_per_s": steps / tb,
        "max_abs_diff": max_diff,
        "n": n,
        "subjects": subjects,
        "trials": trials,
        "subject_steps": steps,
        "loop_subject_steps_per_s": steps / tl,
        "loop_s": tl,
        "batch_s": tb,
        "reps": reps,
        "target": {"speedup_min": TARGET_SPEEDUP, "subject_steps_per_s_min": TARGET_RATE,
                   "max_abs_diff": TOLERANCE},
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
    print(f"{'':24}{'seconds':>10}{'subject-steps/s':>18}")
    print(f"{'per-subject loop':24}{result['loop_s']:>10.3f}{result['loop_subject_steps_per_s']:>18,.0f}")
    print(f"{'BatchKalmanTD':24}{result['batch_s']:>10.3f}{result['subject_steps_per_s']:>18,.0f}")
    print(f"speedup {result['speedup']:.1f}× (target ≥ {TARGET_SPEEDUP:.0f}×); "
          f"rate target ≥ {TARGET_RATE:,.0f}/s; max |Δw| = {result['max_abs_diff']:.2e} (≤ {TOLERANCE:g})")
    print("target met" if result["met"] else "target NOT met")
    return 0


if __name__ == "__main__":
    sys.exit(main())
