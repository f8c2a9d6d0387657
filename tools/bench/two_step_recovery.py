"""Parameter recovery of the two-step hybrid fit: agents simulated with w in {0, 0.25, 0.5,
0.75, 1} (400 trials each, other parameters at the hybrid preset), each fitted with all
seven parameters free. Prints the estimates of w per true w, whether their means rank in
the true order, how often the 95% profile interval covers the true w (target >= 90%),
the share of fits per w whose estimate ranks correctly against the other w's fits of
the same repetition, and the time per fit. PASS when the means rank and coverage >= 90%.

    .venv/bin/python tools/bench/two_step_recovery.py [--reps 10] [--trials 400] [--json]
"""

from __future__ import annotations

import argparse
import json
import sys
import time

import numpy as np

from rigloop.core.two_step import hybrid_agent
from rigloop.fit.two_step import TwoStepData, fit_two_step

W_VALUES = (0.0, 0.25, 0.5, 0.75, 1.0)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--reps", type=int, default=10, help="repetitions per w (default 10)")
    ap.add_argument("--trials", type=int, default=400, help="trials per agent (default 400)")
    ap.add_argument("--json", action="store_true", help="print the figures as JSON")
    args = ap.parse_args(argv)
    est = np.empty((args.reps, len(W_VALUES)))
    covered = np.zeros((args.reps, len(W_VALUES)), dtype=bool)
    t0 = time.perf_counter()
    for rep in range(args.reps):
        for j, w in enumerate(W_VALUES):
            run = hybrid_agent(w, args.trials, seed=1000 * rep + j)
            fit = fit_two_step(TwoStepData.of(run.a1, run.s2, run.a2, run.reward), "hybrid",
                               starts=2, seed=rep)
            est[rep, j] = fit.params["w"]
            low, high = fit.w_interval
            covered[rep, j] = low - 1e-9 <= w <= high + 1e-9
            if not args.json:
                print(f"rep {rep} w {w:.2f}: w_hat {fit.params['w']:.3f} "
                      f"[{low:.3f}, {high:.3f}] {'covers' if covered[rep, j] else 'MISSES'}",
                      flush=True)
    per_fit = (time.perf_counter() - t0) / est.size
    means = est.mean(axis=0)
    ranked = bool(np.all(np.diff(means) > 0))
    rank_rows = float(np.mean([np.all(np.diff(row) > 0) for row in est]))
    coverage = float(covered.mean())
    ok = ranked and coverage >= 0.9
    out = {"w_true": list(W_VALUES), "w_hat_mean": means.round(3).tolist(),
           "w_hat_sd": est.std(axis=0).round(3).tolist(), "means_rank_in_order": ranked,
           "repetitions_fully_in_order": rank_rows, "coverage": coverage, "fits": int(est.size),
           "seconds_per_fit": round(per_fit, 2), "pass": ok}
    if args.json:
        print(json.dumps(out))
    else:
        for k, v in out.items():
            print(f"{k}: {v}")
        print("PASS" if ok else "FAIL")
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
