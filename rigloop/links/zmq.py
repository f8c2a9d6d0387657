"""ZeroMQ links: the ROUTER rigs talk to, the PUB observers read, CURVE/ZAP, client sockets.

This is the only module that imports ``zmq``. Everything here is non-blocking: the
daemon's single loop polls the sockets (and serial file descriptors) with one
``Poller`` and never waits on one peer.

ROUTER choices (see docs on reliability): ``ROUTER_MANDATORY=1`` so a reply to a peer
whose pipe is full raises EAGAIN instead of vanishing; such replies wait in a bounded
queue and are retried until a deadline, then dropped *and counted* (the rig's retry gets
the stored decision again). ``ROUTER_HANDOVER=1`` so a restarted rig with a fixed
routing id takes over its old connection. ``MAXMSGSIZE`` caps each frame (the peer is
disconnected), heartbeats detect dead peers, ``HANDSHAKE_IVL`` drops idle junk
connections, ``LINGER`` is bounded so ``ctx.term()`` cannot hang.

CURVE: the server sets ``ZAP_DOMAIN`` and ``ZAP_ENFORCE_DOMAIN=1`` so that with no
authenticator answering, every connection is refused (fail closed). The authenticator
runs on the same Context; its key check is a callback over an in-memory allow-list
(public key -> rig name), and the User-Id it returns is the rig name, so the daemon
reads who a peer is from the connection, never from the payload.
"""

from __future__ import annotations

import os
import time
from collections.abc import Callable, Iterable, Mapping
from dataclasses import dataclass, field
from typing import Any

import zmq
import zmq.auth
from zmq.auth.thread import ThreadAuthenticator
from zmq.utils.monitor import recv_monitor_message

from . import BoundedQueue

ZAP_DOMAIN = "rigloop"
POLLIN = zmq.POLLIN

# plain ints for the per-message paths: pyzmq's constants are enum flags, and `&` or `|` on one
# runs Python code in the enum module (`get(EVENTS) & POLLIN`: ~4.8 -> ~2.9 µs)
_EVENTS = int(zmq.EVENTS)
_POLLIN = int(zmq.POLLIN)
_NOBLOCK = int(zmq.NOBLOCK)
_MORE_NOW = int(zmq.SNDMORE | zmq.NOBLOCK)  # a frame of a reply with more to come, never blocking

Again = zmq.Again
ZMQError = zmq.ZMQError


def has_curve() -> bool:
    """True when libzmq was built with CURVE (libsodium)."""
    return bool(zmq.has("curve"))


def new_context() -> zmq.Context:
    """A fresh Context (one per daemon or client process; never shared across fork)."""
    return zmq.Context()


def versions() -> dict[str, str]:
    return {"pyzmq": zmq.__version__, "libzmq": zmq.zmq_version()}


def curve_keypair() -> tuple[bytes, bytes]:
    """A new CURVE key pair ``(public, secret)``, each 40 bytes of Z85."""
    return zmq.curve_keypair()


def curve_public(secret: bytes) -> bytes:
    """The Z85 public key that belongs to a Z85 secret key."""
    return zmq.curve_public(secret)


def load_certificate(path: str | os.PathLike) -> tuple[bytes, bytes | None]:
    """``(public, secret or None)`` from a zmq.auth certificate file (Z85 bytes)."""
    return zmq.auth.load_certificate(os.fspath(path))


def create_certificates(directory: str | os.PathLike, name: str) -> tuple[str, str]:
    """Write ``name.key`` and ``name.key_secret`` in ``directory``; returns their paths.

    zmq.auth writes both 0644: the caller must chmod the secret file.
    """
    return zmq.auth.create_certificates(os.fspath(directory), name)


# --------------------------------------------------------------------------- poller


class Poller:
    """One poller for zmq sockets and raw file descriptors (serial ports)."""

    def __init__(self):
        self._poller = zmq.Poller()

    def register(self, what: Any) -> None:
        self._poller.register(what, zmq.POLLIN)

    def unregister(self, what: Any) -> None:
        try:
            self._poller.unregister(what)
        except KeyError:
            pass

    def poll(self, timeout_ms: float) -> set:
        """The registered things (sockets or fds) ready to read within ``timeout_ms``."""
        return {s for s, ev in self._poller.poll(max(0, int(timeout_ms))) if ev & _POLLIN}


# --------------------------------------------------------------------------- server side


@dataclass(frozen=True, slots=True)
class RouterOptions:
    """Socket options of the rig-facing ROUTER (times in ms, sizes in bytes/messages)."""

    sndhwm: int = 10_000
    rcvhwm: int = 10_000
    max_msg_size: int = 64 * 1024
    heartbeat_ivl: int = 1000
    heartbeat_timeout: int = 3000
    heartbeat_ttl: int = 6000
    handshake_ivl: int = 5000
    linger: int = 200
    send_retry_ms: int = 1000  # how long a reply may wait for a full pipe before it is dropped
    pending_bound: int = 10_000


@dataclass(frozen=True, slots=True)
class CurveServerKeys:
    """The server's key pair (Z85 bytes) for a CURVE ROUTER or PUB."""

    public: bytes
    secret: bytes = field(repr=False)


@dataclass(slots=True)
class Incoming:
    """One message from a rig: the routing envelope to reply on, the payload frame (None
    when the frame count was wrong), the authenticated rig (CURVE User-Id) if any."""

    envelope: tuple[bytes, ...]
    payload: bytes | None
    user_id: str | None
    frames: int
    received_ns: int


class RouterLink:
    """The ROUTER socket rigs connect to; see the module docstring for the options."""

    def __init__(self, ctx: zmq.Context, endpoint: str, options: RouterOptions = RouterOptions(),
                 curve: CurveServerKeys | None = None, clock: Callable[[], float] = time.monotonic):
        self.options = options
        self._clock = clock
        s = ctx.socket(zmq.ROUTER)
        self.socket = s
        try:
            s.setsockopt(zmq.LINGER, options.linger)
            s.setsockopt(zmq.ROUTER_MANDATORY, 1)
            s.setsockopt(zmq.ROUTER_HANDOVER, 1)
            s.setsockopt(zmq.SNDHWM, options.sndhwm)
            s.setsockopt(zmq.RCVHWM, options.rcvhwm)
            s.setsockopt(zmq.MAXMSGSIZE, options.max_msg_size)
            s.setsockopt(zmq.HEARTBEAT_IVL, options.heartbeat_ivl)
            s.setsockopt(zmq.HEARTBEAT_TIMEOUT, options.heartbeat_timeout)
            s.setsockopt(zmq.HEARTBEAT_TTL, options.heartbeat_ttl)
            s.setsockopt(zmq.HANDSHAKE_IVL, options.handshake_ivl)
            self.curve = curve is not None
            self.endpoint = _bind_server(s, endpoint, curve)
        except BaseException:
            s.close(0)
            raise
        self.pending: BoundedQueue[tuple[float, list[bytes]]] = BoundedQueue(options.pending_bound, "replies waiting")
        self.counts = {"received": 0, "sent": 0, "bad_frames": 0, "send_retried": 0,
                       "dropped_full": 0, "dropped_unroutable": 0}
        self._monitor = None
        self.auth_failures = 0
        self.handshakes = 0

    # -- receiving ------------------------------------------------------------

    def recv(self) -> Incoming | None:
        """One message if one is waiting (never blocks), else None.

        DEALER rigs send ``[payload]`` (we see ``[id, payload]``); REQ rigs send
        ``[b"", payload]`` (we see ``[id, b"", payload]``, or ``[id, request-id, b"",
        payload]`` with REQ_CORRELATE). Anything else comes back with ``payload=None``
        and the envelope to send an error on.
        """
        if not self.socket.get(_EVENTS) & _POLLIN:  # cheaper than a receive that fails
            return None
        curve = self.curve
        try:
            # frames as bytes (cheaper than Frame objects for small messages); with CURVE as
            # Frames, which carry the User-Id
            frames = self.socket.recv_multipart(_NOBLOCK, copy=not curve)
        except zmq.Again:
            return None
        now = time.monotonic_ns()
        self.counts["received"] += 1
        n = len(frames)
        user_id = None
        if curve:
            if n > 1:
                try:
                    user_id = frames[-1].get("User-Id")
                except (zmq.ZMQError, AttributeError):
                    user_id = None
            frames = [f.bytes for f in frames]
        ident = frames[0]
        if n == 2:
            return Incoming((ident,), frames[1], user_id, n, now)
        if n in (3, 4) and len(frames[-2]) == 0 and all(len(f) for f in frames[1:-2]):
            # REQ: [id, b"", payload]; REQ with REQ_CORRELATE: [id, request-id, b"", payload]
            return Incoming(tuple(frames[:-1]), frames[-1], user_id, n, now)
        self.counts["bad_frames"] += 1
        envelope = (ident, b"") if n > 1 and len(frames[1]) == 0 else (ident,)
        return Incoming(envelope, None, user_id, n, now)

    def waiting(self) -> bool:
        """Whether a message is waiting to be received (cheaper than a poll)."""
        return bool(self.socket.get(_EVENTS) & _POLLIN)

    # -- sending ----------------------------------------------------------------

    def send(self, envelope: Iterable[bytes], payload: bytes) -> bool:
        """Send a reply now, or queue it for a bounded retry if the peer's pipe is full.

        Returns False when the reply was dropped (peer gone, or the wait queue full).
        """
        frames = [*envelope, payload]
        if self.pending:  # replies already waiting go first, so a peer sees them in order
            return self._queue(frames)
        result = self._try(frames)
        if result == "again":
            return self._queue(frames)
        return result == "sent"

    def _try(self, frames: list[bytes]) -> str:
        """"sent", "again" (pipe full) or "gone" (unroutable, counted and dropped)."""
        sock = self.socket
        try:
            # send_multipart's own loop, without its per-frame checks: the ROUTER routes (and
            # refuses, with ROUTER_MANDATORY) on the first frame, so a refusal sends nothing
            for frame in frames[:-1]:
                sock.send(frame, _MORE_NOW)
            sock.send(frames[-1], _NOBLOCK)
        except zmq.Again:
            return "again"
        except zmq.ZMQError as err:
            if err.errno == zmq.EHOSTUNREACH:
                self.counts["dropped_unroutable"] += 1
                return "gone"
            raise
        self.counts["sent"] += 1
        return "sent"

    def _queue(self, frames: list[bytes]) -> bool:
        ok = self.pending.put((self._clock() + self.options.send_retry_ms / 1000.0, frames))
        if not ok:
            self.counts["dropped_full"] += 1
        return ok

    def flush(self) -> None:
        """Retry queued replies in order; drop those past their deadline (counted)."""
        while self.pending:
            deadline, frames = self.pending.get()
            self.counts["send_retried"] += 1
            result = self._try(frames)
            if result != "again":
                continue
            if self._clock() >= deadline:
                self.pending.drop()
                self.counts["dropped_full"] += 1
                continue
            self.pending.put_front((deadline, frames))
            return

    def next_deadline(self) -> float | None:
        return self.pending.peek()[0] if self.pending else None

    # -- security monitor ---------------------------------------------------------

    def start_monitor(self) -> zmq.Socket:
        """A monitor socket for handshake outcomes (counted by ``read_monitor``)."""
        events = zmq.EVENT_HANDSHAKE_FAILED_AUTH | zmq.EVENT_HANDSHAKE_FAILED_PROTOCOL | zmq.EVENT_HANDSHAKE_SUCCEEDED
        self._monitor = self.socket.get_monitor_socket(events)
        self._monitor.setsockopt(zmq.LINGER, 0)
        return self._monitor

    def read_monitor(self) -> list[str]:
        """Drain monitor events; returns the names of failures seen (for logging)."""
        failures = []
        if self._monitor is None:
            return failures
        while True:
            try:
                msg = recv_monitor_message(self._monitor, zmq.NOBLOCK)
            except zmq.Again:
                return failures
            ev = msg["event"]
            if ev == zmq.EVENT_HANDSHAKE_SUCCEEDED:
                self.handshakes += 1
            else:
                self.auth_failures += 1
                failures.append("auth" if ev == zmq.EVENT_HANDSHAKE_FAILED_AUTH else "protocol")

    def statistics(self) -> dict[str, Any]:
        return {**self.counts, "pending": self.pending.statistics(), "auth_failures": self.auth_failures,
                "handshakes": self.handshakes}

    def close(self) -> None:
        if self._monitor is not None:
            try:
                self.socket.disable_monitor()
            except zmq.ZMQError:
                pass
            self._monitor.close(0)
            self._monitor = None
        self.socket.close(self.options.linger)


class PubLink:
    """The publishing socket for observers; topic = subject id. It never blocks: a slow
    observer loses messages at its HWM, rigs are never held up.

    An XPUB rather than a PUB, so the daemon can see the subscriptions and skip building
    messages nobody has asked for (``wants``). Sending is the same as PUB's; libzmq
    passes on the first subscription to a topic and the last unsubscription (also when
    a subscriber disconnects), so a set of topics mirrors what is subscribed.
    """

    def __init__(self, ctx: zmq.Context, endpoint: str, *, sndhwm: int = 10_000, linger: int = 0,
                 curve: CurveServerKeys | None = None):
        s = ctx.socket(zmq.XPUB)
        self.socket = s
        try:
            s.setsockopt(zmq.LINGER, linger)
            s.setsockopt(zmq.SNDHWM, sndhwm)
            self.endpoint = _bind_server(s, endpoint, curve)
        except BaseException:
            s.close(0)
            raise
        self.published = 0
        self.topics: set[bytes] = set()  # subscribed topic prefixes (b"" = everything)

    def _read_subscriptions(self) -> None:
        """Take in (un)subscriptions that arrived: b"\x01topic" adds, b"\x00topic" removes."""
        while self.socket.get(_EVENTS) & _POLLIN:  # cheaper than a receive that fails
            try:
                msg = self.socket.recv(zmq.NOBLOCK)
            except zmq.Again:
                return
            if msg[:1] == b"\x01":
                self.topics.add(msg[1:])
            elif msg[:1] == b"\x00":
                self.topics.discard(msg[1:])

    def wants(self, topic: str) -> bool:
        """Whether some observer is subscribed to ``topic`` (by prefix, as PUB filters)."""
        self._read_subscriptions()
        if not self.topics:
            return False
        t = topic.encode()
        return any(t.startswith(prefix) for prefix in self.topics)

    def publish(self, topic: str, payload: bytes) -> None:
        try:
            self.socket.send_multipart([topic.encode(), payload], zmq.NOBLOCK)
            self.published += 1
        except zmq.Again:  # PUB drops at HWM rather than raising; kept for safety
            pass

    def close(self) -> None:
        self.socket.close(0)


class Authenticator:
    """The ZAP handler, on the daemon's own Context, over an in-memory allow-list.

    ``allowed`` maps Z85 public keys (bytes) to rig names; the rig name becomes the
    connection's User-Id. Names in ``loopback_only`` get in only from a loopback peer
    address. Replace the list with ``set_allowed`` (takes effect for new connections).
    """

    def __init__(self, ctx: zmq.Context, allowed: Mapping[bytes, str], loopback_only: Iterable[str] = ()):
        self._allowed = dict(allowed)
        self._loopback_only = frozenset(loopback_only)
        self._address = ""  # the peer address of the ZAP request being handled (one thread)
        self._auth = ThreadAuthenticator(ctx, log=_quiet_logger())
        outer = self

        class _Provider:
            def callback(self, domain: str, key: bytes) -> bool:
                name = outer._allowed.get(key)
                return name is not None and (name not in outer._loopback_only or _loopback_peer(outer._address))

        handle = self._auth.handle_zap_message

        async def _handle_zap(msg: list[bytes]) -> None:
            outer._address = msg[3].decode("utf-8", "replace") if len(msg) > 3 else ""
            await handle(msg)

        self._auth.handle_zap_message = _handle_zap  # instance attribute: sees the peer address first
        self._auth.start()
        # the domain must be ours: pyzmq maps only an empty domain to "*"
        self._auth.configure_curve_callback(domain=ZAP_DOMAIN, credentials_provider=_Provider())
        self._auth.curve_user_id = self._user_id  # instance attribute: looked up per call
        self.running = True

    def _user_id(self, client_public_key: bytes) -> str:
        from zmq.utils import z85

        return self._allowed.get(z85.encode(client_public_key), "")

    def set_allowed(self, allowed: Mapping[bytes, str]) -> None:
        self._allowed = dict(allowed)

    def stop(self) -> None:
        if self.running:
            self._auth.stop()
            self.running = False


def _loopback_peer(address: str) -> bool:
    """Whether a ZAP request's peer address is this machine (127.0.0.0/8, ::1, or ipc)."""
    import ipaddress

    if not address:
        return True  # ipc:// and inproc:// peers have no network address
    try:
        ip = ipaddress.ip_address(address.strip("[]"))
    except ValueError:
        return False
    return (getattr(ip, "ipv4_mapped", None) or ip).is_loopback


def _quiet_logger():
    import logging

    log = logging.getLogger("rigloop.zap")
    log.setLevel(logging.WARNING)  # pyzmq logs client keys at DEBUG
    return log


# --------------------------------------------------------------------------- client side


@dataclass(frozen=True, slots=True)
class CurveClientKeys:
    """A client's key pair plus the server's public key (all Z85 bytes)."""

    public: bytes
    secret: bytes = field(repr=False)
    server: bytes = b""


class DealerLink:
    """A client DEALER (or REQ) socket for rigs, tools and tests. Non-blocking with
    ``poll``; ``reopen`` closes it with LINGER 0 and connects a fresh one (Lazy Pirate)."""

    def __init__(self, ctx: zmq.Context, endpoint: str, *, identity: bytes | None = None,
                 curve: CurveClientKeys | None = None, req: bool = False, sndhwm: int = 1000):
        self._ctx, self.endpoint, self._identity, self._curve, self._req = ctx, endpoint, identity, curve, req
        self._sndhwm = sndhwm
        self.socket = None
        self._open()

    def _open(self) -> None:
        s = self._ctx.socket(zmq.REQ if self._req else zmq.DEALER)
        s.setsockopt(zmq.LINGER, 0)
        s.setsockopt(zmq.SNDHWM, self._sndhwm)
        if self._req:
            s.setsockopt(zmq.REQ_RELAXED, 1)
            s.setsockopt(zmq.REQ_CORRELATE, 1)
        if self._identity:
            s.setsockopt(zmq.ROUTING_ID, self._identity)
        if self._curve is not None:
            s.curve_secretkey = self._curve.secret
            s.curve_publickey = self._curve.public
            s.curve_serverkey = self._curve.server
        s.connect(self.endpoint)
        self.socket = s

    def reopen(self) -> None:
        self.socket.close(0)
        self._open()

    def send(self, payload: bytes) -> bool:
        """Queue one request; False if the socket's queue is full (would block)."""
        try:
            self.socket.send(payload, zmq.NOBLOCK)
            return True
        except zmq.Again:
            return False

    def send_frames(self, frames: list[bytes]) -> bool:
        try:
            self.socket.send_multipart(frames, zmq.NOBLOCK)
            return True
        except zmq.Again:
            return False

    def recv(self, timeout_ms: float) -> bytes | None:
        """The next reply payload within ``timeout_ms``, else None."""
        if self.socket.poll(max(0, int(timeout_ms)), zmq.POLLIN):
            frames = self.socket.recv_multipart()
            return frames[-1]
        return None

    def recv_nowait(self) -> bytes | None:
        try:
            return self.socket.recv_multipart(zmq.NOBLOCK)[-1]
        except zmq.Again:
            return None

    def close(self) -> None:
        if self.socket is not None:
            self.socket.close(0)
            self.socket = None


class SubLink:
    """A SUB socket for observers (``rigloop watch``)."""

    def __init__(self, ctx: zmq.Context, endpoint: str, topics: Iterable[str] = ("",),
                 curve: CurveClientKeys | None = None):
        s = ctx.socket(zmq.SUB)
        s.setsockopt(zmq.LINGER, 0)
        s.setsockopt(zmq.RCVHWM, 100_000)
        if curve is not None:
            s.curve_secretkey = curve.secret
            s.curve_publickey = curve.public
            s.curve_serverkey = curve.server
        for t in topics:
            s.setsockopt(zmq.SUBSCRIBE, t.encode())
        s.connect(endpoint)
        self.socket = s

    def recv(self, timeout_ms: float) -> tuple[str, bytes] | None:
        if self.socket.poll(max(0, int(timeout_ms)), zmq.POLLIN):
            frames = self.socket.recv_multipart()
            if len(frames) == 2:
                return frames[0].decode("utf-8", "replace"), frames[1]
        return None

    def close(self) -> None:
        self.socket.close(0)


def raw_socket(ctx: zmq.Context, kind: str) -> zmq.Socket:
    """A bare socket of ``kind`` ("dealer", "router", "req") with LINGER 0, for tests and
    benchmarks that need to send malformed traffic or measure a bare echo."""
    s = ctx.socket(getattr(zmq, kind.upper()))
    s.setsockopt(zmq.LINGER, 0)
    return s


def _bind_server(s, endpoint: str, curve) -> str:
    """Bind a server socket, as a CURVE server on our enforced ZAP domain when ``curve``
    is given (a missing authenticator then fails closed); returns the bound endpoint."""
    if curve is not None:
        s.setsockopt(zmq.ZAP_DOMAIN, ZAP_DOMAIN.encode())
        s.setsockopt(zmq.ZAP_ENFORCE_DOMAIN, 1)
        s.curve_secretkey = curve.secret
        s.curve_publickey = curve.public
        s.curve_server = True
    s.bind(endpoint)
    return s.getsockopt_string(zmq.LAST_ENDPOINT)
