"""A virtual rig: simulated animals driving a running ``rigloop serve``, accelerated.

Over ZeroMQ (the daemon's ROUTER; ``--data DIR`` finds it in DIR/daemon.json):

    python tools/virtual_rig.py --data DATA --rules tone_reversal --subjects 3 --trials 200

Over a serial line: ``--pty DIR`` makes a pseudo-terminal behind DIR/rig.tty and waits
for a daemon started with ``--serial DIR/rig.tty=RIG`` to answer on it:

    python tools/virtual_rig.py --pty /tmp/vr --rig bench2 --rules tone_reversal &
    rigloop serve --data DATA --rules tone_reversal --serial /tmp/vr/rig.tty=bench2

Each subject runs one session: the animal makes each next trial from the daemon's last
decision; trial clocks advance ``--trial-s`` per trial however fast the daemon answers.
Retries are Lazy Pirate (resend the same request on timeout, give up after --retries).
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from rigloop.offline.simulate import SimulatedAnimal  # noqa: E402
from rigloop.serve.daemon import read_state_file  # noqa: E402
from rigloop.testing import PtyPort, RigTimeout, SerialRig, ZmqRig, drive_session  # noqa: E402


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    where = ap.add_mutually_exclusive_group(required=True)
    where.add_argument("--zmq", metavar="ADDR", help="the daemon's ROUTER endpoint")
    where.add_argument("--data", metavar="DIR", help="find the endpoint in DIR/daemon.json")
    where.add_argument("--pty", metavar="DIR", help="serve a pseudo-terminal at DIR/rig.tty (serial)")
    ap.add_argument("--rig", default="vrig1", help="this rig's name")
    ap.add_argument("--rules", default="tone_reversal", help="the rule file the sessions name")
    ap.add_argument("--subjects", type=int, default=2)
    ap.add_argument("--trials", type=int, default=100, help="trials per session (fewer if a decision ends it)")
    ap.add_argument("--task", choices=["lick", "choice"], default="lick")
    ap.add_argument("--session", default=None, help="session id (default: vr-<time>)")
    ap.add_argument("--trial-s", type=float, default=8.0, help="simulated seconds per trial")
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--timeout", type=float, default=1.0, help="seconds to wait for each reply")
    ap.add_argument("--retries", type=int, default=10)
    ap.add_argument("--key", metavar="FILE", help="CURVE key pair of this rig (NAME.key_secret)")
    ap.add_argument("--server-key", metavar="FILE", help="the daemon's server.key")
    args = ap.parse_args(argv)

    port = None
    if args.pty:
        Path(args.pty).mkdir(parents=True, exist_ok=True)
        port = PtyPort(args.pty)
        print(f"serial port ready: {port.path}  (start: rigloop serve ... --serial {port.path}={args.rig})",
              flush=True)
        client = SerialRig(port, args.rig, timeout_s=args.timeout, retries=args.retries)
        deadline = time.monotonic() + 120
        while True:
            try:
                client.ping()
                break
            except RigTimeout:
                if time.monotonic() > deadline:
                    print("no daemon answered on the serial port within 120 s", file=sys.stderr)
                    return 1
    else:
        endpoint = args.zmq
        if args.data:
            info = read_state_file(args.data)
            if not info:
                print(f"no running daemon in {args.data} (no daemon.json)", file=sys.stderr)
                return 1
            endpoint = info["zmq"]
        curve = None
        if args.key:
            from rigloop.links.curve import load_client_keys

            curve = load_client_keys(args.key, args.server_key)
        client = ZmqRig(endpoint, args.rig, timeout_s=args.timeout, retries=args.retries, curve=curve)
    session = args.session or f"vr-{int(time.time())}"
    try:
        for n in range(args.subjects):
            sides = {"tone_hi": "left", "tone_lo": "right"} if args.task == "choice" else {}
            animal = SimulatedAnimal(f"{args.rig}-m{n + 1}", task=args.task, sides=sides, seed=args.seed + n)
            t0 = time.perf_counter()
            got = drive_session(client, animal, session=session, rules=args.rules, trials=args.trials,
                                trial_s=args.trial_s)
            dt = time.perf_counter() - t0
            rewarded = sum(1 for e, _ in got if e.outcome.rewarded)
            last = got[-1][1] if got else None
            print(f"{animal.subject}: {len(got)} trials in {dt:.2f} s ({len(got) / max(dt, 1e-9):.0f}/s), "
                  f"{rewarded} rewarded; now stage {last.stage if last else '-'}, block {last.block if last else '-'}"
                  f"{' (session ended by the rules)' if last and last.end_session else ''}")
        print(f"resends {client.resends}, stale replies ignored {client.stale}")
    finally:
        if port is not None:
            port.close()
        elif hasattr(client, "close"):
            client.close()
    return 0


if __name__ == "__main__":
    sys.exit(main())
