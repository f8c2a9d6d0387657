"""CURVE restart under live rigs: a keyed rig that keeps resending (Lazy Pirate) while the
daemon is killed and started again must not make the restarted daemon's self-test fail;
the restarted daemon serves, and the rig's retried trial gets its stored decision.
Nothing leaves 127.0.0.0/8: "non-loopback" is 127.0.0.2, as in test_security.py."""

from __future__ import annotations

import socket
import threading
import time

from rigloop.links.curve import create_rig_keys, create_server_keys, load_client_keys
from rigloop.offline.simulate import SimulatedAnimal
from rigloop.testing import DaemonProcess, ZmqRig

RULES = "tone_reversal"


def _free_port(host: str) -> int:
    """A TCP port free on ``host`` now (the daemon binds it on every start)."""
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind((host, 0))
        return s.getsockname()[1]


def _keys(data, rig):
    return load_client_keys(data / f"keys/issued/{rig}.key_secret", data / "keys/server.key")


def test_restart_with_a_keyed_rig_resending_serves_and_answers_from_the_store(tmp_path):
    """SIGKILL the daemon, let a keyed rig resend its trial every 0.1 s, start the daemon
    on the same port: its self-test ignores the rig's frames (only its own probe counts),
    it serves, and the rig's retry gets the decision stored before the kill."""
    data = tmp_path / "data"
    create_server_keys(data)
    create_rig_keys(data, "rig1")
    endpoint = f"tcp://127.0.0.2:{_free_port('127.0.0.2')}"
    args = ["--no-trial-log"]
    first = DaemonProcess(data, [RULES], args, zmq=endpoint, publish=None)
    procs = [first]
    try:
        first.wait_ready()
        assert first.info["curve"]
        rig = ZmqRig(endpoint, "rig1", timeout_s=2.0, retries=3, curve=_keys(data, "rig1"))
        opened = rig.open("m1", "s1", RULES, wall_time=1_000.0)
        event = SimulatedAnimal("m1", seed=3).trial(opened.decision, "rig1", 1_010.0)
        stored = rig.trial(event)
        assert not stored.duplicate
        first.kill()

        rig.timeout_s, rig.retries = 0.1, 600  # resend every 0.1 s for up to a minute
        got: list = []
        sender = threading.Thread(target=lambda: got.append(rig.trial(event)), daemon=True)
        sender.start()
        time.sleep(0.5)  # the rig is resending to nobody
        resends_before = rig.resends
        second = DaemonProcess(data, [RULES], args, zmq=endpoint, publish=None)
        procs.append(second)
        second.wait_ready()  # raises with the log tail if the self-test refused to serve
        sender.join(30)
        assert not sender.is_alive(), "the rig got no reply from the restarted daemon"
        assert resends_before >= 2  # the rig really was retrying while the daemon started
        reply = got[0]
        assert reply.duplicate and reply.decision == stored.decision
        log = (data / "serve.log").read_text(encoding="utf-8")
        assert "curve_self_test_passed" in log and "CURVE self-test failed" not in log
        rig.close()
    finally:
        for p in procs:
            p.close()
