"""CURVE and the loopback rule: a non-loopback bind needs keys, keys must be private,
only listed rigs get in, a rig is who its key says, and a missing authenticator fails
closed. Nothing leaves 127.0.0.0/8: "non-loopback" is 127.0.0.2."""

from __future__ import annotations

import os
import stat
import time

import pytest

from rigloop import wire
from rigloop.cli import main as cli_main
from rigloop.links import zmq as zlink
from rigloop.links.curve import (
    SecurityError,
    create_rig_keys,
    create_server_keys,
    ephemeral_client,
    is_loopback,
    load_allowed,
    load_client_keys,
    load_server_keys,
)
from rigloop.serve.daemon import Daemon, Settings
from rigloop.testing import RigRefused, RigTimeout, ZmqRig

RULES = "tone_reversal"


class Recorder:
    """A logger that keeps every event (to check what reaches the logs)."""

    def __init__(self):
        self.events = []

    def _log(self, level, event, **kw):
        self.events.append((level, event, kw))

    def __getattr__(self, level):
        return lambda event, **kw: self._log(level, event, **kw)


def _settings(data, **kw):
    return Settings(**{"data": str(data), "rules": (RULES,), "zmq": "tcp://127.0.0.2:*",
                       "publish": "tcp://127.0.0.1:*", "log_trials": False, "selftest_timeout_s": 0.5, **kw})


@pytest.mark.parametrize("endpoint, loop", [
    ("tcp://127.0.0.1:5570", True), ("tcp://localhost:*", True), ("tcp://[::1]:5", True),
    ("ipc:///tmp/x", True), ("tcp://127.0.0.2:5570", False), ("tcp://0.0.0.0:5570", False),
    ("tcp://*:5570", False), ("tcp://eth0:5570", False), ("tcp://10.0.0.5:1", False),
])
def test_is_loopback(endpoint, loop):
    """Only 127.0.0.1, localhost, ::1, ipc and inproc count as loopback."""
    assert is_loopback(endpoint) is loop


def test_curve_is_available():
    """This libzmq has CURVE (the daemon asserts it before a non-loopback bind)."""
    assert zlink.has_curve()


def test_non_loopback_bind_refused_without_keys(tmp_path):
    """No server keys: the daemon refuses to build, naming the command that makes them."""
    with pytest.raises(SecurityError, match="rigloop keys server"):
        Daemon(_settings(tmp_path))


def test_secret_key_must_be_private_and_allow_list_present(tmp_path):
    """A group/world-readable secret key, or a missing allow-list directory, is refused."""
    public, secret = create_server_keys(tmp_path)
    assert stat.S_IMODE(secret.stat().st_mode) == 0o600
    os.chmod(secret, 0o644)
    with pytest.raises(SecurityError, match="readable by group or others"):
        Daemon(_settings(tmp_path))
    os.chmod(secret, 0o600)
    (tmp_path / "keys" / "rigs").rmdir()
    with pytest.raises(SecurityError, match="no allow-list directory"):
        Daemon(_settings(tmp_path))
    with pytest.raises(SecurityError, match="exist already"):
        create_server_keys(tmp_path)


def test_insecure_flag_allows_a_plain_bind(tmp_path):
    """--insecure binds beyond loopback without CURVE, with a loud warning."""
    rec = Recorder()
    d = Daemon(_settings(tmp_path, insecure=True), logger=rec).start_thread()
    try:
        assert not d.endpoints["curve"]
        with ZmqRig(d.endpoints["zmq"], "rig1", timeout_s=2.0, retries=2) as rig:
            assert rig.ping()
    finally:
        d.stop()
        d.join()
    assert any(e == "insecure_bind" and "INSECURE" in kw["message"] for _, e, kw in rec.events)


def test_keys_command_writes_private_keys(tmp_path, capsys):
    """`rigloop keys server|rig NAME` writes the server pair and a listed rig key."""
    assert cli_main(["keys", "server", "--data", str(tmp_path)]) == 0
    assert cli_main(["keys", "rig", "rig7", "--data", str(tmp_path)]) == 0
    assert load_allowed(tmp_path) == {load_client_keys(tmp_path / "keys/issued/rig7.key_secret",
                                                       tmp_path / "keys/server.key").public: "rig7"}
    assert stat.S_IMODE((tmp_path / "keys/issued/rig7.key_secret").stat().st_mode) == 0o600
    assert load_server_keys(tmp_path).public == zlink.load_certificate(tmp_path / "keys/server.key")[0]


@pytest.fixture
def curve_daemon(tmp_path):
    create_server_keys(tmp_path)
    create_rig_keys(tmp_path, "rig1")
    create_rig_keys(tmp_path, "rig2")
    rec = Recorder()
    d = Daemon(_settings(tmp_path), logger=rec).start_thread()
    d.recorder = rec
    yield d
    d.stop()
    d.join()


def _keys(tmp_path, rig):
    return load_client_keys(tmp_path / f"keys/issued/{rig}.key_secret", tmp_path / "keys/server.key")


def test_curve_listed_rig_gets_in_as_itself(curve_daemon, tmp_path):
    """A listed key is served, and the rig is who its key says: a payload naming
    another rig is refused."""
    assert curve_daemon.endpoints["curve"]
    with ZmqRig(curve_daemon.endpoints["zmq"], "rig1", timeout_s=2.0, retries=2, curve=_keys(tmp_path, "rig1")) as rig:
        assert rig.ping()
        assert rig.open("c1", "s1", RULES).decision.trial == 1
        rig.rig = "rig2"  # claim to be the other rig
        with pytest.raises(RigRefused, match="belongs to rig 'rig1'") as e:
            rig.open("c2", "s1", RULES)
        assert e.value.reply.field == "rig"


@pytest.mark.parametrize("who", ["unlisted", "null", "wrong_server_key"])
def test_curve_rejects_strangers(curve_daemon, tmp_path, who):
    """An unlisted key, a NULL (plain) client and a client with the wrong server key get
    no answer at all, and the daemon counts the refused handshakes."""
    server = load_server_keys(tmp_path).public
    keys = {"unlisted": ephemeral_client(server), "null": None,
            "wrong_server_key": ephemeral_client(zlink.curve_keypair()[0])}[who]
    if who == "wrong_server_key":
        listed = _keys(tmp_path, "rig1")
        keys = zlink.CurveClientKeys(listed.public, listed.secret, keys.server)
    with ZmqRig(curve_daemon.endpoints["zmq"], "rig1", timeout_s=0.3, retries=2, curve=keys) as rig:
        with pytest.raises(RigTimeout):
            rig.ping()
    if who == "unlisted":
        deadline = time.monotonic() + 5
        while curve_daemon.status()["queues"]["router"]["auth_failures"] == 0 and time.monotonic() < deadline:
            time.sleep(0.05)
        assert curve_daemon.status()["queues"]["router"]["auth_failures"] >= 1


def test_stopped_authenticator_fails_closed(curve_daemon, tmp_path):
    """With the ZAP handler gone, even a listed key is refused (ZAP_ENFORCE_DOMAIN=1)."""
    curve_daemon.auth.stop()
    with ZmqRig(curve_daemon.endpoints["zmq"], "rig1", timeout_s=0.3, retries=2, curve=_keys(tmp_path, "rig1")) as rig:
        with pytest.raises(RigTimeout):
            rig.ping()


def test_no_key_material_in_logs(curve_daemon, tmp_path):
    """Neither the server's nor a rig's secret key, nor payload bytes, reach the logs."""
    keys = _keys(tmp_path, "rig1")
    with ZmqRig(curve_daemon.endpoints["zmq"], "rig1", timeout_s=2.0, retries=2, curve=keys) as rig:
        rig.open("c3", "s1", RULES)
        rig.link.send(b"\x93garbage-payload")
        assert rig.link.recv(2000) is not None
    text = repr(curve_daemon.recorder.events)
    secret = load_server_keys(tmp_path).secret.decode()
    assert secret not in text and keys.secret.decode() not in text
    assert "garbage-payload" not in text
    assert any(e == "curve_self_test_passed" for _, e, _ in curve_daemon.recorder.events)


def test_error_reply_for_unauthenticated_rig_field_is_decodable(curve_daemon, tmp_path):
    """The wrong-rig error is an ordinary error reply the rig can decode."""
    with ZmqRig(curve_daemon.endpoints["zmq"], "rig2", timeout_s=2.0, retries=2, curve=_keys(tmp_path, "rig1")) as rig:
        reply = rig.request(wire.OpenSession(rig.next_id(), "c4", "rig2", "s1", RULES))
    assert isinstance(reply, wire.ErrorReply) and reply.code == "bad_field"
