"""Sustained load: many rigs at once against one daemon, for a fixed time.

``rigloop serve`` runs as its own process (``tone_reversal``: 2 cues, serial-compound
features, Kalman TD, durable group commits). One client process drives ``--rigs``
DEALER sockets from a single poll loop; each rig runs its own simulated animal, has one
trial in flight at a time (send, wait for the decision, make the next trial from it)
and resends the same trial after ``--timeout`` (Lazy Pirate). Each rig starts a trial
every ``--interval`` seconds on average (default 0.1 s: 100 rigs offer ~1,000 trials/s,
each rig far faster than a real trial), each interval drawn uniformly within
``--jitter`` of it (default ±25%, as tasks jitter their inter-trial intervals) and each
rig starting at a random moment of the first interval, as independent rigs do.
``--jitter 0`` keeps every rig in lockstep from one common start: all 100 trials arrive
together every interval, a worst case no room of real rigs sustains (latency is then
set by the time to step a whole burst). ``--interval 0`` runs closed-loop flat out,
which measures capacity (latency is then rigs / throughput, by Little's law). At the
end the store is read back: every trial a rig got a decision for must be stored
exactly once.

Reported: ``trials_per_s`` (acknowledged trials over the measured time), ``p99_ms``
(send-to-decision at the rig, all rigs), ``lost`` (acknowledged trials missing
from the store, plus trials abandoned after every retry), ``daemon_cpu_ms_per_trial``
(the daemon process's CPU time over the measured window per acknowledged trial: the
figure that moves least with the machine's load, for comparing versions). Targets: paced (``--interval``
> 0) p99 <= 10 ms, 0 lost, >= 95% of the offered rate served; flat out (``--interval 0``)
>= 1,500 trials/s, p99 <= 50 ms, 0 lost.

    python tools/bench/load.py [--json] [--seconds 60] [--rigs 100] [--dir PATH]
"""

from __future__ import annotations

import argparse
import json
import os
import random
import statistics
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from rigloop import wire  # noqa: E402
from rigloop.links import zmq as zlink  # noqa: E402
from rigloop.offline.simulate import SimulatedAnimal  # noqa: E402
from rigloop.store import Store  # noqa: E402
from rigloop.testing import DaemonProcess, ZmqRig  # noqa: E402

RULES = "tone_reversal"


def cpu_seconds(pid: int) -> float:
    """User + system CPU time of process ``pid``, all its threads (Linux /proc; 0.0 elsewhere).

    CPU time per trial barely moves with the machine's load, unlike wall-clock rates, so
    it is the figure to compare two versions by on a shared machine."""
    try:
        with open(f"/proc/{pid}/stat", encoding="ascii") as f:
            fields = f.read().rsplit(")", 1)[1].split()
        return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")
    except (OSError, ValueError, IndexError):
        return 0.0


def cpu_by_thread(pid: int) -> dict[str, float]:
    """User + system CPU seconds of process ``pid`` by kind of thread (Linux /proc; {} elsewhere):
    ``loop`` (the main thread: sockets, decoding, step, replies, and commits made on the loop
    when idle), ``zmq`` (libzmq's I/O threads) and ``other`` (the committer thread and the
    store's checkpoint thread, whose SQLite work mostly runs without the GIL).

    Why: the loop and the committer share one GIL, so what the loop spends per trial bounds
    the daemon's throughput whatever the number of cores."""
    out = {"loop": 0.0, "zmq": 0.0, "other": 0.0}
    tick = os.sysconf("SC_CLK_TCK")
    try:
        tids = os.listdir(f"/proc/{pid}/task")
    except OSError:
        return {}
    for tid in tids:
        try:
            with open(f"/proc/{pid}/task/{tid}/stat", encoding="ascii", errors="replace") as f:
                text = f.read()
        except OSError:
            continue  # a thread that just ended
        name = text[text.index("(") + 1:text.rindex(")")]
        fields = text.rsplit(")", 1)[1].split()
        kind = "loop" if int(tid) == pid else "zmq" if name.startswith("ZMQbg") else "other"
        out[kind] += (int(fields[11]) + int(fields[12])) / tick
    return out


def per_trial_ms(before: dict[str, float], after: dict[str, float], trials: int) -> dict[str, float]:
    """Each kind of thread's CPU ms per trial between two ``cpu_by_thread`` readings."""
    return {k: round(1e3 * (after.get(k, 0.0) - before.get(k, 0.0)) / max(1, trials), 3) for k in after}


class Rig:
    """One simulated rig: a socket, an animal, one request in flight."""

    def __init__(self, ctx, endpoint: str, n: int):
        self.name = f"rig{n:03d}"
        self.link = zlink.DealerLink(ctx, endpoint)
        self.animal = SimulatedAnimal(f"L{n:03d}", seed=n, record_truth=False)  # frames as a rig sends them
        self.session = 0
        self.decision = None
        self.frame = b""
        self.rid = 0
        self.sent_at = 0.0
        self.first_sent = 0.0
        self.tries = 0
        self.kind = ""
        self.wall = time.time()
        self.acked: list[tuple[str, int]] = []
        self.due = 0.0  # when the next trial may start (pacing)
        self.rng = random.Random(n)  # this rig's interval jitter


TARGET_PACED_P99_MS = 10.0  # 100 rigs at 10 trials/s each (--interval 0.1)
TARGET_PACED_SHARE = 0.95  # of the offered rate (the jitter and the measured window's edges take a little)
TARGET_FLAT_RATE = 1500.0  # --interval 0
TARGET_FLAT_P99_MS = 50.0


WINDOW_S = 10.0
DAY_S = 86400.0
MORNING_S = 8 * 3600.0  # each session after the first starts at 08:00 UTC of the next day


def by_window(stamps: list[float], latencies: list[float], width: float) -> list[float]:
    """The p99 (ms) of the latencies seen in each ``width``-second window of the run, in
    order: whether a tail comes from the whole run or from moments of it."""
    bins: dict[int, list[float]] = {}
    for t, ms in zip(stamps, latencies):
        bins.setdefault(int(t // width), []).append(ms)
    out = []
    for k in sorted(bins):
        lat = sorted(bins[k])
        if len(lat) < 100:  # the run's last moments: too few for a p99
            continue
        out.append(round(lat[min(len(lat) - 1, int(0.99 * len(lat)))], 1))
    return out


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seconds", type=float, default=60.0)
    ap.add_argument("--rigs", type=int, default=100)
    ap.add_argument("--interval", type=float, default=0.1,
                    help="each rig starts a trial at most this often (s); 0 = as fast as replies come")
    ap.add_argument("--jitter", type=float, default=0.25,
                    help="each interval is drawn uniformly within this fraction of --interval; 0 = lockstep")
    ap.add_argument("--timeout", type=float, default=2.0, help="resend a request after this many seconds")
    ap.add_argument("--retries", type=int, default=10)
    ap.add_argument("--dir", default=None)
    ap.add_argument("--json", action="store_true")
    args = ap.parse_args(argv)

    tmp = tempfile.TemporaryDirectory(dir=args.dir)
    data = Path(tmp.name) / "data"
    daemon = DaemonProcess(data, [RULES], ["--no-trial-log", "--log-level", "warning", "--no-publish"],
                           publish=None)
    ids = iter(range(1, 1 << 62))
    try:
        daemon.wait_ready()
        ctx = zlink.new_context()
        rigs = [Rig(ctx, daemon.endpoint, n) for n in range(args.rigs)]
        by_socket = {r.link.socket: r for r in rigs}
        poller = zlink.Poller()
        for r in rigs:
            poller.register(r.link.socket)

        def send(r: Rig, req) -> None:
            r.rid = req.id
            r.frame = wire.encode_request(req)
            r.kind = req.type
            r.tries = 1
            r.first_sent = r.sent_at = time.perf_counter()
            r.link.send(r.frame)

        def open_next(r: Rig) -> None:
            if r.session:
                # the next session is the animal's next day, as a lab runs them: on the same day an
                # animal that has earned its day's water has every session end at once, and the
                # rig would measure opening sessions instead of trials
                r.wall = (r.wall // DAY_S + 1) * DAY_S + MORNING_S
            r.session += 1
            send(r, wire.OpenSession(next(ids), r.animal.subject, r.name, f"s{r.session}", RULES, wall_time=r.wall))

        def next_trial(r: Rig) -> None:
            event = r.animal.trial(r.decision, r.name, r.wall)
            r.wall += 4.0
            send(r, wire.TrialReport(next(ids), event))

        def interval(r: Rig) -> float:
            return args.interval * (1.0 + args.jitter * (2.0 * r.rng.random() - 1.0))

        t_start = time.perf_counter()
        for r in rigs:
            if args.jitter:
                r.due = t_start + args.interval * r.rng.random()  # independent rigs start at different moments
            else:
                open_next(r)
        latencies: list[float] = []
        stamps: list[float] = []  # when each latency was seen (s from the start), for the windows
        abandoned = 0
        acked = 0
        start = time.perf_counter()
        end = start + args.seconds
        measuring_from = start + min(2.0, args.seconds / 10)  # skip the first moments (sessions opening)
        acked_at_measure = None
        while True:
            now = time.perf_counter()
            if now >= end:
                break
            if acked_at_measure is None and now >= measuring_from:
                acked_at_measure, t_measure = acked, now
                cpu_at_measure = cpu_seconds(daemon.proc.pid)
                threads_at_measure = cpu_by_thread(daemon.proc.pid)
            for sock in poller.poll(2):
                r = by_socket[sock]
                while True:
                    raw = r.link.recv_nowait()
                    if raw is None:
                        break
                    reply = wire.decode_reply(raw)
                    if reply.id != r.rid:
                        continue  # a late answer to an earlier try
                    t = time.perf_counter()
                    if isinstance(reply, wire.ErrorReply):
                        raise SystemExit(f"{r.name}: error reply {reply.code}: {reply.message}")
                    r.decision = reply.decision
                    if r.kind == "trial":
                        acked += 1
                        r.acked.append((f"s{r.session}", r.decision.trial - 1))
                        if t >= measuring_from:
                            latencies.append((t - r.first_sent) * 1e3)
                            stamps.append(t - start)
                    r.rid = 0
                    r.due = r.first_sent + interval(r)
                    break
            now = time.perf_counter()
            for r in rigs:
                if not r.rid and now >= r.due and now < end:
                    if r.decision is None or r.decision.end_session:
                        open_next(r)
                    else:
                        next_trial(r)
                    continue
                # Lazy Pirate: resend the same frame on timeout
                if r.rid and now - r.sent_at > args.timeout:
                    if r.tries >= args.retries:
                        abandoned += 1
                        r.rid = 0
                        continue
                    r.tries += 1
                    r.sent_at = now
                    r.link.reopen()
                    poller.register(r.link.socket)
                    by_socket[r.link.socket] = r
                    r.link.send(r.frame)
        elapsed = time.perf_counter() - t_measure
        rate = (acked - acked_at_measure) / elapsed
        cpu_ms_per_trial = 1e3 * (cpu_seconds(daemon.proc.pid) - cpu_at_measure) / max(1, acked - acked_at_measure)
        threads_ms = per_trial_ms(threads_at_measure, cpu_by_thread(daemon.proc.pid), acked - acked_at_measure)
        # let in-flight requests finish so the store check is exact
        deadline = time.perf_counter() + 5
        while any(r.rid for r in rigs) and time.perf_counter() < deadline:
            for sock in poller.poll(50):
                r = by_socket[sock]
                raw = r.link.recv_nowait()
                if raw is not None and wire.decode_reply(raw).id == r.rid:
                    r.rid = 0
        with ZmqRig(daemon.endpoint, "status", timeout_s=2.0, retries=2, ctx=ctx) as probe:
            status = probe.status()
        for r in rigs:
            r.link.close()
        ctx.term()
    finally:
        daemon.terminate(timeout=20)
        daemon.close()
    missing = 0  # acknowledged trials not in the store
    with Store(data / "rigloop.sqlite") as store:
        stored = store.statistics()["trials"]
        for r in rigs:
            for session, trial in r.acked:
                if store.last_trial(r.animal.subject, session) < trial:
                    missing += 1
        acked_total = sum(len(r.acked) for r in rigs)
    tmp.cleanup()
    lost = missing + abandoned
    lat = sorted(latencies)
    p99 = lat[min(len(lat) - 1, int(0.99 * len(lat)))] if lat else None
    result = {
        "rigs": args.rigs,
        "seconds": args.seconds,
        "interval_s": args.interval,
        "jitter": args.jitter,
        "trials_per_s": round(rate, 1),
        "p50_ms": round(statistics.median(lat), 3) if lat else None,
        "p99_ms": round(p99, 3) if p99 is not None else None,
        "lost": lost,
        "acked": acked_total,
        "stored": stored,
        "abandoned": abandoned,
        "batch_peak": status["queues"]["batch"]["peak"],
        "daemon_latency_ms": status["latency_ms"],
        "daemon_ms_per_request": round(1e3 * status["busy_s"] / max(1, status["counts"]["requests"]), 3),
        "daemon_cpu_ms_per_trial": round(cpu_ms_per_trial, 3),
        "daemon_cpu_ms_by_thread": threads_ms,
        "p99_ms_by_window": by_window(stamps, latencies, WINDOW_S),
    }
    if args.interval > 0:  # paced: the rigs offer rigs / interval trials/s; all of it must be served
        target = {"trials_per_s": round(TARGET_PACED_SHARE * args.rigs / args.interval, 1),
                  "p99_ms": TARGET_PACED_P99_MS, "lost": 0}
    else:  # flat out: capacity
        target = {"trials_per_s": TARGET_FLAT_RATE, "p99_ms": TARGET_FLAT_P99_MS, "lost": 0}
    result["target"] = target
    result["pass"] = (rate >= target["trials_per_s"] and p99 is not None and p99 <= target["p99_ms"]
                      and lost == 0)
    if args.json:
        print(json.dumps(result))
    else:
        print(f"{args.rigs} rigs for {args.seconds:.0f} s: {rate:.0f} trials/s, p50 {result['p50_ms']} ms, "
              f"p99 {result['p99_ms']} ms, lost {lost} (acked {acked_total}, stored {stored}), "
              f"largest batch {result['batch_peak']}, daemon CPU {result['daemon_cpu_ms_per_trial']} ms a trial")
        windows = result["p99_ms_by_window"]
        if len(windows) > 1:
            print(f"p99 by {WINDOW_S:g} s window (ms): " + ", ".join(f"{w:g}" for w in windows))
        if threads_ms:
            print("daemon CPU by thread (ms a trial): " + ", ".join(f"{k} {v}" for k, v in threads_ms.items()))
        mode = "paced" if args.interval > 0 else "flat out"
        print(f"target ({mode}) >= {target['trials_per_s']:g} trials/s, p99 <= {target['p99_ms']:g} ms, 0 lost: "
              f"{'PASS' if result['pass'] else 'FAIL'}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
