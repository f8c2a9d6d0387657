"""Command line: argument parsing and wiring only; the work lives in the modules.

Each command has one ``_add_<name>`` function that declares its arguments and sets
``func`` to a small runner that imports its module lazily (so ``rigloop --help`` stays
fast and optional dependencies load only when used).
"""

from __future__ import annotations

import argparse
import sys

from ..errors import RigloopError
from ..version import __version__


def _add_demo(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("demo", help="run the built-in demonstration end to end")
    p.add_argument("--trials", type=int, default=None, help="trials per block in part 1 (default: the demo's own)")
    p.add_argument("--data", default=None, help="data directory for part 2 (default: a new temporary one)")

    def run(args: argparse.Namespace) -> int:
        from ..demo import main as demo_main

        return demo_main(args)

    p.set_defaults(func=run)


def _add_check(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("check", help="validate a rule file (and a rig profile) and print its plan")
    p.add_argument("rules", help="a rule file path, or the name of a shipped example (e.g. tone_reversal)")
    p.add_argument("--profile", default=None, help="a rig profile path or name from rig_profiles/")

    def run(args: argparse.Namespace) -> int:
        from .check_cmd import run_check

        return run_check(args.rules, args.profile)

    p.set_defaults(func=run)


def _add_replay(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("replay", help="feed stored trials through step; compare with the stored decisions")
    p.add_argument("--db", required=True, help="the SQLite store (e.g. DATA_DIR/rigloop.sqlite)")
    p.add_argument("--subject", required=True)
    p.add_argument("--session", default=None, help="replay up to and including this session")
    p.add_argument("--rules", default=None, help="another rule file (path or example name) to compare with")
    p.add_argument("--limit", type=int, default=20, help="rows of the differences table (default 20)")

    def run(args: argparse.Namespace) -> int:
        from ..replay import format_differences, replay_subject
        from ..rules.load import load_any
        from ..store import Store
        from .progress import Progress

        rules = load_any(args.rules) if args.rules else None
        with Store(args.db, create=False) as store:
            bar = Progress(0, f"replaying {args.subject}")
            result = replay_subject(store, args.subject, session=args.session, rules=rules, progress=bar)
            bar.close()
        print(result.summary())
        table = format_differences(result, args.limit)
        if table:
            print(table)
        # with the session's own rules a difference is a fault; with other rules it is the answer
        return 1 if (result.differing and rules is None) else 0

    p.set_defaults(func=run)


def _add_export(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("export", help="write trials, decisions or per-trial model quantities as CSV or JSONL")
    p.add_argument("--db", required=True)
    p.add_argument("--subject", default=None)
    p.add_argument("--session", default=None)
    p.add_argument("--what", choices=("trials", "decisions", "quantities"), default="trials")
    p.add_argument("--format", choices=("csv", "jsonl"), default="csv")
    p.add_argument("--out", default="-", help="output file (default: standard output)")

    def run(args: argparse.Namespace) -> int:
        from ..offline.tables import export
        from ..store import Store

        with Store(args.db, create=False) as store:
            if args.out == "-":
                n = export(store, args.what, args.format, sys.stdout, subject=args.subject, session=args.session)
            else:
                with open(args.out, "w", newline="", encoding="utf-8") as fh:
                    n = export(store, args.what, args.format, fh, subject=args.subject, session=args.session)
        print(f"{n:,} {args.what} rows written to {args.out if args.out != '-' else 'standard output'}",
              file=sys.stderr)
        return 0

    p.set_defaults(func=run)


def _add_simulate(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("simulate", help="try a rule file on simulated animals before it touches a real one")
    p.add_argument("rules", help="a rule file path or example name")
    p.add_argument("--subjects", type=int, default=8)
    p.add_argument("--sessions", type=int, default=3, help="sessions per subject")
    p.add_argument("--max-trials", type=int, default=500, help="per session")
    p.add_argument("--task", choices=("lick", "choice"), default=None, help="default: from the rule file's cues")
    p.add_argument("--seed", type=int, default=1)
    p.add_argument("--db", default=None, help="also store every simulated trial in this SQLite file")
    p.add_argument("--animal", default="typical", metavar="PRESET",
                   help="the kind of simulated animal (default typical; see rigloop/simulate.py for the presets)")
    p.add_argument("--mix", default=None, metavar="PRESET=FRACTION,...",
                   help="a mix of presets over the subjects instead, e.g. typical=0.75,non_discriminator=0.25")

    def run(args: argparse.Namespace) -> int:
        from ..offline.sweep import print_simulation
        from ..rules.load import load_any

        return print_simulation(load_any(args.rules), subjects=args.subjects, sessions=args.sessions,
                                max_trials=args.max_trials, task=args.task, seed=args.seed, db=args.db,
                                animal=args.animal, mix=args.mix)

    p.set_defaults(func=run)


def _add_report(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("report", help="plot a subject's learning (values ± sd, learning curve, errors)")
    p.add_argument("--db", required=True)
    p.add_argument("--subject", required=True)
    p.add_argument("--out", default=None, help="image path (default: SUBJECT.png)")

    def run(args: argparse.Namespace) -> int:
        from ..outputs.report import plot_subject
        from ..store import Store

        with Store(args.db, create=False) as store:
            q = list(store.rows("quantities", subject=args.subject))
            d = list(store.rows("decisions", subject=args.subject))
            t = list(store.rows("trials", subject=args.subject))
        out = plot_subject(q, d, args.out or f"{args.subject}.png", trials=t, title=f"subject {args.subject}")
        print(f"wrote {out} ({len(q):,} trials)")
        return 0

    p.set_defaults(func=run)


def _add_import(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("import", help="import a CSV trial table through a column mapping (all or nothing)")
    p.add_argument("csv", help="the trial table")
    p.add_argument("--map", required=True, help="the column mapping (TOML)")
    p.add_argument("--db", required=True, help="the SQLite store to import into (created if missing)")
    p.add_argument("--rules", required=True, help="the rule file the sessions ran under (path or example name)")

    def run(args: argparse.Namespace) -> int:
        from ..offline.importer import import_csv
        from ..rules.load import load_any
        from ..store import Store
        from .progress import Progress

        rules = load_any(args.rules)
        with Store(args.db) as store:
            bar = Progress(0, "importing")
            report = import_csv(store, args.csv, args.map, rules, progress=bar)
            bar.close()
        print(report.summary(args.csv))
        return 0

    p.set_defaults(func=run)


def _add_fit(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("fit", help="fit learner parameters to a subject's responses (needs scipy: the 'fit' extra)")
    p.add_argument("--db", required=True, help="the SQLite store")
    p.add_argument("--subject", required=True)
    p.add_argument("--learner", action="append", metavar="NAME",
                   help="learner to fit (repeatable: the fits are ranked by AIC; default: the rule file's)")
    p.add_argument("--session", default=None, help="fit only this session (default: every session, in order)")
    p.add_argument("--starts", type=int, default=4, help="optimiser starts per learner (default 4)")
    p.add_argument("--json", action="store_true", help="print the fits as JSON")

    def run(args: argparse.Namespace) -> int:
        from .fit_cmd import run_command

        return run_command(args.db, args.subject, args.learner, args.session, starts=args.starts,
                           as_json=args.json)

    p.set_defaults(func=run)


COMMANDS = [_add_demo, _add_check, _add_import, _add_replay, _add_export, _add_simulate, _add_report, _add_fit]


# --- daemon commands: serve, watch, status, keys -------------------------------------


def _pairs(items, what: str):
    from ..errors import BadArgument

    out = []
    for item in items or ():
        left, sep, right = item.partition("=")
        if not sep or not left or not right:
            raise BadArgument(what, "NAME=VALUE", item)
        out.append((left, right))
    return tuple(out) or None


def _add_serve(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("serve", help="run the streaming daemon for rigs (ZeroMQ and serial)")
    p.add_argument("--rules", action="append", metavar="R",
                   help="rule file, directory of rule files, or shipped example name (repeatable)")
    p.add_argument("--data", metavar="DIR", help="data directory (store, keys, daemon.json)")
    p.add_argument("--zmq", metavar="ADDR", help="ROUTER endpoint for rigs (default tcp://127.0.0.1:5570)")
    p.add_argument("--publish", metavar="ADDR", help="PUB endpoint for observers (default tcp://127.0.0.1:5571)")
    p.add_argument("--no-publish", action="store_true", help="do not open the observer stream")
    p.add_argument("--serial", action="append", metavar="PORT=RIG", help="a serial port and its rig (repeatable)")
    p.add_argument("--profile", action="append", metavar="RIG=PROFILE", help="rig profile of a rig (repeatable)")
    p.add_argument("--config", metavar="FILE", help="TOML settings file (command-line options win)")
    p.add_argument("--insecure", action="store_true",
                   help="allow a non-loopback bind WITHOUT CURVE (anyone on the network can talk to it)")
    p.add_argument("--snapshot-every", type=int, metavar="N", help="snapshot a subject every N trials (default 50)")
    p.add_argument("--batch-max", type=int, metavar="N", help="largest group commit (default 64)")
    p.add_argument("--require-checksum", action="store_true", default=None, help="serial lines must carry a checksum")
    p.add_argument("--no-trial-log", action="store_true", help="do not log one line per trial")
    p.add_argument("--log-level", default="info", choices=["debug", "info", "warning", "error"])

    def run(args: argparse.Namespace) -> int:
        from dataclasses import replace

        from ..errors import BadArgument
        from ..serve.daemon import Settings, serve

        over = dict(data=args.data, rules=tuple(args.rules) if args.rules else None, zmq=args.zmq,
                    publish="" if args.no_publish else args.publish, serial=_pairs(args.serial, "--serial"),
                    profiles=_pairs(args.profile, "--profile"), insecure=True if args.insecure else None,
                    snapshot_every=args.snapshot_every, batch_max=args.batch_max,
                    require_checksum=args.require_checksum, log_trials=False if args.no_trial_log else None)
        if args.config:
            settings = Settings.from_toml(args.config, **over)
        else:
            if not args.data or not args.rules:
                raise BadArgument("--data and --rules", "given (or set in --config)", None)
            settings = Settings(**{k: v for k, v in over.items() if v is not None})
        if settings.publish == "":
            settings = replace(settings, publish=None)
        return serve(settings, log_level=args.log_level)

    p.set_defaults(func=run)


def _add_watch(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("watch", help="live table of subjects from a running daemon's observer stream")
    p.add_argument("--publish", metavar="ADDR", help="the daemon's PUB endpoint (default tcp://127.0.0.1:5571)")
    p.add_argument("--data", metavar="DIR", help="find the endpoint in DIR/daemon.json")
    p.add_argument("--once", action="store_true", help="print one table after the first update and exit")
    p.add_argument("--count", type=int, metavar="N", help="exit after N updates")
    p.add_argument("--timeout", type=float, default=None, metavar="S", help="exit after S seconds")
    p.add_argument("--plain", action="store_true", help="no screen redraw: print each table below the last")

    def run(args: argparse.Namespace) -> int:
        from ..serve.watch import main as watch_main

        return watch_main(args)

    p.set_defaults(func=run)


def _add_status(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("status", help="ask a running daemon for its counts, errors, latency and queues")
    p.add_argument("--zmq", metavar="ADDR", help="the daemon's ROUTER endpoint (default tcp://127.0.0.1:5570)")
    p.add_argument("--data", metavar="DIR", help="find the endpoint in DIR/daemon.json")
    p.add_argument("--key", metavar="FILE", help="this client's CURVE key pair file (NAME.key_secret)")
    p.add_argument("--server-key", metavar="FILE", help="the daemon's public key file (server.key)")
    p.add_argument("--timeout", type=float, default=2.0, metavar="S")
    p.add_argument("--json", action="store_true", help="print the status map as JSON")

    def run(args: argparse.Namespace) -> int:
        from ..serve.watch import status_main

        return status_main(args)

    p.set_defaults(func=run)


def _add_keys(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("keys", help="create CURVE keys: the daemon's, or a rig's (added to the allow-list)")
    p.add_argument("which", choices=["server", "rig"], help="server keys, or keys for one rig")
    p.add_argument("name", nargs="?", help="the rig's name (for `keys rig`)")
    p.add_argument("--data", metavar="DIR", required=True, help="data directory")
    p.add_argument("--force", action="store_true", help="replace existing keys")

    def run(args: argparse.Namespace) -> int:
        from ..errors import BadArgument
        from ..links import curve as security

        if args.which == "server":
            public, secret = security.create_server_keys(args.data, force=args.force)
            print(f"server public key: {public}  (give this file to every rig)")
            print(f"server secret key: {secret}  (mode 0600; never copy it)")
            return 0
        if not args.name:
            raise BadArgument("name", "a rig name after `keys rig`", None)
        listed, secret = security.create_rig_keys(args.data, args.name, force=args.force)
        print(f"rig {args.name!r} allowed: {listed}")
        print(f"rig key pair: {secret}  (copy it to the rig's controller, then delete it here)")
        return 0

    p.set_defaults(func=run)


COMMANDS += [_add_serve, _add_watch, _add_status, _add_keys]


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="rigloop",
        description="Adaptive, Bayesian trial scheduling beside behavioural rig controllers.",
    )
    parser.add_argument("--version", action="version", version=f"rigloop {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for add in COMMANDS:
        add(sub)
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "func", None):
        parser.print_help()
        return 2
    try:
        return int(args.func(args) or 0)
    except RigloopError as err:
        print(f"rigloop {args.command}: {err}", file=sys.stderr)
        return 1
    except KeyboardInterrupt:
        print(f"rigloop {args.command}: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:  # output piped into head, less, ...: the reader left
        sys.stderr.close()
        return 0
