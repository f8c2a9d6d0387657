"""The rig side of the protocol over ZeroMQ: the client that virtual rigs, ``rigloop
status``/``watch`` and the tests use.

``ZmqRig`` is a DEALER client with Lazy-Pirate retries: poll with a timeout, resend the
same request, recreate the socket with LINGER 0 after a timeout, give up after N tries,
match replies by id and ignore stale ones. ``RigTimeout`` / ``RigRefused`` say whose fault
a failure was (nothing answered; the daemon answered with an error).
"""

from __future__ import annotations

import itertools
import os
import time
from typing import Any

from .. import wire
from ..core.trial import TrialEvent
from ..errors import RigloopError
from ..links import zmq as zlink


class RigTimeout(RigloopError, TimeoutError):
    """No reply after every retry: the daemon is down or unreachable."""


class RigRefused(RigloopError, RuntimeError):
    """The daemon answered with an error reply (kept in ``.reply``)."""

    def __init__(self, reply: Any):
        self.reply = reply
        super().__init__(f"{reply.code}: {reply.message}" + (f" (field {reply.field})" if reply.field else ""))


class _Client:
    """What both rigs share: ids, Lazy-Pirate bookkeeping and the request helpers."""

    rig: str
    retries: int
    timeout_s: float

    def __init__(self) -> None:
        self._ids = itertools.count(int.from_bytes(os.urandom(3), "big") * 1000)
        self.resends = 0
        self.stale = 0
        self.reopens = 0

    def next_id(self) -> int:
        return next(self._ids)

    def request(self, req: Any) -> Any:  # pragma: no cover - abstract
        raise NotImplementedError

    def _checked(self, reply: Any, want: type) -> Any:
        if isinstance(reply, wire.ErrorReply):
            raise RigRefused(reply)
        if not isinstance(reply, want):
            raise RigloopError(f"expected a {want.__name__}, got {type(reply).__name__}")
        return reply

    def open(self, subject: str, session: str, rules: str, *, seed: int | None = None,
             profile: str | None = None, wall_time: float | None = None) -> wire.DecisionReply:
        req = wire.OpenSession(self.next_id(), subject, self.rig, session, rules, seed, profile, wall_time)
        return self._checked(self.request(req), wire.DecisionReply)

    def trial(self, event: TrialEvent) -> wire.DecisionReply:
        return self._checked(self.request(wire.TrialReport(self.next_id(), event)), wire.DecisionReply)

    def close_session(self, subject: str, session: str) -> wire.Ack:
        return self._checked(self.request(wire.CloseSession(self.next_id(), subject, self.rig, session)), wire.Ack)

    def ping(self) -> wire.Pong:
        return self._checked(self.request(wire.Ping(self.next_id())), wire.Pong)

    def query(self, subject: str) -> wire.StateReply:
        return self._checked(self.request(wire.QueryState(self.next_id(), subject)), wire.StateReply)


class ZmqRig(_Client):
    """A rig over ZeroMQ (DEALER, Lazy Pirate). ``curve`` are its CURVE keys, if any."""

    def __init__(self, endpoint: str, rig: str, timeout_s: float = 1.0, retries: int = 5, *,
                 curve: zlink.CurveClientKeys | None = None, ctx: Any = None, req_socket: bool = False):
        super().__init__()
        self.endpoint, self.rig, self.timeout_s, self.retries = endpoint, rig, timeout_s, retries
        self._own_ctx = ctx is None
        self.ctx = zlink.new_context() if ctx is None else ctx
        self.link = zlink.DealerLink(self.ctx, endpoint, curve=curve, req=req_socket)

    def request(self, req: Any) -> Any:
        """Send ``req`` and return its reply; resend on timeout; RigTimeout after
        ``retries`` tries. Replies with another id (late answers to earlier tries of
        an abandoned request) are counted in ``stale`` and ignored."""
        return self.request_frame(wire.encode_request(req), req.id)

    def request_frame(self, frame: bytes, rid: Any) -> Any:
        for attempt in range(self.retries):
            if attempt:
                self.resends += 1
            self.link.send(frame)
            deadline = time.monotonic() + self.timeout_s
            while True:
                left = deadline - time.monotonic()
                if left <= 0:
                    break
                raw = self.link.recv(left * 1000)
                if raw is None:
                    break
                try:
                    reply = wire.decode_reply(raw)
                except wire.MessageError:
                    self.stale += 1
                    continue
                if reply.id == rid:
                    return reply
                self.stale += 1
            self.link.reopen()  # brute force: a fresh socket drops anything queued for the old one
            self.reopens += 1
        raise RigTimeout(f"no reply from {self.endpoint} after {self.retries} tries of {self.timeout_s} s")

    def status(self) -> dict[str, Any]:
        """The daemon's status map (``{"type": "status"}`` request)."""
        import msgpack

        rid = self.next_id()
        self.link.send(msgpack.packb({"type": "status", "id": rid}))
        deadline = time.monotonic() + self.timeout_s * self.retries
        while time.monotonic() < deadline:
            raw = self.link.recv(100)
            if raw is None:
                continue
            body = msgpack.unpackb(raw, raw=False)
            if body.get("id") == rid and body.get("type") == "status":
                return body["status"]
        raise RigTimeout(f"no status reply from {self.endpoint}")

    def close(self) -> None:
        self.link.close()
        if self._own_ctx:
            self.ctx.term()

    def __enter__(self) -> ZmqRig:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()
