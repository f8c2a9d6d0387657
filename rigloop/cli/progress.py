"""A small progress bar for long offline work (replay, import, simulation sweeps).

Writes to stderr only when it is a terminal, or always with ``force=True``; redraws
at most ten times a second so it costs nothing on fast loops.
"""

from __future__ import annotations

import sys
import time


class Progress:
    """``Progress(total, label)`` as a callable ``(done, total)``; ``close()`` ends the line."""

    def __init__(self, total: int, label: str = "", *, stream=None, force: bool = False):
        self.total = max(int(total), 0)
        self.label = label
        self.stream = stream or sys.stderr
        self.enabled = force or getattr(self.stream, "isatty", lambda: False)()
        self._last = 0.0
        self._start = time.monotonic()
        self._drawn = False

    def __call__(self, done: int, total: int | None = None) -> None:
        if not self.enabled:
            return
        if total is not None:
            self.total = total
        now = time.monotonic()
        if now - self._last < 0.1 and done < self.total:
            return
        self._last = now
        frac = done / self.total if self.total else 1.0
        width = 30
        bar = "#" * int(frac * width) + "-" * (width - int(frac * width))
        rate = done / max(now - self._start, 1e-9)
        self.stream.write(f"\r{self.label} [{bar}] {done:,}/{self.total:,} ({rate:,.0f}/s)")
        self.stream.flush()
        self._drawn = True

    def close(self) -> None:
        if self._drawn:
            self.stream.write("\n")
            self.stream.flush()
