"""One ``step`` in-process, and what each hot-path trick buys against its readable reference.

Part 1: the median time of ``step`` over simulated sessions of each shipped example
(the animal and its trials recorded first, then stepped again and timed one by one).
Part 2: each trick of the per-trial path beside the readable version the tests hold it to
(tests/test_fast_paths.py: same bits), timed side by side in this run; the ratio is
reference time / trick time. The figures in the code's comments come from here.

Part 3 (``--against REV``): the same trials stepped by the code at git revision REV and by
the working tree in one process, alternating trial by trial (which goes first alternating
too), so a loaded shared machine slows both alike: each example's median and p99 for both,
and their ratio. REV's package is unpacked into a temporary directory under another name.

    python tools/bench/step.py [--json] [--reps 5] [--cpu] [--against REV]
"""

from __future__ import annotations

import argparse
import dataclasses
import importlib
import io
import itertools
import json
import re
import statistics
import subprocess
import sys
import tarfile
import tempfile
import time
import timeit
from pathlib import Path
from types import MappingProxyType

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

import numpy as np  # noqa: E402

from rigloop.core import behaviour as behaviour_module  # noqa: E402
from rigloop.core import curve, features, quantities, seeds  # noqa: E402
from rigloop.core import step as core_step  # noqa: E402
from rigloop.core.learners._shared import Learner  # noqa: E402
from rigloop.core.subject import new_subject  # noqa: E402
from rigloop.core.trial import Decision  # noqa: E402
from rigloop.offline.simulate import simulate_session  # noqa: E402
from rigloop.offline.sweep import animal_for  # noqa: E402
from rigloop.rules import load_example  # noqa: E402

EXAMPLES = ("tone_reversal", "gonogo_shaping", "two_choice_staircase")


def step_medians(reps: int, clock=time.perf_counter, p99: dict | None = None) -> dict[str, float]:
    """Median µs of one step, per example (best of ``reps`` passes over the same trials).
    ``clock``: wall time (perf_counter), or this thread's CPU time (thread_time), which a
    machine shared with other work inflates less (time the process waits is not counted).
    ``p99``: a dict to fill with each example's 99th percentile (of the pass with the best median)."""
    out = {}
    for name in EXAMPLES:
        rules = load_example(name)
        run = simulate_session(rules, animal_for(rules, "b1", 1), session="s1", max_trials=400)
        best = None
        for _ in range(reps):
            state = new_subject("b1", rules)
            state, _ = core_step.begin_session(state, rules, session="s1", rig="sim-rig", wall_time=1.8e9,
                                               seed=run.state.context.seed)
            times = []
            for event in run.events:
                t0 = clock()
                state, _, _ = core_step.step(state, event, rules)
                times.append(clock() - t0)
            med = statistics.median(times) * 1e6
            if best is None or med < best:
                best = med
                if p99 is not None:
                    p99[name] = round(statistics.quantiles(times, n=100)[98] * 1e6, 1)
        out[name] = round(best, 1)
    return out


def _pair(trick, reference, number: int) -> dict[str, float]:
    t = min(timeit.repeat(trick, number=number, repeat=5)) / number * 1e6
    r = min(timeit.repeat(reference, number=number, repeat=5)) / number * 1e6
    return {"trick_us": round(t, 3), "reference_us": round(r, 3), "ratio": round(r / t, 2)}


def _dataclass_built(cls, args):
    """``cls(*args)`` by the dataclass's own generated ``__init__`` (quick_init's reference)."""
    new = object.__new__(cls)
    cls._dataclass_init(new, *args)
    return new


def tricks() -> dict[str, dict[str, float]]:
    rules = load_example("tone_reversal")
    state = new_subject("b1", rules)
    sched = state.schedule
    rng = np.random.default_rng(3)
    errors, variances = rng.normal(size=8), rng.uniform(0.1, 2.0, 8)
    curve_state = curve.LearningCurve(0.5, 0.05).state()
    rep = features.make_representation("serial_compound", features.CueList(["tone_hi", "tone_lo"]), dt=0.5,
                                       n_bins=4)
    run = simulate_session(rules, animal_for(rules, "b1", 1), session="s1", max_trials=5)
    event = run.events[0]
    cues = [(c.cue, c.onset, c.offset) for c in event.cues]
    outcomes = [(t, a / 4.0) for t, a in event.outcome_events()]
    behaviour = {"tone_hi": (1.2, 0.4, 20), "tone_lo": (-0.8, 0.5, 18)}
    learner = state.learner  # the file's Kalman TD learner, working form
    from rigloop.core.learners.kalman_td import _rows_of

    trial_rows = rep._event_rows(event, 4.0)
    kept_rows = _rows_of(trial_rows.X, learner.gamma)
    probs = rng.uniform(0.0, 1.0, 24)  # the Gauss-Hermite nodes' probabilities d' clips
    decision_args = ("b1", "s1", 5, "tone_hi", 0.8, 4.0, True, "acquisition", "training", False, None, None,
                     ("a reason",), (), ())
    b_means = itertools.cycle(np.linspace(-1.0, 0.5, 97).tolist())  # cue b moves, cue a stays (as between trials)
    return {
        "lazy trial generator vs trial_rng": _pair(lambda: seeds._LazyTrialRng(7, 3),
                                                    lambda: seeds.trial_rng(7, 3), 20000),
        "trial generator from its block vs trial_rng": _pair(lambda: seeds._trial_generator(7, 3),
                                                        lambda: seeds.trial_rng(7, 3), 5000),
        "_surprise vs array form": _pair(lambda: quantities._surprise(errors, variances, 0.2),
                                         lambda: quantities._surprise_reference(errors, variances, 0.2), 20000),
        "curve from plain state vs checked": _pair(lambda: curve.LearningCurve.from_state(curve_state),
                                                   lambda: curve.LearningCurve.from_state(
                                                       MappingProxyType(curve_state)), 20000),
        "ScheduleState._evolved vs replace": _pair(lambda: sched._evolved({"trials_in_block": 3}),
                                                    lambda: dataclasses.replace(sched, trials_in_block=3), 20000),
        "kept trial rows vs checked rows": _pair(lambda: rep._event_rows(event, 4.0),
                                                 lambda: rep.rows(cues, outcomes, event.duration), 5000),
        "P(p_a - p_b > m), cue a kept vs plain loop": _pair(
            lambda: behaviour_module.p_difference_above(1.2, 0.4, next(b_means), 0.5, 0.2),
            lambda: behaviour_module._p_difference_above_reference(1.2, 0.4, next(b_means), 0.5, 0.2), 5000),
        "d' interval, cue a kept vs afresh": _pair(
            lambda: behaviour_module.dprime_estimate(1.2, 0.4, next(b_means), 0.5),
            lambda: (behaviour_module._G_NODES.clear(), behaviour_module.dprime_estimate(1.2, 0.4, next(b_means), 0.5)),
            500),
        "KalmanTD.copy in one pass vs general": _pair(learner.copy, lambda: Learner.copy(learner), 20000),
        "curve state updated, no object vs object": _pair(
            lambda: curve._updated_state(curve_state, True),
            lambda: curve._updated_state_reference(curve_state, True), 20000),
        "d' clip as two ufuncs vs np.clip": _pair(lambda: behaviour_module._clip(probs, 1e-300, 1.0 - 1e-16),
                                                  lambda: np.clip(probs, 1e-300, 1.0 - 1e-16), 20000),
        "Kalman TD trial, corrections inline vs _observe": _pair(
            lambda: learner.copy()._trial(kept_rows, trial_rows.r, True),
            lambda: learner.copy()._trial_reference(kept_rows, trial_rows.r, True), 5000),
        "Decision, quick_init vs the dataclass's __init__": _pair(
            lambda: Decision(*decision_args), lambda: _dataclass_built(Decision, decision_args), 20000),
        "behaviour quantities vs reference": _pair(
            lambda: quantities._behaviour_quantities({}, rules.spec, behaviour),
            lambda: quantities._behaviour_quantities_reference({}, rules.spec, behaviour), 20000),
    }


def _package_at(rev: str, into: Path) -> str:
    """rigloop as of git revision ``rev``, unpacked under ``into`` as the package
    ``rigloop_at_rev`` (its absolute imports renamed), importable beside the working tree."""
    try:
        tar = subprocess.run(["git", "-C", str(ROOT), "archive", "--format=tar", rev, "rigloop"], check=True,
                             capture_output=True).stdout
    except (OSError, subprocess.CalledProcessError) as err:
        detail = getattr(err, "stderr", b"") or b""
        raise SystemExit(f"--against {rev}: git archive failed ({detail.decode(errors='replace').strip() or err}); "
                         f"give a commit, branch or tag of this repository") from None
    with tarfile.open(fileobj=io.BytesIO(tar)) as archive:
        archive.extractall(into, filter="data")
    (into / "rigloop").rename(into / "rigloop_at_rev")
    pattern = re.compile(r"\b(from|import) rigloop(?=[. ])")
    for path in (into / "rigloop_at_rev").rglob("*.py"):
        text = path.read_text()
        new = pattern.sub(r"\1 rigloop_at_rev", text)
        if new != text:
            path.write_text(new)
    sys.path.insert(0, str(into))
    return "rigloop_at_rev"


def against(rev: str, clock) -> dict[str, dict[str, float]]:
    """Median and p99 µs of ``step`` at ``rev`` and now, the same trials alternating in one process."""
    import gc

    with tempfile.TemporaryDirectory(prefix="rigloop-step-") as tmp:
        old_pkg = _package_at(rev, Path(tmp))
        sides = {}
        for key, pkg in (("then", old_pkg), ("now", "rigloop")):
            sides[key] = (importlib.import_module(pkg + ".core.step"), importlib.import_module(pkg + ".core.subject"),
                          importlib.import_module(pkg + ".rules"), importlib.import_module(pkg + ".core.trial"))
        out = {}
        for name in EXAMPLES:
            rules_now = load_example(name)
            run = simulate_session(rules_now, animal_for(rules_now, "b1", 1), session="s1", max_trials=400)
            times: dict[str, list[float]] = {"then": [], "now": []}
            states, rules, events = {}, {}, {}
            for key, (st, sub, rl, tr) in sides.items():
                rules[key] = rl.load_example(name)
                state = sub.new_subject("b1", rules[key])
                states[key], _ = st.begin_session(state, rules[key], session="s1", rig="sim-rig", wall_time=1.8e9,
                                                  seed=run.state.context.seed)
                events[key] = [tr.TrialEvent.from_dict(e.to_dict()) for e in run.events]
            gc.disable()
            try:
                for i in range(len(run.events)):
                    for key in (("then", "now") if i % 2 else ("now", "then")):
                        step = sides[key][0].step
                        t0 = clock()
                        states[key], _, _ = step(states[key], events[key][i], rules[key])
                        times[key].append(clock() - t0)
            finally:
                gc.enable()
            row = {}
            for key, ts in times.items():
                row[f"{key}_median_us"] = round(statistics.median(ts) * 1e6, 1)
                row[f"{key}_p99_us"] = round(statistics.quantiles(ts, n=100)[98] * 1e6, 1)
            row["ratio"] = round(row["then_median_us"] / row["now_median_us"], 2)
            out[name] = row
        sys.path.remove(tmp)
        return out


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--json", action="store_true")
    ap.add_argument("--reps", type=int, default=5)
    ap.add_argument("--cpu", action="store_true",
                    help="time step by this thread's CPU time, not wall time (a busy shared machine)")
    ap.add_argument("--against", metavar="REV",
                    help="also step the same trials with rigloop at this git revision, alternating in one process")
    args = ap.parse_args()
    if args.reps < 1:
        ap.error(f"--reps must be at least 1, not {args.reps}")
    if args.against and subprocess.run(["git", "-C", str(ROOT), "rev-parse", "--verify", "--quiet",
                                        f"{args.against}^{{commit}}"], capture_output=True).returncode != 0:
        ap.error(f"--against {args.against}: not a commit of this repository (give a commit, branch or tag)")
    p99: dict[str, float] = {}
    out = {"step_median_us": step_medians(args.reps, time.thread_time if args.cpu else time.perf_counter, p99),
           "step_p99_us": p99, "clock": "thread CPU time" if args.cpu else "wall time", "tricks": tricks(),
           "target_step_us": 60.0}
    out["pass"] = out["step_median_us"]["tone_reversal"] <= out["target_step_us"]
    if args.against:
        out["against"] = {"rev": args.against, **against(args.against, time.thread_time if args.cpu else time.perf_counter)}
    if args.json:
        print(json.dumps(out))
        return 0
    print(f"step, µs in-process (the pass with the best median; {out['clock']}):")
    print(f"  {'':<22} {'median':>8} {'p99':>8}")
    for name, us in out["step_median_us"].items():
        print(f"  {name:<22} {us:8.1f} {out['step_p99_us'][name]:8.1f}")
    ok = out["step_median_us"]["tone_reversal"] <= out["target_step_us"]
    print(f"target tone_reversal ≤ {out['target_step_us']:.0f} µs: {'PASS' if ok else 'FAIL'}")
    print("\ntrick vs its readable reference (same bits; tests/test_fast_paths.py):")
    print(f"  {'':<40} {'trick µs':>9} {'reference µs':>13} {'ratio':>7}")
    for name, r in out["tricks"].items():
        print(f"  {name:<40} {r['trick_us']:9.3f} {r['reference_us']:13.3f} {r['ratio']:6.2f}x")
    if args.against:
        print(f"\nstep at {args.against} (then) and now, the same trials alternating in one process, µs ({out['clock']}):")
        print(f"  {'':<22} {'then':>8} {'now':>8} {'ratio':>7} {'p99 then':>9} {'p99 now':>8}")
        for name in EXAMPLES:
            r = out["against"][name]
            print(f"  {name:<22} {r['then_median_us']:8.1f} {r['now_median_us']:8.1f} {r['ratio']:6.2f}x"
                  f" {r['then_p99_us']:9.1f} {r['now_p99_us']:8.1f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
