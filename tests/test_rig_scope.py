"""Rig scope under CURVE: a rig's key may query only subjects whose sessions ran on that
rig, ``status`` is for the operator (the daemon's own key, from loopback), and the
allow-list is re-read without a restart (on SIGHUP, and when its files change): an added
key gets in, a removed key is cut off. Real daemons, real CURVE sockets; "non-loopback"
is 127.0.0.2, as in test_security.py."""

from __future__ import annotations

import signal
import time

import msgpack
import pytest

from rigloop import wire
from rigloop.links.curve import create_rig_keys, create_server_keys, load_client_keys
from rigloop.serve.daemon import Daemon, Settings
from rigloop.testing import DaemonProcess, RigRefused, RigTimeout, ZmqRig

RULES = "tone_reversal"


class Recorder:
    """A logger that keeps every event (to see what the daemon logged)."""

    def __init__(self):
        self.events = []

    def __getattr__(self, level):
        return lambda event, **kw: self.events.append((level, event, kw))

    def find(self, name):
        return [kw for _, e, kw in self.events if e == name]


def _keys(data, rig):
    return load_client_keys(data / f"keys/issued/{rig}.key_secret", data / "keys/server.key")


def _operator(data):
    """The operator's keys: the daemon's own pair, as `rigloop status --key` loads them."""
    return load_client_keys(data / "keys/server.key_secret", data / "keys/server.key")


def _wait_for(pred, what, timeout=10.0):
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if pred():
            return
        time.sleep(0.05)
    raise AssertionError(f"timed out waiting for {what}")


@pytest.fixture
def keyed(tmp_path):
    create_server_keys(tmp_path)
    create_rig_keys(tmp_path, "rig1")
    create_rig_keys(tmp_path, "rig2")
    rec = Recorder()
    d = Daemon(Settings(data=str(tmp_path), rules=(RULES,), zmq="tcp://127.0.0.2:*", publish=None,
                        log_trials=False, selftest_timeout_s=0.5), logger=rec).start_thread()
    d.recorder = rec
    yield d
    d.stop()
    d.join()


def _status_reply(rig: ZmqRig) -> dict:
    """Send a status request and return the raw reply map (status or error)."""
    rid = rig.next_id()
    rig.link.send(msgpack.packb({"type": "status", "id": rid}))
    raw = rig.link.recv(3000)
    assert raw is not None, "no reply to status"
    return msgpack.unpackb(raw, raw=False)


def test_a_rig_queries_only_subjects_that_ran_on_it(keyed, tmp_path):
    """rig2 asking about rig1's subject, or about a subject nobody has, gets the same
    bad_field on `subject`; rig1 and the operator get the state."""
    ep = keyed.endpoints["zmq"]
    with ZmqRig(ep, "rig1", timeout_s=2.0, retries=2, curve=_keys(tmp_path, "rig1")) as rig1, \
            ZmqRig(ep, "rig2", timeout_s=2.0, retries=2, curve=_keys(tmp_path, "rig2")) as rig2, \
            ZmqRig(ep, "ops", timeout_s=2.0, retries=2, curve=_operator(tmp_path)) as ops:
        rig1.open("m1", "s1", RULES)
        assert rig1.query("m1").subject == "m1"
        assert ops.query("m1").state["open_session"] == "s1"
        replies = []
        for subject in ("m1", "nobody"):
            with pytest.raises(RigRefused) as e:
                rig2.query(subject)
            replies.append(e.value.reply)
    for reply, subject in zip(replies, ("m1", "nobody"), strict=True):
        assert (reply.code, reply.field) == ("bad_field", "subject")
        assert reply.message == (f"rig 'rig2' has run no session of subject {subject!r}; a rig's key may query "
                                 "only subjects whose sessions ran on that rig")


def test_status_is_for_the_operator_not_for_rigs(keyed, tmp_path):
    """A rig's key asking for status gets bad_field on `type`; the daemon's own key (the
    operator, from loopback) gets the status map."""
    ep = keyed.endpoints["zmq"]
    with ZmqRig(ep, "rig1", timeout_s=2.0, retries=2, curve=_keys(tmp_path, "rig1")) as rig1:
        body = _status_reply(rig1)
    assert body["type"] == "error" and body["code"] == "bad_field" and body["field"] == "type"
    assert body["message"] == ("status is for the operator, not for rig 'rig1': ask from the daemon's machine "
                               "with its own key (server.key_secret)")
    with ZmqRig(ep, "ops", timeout_s=2.0, retries=2, curve=_operator(tmp_path)) as ops:
        status = ops.status()
    assert status["endpoints"]["curve"] is True


def test_operator_key_is_let_in_from_loopback_only():
    """ZAP's address rule for the operator: 127.0.0.0/8, ::1 (also IPv4-mapped) and ipc
    peers are this machine; any other address is not."""
    from rigloop.links.zmq import _loopback_peer

    assert all(_loopback_peer(a) for a in ("127.0.0.1", "127.0.0.2", "::1", "::ffff:127.0.0.1", ""))
    assert not any(_loopback_peer(a) for a in ("10.0.0.5", "192.168.1.2", "::ffff:10.0.0.5", "fe80::1", "junk"))


def test_an_added_key_gets_in_without_a_restart(keyed, tmp_path):
    """`rigloop keys rig rig3` while the daemon runs: rig3 is served within a few seconds."""
    create_rig_keys(tmp_path, "rig3")
    _wait_for(lambda: any("rig3" in kw["added"] for kw in keyed.recorder.find("allow_list_reloaded")),
              "the allow-list to be re-read")
    reload = keyed.recorder.find("allow_list_reloaded")[-1]
    assert reload["reason"] == "file_changed" and reload["rigs"] == 3
    with ZmqRig(keyed.endpoints["zmq"], "rig3", timeout_s=1.0, retries=3, curve=_keys(tmp_path, "rig3")) as rig3:
        assert rig3.ping()
        assert rig3.open("m3", "s1", RULES).decision.trial == 1


def test_a_removed_key_is_cut_off(keyed, tmp_path):
    """Deleting keys/rigs/rig1.key: rig1's next request on its open connection gets no
    answer, its reconnect is refused by ZAP; rig2 carries on."""
    ep = keyed.endpoints["zmq"]
    with ZmqRig(ep, "rig1", timeout_s=0.4, retries=3, curve=_keys(tmp_path, "rig1")) as rig1, \
            ZmqRig(ep, "rig2", timeout_s=2.0, retries=2, curve=_keys(tmp_path, "rig2")) as rig2:
        assert rig1.ping() and rig2.ping()
        (tmp_path / "keys/rigs/rig1.key").unlink()
        _wait_for(lambda: any(kw["removed"] == ["rig1"] for kw in keyed.recorder.find("allow_list_reloaded")),
                  "the removal to be picked up")
        failures = keyed.status()["queues"]["router"]["auth_failures"]
        with pytest.raises(RigTimeout):
            rig1.ping()  # first try on the old connection, then reconnects (refused)
        assert rig1.reopens >= 1
        _wait_for(lambda: keyed.status()["queues"]["router"]["auth_failures"] > failures, "ZAP to refuse rig1")
        assert keyed.status()["counts"]["revoked_dropped"] >= 1
        assert rig2.ping()


def test_an_unreadable_allow_list_is_refused_loudly_and_the_old_one_stays(keyed, tmp_path):
    """A damaged key file: the reload is refused with a log line naming the file, and the
    rigs listed before are still served."""
    (tmp_path / "keys/rigs/rig9.key").write_text("not a key\n", encoding="utf-8")
    _wait_for(lambda: keyed.recorder.find("allow_list_refused"), "the refusal")
    assert "rig9.key" in keyed.recorder.find("allow_list_refused")[0]["error"]
    with ZmqRig(keyed.endpoints["zmq"], "rig1", timeout_s=2.0, retries=2, curve=_keys(tmp_path, "rig1")) as rig1:
        assert rig1.ping()


def test_sighup_rereads_the_allow_list(tmp_path):
    """`kill -HUP` on a serving process re-reads the allow-list (logged as a signal reload)."""
    data = tmp_path / "data"
    create_server_keys(data)
    create_rig_keys(data, "rig1")
    proc = DaemonProcess(data, [RULES], ["--no-trial-log"], zmq="tcp://127.0.0.2:*", publish=None)
    try:
        proc.wait_ready()
        proc.proc.send_signal(signal.SIGHUP)
        _wait_for(lambda: '"reason": "signal"' in (data / "serve.log").read_text(encoding="utf-8"),
                  "the SIGHUP reload in the log")
        assert proc.proc.poll() is None  # SIGHUP does not stop the daemon
        with ZmqRig(proc.endpoint, "rig1", timeout_s=2.0, retries=2, curve=_keys(data, "rig1")) as rig1:
            assert isinstance(rig1.ping(), wire.Pong)
        assert proc.terminate() == 0
    finally:
        proc.close()
