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

Each trial also updates every subject's behaviour estimate of the trial's cue (the
animal's P(respond | cue), rigloop.behaviour) with a random binary response, each
subject with its own sigma2 and prior_var: the loop calls ``CueEstimate.updated`` per
subject, every batch path one ``BatchBehaviour.update`` for all (the numpy path, or the
compiled kernel on the kernel paths; it has no threaded form). That part is timed on
its own; the script asserts the estimates agree with the loop's (max |Δ| ≤ 1e-12) and
reports ``speedup_behaviour`` and ``speedup_combined`` (Kalman TD and behaviour together).

The kernel is compiled (or loaded from numba's disk cache) by a warm-up call before any
timing; that one-off cost is printed separately and excluded from the figures.
Repetitions rotate which side runs first, so drift in machine load hits all; figures
are medians. ``speedup`` and ``subject_steps_per_s`` in the JSON refer to the fastest
available batch path (``best_path``); ``speedup_numpy`` / ``speedup_kernel`` give each.

Target: ≥ 30× faster and ≥ 5M subject-steps/s at n = 32.

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

from rigloop.core.behaviour import CueEstimate
from rigloop.core.features import CueList, make_representation
from rigloop.core.learners import KalmanTD
from rigloop.offline import batch as batch_module
from rigloop.offline.batch import BatchBehaviour, BatchKalmanTD

CUES = ("cs_plus", "cs_minus")
N_BINS, DT = 16, 0.25
TARGET_SPEEDUP, TARGET_RATE, TOLERANCE = 30.0, 5e6, 1e-9
BEHAVIOUR_TOLERANCE = 1e-12  # the scalar filter's numbers (tests/test_batch.py pins the same)


def make_task(subjects: int, trials: int, seed: int):
    """Per trial: padded Xs (S, T, n), rs (S, T), lengths (S,) and the cue index (S,) of
    each subject's trial; and per-subject parameters."""
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
    batch, cue_of = [], []
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
        cue_of.append(cues)
    params = {
        "gamma": rng.uniform(0.9, 0.99, subjects),
        "diffusion": rng.uniform(1e-4, 1e-2, subjects),
        "noise": rng.uniform(0.1, 1.0, subjects),
        "prior_var": rng.uniform(0.5, 2.0, subjects),
    }
    return rep.n_features, batch, params, cue_of


def make_behaviour(cue_of: list[np.ndarray], seed: int):
    """Per trial (cue index (S,), response (S,) 1.0 / 0.0), and per-subject behaviour
    parameters; from a generator of its own, so the Kalman task stays as it was."""
    rng = np.random.default_rng(seed + 1)
    subjects = len(cue_of[0])
    p_respond = rng.uniform(0.1, 0.9, (subjects, len(CUES)))
    rows = np.arange(subjects)
    trials = [(cues, (rng.random(subjects) < p_respond[rows, cues]).astype(np.float64)) for cues in cue_of]
    params = {"sigma2": rng.uniform(0.01, 0.2, subjects), "prior_var": rng.uniform(1.0, 3.0, subjects)}
    return trials, params


def behaviour_arrays(estimates: list[dict]) -> np.ndarray:
    """(3, S, C) x, var, n of per-subject maps cue -> (x, var, n); the prior where absent."""
    out = np.full((3, len(estimates), len(CUES)), np.nan)
    for s, est in enumerate(estimates):
        for j, cue in enumerate(CUES):
            if cue in est:
                out[:, s, j] = est[cue]
    return out


def run_loop(n, batch, params, behaviour, bparams) -> tuple[float, np.ndarray, float, np.ndarray]:
    """Kalman TD seconds, final weights, behaviour seconds, final (3, S, C) estimates."""
    S = len(params["gamma"])
    learners = [KalmanTD(n, **{k: float(v[s]) for k, v in params.items()}) for s in range(S)]
    # each subject's own rows, cut to its length (as the daemon would hand them over)
    work = [[(X[:L], r[:L]) for X, r, L in zip(Xs, rs, lengths, strict=True)]
            for Xs, rs, lengths in batch]
    # each subject's trial cue and response, as step reads them: a cue name and a bool
    responses = [list(zip([CUES[c] for c in cues.tolist()], (y == 1.0).tolist(), strict=True))
                 for cues, y in behaviour]
    sigma2, prior_var = bparams["sigma2"].tolist(), bparams["prior_var"].tolist()
    estimates: list[dict[str, CueEstimate]] = [{} for _ in range(S)]
    kalman_s = behaviour_s = 0.0
    for trial, seen in zip(work, responses, strict=True):
        start = time.perf_counter()
        for learner, (X, r) in zip(learners, trial, strict=True):
            learner.learn_trial(X, r)
        middle = time.perf_counter()
        for s, (cue, did) in enumerate(seen):
            est = estimates[s].get(cue)
            if est is None:
                est = CueEstimate.prior(prior_var[s])
            estimates[s][cue] = est.updated(did, sigma2[s])
        end = time.perf_counter()
        kalman_s += middle - start
        behaviour_s += end - middle
    held = behaviour_arrays([{c: e.as_tuple() for c, e in est.items()} for est in estimates])
    return kalman_s, np.array([lr.w for lr in learners]), behaviour_s, held


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


def run_batch(n, batch, params, behaviour, bparams, path: Path) -> tuple[float, np.ndarray, float, np.ndarray]:
    """As ``run_loop``, through one BatchKalmanTD and one BatchBehaviour on ``path``."""
    S = len(params["gamma"])
    learners = BatchKalmanTD(S, n, **params, parallel=path.parallel)
    estimates = BatchBehaviour(S, CUES, **bparams)
    kalman_s = behaviour_s = 0.0
    with path:
        for (Xs, rs, lengths), (cues, y) in zip(batch, behaviour, strict=True):
            start = time.perf_counter()
            learners.learn_trials(Xs, rs, lengths)
            middle = time.perf_counter()
            estimates.update(cues, y)
            end = time.perf_counter()
            kalman_s += middle - start
            behaviour_s += end - middle
    return kalman_s, learners.w.copy(), behaviour_s, behaviour_arrays(estimates.to_estimates())


def warm_up(n, batch, params, behaviour, bparams, paths: list[Path]) -> float:
    """One untimed call per path (the kernels compile, or load from their disk cache, on
    their first call); returns the seconds that took in all."""
    start = time.perf_counter()
    for path in paths:
        run_batch(n, batch[:1], params, behaviour[:1], bparams, path)
    return time.perf_counter() - start


def measure(subjects: int, trials: int, reps: int, seed: int = 7) -> dict:
    n, batch, params, cue_of = make_task(subjects, trials, seed)
    behaviour, bparams = make_behaviour(cue_of, seed)
    steps = int(sum(lengths.sum() for _, _, lengths in batch))
    paths = available_paths()
    warm_s = warm_up(n, batch, params, behaviour, bparams, paths)
    sides = ["loop"] + [p.name for p in paths]
    times: dict[str, list[float]] = {side: [] for side in sides}
    btimes: dict[str, list[float]] = {side: [] for side in sides}
    diffs: dict[str, list[float]] = {p.name: [] for p in paths}
    bdiffs: dict[str, list[float]] = {p.name: [] for p in paths}
    by_name = {p.name: p for p in paths}
    gc.disable()
    try:
        for rep in range(reps):
            order = sides[rep % len(sides):] + sides[: rep % len(sides)]
            weights, held = {}, {}
            for side in order:
                if side == "loop":
                    res = run_loop(n, batch, params, behaviour, bparams)
                else:
                    res = run_batch(n, batch, params, behaviour, bparams, by_name[side])
                times[side].append(res[0])
                btimes[side].append(res[2])
                weights[side], held[side] = res[1], res[3]
                gc.collect()
            for p in paths:
                diffs[p.name].append(float(np.max(np.abs(weights["loop"] - weights[p.name]))))
                same_cells = np.array_equal(np.isnan(held["loop"]), np.isnan(held[p.name]))
                assert same_cells, f"{p.name}: the batch holds estimates of other cues than the loop"
                bdiffs[p.name].append(float(np.nanmax(np.abs(held["loop"] - held[p.name]))))
    finally:
        gc.enable()
    max_diff = max(max(d) for d in diffs.values())
    assert max_diff <= TOLERANCE, f"batched weights differ from the loop's by {max_diff:.3g}"
    max_bdiff = max(max(d) for d in bdiffs.values())
    assert max_bdiff <= BEHAVIOUR_TOLERANCE, f"batched behaviour estimates differ from the loop's by {max_bdiff:.3g}"
    med = {side: statistics.median(t) for side, t in times.items()}
    bmed = {side: statistics.median(t) for side, t in btimes.items()}
    # combined: the median over repetitions of each run's Kalman TD + behaviour seconds
    cmed = {side: statistics.median(k + b for k, b in zip(times[side], btimes[side], strict=True))
            for side in sides}
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
        # behaviour estimates (BatchBehaviour vs CueEstimate per subject), on the best path
        "speedup_behaviour": bmed["loop"] / bmed[best],
        "speedup_combined": cmed["loop"] / cmed[best],
        "speedup_behaviour_by_path": {p.name: bmed["loop"] / bmed[p.name] for p in paths},
        "speedup_combined_by_path": {p.name: cmed["loop"] / cmed[p.name] for p in paths},
        "behaviour_seconds_by_path": bmed,
        "combined_seconds_by_path": cmed,
        "behaviour_updates": subjects * trials,
        "max_abs_diff_behaviour": max_bdiff,
        "max_abs_diff_behaviour_by_path": {name: max(d) for name, d in bdiffs.items()},
    }
    result["met"] = bool(result["speedup"] >= TARGET_SPEEDUP and result["subject_steps_per_s"] >= TARGET_RATE)
    result["met_combined"] = bool(result["speedup_combined"] >= TARGET_SPEEDUP)
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
    print("PASS" if result["met"] else "FAIL")
    print()
    print(f"behaviour estimates, {result['behaviour_updates']:,} updates (one per subject and trial); "
          f"combined = Kalman TD + behaviour")
    print(f"{'':28}{'seconds':>10}{'speedup':>10}{'combined s':>12}{'speedup':>10}{'max |Δ|':>10}")
    bsec, csec = result["behaviour_seconds_by_path"], result["combined_seconds_by_path"]
    print(f"{'per-subject loop':28}{bsec['loop']:>10.4f}{'1.0×':>10}{csec['loop']:>12.3f}{'1.0×':>10}")
    for name, label in result["labels"].items():
        print(f"{label:28}{bsec[name]:>10.4f}{result['speedup_behaviour_by_path'][name]:>9.1f}×"
              f"{csec[name]:>12.3f}{result['speedup_combined_by_path'][name]:>9.1f}×"
              f"{result['max_abs_diff_behaviour_by_path'][name]:>10.1e}")
    print(f"best: behaviour {result['speedup_behaviour']:.1f}×, combined {result['speedup_combined']:.1f}× "
          f"(target ≥ {TARGET_SPEEDUP:.0f}×); max |Δ| of the estimates = {result['max_abs_diff_behaviour']:.2e} "
          f"(≤ {BEHAVIOUR_TOLERANCE:g})")
    print("combined: PASS" if result["met_combined"] else "combined: FAIL")
    return 0


if __name__ == "__main__":
    sys.exit(main())
