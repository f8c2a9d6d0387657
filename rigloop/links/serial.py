"""Serial links: one pyserial port per rig, non-blocking, reopened with backoff.

This is the only module that imports ``serial``. A ``SerialLink`` never blocks the
daemon's loop: its ``fileno()`` goes into the same poller as the ZeroMQ sockets,
``read()`` returns whatever bytes are waiting, and ``write()`` queues whole reply
lines in a bounded buffer that ``flush()`` sends as the port takes them.
When the device disappears (``SerialException`` / ``OSError``: a USB unplug, or the
master side of a pseudo-terminal closing) the link closes the port and schedules a
reopen with exponential backoff; ``generation`` counts successful opens, so the owner
knows to reset its line decoder (a torn line from before the unplug is dropped).

Ports are opened ``exclusive=True``: pyserial takes an advisory ``flock``, so a second
rigloop on the same port fails at start-up. Tools that do not take the lock can still
open the port (the lock is advisory).
"""

from __future__ import annotations

import os
import time
from collections.abc import Callable
from typing import Any

import serial

from ..errors import RigloopError

SerialException = serial.SerialException


class PortBusy(RigloopError, OSError):
    """Another process holds the port's exclusive lock (raised at start-up only)."""


class SerialLink:
    """One rig's serial port. ``port`` is a device path (a stable ``/dev/serial/by-id``
    link is best); ``rig`` names the rig whose trials arrive on it."""

    def __init__(self, port: str, rig: str, *, baudrate: int = 115200, out_bound: int = 64 * 1024,
                 backoff_initial: float = 0.05, backoff_max: float = 5.0,
                 clock: Callable[[], float] = time.monotonic, on_event: Callable[..., None] | None = None):
        self.port, self.rig = port, rig
        self.baudrate = baudrate
        self.out_bound = out_bound
        self._out = bytearray()
        self.backoff_initial, self.backoff_max = backoff_initial, backoff_max
        self._clock = clock
        self._on_event = on_event or (lambda *a, **k: None)
        self._serial: serial.Serial | None = None
        self._backoff = backoff_initial
        self._backoff_last = 0.0
        self.reopen_at: float | None = clock()
        self.generation = 0
        self.counts = {"opens": 0, "open_failures": 0, "disconnects": 0, "bytes_in": 0, "bytes_out": 0,
                       "dropped_replies": 0}
        self.last_error: str | None = None

    # -- state ------------------------------------------------------------------

    @property
    def connected(self) -> bool:
        return self._serial is not None

    def fileno(self) -> int | None:
        return self._serial.fileno() if self._serial is not None else None

    def open(self, *, first: bool = False) -> bool:
        """Try to open the port now. On failure schedule the next try (backoff doubles).

        With ``first=True`` an exclusive-lock failure (another process holds the port)
        is raised instead of retried, so a second daemon fails at start-up.
        """
        try:
            s = serial.Serial()
            s.port = self.port
            s.baudrate = self.baudrate
            s.timeout = 0
            s.exclusive = True
            s.open()
        except (serial.SerialException, OSError, ValueError) as err:
            self.counts["open_failures"] += 1
            self.last_error = _describe(err)
            if first and "exclusively lock" in str(err):
                raise PortBusy(f"{self.port}: another process holds this serial port (could not exclusively "
                               f"lock it); is a second rigloop running?") from None
            self._schedule()
            self._on_event("serial_open_failed", port=self.port, rig=self.rig, error=self.last_error,
                           retry_in_s=round(self._backoff_last, 3))
            return False
        self._serial = s
        self.reopen_at = None
        self._backoff = self.backoff_initial
        self.generation += 1
        self.counts["opens"] += 1
        self._on_event("serial_open", port=self.port, rig=self.rig, generation=self.generation)
        return True

    def _schedule(self) -> None:
        self._backoff_last = self._backoff
        self.reopen_at = self._clock() + self._backoff
        self._backoff = min(self.backoff_max, self._backoff * 2)

    def lost(self, err: BaseException | str) -> None:
        """The device went away: close it and schedule a reopen."""
        self.last_error = err if isinstance(err, str) else _describe(err)
        self.counts["disconnects"] += 1
        self._close()
        self._schedule()
        self._on_event("serial_lost", port=self.port, rig=self.rig, error=self.last_error,
                       retry_in_s=round(self._backoff_last, 3))

    def due(self, now: float | None = None) -> bool:
        now = self._clock() if now is None else now
        return self._serial is None and self.reopen_at is not None and now >= self.reopen_at

    # -- I/O ----------------------------------------------------------------------

    def read(self, limit: int = 4096) -> bytes:
        """The bytes waiting (possibly b''); on a device error: ``lost`` and b''."""
        if self._serial is None:
            return b""
        try:
            data = self._serial.read(limit)
        except (serial.SerialException, OSError) as err:
            self.lost(err)
            return b""
        self.counts["bytes_in"] += len(data)
        return data

    def write(self, data: bytes) -> bool:
        """Queue a reply line and send what the port takes now; never blocks.

        A rig that does not read its replies fills the port's buffer; then whole lines
        wait here up to ``out_bound`` bytes, and lines beyond that are dropped (counted
        in ``dropped_replies``); the rig's retry gets the stored decision again.
        """
        if self._serial is None:
            self.counts["dropped_replies"] += 1
            return False
        if len(self._out) + len(data) > self.out_bound:
            self.counts["dropped_replies"] += 1
            return False
        self._out += data
        self.flush()
        return True

    @property
    def pending_out(self) -> int:
        return len(self._out)

    def flush(self) -> None:
        """Send queued bytes until the port would block (pyserial opens it O_NONBLOCK)."""
        while self._out and self._serial is not None:
            try:
                n = os.write(self._serial.fileno(), self._out)
            except BlockingIOError:
                return
            except InterruptedError:
                continue
            except OSError as err:
                self.lost(err)
                return
            self.counts["bytes_out"] += n
            del self._out[:n]

    def _close(self) -> None:
        if self._out:
            self.counts["dropped_replies"] += self._out.count(b"\n")
            self._out.clear()
        s, self._serial = self._serial, None
        if s is not None:
            try:
                s.close()
            except (serial.SerialException, OSError):
                pass

    def close(self) -> None:
        self._close()
        self.reopen_at = None

    def statistics(self) -> dict[str, Any]:
        return {"port": self.port, "rig": self.rig, "connected": self.connected, "generation": self.generation,
                **self.counts, "last_error": self.last_error}


def _describe(err: BaseException) -> str:
    text = str(err) or type(err).__name__
    return text if len(text) <= 200 else text[:197] + "..."


def open_loopback(baudrate: int = 1_000_000) -> Any:
    """A ``loop://`` port (what is written is read back), for codec tests."""
    return serial.serial_for_url("loop://", baudrate=baudrate, timeout=0)


def port_exists(path: str) -> bool:
    return os.path.exists(path)
