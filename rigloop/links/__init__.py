"""Transports: the only package that touches sockets and serial ports.

``links.zmq``     ROUTER for rigs, PUB for observers, CURVE/ZAP set-up, client sockets
``links.serial``  one pyserial port per rig, non-blocking, reopened with backoff
``BoundedQueue``  the queue type every link uses between parts (explicit bound and
                  ``statistics()``: depth, peak, dropped)

Only ``links/zmq.py`` imports zmq and only ``links/serial.py`` imports serial; the
daemon, the security helpers, the watch table and the virtual rig go through them.
"""

from __future__ import annotations

from collections import deque
from collections.abc import Iterator
from typing import Any, Generic, TypeVar

T = TypeVar("T")


class BoundedQueue(Generic[T]):
    """A FIFO with a hard bound. ``put`` on a full queue drops the item and counts it.

    The daemon is single-threaded, so there is no locking: the point is the explicit
    bound and the ``statistics()`` record reported by ``rigloop status``.
    """

    def __init__(self, maxlen: int, name: str = "queue"):
        if isinstance(maxlen, bool) or not isinstance(maxlen, int) or maxlen < 1:
            raise ValueError(f"'maxlen' must be a whole number >= 1 (got {maxlen!r})")
        self.name = name
        self.maxlen = maxlen
        self._items: deque[T] = deque()
        self.peak = 0
        self.dropped = 0
        self.total = 0

    def put(self, item: T) -> bool:
        """Append ``item``; False (and counted as dropped) when the queue is full."""
        if len(self._items) >= self.maxlen:
            self.dropped += 1
            return False
        self._items.append(item)
        self.total += 1
        if len(self._items) > self.peak:
            self.peak = len(self._items)
        return True

    def put_front(self, item: T) -> None:
        """Return an item taken by ``get`` to the head (a retry keeps its place)."""
        self._items.appendleft(item)

    def get(self) -> T:
        return self._items.popleft()

    def peek(self) -> T:
        return self._items[0]

    def drop(self, n: int = 1) -> None:
        """Count ``n`` items given up after they were queued (e.g. a reply that timed out)."""
        self.dropped += n

    def __len__(self) -> int:
        return len(self._items)

    def __bool__(self) -> bool:
        return bool(self._items)

    def __iter__(self) -> Iterator[T]:
        return iter(self._items)

    def statistics(self) -> dict[str, Any]:
        return {"depth": len(self._items), "peak": self.peak, "dropped": self.dropped,
                "total": self.total, "bound": self.maxlen}
