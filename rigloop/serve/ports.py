"""The rig-facing ports: ROUTER messages and serial lines in, as decoded requests that
know where they came from; each reply out to the place its request came from.

A request travels as ``(source, request, received_ns)``; the request is a ``wire``
value, a ``StatusRequest``, or the ``WireError`` that decoding it raised (answered
with an error reply like any other). ``source.send(reply)`` answers it, on the ROUTER
to its envelope or as a line on its serial port, and says whether it went out.

Serial ports reconnect by themselves (``SerialLink``); a reconnect tears the partial
line, so the port's decoder starts afresh when the link's generation moves.
"""

from __future__ import annotations

import dataclasses
import time
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from .. import wire
from ..errors import WireError
from ..links import zmq as zlink
from ..links.serial import SerialLink
from ..wire import MessageError
from .observers import wire_pack
from .settings import Settings

# --------------------------------------------------------------------------- where a request came from


@dataclass(slots=True)
class ZmqSource:
    """A request that came on the ROUTER; the reply goes back to its envelope."""

    router: zlink.RouterLink
    rig: str | None  # authenticated rig (CURVE User-Id), or None without CURVE
    envelope: tuple[bytes, ...]

    def send(self, reply: Any) -> bool:
        frame = reply.encode() if isinstance(reply, StatusReply) else wire.encode_reply(reply)
        return self.router.send(self.envelope, frame)


@dataclass(slots=True)
class SerialSource:
    """A request that came as a line on a serial port; the reply goes back as a line."""

    link: SerialLink
    rig: str | None  # the serial port's rig

    def send(self, reply: Any) -> bool:
        return self.link.write(wire.format_reply_line(reply))


# --------------------------------------------------------------------------- the status request


@dataclass(frozen=True, slots=True)
class StatusRequest:
    """``{"type": "status", "id": ...}`` over the ROUTER: not a rig message, so it is not
    in ``wire``; answered with ``{"type": "status", "id": ..., "status": {...}}``."""

    id: Any


@dataclass(frozen=True, slots=True)
class StatusReply:
    id: Any
    status: Mapping[str, Any]

    def encode(self) -> bytes:
        return wire_pack({"type": "status", "id": self.id, "status": self.status})


def status_request(payload: bytes) -> StatusRequest | None:
    """A status request, or None (only tried when ``wire`` found an unknown type)."""
    import msgpack

    try:
        body = msgpack.unpackb(payload, raw=False, strict_map_key=True)
    except Exception:  # msgpack's errors share no base class
        return None
    if isinstance(body, dict) and body.get("type") == "status" and set(body) <= {"type", "id"}:
        rid = body.get("id")
        if rid is None or (isinstance(rid, int) and not isinstance(rid, bool)) or (isinstance(rid, str) and len(rid) <= 32):
            return StatusRequest(rid)
    return None


# --------------------------------------------------------------------------- the ROUTER


class ZmqPort:
    """The ROUTER's side of a batch: at most ``batch_max`` waiting messages, decoded."""

    def __init__(self, router: zlink.RouterLink, batch_max: int):
        self.router = router
        self.batch_max = batch_max

    def drain(self, work: list) -> None:
        router = self.router
        for _ in range(self.batch_max):
            msg = router.recv()
            if msg is None:
                return
            src = ZmqSource(router, msg.user_id if router.curve else None, msg.envelope)
            if msg.payload is None:
                work.append((src, MessageError("bad_message", f"expected a routing id and one payload frame (or an "
                                                          f"empty delimiter and one payload frame), got {msg.frames} "
                                                          "frames"), msg.received_ns))
                continue
            try:
                req = wire.decode_request(msg.payload)
            except WireError as err:
                req = status_request(msg.payload) if err.code == "unknown_type" else None
                if req is None:
                    req = err
            except Exception as err:  # the codec promises WireError only; never die on input
                req = MessageError("internal", f"could not decode the message ({type(err).__name__})")
            work.append((src, req, msg.received_ns))


# --------------------------------------------------------------------------- serial ports


@dataclass(slots=True)
class SerialPort:
    """One serial port: its link, the decoder of its lines, and the link generation the
    decoder's partial line belongs to."""

    link: SerialLink
    decoder: wire.LineDecoder
    generation: int = 0  # the link.generation of the decoder's partial line

    def drain(self, work: list) -> None:
        """Every complete line read so far, decoded (the decoder restarts after a reconnect)."""
        link = self.link
        data = link.read()
        if self.generation != link.generation:
            self.decoder.reset()
            self.generation = link.generation
        if data:
            now = time.monotonic_ns()
            self.decoder.feed(data)
            src = SerialSource(link, link.rig)
            for item in self.decoder:
                work.append((src, item, now))

    def statistics(self) -> dict[str, Any]:
        return self.link.statistics() | {"decoder": dataclasses.asdict(self.decoder.statistics())}


class SerialPorts:
    """Every configured serial port, and which of them the poller watches (by fd)."""

    def __init__(self, settings: Settings, poller: zlink.Poller, on_event: Any):
        self.poller = poller
        self.ports = [SerialPort(SerialLink(port, rig, baudrate=settings.serial_baudrate, on_event=on_event),
                                 wire.LineDecoder(max_line=settings.serial_max_line,
                                                  require_checksum=settings.require_checksum))
                      for port, rig in settings.serial]
        self.by_fd: dict[int, SerialPort] = {}  # the connected ports, watched by the poller

    def open(self) -> None:
        """The first open of every port (one that is missing is retried later)."""
        for port in self.ports:
            if port.link.open(first=True):
                self._register(port)

    def _register(self, port: SerialPort) -> None:
        fd = port.link.fileno()
        self.by_fd[fd] = port
        self.poller.register(fd)

    def drain(self, ready: set, work: list) -> None:
        """The lines of every port the poller found readable."""
        for fd in [r for r in ready if isinstance(r, int)]:
            port = self.by_fd.get(fd)
            if port is not None:
                port.drain(work)

    def tend(self) -> None:
        """Write out what waits, stop watching ports that went away, reopen those due."""
        for port in self.ports:
            port.link.flush()
        for fd, port in list(self.by_fd.items()):
            if not port.link.connected or port.link.fileno() != fd:
                self.poller.unregister(fd)
                del self.by_fd[fd]
        now = time.monotonic()
        for port in self.ports:
            if port.link.due(now) and port.link.open():
                self._register(port)

    def timeout_ms(self, timeout: float) -> float:
        """``timeout`` shortened for replies waiting to be written and reopens due."""
        now = time.monotonic()
        for port in self.ports:
            link = port.link
            if link.pending_out:
                timeout = min(timeout, 5.0)
            if link.reopen_at is not None:
                timeout = min(timeout, max(0.0, (link.reopen_at - now) * 1000))
        return timeout

    def statistics(self) -> list[dict[str, Any]]:
        return [port.statistics() for port in self.ports]

    def close(self) -> None:
        for port in self.ports:
            port.link.close()
