"""A digest of everything ``step`` produces over simulated sessions of the shipped examples.

Run it before and after changing the numeric core for speed: the digest must not move
by a single bit, or live decisions stored by the old code would no longer replay
exactly. It covers every decision (with its reasons), every per-trial quantity, the
per-time-step values and errors, and each subject's state bytes at the end of each
session: 4 simulated subjects x 3 sessions of each example rule file.

A change that is meant to alter results (a model fix, a new rule) changes the digest
too; say so in the commit. The digest also depends on the environment: the same tree
gave 7832435f488f1caa in one venv and b65057098f82c6b4 in another (numpy's build and
its BLAS sum in their own order), so compare two trees in one environment.

    python tools/step_digest.py            # prints {"all": ..., "<example>": ..., "steps": N}
"""

from __future__ import annotations

import hashlib
import json
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from rigloop.offline.simulate import simulate_session  # noqa: E402
from rigloop.offline.sweep import animal_for  # noqa: E402
from rigloop.rules import load_example  # noqa: E402

EXAMPLES = ("tone_reversal", "gonogo_shaping", "two_choice_staircase")


def example_digest(name: str, subjects: int = 4, sessions: int = 3, max_trials: int = 400) -> tuple[str, int]:
    """sha256 over one example's simulated sessions, and the number of steps taken."""
    rules = load_example(name)
    h = hashlib.sha256()
    steps = 0
    for seed in range(subjects):
        animal = animal_for(rules, f"g{seed}", seed)
        state = None
        for s in range(sessions):
            run = simulate_session(rules, animal, session=f"s{s}", state=state, max_trials=max_trials)
            state = run.state
            h.update(json.dumps(run.first.to_dict(), sort_keys=True).encode())
            for decision, update in zip(run.decisions, run.updates, strict=True):
                h.update(json.dumps(decision.to_dict(), sort_keys=True).encode())
                h.update(repr(sorted(update.quantities.items())).encode())
                h.update(update.values.tobytes())
                h.update(update.errors.tobytes())
                steps += 1
            h.update(state.to_bytes())
    return h.hexdigest(), steps


def main() -> int:
    total = hashlib.sha256()
    out: dict[str, object] = {}
    steps = 0
    for name in EXAMPLES:
        digest, n = example_digest(name)
        total.update(bytes.fromhex(digest))
        out[name] = digest[:16]
        steps += n
    print(json.dumps({"all": total.hexdigest()[:16], **out, "steps": steps}))
    return 0


if __name__ == "__main__":
    sys.exit(main())
