"""The built-in demonstration (``rigloop demo`` / ``make demo``).

Part 1 tours the four learners on an invented two-tone discrimination with a
reversal. Part 2 (when the daemon is available) runs the daemon on a temporary data
directory with virtual rigs and shows what it decided and why.
"""

from __future__ import annotations

from . import demo_learners


def main(args) -> int:
    print("=" * 78)
    print("rigloop demo, part 1: the learning core")
    print("=" * 78)
    demo_learners.run(per_block=args.trials or demo_learners.TRIALS_PER_BLOCK)
    return 0
