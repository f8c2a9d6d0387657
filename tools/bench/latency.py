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
round trip; ``p99_ms`` = 99th percentile of the trial round trip. Targets: ratio <= 1.5,
p99 <= 5 ms. Use --dir on the disk the daemon will use (on tmpfs fsync is free).

``--breakdown`` adds the median cost of each stage a trial passes, timed in-process on the
daemon's own functions (see ``breakdown``), so a change shows where it costs.

    python tools/bench/latency.py [--json] [--trials 2000] [--dir PATH] [--breakdown]
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

sys.path.insert(0, str(Path(__file__).resolve().parent))
from load import cpu_by_thread, cpu_seconds, per_trial_ms  # noqa: E402  (the same /proc readings as the load bench)

RULES = "tone_reversal"
TARGET_RATIO = 1.5  # median trial round trip / median bare durable echo, same run
TARGET_P99_MS = 5.0
SNAPSHOT_EVERY = 50  # the daemon's default (serve/settings.py)


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


# --------------------------------------------------------------------------- --breakdown


def breakdown(directory: str, trials: int) -> dict:
    """Median µs of each stage a trial passes from socket to reply, in-process, same run.

    The daemon's own functions on one subject's session (tone_reversal): ``decode`` the
    msgpack frame (plain ``unpackb``), ``validate`` it into a TrialEvent (fields, limits, the
    event's checks: ``decode_request`` less that unpack; ``reference_decode`` is the whole
    decode by the readable reference path, which the fast path replaces for the usual trial),
    ``step``, ``snapshot`` (the state's bytes, every ``snapshot_every`` trials; here per
    trial, its median is the cost when it happens), ``commit`` (Store.commit_batch of one
    trial: WAL, synchronous=FULL, checkpoints on their own thread as in the daemon), of which
    ``encode`` (the trial's texts: ``records.prepare``, timed apart on the same values) and
    the rest is SQLite's insert plus the WAL's write and fdatasync, ``reply`` (encode the
    DecisionReply), then what follows
    the reply: ``publish`` (the observer message with its watch summary, packed) and
    ``log`` (the per-trial JSON log line). ``echo`` is the bare floor beside them: unpack,
    append, fdatasync, pack.
    """
    import io

    import structlog

    from rigloop.core import step as core_step
    from rigloop.core.subject import new_subject
    from rigloop.rules import load_example
    from rigloop.serve.observers import wire_pack
    from rigloop.serve.summary import summary
    from rigloop.store import SessionInfo, Store
    from rigloop.wire import packed

    rules = load_example(RULES)
    from rigloop.store.records import prepare

    store = Store(os.path.join(directory, "breakdown.sqlite"), background_checkpoint=True)
    log = structlog.wrap_logger(structlog.PrintLogger(io.StringIO()), processors=[
        structlog.processors.add_log_level, structlog.processors.TimeStamper(fmt="iso", utc=True),
        structlog.processors.JSONRenderer()])
    fd = os.open(os.path.join(directory, "breakdown_echo.log"), os.O_WRONLY | os.O_CREAT | os.O_APPEND, 0o600)
    stages = ("decode", "validate", "step", "snapshot", "commit", "reply", "publish", "log", "echo", "encode",
              "reference_decode")
    times: dict[str, list[float]] = {k: [] for k in stages}
    clock = time.perf_counter
    n_session, decision, state, animal = 0, None, None, None
    t_wall = time.time()
    try:
        while len(times["step"]) < trials:
            if decision is None or decision.end_session:
                n_session += 1
                animal = SimulatedAnimal(f"b{n_session}", seed=n_session, record_truth=False)
                state = new_subject(animal.subject, rules)
                state, decision = core_step.begin_session(state, rules, session="s1", rig="bench-rig",
                                                          wall_time=t_wall)
                store.open_session(SessionInfo.new(animal.subject, "s1", "bench-rig", RULES, rules.text,
                                                   state.context.seed, t_wall))
            event = animal.trial(decision, "bench-rig", t_wall)
            t_wall += 4.0
            frame = wire.encode_request(wire.TrialReport(len(times["step"]) + 1, event))
            t0 = clock()
            msgpack.unpackb(frame, raw=False, strict_map_key=True)  # what the trial fast path starts with
            t1 = clock()
            req = wire.decode_request(frame)
            t2 = clock()
            state, decision, update = core_step.step(state, req.event, rules)
            t3 = clock()
            snap = state.to_bytes()
            t4 = clock()
            store.commit_batch([(req.event, decision, update.quantities, None)])
            t5 = clock()
            wire.encode_reply(wire.DecisionReply(req.id, decision, False))
            t6 = clock()
            wire_pack({"type": "trial", "subject": event.subject, "rig": event.rig, "session": event.session,
                       "trial": event.trial, "decision": decision.to_dict(), "update": update.to_dict(),
                       "summary": summary(state, rules, decision)})
            t7 = clock()
            log.info("trial", subject=event.subject, rig=event.rig, session=event.session, trial=event.trial,
                     latency_ms=0.5, duplicate=False, sent=True)
            t8 = clock()
            body = msgpack.unpackb(frame, raw=False)
            os.write(fd, frame)
            os.fdatasync(fd)
            msgpack.packb({"type": "echo", "id": body.get("id")})
            t9 = clock()
            prepare(req.event, decision, update.quantities, None)
            t10 = clock()
            packed.decode_request_reference(frame)
            t11 = clock()
            del snap
            # validate = the whole decode minus the unpack it starts with
            for name, dt in zip(stages, (t1 - t0, (t2 - t1) - (t1 - t0), t3 - t2, t4 - t3, t5 - t4, t6 - t5,
                                         t7 - t6, t8 - t7, t9 - t8, t10 - t9, t11 - t10), strict=True):
                times[name].append(dt * 1e6)
    finally:
        os.close(fd)
        store.close()
    out = {k: round(statistics.median(v), 1) for k, v in times.items()}
    out["commit_p99"] = round(percentile(times["commit"], 0.99), 1)
    out["echo_p99"] = round(percentile(times["echo"], 0.99), 1)
    return out


BEFORE_REPLY = ("decode", "validate", "step", "commit", "reply")
AFTER_REPLY = ("publish", "log")


def print_breakdown(bd: dict, snapshot_every: int) -> None:
    print("where a trial's time goes (median µs per stage, in-process, same run):")
    before = sum(bd[k] for k in BEFORE_REPLY) + bd["snapshot"] / snapshot_every
    for k in BEFORE_REPLY:
        print(f"  {k:<10} {bd[k]:9.1f}   {100 * bd[k] / before:5.1f}% of the work before the reply")
        if k == "validate" and "reference_decode" in bd:
            print(f"    {'ref.':<8} {bd['reference_decode']:9.1f}   decode + validate by the reference path (the fast "
                  f"path's {bd['decode'] + bd['validate']:.1f} replaces it for the usual trial)")
        if k == "commit" and "encode" in bd:
            print(f"    {'encode':<8} {bd['encode']:9.1f}   of it: the trial's JSON texts; the rest is the SQLite insert, "
                  "the WAL write and its fdatasync")
            print(f"    {'p99':<8} {bd['commit_p99']:9.1f}   (echo p99 {bd['echo_p99']:.1f}; no checkpoint runs inside a commit)")
    print(f"  {'snapshot':<10} {bd['snapshot']:9.1f}   once every {snapshot_every} trials "
          f"({bd['snapshot'] / snapshot_every:.1f} µs a trial), before the reply (stored with its trial)")
    print(f"  {'= before':<10} {before:9.1f}   the reply waits for these")
    for k in AFTER_REPLY:
        print(f"  {k:<10} {bd[k]:9.1f}   after the reply (the next request waits for it, this one does not)")
    print(f"  {'echo':<10} {bd['echo']:9.1f}   the floor: unpack, append, fdatasync, pack")


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--trials", type=int, default=2000)
    ap.add_argument("--dir", default=None, help="directory for the store and the echo log (default: a temp dir)")
    ap.add_argument("--json", action="store_true")
    ap.add_argument("--breakdown", action="store_true",
                    help="also time each stage of a trial in-process (decode, validate, step, commit, reply, "
                         "publish, log) beside the bare echo")
    ap.add_argument("--echo-server", metavar="DIR", help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.echo_server:
        return echo_server(args.echo_server)
    if args.trials < 100:
        ap.error(f"--trials must be at least 100 (50 warm-up trials are not counted), not {args.trials}")

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
        cpu_start = None
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
            if cpu_start is None:
                cpu_start = cpu_seconds(daemon.proc.pid)  # from here: the daemon's CPU time for the counted trials
                threads_start = cpu_by_thread(daemon.proc.pid)
            trial_ms.append((t1 - t0) * 1e3)
            echo_ms.append((t2 - t1) * 1e3)
        cpu_ms = 1e3 * (cpu_seconds(daemon.proc.pid) - cpu_start) / max(1, len(trial_ms) - 1)
        threads_ms = per_trial_ms(threads_start, cpu_by_thread(daemon.proc.pid), len(trial_ms) - 1)
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
        "daemon_cpu_ms_per_trial": round(cpu_ms, 3),
        "daemon_cpu_ms_by_thread": threads_ms,
        "target": {"median_ratio": TARGET_RATIO, "p99_ms": TARGET_P99_MS},
    }
    result["pass"] = result["median_ratio"] <= TARGET_RATIO and result["p99_ms"] <= TARGET_P99_MS
    if args.breakdown:
        with tempfile.TemporaryDirectory(dir=args.dir) as bdir:
            result["breakdown_us"] = breakdown(bdir, min(args.trials, 1000))
    if args.json:
        print(json.dumps(result))
    else:
        print(f"trial round trip  median {med_t:.3f} ms  p99 {result['p99_ms']:.3f} ms  ({len(trial_ms)} trials)")
        print(f"echo + fdatasync  median {med_e:.3f} ms  p99 {result['p99_echo_ms']:.3f} ms")
        print(f"daemon CPU        {result['daemon_cpu_ms_per_trial']:.3f} ms a trial (moves least with the machine's load)")
        if threads_ms:
            print("  by thread       " + ", ".join(f"{k} {v:.3f}" for k, v in threads_ms.items())
                  + " (loop: sockets, decode, step, the commit when idle, replies)")
        print(f"ratio (median)    {result['median_ratio']:.2f}x   target <= {TARGET_RATIO}x, p99 <= "
              f"{TARGET_P99_MS:.0f} ms: {'PASS' if result['pass'] else 'FAIL'}")
        if args.breakdown:
            print()
            print_breakdown(result["breakdown_us"], SNAPSHOT_EVERY)
    return 0


if __name__ == "__main__":
    sys.exit(main())
