"""Command line: argument parsing and wiring only; the work lives in the modules.

Each command has one ``_add_<name>`` function that declares its arguments and sets
``func`` to a small runner that imports its module lazily (so ``rigloop --help`` stays
fast and optional dependencies load only when used).
"""

from __future__ import annotations

import argparse
import sys

from . import __version__
from .errors import RigloopError


def _add_demo(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("demo", help="run the built-in demonstration end to end")
    p.add_argument("--trials", type=int, default=None, help="trials per subject (default: the demo's own)")

    def run(args: argparse.Namespace) -> int:
        from .demo import main as demo_main

        return demo_main(args)

    p.set_defaults(func=run)


def _add_check(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("check", help="validate a rule file (and a rig profile) and print its plan")
    p.add_argument("rules", help="a rule file path, or the name of a shipped example (e.g. tone_reversal)")
    p.add_argument("--profile", default=None, help="a rig profile path or name from rig_profiles/")

    def run(args: argparse.Namespace) -> int:
        from .rules.plan import run_check

        return run_check(args.rules, args.profile)

    p.set_defaults(func=run)


COMMANDS = [_add_demo, _add_check]


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
