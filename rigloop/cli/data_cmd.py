"""Commands that move data in and out of a store: ``import``, ``export`` and ``report``.

Each ``add_<name>`` declares a command's arguments; its runner imports the work lazily
and only wires arguments to it (opening the store, the output file, the progress bar).
"""

from __future__ import annotations

import argparse
import sys

from .args import add_session, add_store, open_store


def add_import(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("import", help="import a CSV trial table through a column mapping (all or nothing)")
    p.add_argument("csv", help="the trial table")
    p.add_argument("--map", required=True, help="the column mapping (TOML)")
    p.add_argument("--db", required=True, help="the SQLite store to import into (created if missing)")
    p.add_argument("--rules", required=True, help="the rule file the sessions ran under (path or example name)")
    p.add_argument("--units", default="", metavar="NAME=UNIT,...",
                   help="the table's units when not s and µL, converted on import: time=s|ms (times within a "
                        "trial), wall_time=s|ms (epoch columns), reward=µL|uL|mL|nL (default: s and µL; a column "
                        "that looks like another unit is refused)")
    p.set_defaults(func=_run_import)


def _run_import(args: argparse.Namespace) -> int:
    from ..offline.importer import import_csv
    from ..rules.load import load_any
    from ..store import Store
    from .progress import Progress

    rules = load_any(args.rules)
    with Store(args.db) as store:
        bar = Progress(0, "importing")
        report = import_csv(store, args.csv, args.map, rules, progress=bar, units=args.units)
        bar.close()
    print(report.summary(args.csv))
    return 0


def add_export(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("export", help="write trials, decisions or per-trial model quantities as CSV or JSONL")
    add_store(p, subject_required=False, subject_help="only this subject (default: every subject)")
    add_session(p)
    p.add_argument("--what", choices=("trials", "decisions", "quantities"), default="trials", help="what to write")
    p.add_argument("--format", choices=("csv", "jsonl", "parquet"), default="csv",
                   help="the file format (parquet: the columns of rigloop.open's DataFrames; needs --out)")
    p.add_argument("--out", default="-", help="output file (default: standard output)")
    p.set_defaults(func=_run_export)


def _run_export(args: argparse.Namespace) -> int:
    from ..offline.tables import export

    if args.format == "parquet":
        return _run_export_parquet(args)
    with open_store(args.db) as store:
        if args.out == "-":
            n = export(store, args.what, args.format, sys.stdout, subject=args.subject, session=args.session)
        else:
            with open(args.out, "w", newline="", encoding="utf-8") as fh:
                n = export(store, args.what, args.format, fh, subject=args.subject, session=args.session)
    print(f"{n:,} {args.what} rows written to {args.out if args.out != '-' else 'standard output'}",
          file=sys.stderr)
    return 0


def _run_export_parquet(args: argparse.Namespace) -> int:
    from ..errors import BadArgument
    from ..outputs.frames import export_parquet

    if args.out == "-":
        raise BadArgument("--out", "a file path for a Parquet file (a binary format)", args.out)
    n = export_parquet(args.db, args.what, args.out, subject=args.subject, session=args.session)
    print(f"{n:,} {args.what} rows written to {args.out}", file=sys.stderr)
    return 0


def add_report(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("report", help="plot a subject's learning (values ± sd, learning curve, errors)")
    add_store(p)
    p.add_argument("--out", default=None, help="image path (default: SUBJECT.png)")
    p.set_defaults(func=_run_report)


def _run_report(args: argparse.Namespace) -> int:
    from ..outputs.report import plot_subject
    from ..replay import stored_sessions

    with open_store(args.db) as store:
        stored_sessions(store, args.subject)
        q = list(store.rows("quantities", subject=args.subject))
        d = list(store.rows("decisions", subject=args.subject))
        t = list(store.rows("trials", subject=args.subject))
    out = plot_subject(q, d, args.out or f"{args.subject}.png", trials=t, title=f"subject {args.subject}")
    print(f"wrote {out} ({len(q):,} trials)")
    return 0
