"""The built-in demonstration (``rigloop demo`` / ``make demo``).

Part 1 tours the four learners on an invented two-tone discrimination with a
reversal. Part 2 runs the daemon on a fresh data directory with virtual rigs (ZeroMQ
and serial) and shows what it decided and why; then replays, exports and plots.
"""

from __future__ import annotations

import shutil
import tempfile
from pathlib import Path

from . import demo_learners


def _banner(text: str) -> None:
    print("=" * 78)
    print(text)
    print("=" * 78)


def main(args) -> int:
    _banner("rigloop demo, part 1: the learning core")
    demo_learners.run(per_block=args.trials or demo_learners.TRIALS_PER_BLOCK)

    from . import demo_daemon

    _banner("rigloop demo, part 2: the daemon beside three virtual rigs")
    data = Path(args.data) if getattr(args, "data", None) else Path(tempfile.mkdtemp(prefix="rigloop-demo-"))
    if data.exists() and any(data.iterdir()) and getattr(args, "data", None):
        shutil.rmtree(data)  # the demo's own directory from an earlier run
    status = demo_daemon.run(data)
    print("")
    status |= demo_daemon.after(data)
    print("")
    print("demo finished" + ("" if status == 0 else " WITH PROBLEMS (see above)"))
    return status
