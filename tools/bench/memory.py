"""Memory: 10,000 subjects resident at n = 32, held the way the daemon holds them.

Each subject is a ``SubjectState`` from ``rigloop.subject.new_subject`` under the
``tone_reversal`` example rule file with its CSC features widened to 16 bins (2 cues ×
16 bins = 32 features, Kalman TD), opened with ``begin_session`` and stepped once with a
small trial so its learner, learning curves, schedule and first decision are all
populated. The states live in one dict keyed by subject, as in the daemon.

Measured: process VmRSS (``/proc/self/status``) before and after building them, and,
on a sample of subjects under ``tracemalloc``, where the Python-allocated bytes go
(by source line, and by part of the state).

Each state is kept as the daemon keeps a committed state, ``rigloop.core.subject.resident``
(the learner's compact form at rest).

Target: ≤ 150 MB RSS for 10,000 subjects.

    python tools/bench/memory.py [--json] [--subjects 10000] [--sample 500]
"""

from __future__ import annotations

import argparse
import gc
import json
import sys
import tracemalloc

import numpy as np

from rigloop.core.step import begin_session, step
from rigloop.core.subject import new_subject, representation_for, resident
from rigloop.core.trial import CuePresentation, Outcome, Response, TrialEvent
from rigloop.rules import load_rules
from rigloop.rules.load import example_text

TARGET_MB = 150.0
N_FEATURES = 32


def rules_n32():
    """The tone_reversal rule file with 16 CSC bins per tone: 2 × 16 = 32 features."""
    text = example_text("tone_reversal")
    assert "n_bins = 4 " in text, "the example's n_bins line changed; update this script"
    rules = load_rules(text.replace("n_bins = 4 ", "n_bins = 16", 1), source="memory-bench")
    n = representation_for(rules).n_features
    assert n == N_FEATURES, f"expected {N_FEATURES} features, got {n}"
    return rules


def rss_kb() -> int:
    """This process's resident set size (VmRSS), in kB."""
    with open("/proc/self/status", encoding="ascii") as f:
        for line in f:
            if line.startswith("VmRSS:"):
                return int(line.split()[1])
    raise RuntimeError("no VmRSS line in /proc/self/status")


def one_subject(rules, i: int):
    """A subject opened and stepped once: a 2 s tone (8 s trial), licks, a reward at offset."""
    name = f"m{i:05d}"
    state, decision = begin_session(new_subject(name, rules), rules, session=f"{name}-s1",
                                    rig=f"rig{i % 100:02d}", wall_time=1.8e9)
    cue = decision.cue or rules.cues[0]
    event = TrialEvent(
        subject=name, rig=f"rig{i % 100:02d}", session=f"{name}-s1", trial=1,
        cues=(CuePresentation(cue, 1.0, 3.0),),
        outcome=Outcome(reward_ul=decision.reward_ul, reward_time=3.0 if decision.reward_ul else None),
        response=Response(kind="licks", value=3.0, result="correct", latency=1.4),
        duration=8.0, wall_time=1.8e9 + 8.0,
    )
    state, _, _ = step(state, event, rules)
    return resident(state)


def build(rules, subjects: int) -> dict:
    return {s.subject: s for s in (one_subject(rules, i) for i in range(subjects))}


def learner_bytes(learner) -> tuple[int, int]:
    """(bytes of numpy data the learner owns, number of ndarray objects it holds)."""
    own, arrays = 0, 0
    for slot in type(learner).__mro__:
        for name in getattr(slot, "__slots__", ()):
            try:  # (not getattr: reading a working buffer of a resting learner rebuilds it)
                value = object.__getattribute__(learner, name)
            except AttributeError:
                continue
            if isinstance(value, np.ndarray):
                arrays += 1
                if value.base is None:
                    own += value.nbytes
    return own, arrays


def where_it_goes(rules, sample: int) -> dict:
    """tracemalloc over ``sample`` subjects: bytes per subject by source line and by part."""
    gc.collect()
    tracemalloc.start(1)
    before = tracemalloc.take_snapshot()
    states = build(rules, sample)
    gc.collect()
    after = tracemalloc.take_snapshot()
    tracemalloc.stop()
    stats = after.compare_to(before, "lineno")
    total = sum(s.size_diff for s in stats)
    top = [{"where": f"{s.traceback[0].filename.split('/rigloop/')[-1]}:{s.traceback[0].lineno}",
            "bytes_per_subject": s.size_diff / sample}
           for s in sorted(stats, key=lambda s: -s.size_diff)[:8]]
    one = next(iter(states.values()))
    own, arrays = learner_bytes(one.learner)
    by_part = {
        "learner numpy data": own,
        "learner ndarray objects (headers, views)": arrays * sys.getsizeof(np.empty(0)),
    }
    return {"python_bytes_per_subject": total / sample, "top_lines": top, "learner": by_part,
            "learner_arrays": arrays}


def measure(subjects: int, sample: int) -> dict:
    rules = rules_n32()
    one_subject(rules, 0)  # warm caches (representation, rule compilation) before measuring
    gc.collect()
    base = rss_kb()
    states = build(rules, subjects)
    gc.collect()
    total = rss_kb()
    assert len(states) == subjects
    delta_mb = (total - base) / 1024
    result = {
        "rss_mb": total / 1024,
        "rss_delta_mb": delta_mb,
        "per_subject_kb": (total - base) / subjects,
        "subjects": subjects,
        "n": N_FEATURES,
        "target": {"rss_mb_max": TARGET_MB},
    }
    result["met"] = bool(result["rss_mb"] <= TARGET_MB)
    del states
    gc.collect()
    result["breakdown"] = where_it_goes(rules, sample)
    return result


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--json", action="store_true", help="print one JSON object")
    parser.add_argument("--subjects", type=int, default=10_000, help="resident subjects (default 10000)")
    parser.add_argument("--sample", type=int, default=500, help="subjects traced by tracemalloc (default 500)")
    args = parser.parse_args(argv)
    if args.subjects < 1 or args.sample < 1:
        parser.error(f"--subjects and --sample must be at least 1 (got {args.subjects} and {args.sample})")
    result = measure(args.subjects, args.sample)
    if args.json:
        print(json.dumps(result))
        return 0
    b = result["breakdown"]
    print(f"{result['subjects']:,} resident subjects at n = {result['n']} (Kalman TD, CSC 2 × 16)")
    print(f"  process RSS        {result['rss_mb']:8.1f} MB   (target ≤ {TARGET_MB:.0f} MB)")
    print(f"  added by subjects  {result['rss_delta_mb']:8.1f} MB   = {result['per_subject_kb']:.1f} kB per subject")
    print(f"  Python allocations {b['python_bytes_per_subject'] / 1024:8.1f} kB per subject (tracemalloc, "
          f"{args.sample} subjects)")
    for part, nbytes in b["learner"].items():
        print(f"    {part:42} {nbytes / 1024:6.1f} kB")
    print("  largest allocation sites, kB per subject:")
    for row in b["top_lines"]:
        print(f"    {row['bytes_per_subject'] / 1024:6.1f}  {row['where']}")
    print(f"target ≤ {TARGET_MB:.0f} MB: {'PASS' if result['met'] else 'FAIL'}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
