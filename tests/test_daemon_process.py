"""The daemon as a process: kill -9 mid-stream, clean SIGTERM, restart recovers."""

from __future__ import annotations

import os
import random
import threading
import time

import pytest

from rigloop.core.step import begin_session, step
from rigloop.core.subject import new_subject
from rigloop.offline.simulate import SimulatedAnimal
from rigloop.replay import replay_subject
from rigloop.rules import load_example
from rigloop.store import Store
from rigloop.testing import DaemonProcess, ZmqRig, drive_session

RULES = "tone_reversal"


def _port(endpoint: str) -> str:
    return endpoint.rsplit(":", 1)[1]


def _offline(subject: str, seed: int, info, trials: int, start: float, trial_s: float):
    """The uninterrupted run: the same animal against ``step`` in memory."""
    rules = load_example(RULES)
    animal = SimulatedAnimal(subject, seed=seed)
    state, decision = begin_session(new_subject(subject, rules), rules, session=info.session, rig=info.rig,
                                    wall_time=info.opened_at, seed=info.seed)
    out = []
    t = start
    while len(out) < trials and not decision.end_session:
        event = animal.trial(decision, info.rig, t)
        state, decision, _ = step(state, event, rules)
        out.append((event, decision))
        t += trial_s
    return out


def test_kill_9_mid_stream_loses_and_doubles_nothing(tmp_path):
    """SIGKILL the daemon several times while a rig streams trials and retries: after
    restarts on the same port, every trial is stored exactly once, the decisions the rig
    got equal the stored ones, an offline replay, and an uninterrupted run."""
    data = tmp_path / "data"
    proc = DaemonProcess(data, [RULES], ["--no-trial-log"])
    procs = [proc]
    try:
        proc.wait_ready()
        endpoint = proc.endpoint
        rig = ZmqRig(endpoint, "rig1", timeout_s=0.25, retries=200)
        kills = 0
        stop = threading.Event()
        rnd = random.Random(5)

        def killer():
            nonlocal kills
            while not stop.is_set() and kills < 3:
                time.sleep(rnd.uniform(0.3, 0.8))
                if stop.is_set():
                    return
                procs[-1].kill()
                kills += 1
                nxt = DaemonProcess(data, [RULES], ["--no-trial-log"], zmq=f"tcp://127.0.0.1:{_port(endpoint)}")
                procs.append(nxt)
                nxt.wait_ready()

        th = threading.Thread(target=killer)
        start = time.time()
        seen = []
        th.start()
        try:
            got = drive_session(rig, SimulatedAnimal("k1", seed=21), session="s1", rules=RULES, trials=250,
                                start_time=start, trial_s=6.0, close=False, on_trial=lambda e, r: seen.append(r))
            while th.is_alive() and kills < 3:  # make sure the kills happened mid-stream
                got += drive_session(rig, SimulatedAnimal("k2", seed=22 + len(got)), session=f"x{len(got)}",
                                     rules=RULES, trials=5, close=False)
        finally:
            stop.set()
            th.join(60)
            rig.close()
        assert kills >= 1 and rig.resends > 0  # the rig did retry through the kills
        procs[-1].terminate()
    finally:
        for p in procs:
            p.close()
    with Store(data / "rigloop.sqlite") as store:
        info = store.session("k1", "s1")
        n = store.last_trial("k1", "s1")
        assert n == 250
        assert [e.trial for e in store.trials("k1", "s1")] == list(range(1, 251))
        stored = list(store.decisions("k1", "s1"))
        result = replay_subject(store, "k1")
    assert result.differing == 0, result.summary()
    k1 = got[:250]
    assert [d.to_dict() for _, d in k1] == [d.to_dict() for d in stored]
    offline = _offline("k1", 21, info, 250, start, 6.0)
    assert [e for e, _ in offline] == [e for e, _ in k1]
    assert [d for _, d in offline] == [d for _, d in k1]


def test_sigterm_shuts_down_cleanly_and_restart_resumes(tmp_path):
    """SIGTERM during a stream: exit status 0 within a few seconds, daemon.json removed,
    and a restarted daemon continues the open session where it stopped."""
    data = tmp_path / "data"
    with DaemonProcess(data, [RULES]) as proc:
        proc.wait_ready()
        rig = ZmqRig(proc.endpoint, "rig1", timeout_s=2.0, retries=3)
        try:
            got = drive_session(rig, SimulatedAnimal("t1", seed=31), session="s1", rules=RULES, trials=30,
                                close=False)
            # rigloop serve keeps what it built at start-up out of the collector's walks
            assert rig.status()["gc"]["frozen"] > 1000
        finally:
            rig.close()
        t0 = time.monotonic()
        assert proc.terminate(timeout=10) == 0, proc.log_tail()
        assert time.monotonic() - t0 < 5
    assert not (data / "daemon.json").exists()
    log = (data / "serve.log").read_text()
    assert '"event": "trial"' in log and '"latency_ms"' in log and "stopped" in log
    with Store(data / "rigloop.sqlite") as store:
        snaps = list(store.snapshots("t1"))
        assert snaps[0].trial == 30  # the shutdown snapshot
    with DaemonProcess(data, [RULES]) as proc:
        proc.wait_ready()
        rig = ZmqRig(proc.endpoint, "rig1", timeout_s=2.0, retries=3)
        try:
            again = rig.open("t1", "s1", RULES)
            assert again.duplicate and again.decision == got[-1][1]
            more = drive_session(rig, SimulatedAnimal("t1", seed=32), session="s1", rules=RULES, trials=5,
                                 first=again.decision)
        finally:
            rig.close()
        assert more[0][0].trial == 31
        assert proc.terminate() == 0
    with Store(data / "rigloop.sqlite") as store:
        assert replay_subject(store, "t1").differing == 0


@pytest.mark.skipif(not hasattr(os, "geteuid"), reason="POSIX only")
def test_second_daemon_on_the_same_serial_port_fails_at_start(tmp_path):
    """Ports are opened exclusively: a second daemon on the same port refuses to start."""
    from rigloop.testing import PtyPort

    port = PtyPort(tmp_path)
    try:
        with DaemonProcess(tmp_path / "a", [RULES], ["--serial", f"{port.path}=rig1"]) as first:
            first.wait_ready()
            second = DaemonProcess(tmp_path / "b", [RULES], ["--serial", f"{port.path}=rig1"])
            try:
                assert second.proc.wait(20) != 0
                assert "exclusively lock" in second.log_tail()
            finally:
                second.close()
    finally:
        port.close()
