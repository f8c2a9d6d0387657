"""The daemon end to end: real sockets on random loopback ports, real pseudo-terminals.

Every receive has a timeout that fails with a message (the virtual rigs raise
RigTimeout); sockets close with linger 0.
"""

from __future__ import annotations

import io
import json
import os
import random
import time
from types import SimpleNamespace

import msgpack
import pytest

from rigloop import wire
from rigloop.core.trial import TrialEvent
from rigloop.links import zmq as zlink
from rigloop.offline.simulate import SimulatedAnimal
from rigloop.replay import replay_subject
from rigloop.serve.daemon import Daemon, Settings, read_state_file
from rigloop.store import Store
from rigloop.testing import PtyPort, RigRefused, SerialRig, ZmqRig, drive_session

RULES = "tone_reversal"


def _settings(tmp_path, **kw):
    base = dict(data=str(tmp_path / "data"), rules=(RULES,), zmq="tcp://127.0.0.1:*",
                publish="tcp://127.0.0.1:*", log_trials=False, selftest_timeout_s=0.5)
    base.update(kw)
    return Settings(**base)


@pytest.fixture
def daemon(tmp_path):
    made = []

    def start(**kw):
        d = Daemon(_settings(tmp_path, **kw)).start_thread()
        made.append(d)
        return d

    yield start
    for d in made:
        d.stop()
        d.join()


@pytest.fixture
def rig_factory():
    made = []

    def make(endpoint, rig="rig1", **kw):
        r = ZmqRig(endpoint, rig, **{"timeout_s": 2.0, "retries": 3, **kw})
        made.append(r)
        return r

    yield make
    for r in made:
        r.close()


def _replay_identical(data_dir, subject):
    with Store(os.path.join(data_dir, "rigloop.sqlite")) as store:
        result = replay_subject(store, subject)
    assert result.differing == 0, result.summary()
    return result


# --------------------------------------------------------------------------- zmq


def test_zmq_session_matches_offline_replay(daemon, rig_factory):
    """A session over ZeroMQ: every decision the rig got equals an offline replay of the
    stored trials, and the status map counts what happened."""
    d = daemon()
    rig = rig_factory(d.endpoints["zmq"])
    got = drive_session(rig, SimulatedAnimal("m1", seed=3), session="s1", rules=RULES, trials=60)
    assert len(got) == 60
    with Store(os.path.join(d.settings.data, "rigloop.sqlite")) as store:
        stored = list(store.decisions("m1", "s1"))
        assert [dec.to_dict() for _, dec in got] == [s.to_dict() for s in stored]
    result = _replay_identical(d.settings.data, "m1")
    assert result.trials == 60
    status = rig.status()
    assert status["counts"]["trials"] == 60
    # one rig waits for each reply, so nothing else is ever waiting: the loop commits itself
    assert (status["counts"]["commits_here"], status["counts"]["commits_handed_over"]) == (60, 0)
    assert status["latency_ms"]["n"] >= 60
    assert status["latency_ms"]["p50"] is not None
    assert read_state_file(d.settings.data)["zmq"] == d.endpoints["zmq"]


def test_retry_gets_the_stored_decision_and_counts_once(daemon, rig_factory):
    """A rig resending a trial gets the same decision with duplicate=True; the trial is
    stored once and the model updates once."""
    d = daemon()
    rig = rig_factory(d.endpoints["zmq"])
    animal = SimulatedAnimal("m2", seed=4)
    first = rig.open("m2", "s1", RULES).decision
    ev = animal.trial(first, "rig1", time.time())
    a = rig.trial(ev)
    b = rig.trial(ev)
    c = rig.trial(ev)
    assert not a.duplicate and b.duplicate and c.duplicate
    assert a.decision == b.decision == c.decision
    # the same trial twice in one batch: both answered, one stored
    ev2 = animal.trial(a.decision, "rig1", time.time())
    sock = zlink.raw_socket(rig.ctx, "dealer")
    sock.connect(d.endpoints["zmq"])
    try:
        for rid in (101, 102):
            sock.send(wire.encode_request(wire.TrialReport(rid, ev2)))
        replies = [wire.decode_reply(_recv(sock)) for _ in range(2)]
    finally:
        sock.close(0)
    assert {r.id for r in replies} == {101, 102}
    assert replies[0].decision == replies[1].decision
    assert sorted(r.duplicate for r in replies) == [False, True]
    with Store(os.path.join(d.settings.data, "rigloop.sqlite")) as store:
        assert store.last_trial("m2", "s1") == 2
    assert rig.query("m2").state["trial"] == 2


def test_reopening_an_open_session_resumes_with_the_current_decision(daemon, rig_factory):
    """Re-sending an open for a session already open answers with its current next
    decision (duplicate=True), so a restarted rig can resume."""
    d = daemon()
    rig = rig_factory(d.endpoints["zmq"])
    got = drive_session(rig, SimulatedAnimal("m3", seed=5), session="s1", rules=RULES, trials=5, close=False)
    again = rig.open("m3", "s1", RULES)
    assert again.duplicate and again.decision == got[-1][1]


def test_errors_name_what_was_expected(daemon, rig_factory):
    """Unknown session, out-of-order trial numbers, a conflicting retry, a wrong rig and
    an unknown rule file each get an error reply with the right code."""
    d = daemon()
    rig = rig_factory(d.endpoints["zmq"])
    animal = SimulatedAnimal("m4", seed=6)
    first = rig.open("m4", "s1", RULES).decision
    ev = animal.trial(first, "rig1", time.time())
    with pytest.raises(RigRefused, match="unknown_session") as e:
        rig.trial(TrialEvent.from_dict({**ev.to_dict(), "session": "nope"}))
    assert e.value.reply.field == "session"
    with pytest.raises(RigRefused, match=r"out_of_order.*expected 1") as e:
        rig.trial(TrialEvent.from_dict({**ev.to_dict(), "trial": 3}))
    rig.trial(ev)
    with pytest.raises(RigRefused, match="conflict"):
        rig.trial(TrialEvent.from_dict({**ev.to_dict(), "wall_time": ev.wall_time + 1}))
    with pytest.raises(RigRefused, match="bad_field") as e:
        rig.trial(TrialEvent.from_dict({**ev.to_dict(), "trial": 2, "rig": "rig9"}))
    assert e.value.reply.field == "rig"
    with pytest.raises(RigRefused, match="bad_field") as e:
        rig.open("m5", "s1", "no_such_rules")
    assert e.value.reply.field == "rules"
    with pytest.raises(RigRefused, match="unknown_session"):
        rig.close_session("m4", "nope")
    rig.close_session("m4", "s1")
    with pytest.raises(RigRefused, match="unknown_session"):
        rig.trial(TrialEvent.from_dict({**ev.to_dict(), "trial": 2}))
    # a retry of a trial stored before the close still gets its decision
    assert rig.trial(ev).duplicate
    codes = rig.status()["errors_by_code"]
    assert codes["unknown_session"] == 3 and codes["out_of_order"] == 1 and codes["conflict"] == 1


def test_req_socket_rigs_and_bad_frame_counts(daemon):
    """REQ rigs (empty delimiter frame) are served like DEALER rigs; a message with the
    wrong number of frames gets a bad_message error, and the daemon keeps serving."""
    d = daemon()
    ctx = zlink.new_context()
    req = zlink.DealerLink(ctx, d.endpoints["zmq"], req=True)
    dealer = zlink.raw_socket(ctx, "dealer")
    try:
        for rid in (7, 8):  # REQ_RELAXED + REQ_CORRELATE: a second request without waiting is fine
            req.send(wire.encode_request(wire.Ping(rid)))
            assert wire.decode_reply(_recv_link(req)) == wire.Pong(rid)
        dealer.connect(d.endpoints["zmq"])
        dealer.send_multipart([b"a", b"b", b"c"])
        reply = wire.decode_reply(_recv(dealer))
        assert isinstance(reply, wire.ErrorReply) and reply.code == "bad_message"
        dealer.send(wire.encode_request(wire.Ping(9)))
        assert wire.decode_reply(_recv(dealer)) == wire.Pong(9)
    finally:
        req.close()
        dealer.close(0)
        ctx.term()
    assert d.status()["queues"]["router"]["bad_frames"] == 1


def test_fuzzed_messages_interleaved_with_good_traffic(daemon, rig_factory):
    """Thousands of malformed messages of both kinds (ZeroMQ frames and serial lines),
    interleaved with a good session: the daemon stays up, answers every bad message
    with an error, stores nothing from them, and the good session is unaffected."""
    n_bad = 50_000 if os.environ.get("RIGLOOP_FULL") else 10_000
    import tempfile

    with tempfile.TemporaryDirectory() as pdir:
        port = PtyPort(pdir)
        d = daemon(serial=((port.path, "rig_s"),))
        good = rig_factory(d.endpoints["zmq"])
        serial_rig = SerialRig(port, "rig_s", timeout_s=2.0)
        _wait_serial_up(serial_rig)
        rnd = random.Random(11)
        fuzz = zlink.raw_socket(good.ctx, "dealer")
        fuzz.setsockopt(zlink.zmq.SNDHWM, 0)
        fuzz.connect(d.endpoints["zmq"])
        samples = [_bad_frame(rnd) for _ in range(n_bad)]
        lines = [_bad_line(rnd) for _ in range(n_bad // 4)]
        animal = SimulatedAnimal("m6", seed=7)
        decision = good.open("m6", "s1", RULES).decision
        t = time.time()
        replies = 0
        errs = []
        chunk = max(1, n_bad // 40)
        try:
            for start in range(0, n_bad, chunk):
                for frames in samples[start:start + chunk]:
                    fuzz.send_multipart(frames)
                for line in lines[start // 4:(start + chunk) // 4]:
                    serial_rig.send_raw(line)
                ev = animal.trial(decision, "rig1", t)
                decision = good.trial(ev).decision
                t += 8.0
                while fuzz.poll(0):
                    replies += _check_error(fuzz.recv())
                errs += serial_rig.read_replies(0.02)
            deadline = time.monotonic() + 30
            while replies < n_bad and time.monotonic() < deadline:
                if fuzz.poll(200):
                    replies += _check_error(fuzz.recv())
        finally:
            fuzz.close(0)
        assert replies == n_bad, f"{replies} error replies for {n_bad} bad messages"
        # every bad serial line got exactly one error line
        errs += serial_rig.read_replies(5.0, count=len(lines) - len(errs))
        assert len(errs) == len(lines), f"{len(errs)} error lines for {len(lines)} bad lines"
        assert all(isinstance(r, wire.ErrorReply) for r in errs)
        assert serial_rig.ping()
        status = good.status()
        n_good = (n_bad + chunk - 1) // chunk
        assert status["counts"]["trials"] == n_good
        with Store(os.path.join(d.settings.data, "rigloop.sqlite")) as store:
            assert store.statistics()["trials"] == n_good
            assert store.subjects() == ["m6"]
        _replay_identical(d.settings.data, "m6")
        port.close()


def _check_error(raw: bytes) -> int:
    reply = wire.decode_reply(raw)
    assert isinstance(reply, wire.ErrorReply), reply
    return 1


def _bad_frame(rnd: random.Random) -> list[bytes]:
    """One malformed ZeroMQ message: garbage, truncated or wrong-schema msgpack, an
    unknown type, a trial for a session never opened, or a wrong frame count."""
    kind = rnd.randrange(8)
    good_trial = wire.encode_request(wire.TrialReport(1, TrialEvent("ghost", "rig1", "s9", 1)))
    if kind == 0:
        return [bytes(rnd.randrange(256) for _ in range(rnd.randrange(1, 64)))]
    if kind == 1:
        return [good_trial[: rnd.randrange(1, len(good_trial))]]
    if kind == 2:
        return [msgpack.packb({"type": "trial", "id": rnd.randrange(1000), "event": rnd.choice([1, "x", [], {}])})]
    if kind == 3:
        return [msgpack.packb({"type": rnd.choice(["nope", "", 5, None]), "id": 3})]
    if kind == 4:
        return [good_trial]  # well-formed, but no such session
    if kind == 5:
        return [b"x", b"y"]
    if kind == 6:
        return [b""]
    body = bytearray(good_trial)
    for _ in range(3):
        body[rnd.randrange(len(body))] = rnd.randrange(256)
    frame = bytes(body)
    try:  # a flip can leave a valid message that is still refused (no such session)
        wire.decode_request(frame)
    except wire.MessageError:
        pass
    return [frame]


def _bad_line(rnd: random.Random) -> bytes:
    kind = rnd.randrange(4)
    if kind == 0:
        return b"X" + bytes(rnd.choice(b"abcXYZ=;*0123 \t\x00\xff") for _ in range(rnd.randrange(0, 80))) + b"\n"
    if kind == 1:
        return b"PING id=5*0000\n"  # bad checksum
    if kind == 2:
        return b"TRIAL id=1 subject=ghost rig=rig_s session=s9 trial=1\n"
    return b"Q" * 700 + b"\n"  # too long


def _wait_serial_up(rig: SerialRig, timeout: float = 10.0) -> None:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        try:
            rig.ping()
            return
        except Exception:
            time.sleep(0.05)
    raise AssertionError("the daemon never answered on the serial port")


def _recv(sock, timeout_ms: int = 5000) -> bytes:
    assert sock.poll(timeout_ms), "no reply from the daemon within the timeout"
    return sock.recv_multipart()[-1]


def _recv_link(link, timeout_ms: int = 5000) -> bytes:
    raw = link.recv(timeout_ms)
    assert raw is not None, "no reply from the daemon within the timeout"
    return raw


# --------------------------------------------------------------------------- serial


def test_serial_session_unplug_and_noise(daemon, tmp_path):
    """A session over a pty: line noise costs only its own lines; closing the master
    mid-line (an unplug) and replugging reconnects; the rig's retry of the trial lost
    in flight is accepted once; decisions equal an offline replay."""
    port = PtyPort(tmp_path)
    d = daemon(serial=((port.path, "rig_s"),))
    rig = SerialRig(port, "rig_s", timeout_s=0.5, retries=20)
    _wait_serial_up(rig)
    animal = SimulatedAnimal("m7", seed=8)
    decision = rig.open("m7", "s1", RULES).decision
    t = time.time()
    for n in range(1, 41):
        ev = animal.trial(decision, "rig_s", t)
        t += 8.0
        if n == 10:
            rig.send_raw(b"garbage \xff\xfe line\nTRIAL id=9 broken\n")
        if n == 20:
            rig.send_raw(wire.format_request_line(wire.TrialReport(1, ev))[:25])  # torn line...
            port.unplug()                                                       # ...then unplugged
            time.sleep(0.2)
            port.replug()
        decision = rig.trial(ev).decision
    rig.close_session("m7", "s1")
    status = d.status()
    (link,) = status["serial"]
    assert link["disconnects"] >= 1 and link["opens"] >= 2
    with Store(os.path.join(d.settings.data, "rigloop.sqlite")) as store:
        assert store.last_trial("m7", "s1") == 40
    _replay_identical(d.settings.data, "m7")
    port.close()


# --------------------------------------------------------------------------- observers


def test_watch_table_from_published_updates(daemon, rig_factory):
    """The PUB stream carries each decision and update; the watch table shows the
    subject with its values, stage, block and last decision."""
    from rigloop.serve.watch import main as watch_main

    d = daemon()
    rig = rig_factory(d.endpoints["zmq"])
    out = io.StringIO()
    import threading

    args = SimpleNamespace(publish=d.endpoints["publish"], data=None, once=False, count=6, timeout=20.0, plain=True)
    th = threading.Thread(target=watch_main, args=(args, out))
    th.start()
    time.sleep(0.5)  # let the subscription reach the daemon (PUB drops until then)
    drive_session(rig, SimulatedAnimal("m8", seed=9), session="s1", rules=RULES, trials=10)
    th.join(25)
    assert not th.is_alive(), "watch did not finish"
    text = out.getvalue()
    assert "m8" in text and "tone_hi" in text and "acquisition" in text


def test_status_command_prints_json(daemon, capsys):
    """``rigloop status --data DIR --json`` finds the daemon and prints its status."""
    from rigloop.cli import main

    d = daemon()
    assert main(["status", "--data", d.settings.data, "--json"]) == 0
    out = capsys.readouterr().out  # the daemon thread's own log lines share stdout here
    status = json.loads(out[out.index("\n{\n") + 1:] if not out.startswith("{") else out)
    assert status["pid"] == os.getpid() and "latency_ms" in status and "queues" in status


def test_settings_from_toml(tmp_path):
    """A TOML settings file sets the same fields as the command line; the command line wins."""
    cfg = tmp_path / "serve.toml"
    cfg.write_text('[serve]\ndata = "d"\nrules = ["tone_reversal"]\nbatch_max = 16\n'
                   'serial = { "/dev/ttyX" = "rig3" }\n', encoding="utf-8")
    s = Settings.from_toml(cfg, batch_max=8, zmq=None)
    assert s.batch_max == 8 and s.serial == (("/dev/ttyX", "rig3"),) and s.rules == ("tone_reversal",)
    cfg.write_text('data = "d"\nrules = "x"\nbogus = 1\n', encoding="utf-8")
    with pytest.raises(ValueError, match="bogus"):
        Settings.from_toml(cfg)


# --------------------------------------------------------------------------- pipelined commit


def _wrap_commit(store, before=None, after=None):
    """Wrap a real Store's ``commit_batch``: ``before(items)`` runs first (it may sleep),
    ``after(items, results)`` gets what the real commit returned."""
    real = store.commit_batch

    def commit_batch(items):
        if before is not None:
            before(items)
        results = real(items)
        if after is not None:
            results = after(items, results)
        return results

    store.commit_batch = commit_batch
    return real


def test_no_reply_is_sent_before_its_commit_returned(daemon):
    """With commits slowed down (so stepping overlaps them) and four rigs at once, every
    decision reaches its rig after the commit holding its trial returned (an ack means
    the trial is durable), and the stored sessions equal an offline replay."""
    import threading

    d = daemon()
    returned: dict[tuple, float] = {}

    def after(items, results):
        now = time.monotonic()
        for (ev, *_), res in zip(items, results):
            if res.ok:
                returned[ev.key] = now
        return results

    _wrap_commit(d.store, before=lambda items: time.sleep(0.015), after=after)
    received: list[tuple[tuple, float]] = []
    failures: list[BaseException] = []

    def drive(n: int) -> None:
        try:
            with ZmqRig(d.endpoints["zmq"], f"rig{n}", timeout_s=5.0, retries=2) as rig:
                animal = SimulatedAnimal(f"p{n}", seed=20 + n)
                decision = rig.open(animal.subject, "s1", RULES).decision
                for _ in range(15):
                    ev = animal.trial(decision, f"rig{n}", time.time())
                    reply = rig.trial(ev)
                    received.append((ev.key, time.monotonic()))
                    decision = reply.decision
        except BaseException as err:  # reported by the main thread
            failures.append(err)

    threads = [threading.Thread(target=drive, args=(n,)) for n in range(4)]
    for th in threads:
        th.start()
    for th in threads:
        th.join(60)
    assert not failures, failures
    assert len(received) == 60
    for key, t in received:
        assert key in returned, f"trial {key} was answered but no commit returned it"
        assert t > returned[key], f"trial {key} was answered {returned[key] - t:.4f} s before its commit returned"
    for n in range(4):
        assert _replay_identical(d.settings.data, f"p{n}").trials == 15


def test_trial_stepped_on_a_trial_that_was_not_stored_is_refused(daemon, rig_factory):
    """Trial 3 is not stored (its commit result fails) while trial 4 was already stepped
    on top of it: both get an ``internal`` error, nothing of either is stored, and the
    rig's retries are then accepted as new trials on the state reloaded from the store."""
    import threading

    from rigloop.errors import StoreError
    from rigloop.store import CommitResult

    d = daemon(inline_commit=False)  # trial 3 commits on the committer thread while 4 is stepped
    rig = rig_factory(d.endpoints["zmq"])
    animal = SimulatedAnimal("q1", seed=31)
    decision = rig.open("q1", "s1", RULES).decision
    for _ in range(2):
        decision = rig.trial(animal.trial(decision, "rig1", time.time())).decision
    ev3 = animal.trial(decision, "rig1", time.time())
    ev4 = TrialEvent.from_dict({**ev3.to_dict(), "trial": 4})
    committing = threading.Event()
    fail_once = {ev3.key}
    real = d.store.commit_batch

    def commit_batch(items):
        """The real commit of every item but trial 3 (the first time), which fails."""
        target = [i for i, (ev, *_) in enumerate(items) if ev.key in fail_once]
        if not target:
            return real(items)
        fail_once.clear()
        committing.set()
        time.sleep(0.3)  # trial 4 arrives and is stepped meanwhile
        results = real([it for i, it in enumerate(items) if i not in target])
        for i in target:
            results.insert(i, CommitResult(None, False, StoreError("injected: not stored")))
        return results

    d.store.commit_batch = commit_batch
    sock = zlink.raw_socket(rig.ctx, "dealer")
    sock.connect(d.endpoints["zmq"])
    try:
        sock.send(wire.encode_request(wire.TrialReport(301, ev3)))
        assert committing.wait(5), "trial 3 never reached the store"
        sock.send(wire.encode_request(wire.TrialReport(302, ev4)))
        replies = {r.id: r for r in (wire.decode_reply(_recv(sock)) for _ in range(2))}
    finally:
        sock.close(0)
    for rid in (301, 302):
        assert isinstance(replies[rid], wire.ErrorReply) and replies[rid].code == "internal", replies[rid]
    assert "injected" in replies[301].message and "stepped on" in replies[302].message
    with Store(os.path.join(d.settings.data, "rigloop.sqlite")) as store:
        assert store.last_trial("q1", "s1") == 2
    again = rig.trial(ev3)
    assert not again.duplicate
    rig.trial(animal.trial(again.decision, "rig1", time.time()))
    assert _replay_identical(d.settings.data, "q1").trials == 4
