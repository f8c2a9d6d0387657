"""CURVE for the daemon's sockets: whether it is needed (a bind beyond loopback), the
keys and allow-list loaded before anything binds, and the self-test run once the
ROUTER is bound (the daemon refuses to serve if CURVE lets a stranger in)."""

from __future__ import annotations

import secrets
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from ..links import zmq as zlink
from ..links.curve import (
    OPERATOR,
    SecurityError,
    ephemeral_client,
    is_loopback,
    load_allowed,
    load_server_keys,
)
from .settings import Settings

SELFTEST_USER = "#selftest"  # the User-Id of the self-test's listed probe (not a valid rig name)


@dataclass(frozen=True, slots=True)
class CurvePlan:
    """What the daemon binds with: ``server_keys`` None means no CURVE (loopback only,
    or ``insecure``); ``beyond_loopback`` says whether an endpoint is not loopback."""

    beyond_loopback: bool
    server_keys: zlink.CurveServerKeys | None = None
    allowed: dict[bytes, str] = field(default_factory=dict)


def plan_curve(settings: Settings, data: Path) -> CurvePlan:
    """Load the keys if a bind goes beyond loopback (and not ``insecure``); refuse to
    start without CURVE in libzmq or without usable keys (``SecurityError``)."""
    beyond = not is_loopback(settings.zmq) or (settings.publish is not None and not is_loopback(settings.publish))
    if not beyond or settings.insecure:
        return CurvePlan(beyond)
    if not zlink.has_curve():
        raise SecurityError("this libzmq was built without CURVE; binding beyond loopback needs it "
                            "(or --insecure)")
    # checked before anything binds: refuse to start without usable keys
    server = load_server_keys(data)
    return CurvePlan(beyond, server, allowed_keys(data, server))


def allowed_keys(data: Path, server: zlink.CurveServerKeys) -> dict[bytes, str]:
    """Who may connect: the listed rigs, plus the daemon's own key as the operator (whoever
    can read the server secret is trusted already; ZAP lets it in from loopback only)."""
    return {**load_allowed(data), server.public: OPERATOR}


def self_test(ctx: Any, router: zlink.RouterLink, auth: zlink.Authenticator, plan: CurvePlan,
              timeout_s: float, log: Any) -> None:
    """With CURVE on: an unlisted key and a NULL client must be refused, a listed key
    (a temporary one, listed for the test only) must get through.

    Each probe sends a payload with a fresh random nonce, and only that payload counts:
    rigs already connected (retrying while the daemon restarted) may send meanwhile;
    their frames are dropped unanswered (they resend) and never judged as a probe."""
    endpoint = router.endpoint
    if "0.0.0.0" in endpoint:
        endpoint = endpoint.replace("0.0.0.0", "127.0.0.1")
    good = ephemeral_client(plan.server_keys.public)
    auth.set_allowed({**plan.allowed, good.public: SELFTEST_USER})
    probes = [("unlisted", ephemeral_client(plan.server_keys.public), False), ("null", None, False),
              ("listed", good, True)]
    others = 0
    try:
        for name, keys, expect in probes:
            probe = b"#selftest:" + secrets.token_hex(16).encode()
            client = zlink.DealerLink(ctx, endpoint, curve=keys)
            try:
                client.send(probe)
                got, skipped = _await_probe(router, probe, timeout_s if expect else timeout_s / 2)
                others += skipped
                passed = (got is not None and got.user_id == SELFTEST_USER) if expect else got is None
                if not passed:
                    raise SecurityError(f"CURVE self-test failed: a {name} client was "
                                        f"{'refused' if expect else 'let through'}; refusing to serve")
            finally:
                client.close()
    finally:
        auth.set_allowed(plan.allowed)
    router.read_monitor()
    router.auth_failures = 0
    log.info("curve_self_test_passed", allowed_rigs=sum(r != OPERATOR for r in plan.allowed.values()),
             rig_frames_dropped=others)


def _await_probe(router: zlink.RouterLink, probe: bytes, wait_s: float) -> tuple[zlink.Incoming | None, int]:
    """The probe's own frame if it arrives within ``wait_s`` (else None), and how many
    other frames (rigs' messages, left unanswered) came meanwhile."""
    deadline = time.monotonic() + wait_s
    others = 0
    while time.monotonic() < deadline:
        if not router.socket.poll(20):
            continue
        while (msg := router.recv()) is not None:
            if msg.payload == probe:
                return msg, others
            others += 1
    return None, others
