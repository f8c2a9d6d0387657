"""The built-in demonstration (``rigloop demo`` / ``make demo``).

Part 1 tours the four learners on an invented two-tone discrimination with a
reversal. Part 2 runs the daemon on a fresh data directory with virtual rigs (ZeroMQ
and serial) and shows what it decided and why; then replays, exports and plots.
Part 3 fits a simulated mouse and checks the fit against it, and fits a psychometric
function to a simulated rat's staircase trials (figures in the data directory).
Part 4 tries a change to a rule file on a simulated cohort before any animal sees it.
Part 5 runs the two-stage task on a mouse that plans and one that repeats what paid:
the criterion on its model-based weight w, the stay regression and figure.
"""

from __future__ import annotations

import shutil
import sys
import tempfile
from pathlib import Path

from . import learners_tour as demo_learners

MARKER = ".rigloop-demo"


def _banner(text: str) -> None:
    print("=" * 78)
    print(text)
    print("=" * 78)


def main(args) -> int:
    _banner("rigloop demo, part 1: the learning core")
    demo_learners.run(per_block=args.trials or demo_learners.TRIALS_PER_BLOCK)

    from . import daemon_tour as demo_daemon

    _banner("rigloop demo, part 2: the daemon beside three virtual rigs")
    data = Path(args.data) if getattr(args, "data", None) else Path(tempfile.mkdtemp(prefix="rigloop-demo-"))
    if data.exists() and any(data.iterdir()):
        if not (data / MARKER).exists():
            print(f"rigloop demo: {data} is not empty and was not made by the demo; give a new directory",
                  file=sys.stderr)
            return 1
        shutil.rmtree(data)  # the demo's own directory from an earlier run
    data.mkdir(parents=True, exist_ok=True)
    (data / MARKER).write_text("made by `rigloop demo`; the demo may delete this directory\n")
    status = demo_daemon.run(data)
    print("")
    status |= demo_daemon.after(data)
    print("")
    from . import fit_tour as demo_fit

    _banner("rigloop demo, part 3: does the fitted model reproduce the animal? and a psychometric fit")
    status |= demo_fit.run(data)
    print("")
    from . import compare_tour as demo_compare

    _banner("rigloop demo, part 4: before you change a rule, compare on a simulated cohort")
    status |= demo_compare.run(data)
    print("")
    from . import two_step_tour as demo_two_step

    _banner("rigloop demo, part 5: does the animal plan? the two-stage task")
    status |= demo_two_step.run(data)
    print("")
    print("demo finished" + ("" if status == 0 else " WITH PROBLEMS (see above)"))
    return status
