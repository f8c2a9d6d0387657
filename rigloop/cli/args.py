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


def add_store(p: argparse.ArgumentParser, db_help: str | None = None, *, subject_required: bool = True,
              subject_help: str = "the subject's name, as stored") -> None:
    """``--db`` (required) and ``--subject``: the commands that read a stored subject."""
    p.add_argument("--db", required=True, help=db_help or "the SQLite store (e.g. DATA_DIR/rigloop.sqlite)")
    if subject_required:
        p.add_argument("--subject", required=True, help=subject_help)
    else:
        p.add_argument("--subject", default=None, help=subject_help)


def add_session(p: argparse.ArgumentParser, help: str | None = None) -> None:
    """``--session``: one stored session (default: all of them)."""
    p.add_argument("--session", default=None, help=help or "only this session (default: every session)")


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
    add_data_dir(p, f"find the endpoint in DIR/daemon.json (default: none, use {flag} or its default)")


class Count:
    """An argparse ``type`` for a whole number in ``[low, high]`` (``high`` None: no upper
    bound); a value outside is refused with the range. ``range`` is shown in ``--help``."""

    def __init__(self, low: int, high: int | None = None, kind=int):
        self.low, self.high, self.kind = low, high, kind
        self.__name__ = "number" if kind is float else "whole number"
        self.range = f"{low} or more" if high is None else f"{low} to {high}"

    def __call__(self, text: str):
        try:
            value = self.kind(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"must be a {self.__name__}, {self.range} (got {text!r})") from None
        if not (value >= self.low and (self.high is None or value <= self.high)):
            raise argparse.ArgumentTypeError(f"must be {self.range} (got {text})")
        return value


class Positive(Count):
    """An argparse ``type`` for a number of seconds > 0."""

    def __init__(self):
        super().__init__(0, None, float)
        self.range = "more than 0"

    def __call__(self, text: str):
        value = super().__call__(text)
        if not value > 0 or value != value or value == float("inf"):
            raise argparse.ArgumentTypeError(f"must be {self.range} and finite (got {text})")
        return value


class HelpFormatter(argparse.HelpFormatter):
    """Help that shows each option's range (from a ``Count`` type) and default, unless the
    help text already says it; flags (off unless given) and required options show none."""

    def _get_help_string(self, action: argparse.Action) -> str:
        text = action.help or ""
        extra = []
        rng = getattr(action.type, "range", None)
        if rng and rng not in text:
            extra.append(rng)
        default = action.default
        shown = default not in (None, False, argparse.SUPPRESS) and not action.required and action.nargs != 0
        if shown and "default" not in text:
            extra.append("default: %(default)s")
        return f"{text} ({'; '.join(extra)})".lstrip() if extra else text


def open_store(path: str):
    """The existing store at ``path`` (``--db``), or a sentence saying none is there."""
    import os

    from ..errors import BadArgument
    from ..store import Store

    if not os.path.isfile(path):
        raise BadArgument("--db", "the path of an existing rigloop store file (a daemon keeps one at "
                          "DATA_DIR/rigloop.sqlite)", path)
    return Store(path, create=False)


def rules_name(text: str) -> str:
    """A rule file path (kept as given) or a shipped example's name; an unknown name gets
    the examples and the nearest one."""
    from pathlib import Path

    from ..core.names import check_name
    from ..rules.load import example_names

    p = Path(text)
    if p.suffix == ".toml" or p.exists() or "/" in text:
        return text
    return check_name("rules", "a rule file or a shipped example", text, example_names())
