"""The options that say where many simulated animals run: --executor, --scheduler, --workers.

Shared by ``simulate`` and ``compare`` so both read the same way; the work itself is
``rigloop.offline.executors.run_ordered``.
"""

from __future__ import annotations

import argparse

from .args import Count

EXECUTOR_CHOICES = ("serial", "local", "dask")


def add_executor(p: argparse.ArgumentParser) -> None:
    """Add --executor, --scheduler and --workers to a command."""
    p.add_argument("--executor", choices=EXECUTOR_CHOICES, default=None,
                   help="where the animals run: serial (this process), local (a process pool on this machine) "
                        "or dask (a Dask cluster; needs pip install rigloop[cluster]) (default: local, or dask "
                        "when --scheduler is given)")
    p.add_argument("--scheduler", default=None, metavar="tcp://HOST:8786",
                   help="the address of a lab's Dask scheduler to run on (default: none; with --executor dask "
                        "and no address, a Dask cluster on this machine)")
    p.add_argument("--workers", type=Count(1, 4096), default=None,
                   help="worker processes for local and for a Dask cluster on this machine (default: one per core)")


def executor_options(args: argparse.Namespace) -> dict:
    """The keyword arguments of ``run_ordered`` the options ask for."""
    return {"executor": args.executor, "scheduler": args.scheduler, "workers": args.workers}
