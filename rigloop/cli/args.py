"""Argument blocks that several commands share, each declared once.

The store and its subject, a session, a rule file, JSON output, a data directory and a
daemon's endpoints recur across the commands; each helper adds one of them to a
subparser. Help texts that differ between commands are passed in, so ``--help`` reads
as each command needs.
"""

from __future__ import annotations

import argparse

# a daemon's two endpoints: the ROUTER rigs talk to, the PUB observers listen on
# (the defaults are serve.daemon.DEFAULT_ZMQ / DEFAULT_PUBLISH, spelt out for --help)
ENDPOINTS = {"--zmq": ("ROUTER", "tcp://127.0.0.1:5570"), "--publish": ("PUB", "tcp://127.0.0.1:5571")}


def add_store(p: argparse.ArgumentParser, db_help: str | None = None, *, subject_required: bool = True) -> None:
    """``--db`` (required) and ``--subject``: the commands that read a stored subject."""
    p.add_argument("--db", required=True, help=db_help)
    if subject_required:
        p.add_argument("--subject", required=True)
    else:
        p.add_argument("--subject", default=None)


def add_session(p: argparse.ArgumentParser, help: str | None = None) -> None:
    """``--session``: one stored session (default: all of them)."""
    p.add_argument("--session", default=None, help=help)


def add_rules_file(p: argparse.ArgumentParser, help: str) -> None:
    """The positional rule file: a path or the name of a shipped example."""
    p.add_argument("rules", help=help)


def add_json(p: argparse.ArgumentParser, help: str) -> None:
    """``--json``: print the result as JSON instead of a table."""
    p.add_argument("--json", action="store_true", help=help)


def add_data_dir(p: argparse.ArgumentParser, help: str, *, required: bool = False) -> None:
    """``--data DIR``: a daemon's data directory."""
    p.add_argument("--data", metavar="DIR", required=required, help=help)


def add_endpoint(p: argparse.ArgumentParser, flag: str, role: str | None = None) -> None:
    """``--zmq`` or ``--publish ADDR``: the daemon's own (``role`` says who it is for)
    or, without ``role``, a running daemon's, as a client names it."""
    kind, default = ENDPOINTS[flag]
    what = f"{kind} endpoint for {role}" if role else f"the daemon's {kind} endpoint"
    p.add_argument(flag, metavar="ADDR", help=f"{what} (default {default})")


def add_daemon_address(p: argparse.ArgumentParser, flag: str) -> None:
    """A running daemon's endpoint, given directly or found in its data directory."""
    add_endpoint(p, flag)
    add_data_dir(p, "find the endpoint in DIR/daemon.json")
