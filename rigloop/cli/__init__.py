"""Command line: argument parsing and wiring only; the work lives in the other rooms.

  main.py         the parser (``build_parser``) and ``main(argv)``; ``COMMANDS`` in --help order
  args.py         argument blocks several commands share (--db/--subject, --session, --json, ...)
  demo_cmd.py     demo
  offline_cmd.py  check, simulate, replay (check_cmd.py: ``run_check``)
  data_cmd.py     import, export, report
  fit_cmd.py      fit (``run_command``)
  serve_cmd.py    serve, watch, status, keys
  progress.py     the progress bar of long offline work

Each command has one ``add_<name>`` function that declares its arguments and sets
``func`` to a small runner that imports its module lazily (so ``rigloop --help`` stays
fast and optional dependencies load only when used).
"""

from .main import COMMANDS, build_parser, main

__all__ = ["COMMANDS", "build_parser", "main"]
