"""``rigloop demo``: the built-in demonstration, end to end."""

from __future__ import annotations

import argparse

from .args import Count


def add_demo(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("demo", help="run the built-in demonstration end to end")
    p.add_argument("--trials", type=Count(1, 100_000), default=None,
                   help="trials per block in part 1 (default: the demo's own)")
    p.add_argument("--data", default=None, help="data directory for part 2 (default: a new temporary one)")
    p.set_defaults(func=_run_demo)


def _run_demo(args: argparse.Namespace) -> int:
    from ..demo import main as demo_main

    return demo_main(args)
