"""Daemon commands: ``serve`` runs it; ``watch``, ``web`` and ``status`` read a running one; ``keys``
makes its CURVE keys.

Each ``add_<name>`` declares a command's arguments; its runner imports the work lazily
(zmq loads only for these commands) and only wires arguments to it.
"""

from __future__ import annotations

import argparse

from .args import (
    Count,
    Positive,
    add_daemon_address,
    add_data_dir,
    add_endpoint,
    add_json,
    rules_name,
)


def add_serve(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("serve", help="run the streaming daemon for rigs (ZeroMQ and serial)")
    p.add_argument("--rules", action="append", metavar="R",
                   help="rule file, directory of rule files, or shipped example name (repeatable; "
                        "required, default: those of --config)")
    add_data_dir(p, "data directory (store, keys, daemon.json; created if missing; "
                    "required, default: that of --config)")
    add_endpoint(p, "--zmq", "rigs")
    add_endpoint(p, "--publish", "observers")
    p.add_argument("--no-publish", action="store_true", help="do not open the observer stream")
    p.add_argument("--serial", action="append", metavar="PORT=RIG",
                   help="a serial port and its rig (repeatable; default: no serial rigs)")
    p.add_argument("--profile", action="append", metavar="RIG=PROFILE",
                   help="rig profile of a rig (repeatable; default: none)")
    p.add_argument("--config", metavar="FILE", help="TOML settings file (command-line options win; default: none)")
    p.add_argument("--insecure", action="store_true",
                   help="allow a non-loopback bind WITHOUT CURVE (anyone on the network can talk to it)")
    p.add_argument("--snapshot-every", type=Count(1), metavar="N",
                   help="snapshot a subject every N trials (1 or more; default 50)")
    p.add_argument("--batch-max", type=Count(1), metavar="N", help="largest group commit (1 or more; default 64)")
    p.add_argument("--require-checksum", action="store_true", default=None, help="serial lines must carry a checksum")
    p.add_argument("--no-trial-log", action="store_true", help="do not log one line per trial")
    p.add_argument("--log-level", default="info", choices=["debug", "info", "warning", "error"],
                   help="the least important log lines shown")
    p.add_argument("--log-format", default=None, choices=["json", "console"],
                   help="log lines as JSON (one object a line) or for people to read "
                        "(default: console when the log goes to a terminal, else json)")
    p.set_defaults(func=_run_serve)


def _run_serve(args: argparse.Namespace) -> int:
    from ..serve.daemon import serve

    settings = _settings(args)
    _check_data_dir(settings.data)
    return serve(settings, log_level=args.log_level, log_format=args.log_format)


def _check_data_dir(path: str) -> None:
    """The data directory must exist or be creatable, and be writable: say so in one
    sentence before the daemon starts, not with a traceback from deep inside it."""
    import tempfile
    from pathlib import Path

    from ..errors import BadArgument

    try:
        Path(path).mkdir(parents=True, exist_ok=True)
        with tempfile.TemporaryFile(dir=path):
            pass
    except OSError as err:
        refused = BadArgument("--data", "a directory this user can create and write", path)
        Exception.__init__(refused, f"'--data' {path}: {err.strerror or err}; give a directory this user can "
                                    "create and write (the store, keys and daemon.json go there)")
        raise refused from None


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
        over["rules"] = tuple(rules_name(r) for r in args.rules)
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
    p.add_argument("--count", type=Count(1), metavar="N", help="exit after N updates (default: run until stopped)")
    p.add_argument("--timeout", type=Positive(), default=None, metavar="S",
                   help="exit after S seconds (default: run until stopped)")
    p.add_argument("--plain", action="store_true", help="no screen redraw: print each table below the last")
    p.set_defaults(func=_run_watch)


def _run_watch(args: argparse.Namespace) -> int:
    from ..serve.watch import main as watch_main

    return watch_main(args)


def add_web(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("web", help="the live room page: every rig and animal of a daemon's data directory")
    add_data_dir(p, "the daemon's data directory (its store, and daemon.json for the observer stream)",
                 required=True)
    p.add_argument("--listen", default="127.0.0.1:8080", metavar="HOST:PORT",
                   help="where the page is served (default 127.0.0.1:8080, loopback; read only, no login)")
    p.add_argument("--publish", metavar="ADDR",
                   help="the daemon's PUB endpoint (default: the one in DIR/daemon.json, looked for until found)")
    p.set_defaults(func=_run_web)


def _run_web(args: argparse.Namespace) -> int:
    from ..outputs.report import plot_subject
    from ..serve.web import serve_web

    return serve_web(args.data, args.listen, publish=args.publish, draw=plot_subject)


def add_status(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("status", help="ask a running daemon for its counts, errors, latency and queues")
    add_daemon_address(p, "--zmq")
    p.add_argument("--key", metavar="FILE",
                   help="this client's CURVE key pair file (NAME.key_secret; default: none, plain loopback)")
    p.add_argument("--server-key", metavar="FILE", help="the daemon's public key file (server.key; default: none)")
    p.add_argument("--timeout", type=Positive(), default=2.0, metavar="S", help="seconds to wait for the answer")
    add_json(p, "print the status map as JSON")
    p.set_defaults(func=_run_status)


def _run_status(args: argparse.Namespace) -> int:
    from ..serve.watch import status_main

    return status_main(args)


def add_keys(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("keys", help="create CURVE keys: the daemon's, or a rig's (added to the allow-list)")
    p.add_argument("which", choices=["server", "rig"], help="server keys, or keys for one rig")
    p.add_argument("name", nargs="?", help="the rig's name (for `keys rig`; not for `keys server`)")
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
