"""The links on their own: bounded queues, the ROUTER's mandatory routing and frame
checks, and the serial port's unplug/reopen cycle on a real pseudo-terminal."""

from __future__ import annotations

import os
import time

import pytest

from rigloop.links import BoundedQueue
from rigloop.links import zmq as zlink
from rigloop.links.serial import PortBusy, SerialLink
from rigloop.testing import PtyPort


def test_bounded_queue_counts_depth_peak_and_drops():
    """A full queue refuses and counts; statistics report depth, peak and drops."""
    q = BoundedQueue(2, "q")
    assert q.put(1) and q.put(2) and not q.put(3)
    assert q.get() == 1
    assert q.statistics() == {"depth": 1, "peak": 2, "dropped": 1, "total": 2, "bound": 2}
    with pytest.raises(ValueError, match="'maxlen' must be a whole number >= 1"):
        BoundedQueue(0)


@pytest.fixture
def ctx():
    c = zlink.new_context()
    yield c
    c.term()


def _recv(router, timeout=2.0):
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if router.socket.poll(50):
            msg = router.recv()
            if msg is not None:
                return msg
    raise AssertionError("nothing arrived at the ROUTER within the timeout")


def test_router_frames_and_envelopes(ctx):
    """DEALER and REQ envelopes are recognised; other frame counts come back with no
    payload and are counted."""
    router = zlink.RouterLink(ctx, "tcp://127.0.0.1:*", zlink.RouterOptions(linger=0))
    dealer = zlink.raw_socket(ctx, "dealer")
    try:
        dealer.connect(router.endpoint)
        dealer.send(b"one")
        m = _recv(router)
        assert m.payload == b"one" and len(m.envelope) == 1
        dealer.send_multipart([b"", b"two"])
        m = _recv(router)
        assert m.payload == b"two" and m.envelope[1:] == (b"",)
        dealer.send_multipart([b"x", b"y", b"z"])
        m = _recv(router)
        assert m.payload is None and m.frames == 4
        assert router.statistics()["bad_frames"] == 1
        assert router.send(m.envelope, b"reply")
        assert dealer.poll(2000) and dealer.recv() == b"reply"
    finally:
        dealer.close(0)
        router.close()


def test_router_unroutable_and_full_pipes_are_counted_not_blocking(ctx):
    """ROUTER_MANDATORY: a reply to a peer that is gone is dropped and counted; replies
    to a peer that stops reading wait in the bounded queue, then are dropped after the
    deadline, counted; send never blocks."""
    opts = zlink.RouterOptions(sndhwm=5, linger=0, send_retry_ms=50, pending_bound=10)
    router = zlink.RouterLink(ctx, "tcp://127.0.0.1:*", opts)
    slow = zlink.raw_socket(ctx, "dealer")
    slow.setsockopt(zlink.zmq.RCVHWM, 5)
    try:
        assert not router.send((b"\x00nobody",), b"x")
        assert router.statistics()["dropped_unroutable"] == 1
        slow.connect(router.endpoint)
        slow.send(b"hello")
        env = _recv(router).envelope
        big = b"x" * 200_000  # fills the kernel buffers quickly
        t0 = time.monotonic()
        for _ in range(200):
            router.send(env, big)
        assert time.monotonic() - t0 < 2.0
        stats = router.statistics()
        assert stats["pending"]["peak"] >= 1
        time.sleep(0.1)
        router.flush()
        stats = router.statistics()
        assert stats["dropped_full"] >= 1 and stats["pending"]["depth"] <= opts.pending_bound
    finally:
        slow.close(0)
        router.close()


def test_serial_unplug_reopen_with_backoff(tmp_path):
    """Closing the pty master makes the next read fail as an unplug: the port closes,
    reopens after backoff once the device is back, and counts both."""
    port = PtyPort(tmp_path)
    events = []
    link = SerialLink(port.path, "rig1", backoff_initial=0.01, backoff_max=0.05,
                      on_event=lambda e, **k: events.append(e))
    try:
        assert link.open(first=True)
        port.write(b"PING id=1\n")
        deadline = time.monotonic() + 2
        data = b""
        while b"\n" not in data and time.monotonic() < deadline:
            data += link.read()
        assert data == b"PING id=1\n"
        assert link.write(b"PONG id=1\n") and port.read(2.0) == b"PONG id=1\n"
        port.unplug()
        deadline = time.monotonic() + 2
        while link.connected and time.monotonic() < deadline:
            link.read()
        assert not link.connected and "serial_lost" in events
        time.sleep(0.02)
        port.replug()
        deadline = time.monotonic() + 2
        while not link.connected and time.monotonic() < deadline:
            if link.due():
                link.open()
            time.sleep(0.005)
        assert link.connected and link.generation == 2
        assert link.statistics()["disconnects"] == 1
    finally:
        link.close()
        port.close()


def test_serial_port_is_exclusive(tmp_path):
    """A second exclusive open of the same port fails at start-up with a clear error."""
    port = PtyPort(tmp_path)
    a, b = SerialLink(port.path, "r"), SerialLink(port.path, "r")
    try:
        assert a.open(first=True)
        with pytest.raises(PortBusy, match="another process holds this serial port"):
            b.open(first=True)
    finally:
        a.close()
        b.close()
        port.close()


def test_serial_writes_never_block_when_the_rig_stops_reading(tmp_path):
    """Replies to a rig that does not read wait in a bounded buffer; beyond it whole
    lines are dropped and counted; write() returns at once."""
    port = PtyPort(tmp_path)
    link = SerialLink(port.path, "r", out_bound=4096)
    try:
        assert link.open(first=True)
        t0 = time.monotonic()
        line = b"E" * 99 + b"\n"
        results = [link.write(line) for _ in range(20_000)]
        assert time.monotonic() - t0 < 2.0
        assert not all(results) and link.statistics()["dropped_replies"] >= 1
        assert link.pending_out <= 4096
    finally:
        link.close()
        port.close()
        assert not os.path.exists(port.path)


def _until(predicate, timeout=2.0):
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if predicate():
            return True
        time.sleep(0.01)
    return predicate()


def test_publisher_sees_subscriptions_by_prefix(ctx):
    """The publisher knows which topics observers want: nobody at first, a subject's
    subscriber by prefix, everything for an empty topic, nobody again once they leave."""
    pub = zlink.PubLink(ctx, "tcp://127.0.0.1:*")
    try:
        assert not pub.wants("m1")
        one = zlink.SubLink(ctx, pub.endpoint, topics=("m1",))
        assert _until(lambda: pub.wants("m1"))
        assert pub.wants("m10") and not pub.wants("m2")  # prefix match, as SUB filters
        everyone = zlink.SubLink(ctx, pub.endpoint)
        assert _until(lambda: pub.wants("m2"))
        pub.publish("m2", b"hello")
        assert everyone.recv(2000) == ("m2", b"hello")
        everyone.close()
        one.close()
        assert _until(lambda: not pub.wants("m1") and not pub.wants("m2"))
    finally:
        pub.close()
