"""The ``rigloop`` parser and ``main(argv)``: every command's arguments, then its runner.

The commands are declared by family (``demo_cmd``, ``offline_cmd``, ``data_cmd``,
``fit_cmd``, ``serve_cmd``); ``COMMANDS`` lists them in the order ``--help`` shows.
``main`` turns every failure into one sentence on stderr and exit status 2 (argparse's
own usage errors too); ``--debug`` shows the traceback instead. A command's negative
verdict (``check``: the file is invalid; ``replay``: decisions differ) stays status 1.
"""

from __future__ import annotations

import argparse
import re
import sys

from ..core.names import closest
from ..errors import RigloopError
from ..version import __version__
from .args import HelpFormatter
from .compare_cmd import add_compare
from .data_cmd import add_export, add_import, add_report
from .demo_cmd import add_demo
from .fit_cmd import add_fit
from .offline_cmd import add_check, add_replay, add_simulate
from .predictive_cmd import add_predictive
from .psychometric_cmd import add_psychometric
from .serve_cmd import add_keys, add_serve, add_status, add_watch, add_web
from .two_step_cmd import add_two_step
from .water_cmd import add_water

COMMANDS = [add_demo, add_check, add_import, add_replay, add_export, add_simulate, add_compare, add_report, add_fit,
            add_psychometric, add_predictive,
            add_serve, add_watch, add_web, add_status, add_keys, add_water, add_two_step]


class Parser(argparse.ArgumentParser):
    """argparse with rigloop's help (ranges and defaults shown) and a "did you mean" on an
    unknown choice (a command, ``--what``, ...); the subcommands' parsers are of this class too."""

    def __init__(self, *args, **kwargs):
        kwargs.setdefault("formatter_class", HelpFormatter)
        super().__init__(*args, **kwargs)

    def error(self, message: str):
        self.print_usage(sys.stderr)
        self.exit(2, f"{self.prog}: error: {_with_suggestion(message)}\n")


def _with_suggestion(message: str) -> str:
    """argparse's "invalid choice: 'x' (choose from 'a', 'b')" plus the nearest choice."""
    found = re.search(r"invalid choice: '([^']*)' \(choose from (.*)\)", message)
    if not found:
        return message
    near = closest(found.group(1), re.findall(r"'([^']*)'", found.group(2)))
    return f"{message}; did you mean {near!r}?" if near else message


def build_parser() -> argparse.ArgumentParser:
    parser = Parser(
        prog="rigloop",
        description="Adaptive, Bayesian trial scheduling beside behavioural rig controllers.",
    )
    parser.add_argument("--version", action="version", version=f"rigloop {__version__}")
    parser.add_argument("--debug", action="store_true", help="on a failure, show the full traceback")
    parser.add_argument("--quiet", action="store_true", help="draw no progress bars")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for add in COMMANDS:
        add(sub)
    for p in sub.choices.values():  # also after the command: `rigloop serve ... --debug`
        p.add_argument("--debug", action="store_true", default=argparse.SUPPRESS,
                       help="on a failure, show the full traceback")
        if "--quiet" not in p._option_string_actions:  # no progress bars (they are off in pipes anyway)
            p.add_argument("--quiet", action="store_true", default=argparse.SUPPRESS,
                           help="draw no progress bars")
    return parser


def unknown_option(parser: argparse.ArgumentParser, argv: list[str]) -> str | None:
    """A sentence for the first ``--option`` the named command does not have (with the
    nearest it has), or None. Checked before parsing, so a mistyped option is named
    even when argparse would first complain that a required one is missing."""
    sub = next((a for a in parser._actions if isinstance(a, argparse._SubParsersAction)), None)
    command = next((a for a in argv if not a.startswith("-")), None)
    if sub is None or command not in sub.choices:
        return None
    known = [o for a in sub.choices[command]._actions for o in a.option_strings if o.startswith("--")]
    for arg in argv:
        if arg == "--":
            break
        flag = arg.partition("=")[0]
        if flag.startswith("--") and flag not in known and not any(k.startswith(flag) for k in known):
            near = closest(flag, known)
            hint = f"did you mean {near}?" if near else f"see `rigloop {command} --help`"
            return f"rigloop {command}: no option {flag}; {hint}"
    return None


def _failure(command: str, err: BaseException) -> str:
    """One sentence for a failure that is not rigloop's own error (a file, a bug)."""
    if isinstance(err, OSError):
        where = f" {err.filename}" if err.filename else ""
        return (f"rigloop {command}: cannot use{where}: {err.strerror or err} "
                "(check that the path exists and that you may read and write it)")
    return (f"rigloop {command}: unexpected {type(err).__name__}: {err} (a fault in rigloop, not in "
            "your input: run again with --debug and report the traceback)")


def main(argv: list[str] | None = None) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    parser = build_parser()
    problem = unknown_option(parser, argv)
    if problem:
        print(problem, file=sys.stderr)
        return 2
    try:
        args = parser.parse_args(argv)
    except SystemExit as done:  # --help, --version (0) or a usage error (2), already printed
        return int(done.code or 0)
    if not getattr(args, "func", None):
        parser.print_help()
        return 2
    if getattr(args, "quiet", False):
        from .progress import set_quiet

        set_quiet(True)
    try:
        return int(args.func(args) or 0)
    except BrokenPipeError:  # output piped into head, less, ...: the reader left
        sys.stderr.close()
        return 0
    except KeyboardInterrupt:
        print(f"rigloop {args.command}: interrupted", file=sys.stderr)
        return 130
    except Exception as err:
        if args.debug:
            raise
        message = f"rigloop {args.command}: {err}" if isinstance(err, RigloopError) else _failure(args.command, err)
        print(message, file=sys.stderr)
        return 2
