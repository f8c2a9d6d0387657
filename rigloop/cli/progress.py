"""The progress bar of long offline work (simulate, compare, fit, import, export, replay).

``Progress(total, label)`` is a callable ``(done, total)`` that the work calls as it goes
(the offline functions take any such callable, so they never import this module);
``close()`` ends the line. The bar is tqdm's, with the rate and the time left, drawn on
stderr only when stderr is a terminal (never into a pipe or a log file) and not after
``--quiet`` (``set_quiet``); ``force=True`` draws it anyway. tqdm is imported only here.
"""

from __future__ import annotations

import os
import sys

from tqdm import tqdm

_QUIET = False


def set_quiet(quiet: bool = True) -> None:
    """Draw no bars from now on (the command line's ``--quiet``)."""
    global _QUIET
    _QUIET = bool(quiet)


def is_quiet() -> bool:
    return _QUIET


def _size(stream) -> dict:
    """Follow the terminal's size; 80 x 24 where it reports none (a bare pseudo-terminal:
    tqdm would otherwise draw a zero-width bar, or hide it below a zero-line screen)."""
    try:
        size = os.get_terminal_size(stream.fileno())
    except (AttributeError, OSError, ValueError):
        size = os.terminal_size((0, 0))
    return {"dynamic_ncols": True} if size.columns > 0 and size.lines > 0 else {"ncols": 80, "nrows": 24}


class Progress:
    """``Progress(total, label)`` as a callable ``(done, total)``; ``close()`` ends the line.

    unit: what is counted (``"trials"``, ``"animals"``, ...), shown with the rate.
    Usable as a context manager, which closes it."""

    def __init__(self, total: int, label: str = "", *, stream=None, force: bool = False, unit: str = "it"):
        self.total = max(int(total), 0)
        self.label = label
        self.stream = stream or sys.stderr
        tty = getattr(self.stream, "isatty", lambda: False)()
        self.enabled = force or (tty and not _QUIET)
        self._bar = None
        self._unit = unit

    def _open(self):
        known = "{desc}: {percentage:3.0f}%|{bar}| {n_fmt}/{total_fmt} [{elapsed}<{remaining}, {rate_fmt}]"
        self._bar = tqdm(total=self.total or None, desc=self.label or None, file=self.stream, unit=" " + self._unit,
                         mininterval=0.1, leave=True, bar_format=known if self.total else None,
                         **_size(self.stream))
        return self._bar

    def __call__(self, done: int, total: int | None = None) -> None:
        if not self.enabled:
            return
        bar = self._bar if self._bar is not None else self._open()
        if total is not None and total != self.total:
            self.total = max(int(total), 0)
            bar.total = self.total
            bar.refresh()
        if done > bar.n:
            bar.update(done - bar.n)

    def close(self) -> None:
        if self._bar is not None:
            self._bar.close()
            self._bar = None

    def __enter__(self) -> Progress:
        return self

    def __exit__(self, *exc) -> None:
        self.close()
