"""The ``rigloop`` parser and ``main(argv)``: every command's arguments, then its runner.

The commands are declared by family (``demo_cmd``, ``offline_cmd``, ``data_cmd``,
``fit_cmd``, ``serve_cmd``); ``COMMANDS`` lists them in the order ``--help`` shows.
``main`` turns rigloop's own errors into a message and exit status 1.
"""

from __future__ import annotations

import argparse
import sys

from ..errors import RigloopError
from ..version import __version__
from .data_cmd import add_export, add_import, add_report
from .demo_cmd import add_demo
from .fit_cmd import add_fit
from .offline_cmd import add_check, add_replay, add_simulate
from .serve_cmd import add_keys, add_serve, add_status, add_watch

COMMANDS = [add_demo, add_check, add_import, add_replay, add_export, add_simulate, add_report, add_fit,
            add_serve, add_watch, add_status, add_keys]


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
