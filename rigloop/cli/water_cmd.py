"""The ``water`` command: the water ledger of a store, and recording a supplement.

``rigloop water --db FILE|--data DIR [--subject S] [--days 14] [--csv OUT]`` prints one
page per cohort (and writes CSV); ``rigloop water add S 0.4mL --note "..." [--day
YYYY-MM-DD] --db FILE`` records water given off the rig. One parser holds both, so every
option is checked against the command's own list.
"""

from __future__ import annotations

import argparse
import os
import sys

from .args import Count, add_data_dir, open_store

_LEDGER_ONLY = ("subject", "days", "until", "csv")
_ADD_ONLY = ("note", "day", "new")


def add_water(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("water", help="the water ledger per animal and lab day; `water add S 0.4mL` records a "
                                     "supplement")
    p.add_argument("words", nargs="*", metavar="add SUBJECT VOLUME",
                   help='nothing: show the ledger; "add SUBJECT VOLUME": record a supplement (0.4mL, 400uL, '
                        '400µL; a bare number is µL)')
    p.add_argument("--db", default=None, help="the SQLite store (default: none, give this or --data)")
    add_data_dir(p, "a daemon's data directory: use DIR/rigloop.sqlite (default: none, give this or --db)")
    p.add_argument("--subject", default=None, help="only this subject (default: every subject)")
    p.add_argument("--days", type=Count(1, 3660), default=14, help="the last this many lab days")
    p.add_argument("--until", default=None, metavar="YYYY-MM-DD",
                   help="the ledger's last lab day (default: the latest day with any record)")
    p.add_argument("--csv", default=None, metavar="OUT", help="also write the ledger as CSV to OUT ('-': stdout; default: no CSV)")
    p.add_argument("--note", default="", help="add: what the supplement was and who gave it (default: no note)")
    p.add_argument("--day", default=None, metavar="YYYY-MM-DD",
                   help="add: the lab day it counts toward (default: the subject's lab day now)")
    p.add_argument("--new", action="store_true",
                   help="add: the subject has no session in the store yet (otherwise an unknown name is refused)")
    p.set_defaults(func=_run_water)


def _run_water(args: argparse.Namespace) -> int:
    from ..errors import BadArgument

    path = _store_path(args)
    if args.words and args.words[0] == "add":
        if len(args.words) != 3:
            raise BadArgument("add", "followed by SUBJECT and VOLUME, e.g. `rigloop water add m01 0.4mL`",
                              " ".join(args.words[1:]))
        _refuse_options(args, _LEDGER_ONLY, "add")
        return _run_add(path, args.words[1], args.words[2], args)
    if args.words:
        raise BadArgument("water", "followed by nothing (the ledger) or by add SUBJECT VOLUME", " ".join(args.words))
    _refuse_options(args, _ADD_ONLY, "the ledger")
    return _run_ledger(path, args)


def _store_path(args: argparse.Namespace) -> str:
    """The store file from ``--db`` or ``--data`` (exactly one)."""
    from ..errors import BadArgument

    if (args.db is None) == (args.data is None):
        raise BadArgument("--db / --data", "exactly one of them", {"--db": args.db, "--data": args.data})
    if args.db is not None:
        return args.db
    from ..serve.daemon import STORE_FILE

    return os.path.join(args.data, STORE_FILE)


def _refuse_options(args: argparse.Namespace, names: tuple[str, ...], where: str) -> None:
    """Options that mean nothing for this use of the command are refused, not ignored."""
    from ..errors import BadArgument

    defaults = {"subject": None, "days": 14, "until": None, "csv": None, "note": "", "day": None, "new": False}
    for name in names:
        if getattr(args, name) != defaults[name]:
            raise BadArgument(f"--{name}", f"left out for {where}", getattr(args, name))


def _run_add(path: str, subject: str, volume: str, args: argparse.Namespace) -> int:
    from ..core.names import closest
    from ..errors import BadArgument
    from ..outputs.water import parse_volume, today

    ul = parse_volume(volume)
    with open_store(path) as store:
        known = store.subjects()
        if subject not in known and not args.new:
            near = closest(subject, known)
            hint = f"did you mean {near!r}? " if near else ""
            raise BadArgument("SUBJECT", f"a subject in the store ({hint}pass --new for an animal not yet on a rig)",
                              subject)
        day = args.day or today(store, subject)
        entry = store.add_supplement(subject, day, ul, args.note)
    print(f"recorded {entry.volume_ul / 1000:.3f} mL for {entry.subject} on lab day {entry.day}"
          + (f" ({entry.note})" if entry.note else ""))
    return 0


def _run_ledger(path: str, args: argparse.Namespace) -> int:
    from ..outputs.water import ledger, printable, write_csv

    with open_store(path) as store:
        rows = ledger(store, subject=args.subject, days=args.days, until=args.until)
        text = printable(store, rows) if rows else "Water ledger: nothing recorded\n"
    sys.stdout.write(text)
    if args.csv == "-":
        write_csv(rows, sys.stdout)
    elif args.csv is not None:
        with open(args.csv, "w", newline="", encoding="utf-8") as fh:
            n = write_csv(rows, fh)
        print(f"{n:,} ledger rows written to {args.csv}", file=sys.stderr)
    return 0
