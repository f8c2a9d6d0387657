"""LineDecoder: sans-I/O reader of the serial line protocol.

Feed it whatever bytes arrived (``feed``), then iterate: each complete line yields a
request value or a ``MessageError`` for that line alone; it never raises on input.
Memory stays bounded whatever arrives: a line longer than ``max_line`` is reported once
(``too_large``) as soon as it overflows, and its bytes are dropped up to the next line
end. LF ends a line; so does CR, so CRLF and CR-only terminals both work; empty lines
are ignored. ``reset()`` drops a torn partial line (e.g. after the port reopened).
"""

from __future__ import annotations

import re
from collections import deque
from collections.abc import Iterator
from dataclasses import dataclass

from ..errors import BadArgument
from .lines import parse_request_line
from .messages import MAX_LINE, MessageError, Request, excerpt

_EOL = re.compile(rb"[\r\n]")


@dataclass(frozen=True, slots=True)
class LineStatistics:
    """Counts since the decoder was made. ``lines`` counts non-empty lines (a line
    that overflowed counts once); ``good + bad == lines``; ``peak_buffer`` is the
    largest partial line held (bytes, at most ``max_line``); ``pending`` the events
    not yet taken."""

    lines: int
    good: int
    bad: int
    too_large: int
    dropped_bytes: int
    resets: int
    peak_buffer: int
    pending: int


class LineDecoder:
    """Serial line bytes in, request values (or per-line errors) out."""

    def __init__(self, max_line: int = MAX_LINE, require_checksum: bool = False):
        if isinstance(max_line, bool) or not isinstance(max_line, int) or max_line < 16:
            raise BadArgument("max_line", "a whole number >= 16", max_line)
        self.max_line = max_line
        self.require_checksum = bool(require_checksum)
        self._partial = bytearray()
        self._discarding = False
        self._pending: deque[Request | MessageError] = deque()
        self._lines = self._good = self._bad = self._too_large = 0
        self._dropped = self._resets = self._peak = 0

    def feed(self, data: bytes) -> None:
        """Take bytes as they came; any split, any content."""
        data = bytes(data)
        start = 0
        for m in _EOL.finditer(data):
            self._end_line(data[start : m.start()])
            start = m.end()
        self._extend(data[start:])

    def events(self) -> Iterator[Request | MessageError]:
        """Yield, and forget, every event decoded so far."""
        while self._pending:
            yield self._pending.popleft()

    __iter__ = events

    def reset(self) -> None:
        """Drop the partial line (a reconnect tore it); the next byte starts a line."""
        self._dropped += len(self._partial)
        self._partial.clear()
        self._discarding = False
        self._resets += 1

    def statistics(self) -> LineStatistics:
        return LineStatistics(
            self._lines, self._good, self._bad, self._too_large, self._dropped, self._resets, self._peak, len(self._pending)
        )

    # -- internals ----------------------------------------------------------

    def _extend(self, tail: bytes) -> None:
        if self._discarding:
            self._dropped += len(tail)
        elif len(self._partial) + len(tail) > self.max_line:
            self._overflow(bytes(self._partial) + tail)
        else:
            self._partial += tail
            self._peak = max(self._peak, len(self._partial))

    def _overflow(self, head: bytes) -> None:
        self._dropped += len(head)
        self._partial.clear()
        self._discarding = True
        self._lines += 1
        self._too_large += 1
        self._fail("too_large", f"line is longer than {self.max_line} bytes; it was discarded", excerpt(head[:40]))

    def _fail(self, code: str, message: str, shown: str) -> None:
        """Count a bad line and queue its error (``shown``: the excerpt for logs)."""
        self._bad += 1
        self._pending.append(MessageError(code, message, line=self._lines, excerpt=shown))

    def _end_line(self, seg: bytes) -> None:
        if self._discarding:
            self._dropped += len(seg)
            self._discarding = False
            return
        if len(self._partial) + len(seg) > self.max_line:
            self._overflow(bytes(self._partial) + seg)
            self._discarding = False
            return
        line = bytes(self._partial) + seg
        self._partial.clear()
        if not line.strip(b" "):
            return
        self._lines += 1
        try:
            self._pending.append(parse_request_line(line, require_checksum=self.require_checksum, max_line=self.max_line))
            self._good += 1
        except MessageError as err:
            self._bad += 1
            err.line = self._lines
            err.excerpt = excerpt(line)
            self._pending.append(err)
        except Exception as err:  # a bug of ours: still cost only this line
            self._fail("internal", f"rigloop could not decode this line ({type(err).__name__})", excerpt(line))
