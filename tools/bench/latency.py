"""Decision round trip vs a bare ZeroMQ + msgpack echo with one fdatasync, same run.

Two servers run as separate processes on loopback:

  daemon   ``rigloop serve`` with the ``tone_reversal`` rule file: 2 cues, serial-compound
           features, Kalman TD; each trial is stepped and committed durably (SQLite WAL,
           synchronous=FULL) before the reply
  echo     a ROUTER that unpacks each msgpack frame, appends it to a file, fdatasyncs,
           packs a reply and sends it: the floor any durable request/reply must pay

One client alternates between them (trial, echo, trial, echo, ...) so machine noise
hits both alike, and times both the same way: from sending the frame on a DEALER to
holding the reply's bytes (the rig decodes the decision afterwards, outside the timing,
as it would decode any reply). ``median_ratio`` = median trial round trip / median echo
round trip; ``p99_ms`` = 99th percentile of the trial round trip. Targets: ratio <= 2.0,
p99 <= 5 ms. Use --dir on the disk the daemon will use (on tmpfs fsync is free).

    python tools/bench/latency.py [--json] [--trials 2000] [--dir PATH]
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import msgpack

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from rigloop import wire  # noqa: E402
from rigloop.links import zmq as zlink  # noqa: E402
from rigloop.offline.simulate import SimulatedAnimal  # noqa: E402
from rigloop.testing import DaemonProcess, ZmqRig  # noqa: E402

RULES = "tone_reversal"


def echo_server(directory: str) -> int:
    """The baseline server: msgpack echo plus one fdatasync per message."""
    ctx = zlink.new_context()
    sock = zlink.raw_socket(ctx, "router")
    sock.bind("tcp://127.0.0.1:*")
    print(sock.getsockopt_string(zlink.zmq.LAST_ENDPOINT), flush=True)
    fd = os.open(os.path.join(directory, "echo.log"), os.O_WRONLY | os.O_CREAT | os.O_APPEND, 0o600)
    try:
        while True:
            frames = sock.recv_multipart()
            if frames[-1] == b"stop":
                return 0
            body = msgpack.unpackb(frames[-1], raw=False)
            os.write(fd, frames[-1])
            os.fdatasync(fd)
            sock.send_multipart([*frames[:-1], msgpack.packb({"type": "echo", "id": body.get("id")})])
    finally:
        os.close(fd)
        sock.close(0)
        ctx.term()


def percentile(data: list[float], q: float) -> float:
    s = sorted(data)
    return s[min(len(s) - 1, max(0, int(round(q * (len(s) - 1)))))]


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--trials", type=int, default=2000)
    ap.add_argument("--dir", default=None, help="directory for the store and the echo log (default: a temp dir)")
    ap.add_argument("--json", action="store_true")
    ap.add_argument("--echo-server", metavar="DIR", help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.echo_server:
        return echo_server(args.echo_server)

    tmp = tempfile.TemporaryDirectory(dir=args.dir)
    work = Path(tmp.name)
    echo = subprocess.Popen([sys.executable, __file__, "--echo-server", str(work)], stdout=subprocess.PIPE,
                            text=True, env={**os.environ, "PYTHONPATH": str(ROOT)})
    daemon = DaemonProcess(work / "data", [RULES], ["--no-trial-log", "--log-level", "warning"])
    try:
        echo_endpoint = echo.stdout.readline().strip()
        daemon.wait_ready()
        rig = ZmqRig(daemon.endpoint, "bench-rig", timeout_s=5.0, retries=2)
        bare = zlink.DealerLink(rig.ctx, echo_endpoint)
        trial_ms: list[float] = []
        echo_ms: list[float] = []
        n_session = 0
        animal = None
        decision = None
        t_wall = time.time()
        warmup = 50
        while len(trial_ms) < args.trials:
            if decision is None or decision.end_session:
                n_session += 1
                animal = SimulatedAnimal(f"b{n_session}", seed=n_session, record_truth=False)  # frames as a rig sends them
                decision = rig.open(animal.subject, "s1", RULES, wall_time=t_wall).decision
            event = animal.trial(decision, rig.rig, t_wall)
            t_wall += 4.0
            frame = wire.encode_request(wire.TrialReport(rig.next_id(), event))
            # the same frame (size and content) to both servers, alternately
            t0 = time.perf_counter()
            rig.link.send(frame)
            raw = rig.link.recv(5000)
            t1 = time.perf_counter()
            bare.send(frame)
            got = bare.recv(5000)
            t2 = time.perf_counter()
            reply = wire.decode_reply(raw) if raw is not None else None
            if got is None or not isinstance(reply, wire.DecisionReply):
                raise SystemExit(f"bench failed: reply {reply!r}, echo {got!r}")
            decision = reply.decision
            if warmup:
                warmup -= 1
                continue
            trial_ms.append((t1 - t0) * 1e3)
            echo_ms.append((t2 - t1) * 1e3)
        status = rig.status()
        bare.send(b"stop")
        bare.close()
        rig.close()
    finally:
        daemon.terminate()
        daemon.close()
        echo.wait(5)
        tmp.cleanup()
    med_t, med_e = statistics.median(trial_ms), statistics.median(echo_ms)
    result = {
        "trials": len(trial_ms),
        "median_trial_ms": round(med_t, 3),
        "median_echo_ms": round(med_e, 3),
        "median_ratio": round(med_t / med_e, 3),
        "p99_ms": round(percentile(trial_ms, 0.99), 3),
        "p99_echo_ms": round(percentile(echo_ms, 0.99), 3),
        "daemon_p50_ms": status["latency_ms"]["p50"],
        "daemon_p99_ms": status["latency_ms"]["p99"],
        "target": {"median_ratio": 2.0, "p99_ms": 5.0},
    }
    result["pass"] = result["median_ratio"] <= 2.0 and result["p99_ms"] <= 5.0
    if args.json:
        print(json.dumps(result))
    else:
        print(f"trial round trip  median {med_t:.3f} ms  p99 {result['p99_ms']:.3f} ms  ({len(trial_ms)} trials)")
        print(f"echo + fdatasync  median {med_e:.3f} ms  p99 {result['p99_echo_ms']:.3f} ms")
        print(f"ratio (median)    {result['median_ratio']:.2f}x   target <= 2.0x, p99 <= 5 ms: "
              f"{'PASS' if result['pass'] else 'FAIL'}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
