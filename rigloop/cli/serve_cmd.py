"""Daemon commands: ``serve`` runs it; ``watch`` and ``status`` read a running one; ``keys``
makes its CURVE keys.

Each ``add_<name>`` declares a command's arguments; its runner imports the work lazily
(zmq loads only for these commands) and only wires arguments to it.
"""

from __future__ import annotations

import argparse

from .args import add_daemon_address, add_data_dir, add_endpoint, add_json


def add_serve(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("serve", help="run the streaming daemon for rigs (ZeroMQ and serial)")
    p.add_argument("--rules", action="append", metavar="R",
                   help="rule file, directory of rule files, or shipped example name (repeatable)")
    add_data_dir(p, "data directory (store, keys, daemon.json)")
    add_endpoint(p, "--zmq", "rigs")
    add_endpoint(p, "--publish", "observers")
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
    p.set_defaults(func=_run_serve)


def _run_serve(args: argparse.Namespace) -> int:
    from ..serve.daemon import serve

    return serve(_settings(args), log_level=args.log_level)


def _settings(args: argparse.Namespace):
    """The daemon's Settings: the options given, over the --config file when there is one."""
    from dataclasses import replace

    from ..errors import BadArgument
    from ..serve.daemon import Settings

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
    return settings


def _pairs(items, what: str):
    """Repeated ``NAME=VALUE`` options -> ((name, value), ...), or None when none came."""
    from ..errors import BadArgument

    out = []
    for item in items or ():
        left, sep, right = item.partition("=")
        if not sep or not left or not right:
            raise BadArgument(what, "NAME=VALUE", item)
        out.append((left, right))
    return tuple(out) or None


def add_watch(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("watch", help="live table of subjects from a running daemon's observer stream")
    add_daemon_address(p, "--publish")
    p.add_argument("--once", action="store_true", help="print one table after the first update and exit")
    p.add_argument("--count", type=int, metavar="N", help="exit after N updates")
    p.add_argument("--timeout", type=float, default=None, metavar="S", help="exit after S seconds")
    p.add_argument("--plain", action="store_true", help="no screen redraw: print each table below the last")
    p.set_defaults(func=_run_watch)


def _run_watch(args: argparse.Namespace) -> int:
    from ..serve.watch import main as watch_main

    return watch_main(args)


def add_status(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("status", help="ask a running daemon for its counts, errors, latency and queues")
    add_daemon_address(p, "--zmq")
    p.add_argument("--key", metavar="FILE", help="this client's CURVE key pair file (NAME.key_secret)")
    p.add_argument("--server-key", metavar="FILE", help="the daemon's public key file (server.key)")
    p.add_argument("--timeout", type=float, default=2.0, metavar="S")
    add_json(p, "print the status map as JSON")
    p.set_defaults(func=_run_status)


def _run_status(args: argparse.Namespace) -> int:
    from ..serve.watch import status_main

    return status_main(args)


def add_keys(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("keys", help="create CURVE keys: the daemon's, or a rig's (added to the allow-list)")
    p.add_argument("which", choices=["server", "rig"], help="server keys, or keys for one rig")
    p.add_argument("name", nargs="?", help="the rig's name (for `keys rig`)")
    add_data_dir(p, "data directory", required=True)
    p.add_argument("--force", action="store_true", help="replace existing keys")
    p.set_defaults(func=_run_keys)


def _run_keys(args: argparse.Namespace) -> int:
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
