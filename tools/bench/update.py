"""Kalman TD update: rigloop's in-place step vs filterpy's predict + update, same numbers.

For n = 4, 16, 64, 256 features, both run the same sequence of time steps (random 0/1
cue rows, a terminal all-zero row ending every trial, random rewards) with F = I,
Q = τ²I, R = σ_r², H = x − γx'. Repetitions alternate between the two so machine noise
hits both; each figure is the median over repetitions of µs per step. filterpy gets its
H rows prebuilt outside the timed loop (a head start); rigloop builds h from x and x' and
validates its inputs inside ``KalmanTD.update``.

The figure is the median over repetitions of the *paired* ratio (filterpy's time / ours
in the same repetition, the two run back to back, which goes first alternating), timed
by the process's CPU time, with BLAS on one thread (OPENBLAS_NUM_THREADS=1 unless set: its
worker threads spin on a busy 2-core machine and inflated filterpy's time at n = 256 by
100x): a shared machine's load moves both halves of a pair alike, so the ratio holds still where each time alone does not (the ratio of two medians of wall
time swung 2.7–5.2× at n = 16 between runs of the same code). ``--wall`` times by wall
clock instead. The quartiles of the paired ratios are printed beside it.

Target: ≥ 5× faster at n = 16 and ≥ 15× at n = 64, weights equal to 1e-10.

    python tools/bench/update.py [--json] [--reps 21] [--wall]
"""

from __future__ import annotations

import argparse
import gc
import json
import os
import statistics
import sys
import time

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")  # before numpy loads BLAS (see above)

import numpy as np  # noqa: E402

from rigloop.core.learners import KalmanTD  # noqa: E402

GAMMA, DIFFUSION, NOISE, PRIOR_VAR = 0.9, 0.01, 0.5, 1.0
STEPS = {4: 600, 16: 600, 64: 300, 256: 40}
CLOCK = [time.process_time]  # main() sets it from --wall (process: BLAS threads count too)
TRIAL_STEPS = 10


def sequence(n: int, steps: int, seed: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Rows x_t (steps, n), next rows x_{t+1} (zero at each trial end), rewards (steps,)."""
    rng = np.random.default_rng(seed)
    X = (rng.random((steps, n)) < 0.3).astype(np.float64)
    X_next = np.zeros_like(X)
    X_next[:-1] = X[1:]
    X_next[TRIAL_STEPS - 1 :: TRIAL_STEPS] = 0.0
    r = np.where(rng.random(steps) < 0.3, 1.0, 0.0)
    return X, X_next, r


def run_ours(n, X, X_next, r) -> tuple[float, np.ndarray]:
    learner = KalmanTD(n, gamma=GAMMA, diffusion=DIFFUSION, noise=NOISE, prior_var=PRIOR_VAR)
    update = learner.update
    rows = list(zip(X, X_next, r.tolist(), strict=True))
    clock = CLOCK[0]
    start = clock()
    for x, x_next, reward in rows:
        update(x, x_next, reward)
    elapsed = clock() - start
    return elapsed / len(rows), learner.w.copy()


def run_filterpy(n, X, X_next, r) -> tuple[float, np.ndarray]:
    from filterpy.kalman import KalmanFilter

    kf = KalmanFilter(dim_x=n, dim_z=1)
    kf.x = np.zeros((n, 1))
    kf.P = np.eye(n) * PRIOR_VAR
    kf.F = np.eye(n)
    kf.Q = np.eye(n) * DIFFUSION
    kf.R = np.array([[NOISE]])
    H = [(x - GAMMA * xn).reshape(1, n) for x, xn in zip(X, X_next, strict=True)]
    rows = list(zip(H, r.tolist(), strict=True))
    clock = CLOCK[0]
    start = clock()
    for h, reward in rows:
        kf.predict()
        kf.update(reward, H=h)
    elapsed = clock() - start
    return elapsed / len(rows), kf.x[:, 0].copy()


def measure(n: int, reps: int) -> dict[str, float]:
    X, X_next, r = sequence(n, STEPS[n], seed=n)
    ours, theirs, diffs = [], [], []
    gc.disable()
    try:
        for rep in range(reps):
            # alternate which goes first, so drift in machine load hits both
            order = (run_ours, run_filterpy) if rep % 2 == 0 else (run_filterpy, run_ours)
            results = {f: f(n, X, X_next, r) for f in order}
            (t_ours, w_ours), (t_fp, w_fp) = results[run_ours], results[run_filterpy]
            ours.append(t_ours)
            theirs.append(t_fp)
            diffs.append(float(np.max(np.abs(w_ours - w_fp))))
            gc.collect()
    finally:
        gc.enable()
    us_ours = statistics.median(ours) * 1e6
    us_fp = statistics.median(theirs) * 1e6
    ratios = [b / a for a, b in zip(ours, theirs, strict=True)]
    q1, _, q3 = statistics.quantiles(ratios, n=4) if len(ratios) > 1 else (ratios[0],) * 3
    return {
        "steps": STEPS[n],
        "ours_us": us_ours,
        "filterpy_us": us_fp,
        "speedup": statistics.median(ratios),
        "speedup_q1": q1,
        "speedup_q3": q3,
        "speedup_best": min(theirs) / min(ours),
        "max_abs_diff": max(diffs),
    }


TARGET_N16, TARGET_N64 = 5.0, 15.0


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--json", action="store_true", help="print one JSON object")
    parser.add_argument("--reps", type=int, default=21, help="repetitions per size (default 21)")
    parser.add_argument("--wall", action="store_true", help="time by wall clock, not the process CPU time")
    args = parser.parse_args(argv)
    if args.reps < 1:
        parser.error(f"--reps must be at least 1, not {args.reps}")
    CLOCK[0] = time.perf_counter if args.wall else time.process_time

    per_n = {n: measure(n, args.reps) for n in STEPS}
    result = {
        "speedup_n16": per_n[16]["speedup"],
        "speedup_n64": per_n[64]["speedup"],
        "max_abs_diff": max(v["max_abs_diff"] for v in per_n.values()),
        "per_n": {str(n): v for n, v in per_n.items()},
        "clock": "wall time" if args.wall else "process CPU time",
        "target": {"speedup_n16": TARGET_N16, "speedup_n64": TARGET_N64, "max_abs_diff": 1e-10},
    }
    result["met"] = bool(
        result["speedup_n16"] >= TARGET_N16
        and result["speedup_n64"] >= TARGET_N64
        and result["max_abs_diff"] <= 1e-10
    )
    if args.json:
        print(json.dumps(result))
        return 0
    print(f"Kalman TD update, µs per step ({result['clock']}, median of {args.reps} alternating repetitions);")
    print("speedup: median of the paired ratios filterpy / rigloop, with their quartiles")
    print(f"{'n':>5} {'steps':>6} {'rigloop':>9} {'filterpy':>9} {'speedup':>8} {'quartiles':>13} {'best/best':>9}"
          f" {'max |Δw|':>10}")
    for n, v in per_n.items():
        quartiles = f"{v['speedup_q1']:.2f}-{v['speedup_q3']:.2f}"
        print(f"{n:>5} {v['steps']:>6} {v['ours_us']:>9.2f} {v['filterpy_us']:>9.2f}"
              f" {v['speedup']:>7.2f}x {quartiles:>13} {v['speedup_best']:>8.2f}x {v['max_abs_diff']:>10.1e}")
    verdict = "PASS" if result["met"] else "FAIL"
    print(f"target ≥ {TARGET_N16:g}× at n = 16, ≥ {TARGET_N64:g}× at n = 64, |Δw| ≤ 1e-10: {verdict}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
