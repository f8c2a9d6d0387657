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
    p.add_argument("--format", choices=("csv", "jsonl", "parquet", "nwb"), default="csv",
                   help="the file format (parquet: the columns of rigloop.open's DataFrames; needs --out; "
                        "nwb: one file per subject with all its sessions, trials and regressors, "
                        "needs --subject and --out)")
    p.add_argument("--out", default="-", help="output file (default: standard output)")
    p.set_defaults(func=_run_export)


def _run_export(args: argparse.Namespace) -> int:
    from ..offline.tables import export
    from .progress import Progress

    if args.format == "parquet":
        return _run_export_parquet(args)
    if args.format == "nwb":
        return _run_export_nwb(args)
    with open_store(args.db) as store, Progress(0, f"exporting {args.what}", unit="rows") as bar:
        kw = dict(subject=args.subject, session=args.session, progress=bar)
        if args.out == "-":
            n = export(store, args.what, args.format, sys.stdout, **kw)
        else:
            with open(args.out, "w", newline="", encoding="utf-8") as fh:
                n = export(store, args.what, args.format, fh, **kw)
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


def _run_export_nwb(args: argparse.Namespace) -> int:
    from ..errors import BadArgument
    from ..outputs.nwb import write_nwb

    if args.subject is None:
        raise BadArgument("--subject", "the subject to write (an NWB file holds one subject)", None)
    if args.session is not None:
        raise BadArgument("--session", "no session (an NWB file holds all of a subject's sessions)",
                          args.session)
    if args.out == "-":
        raise BadArgument("--out", "a file path for an NWB file (a binary format)", args.out)
    with open_store(args.db) as store:
        done = write_nwb(store, args.subject, args.out)
    print(f"{done.trials:,} trials of {done.sessions} session(s) and {done.td_errors:,} prediction errors "
          f"of subject {args.subject} written to {done.path}", file=sys.stderr)
    return 0


def add_report(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("report", help="figures for a lab meeting: one subject's learning, responses and water, "
                                      "or one figure per cohort (--cohort)")
    add_store(p, subject_required=False,
              subject_help="the subject's name, as stored: one animal's figure (default: none; then --cohort)")
    p.add_argument("--cohort", action="store_true", help="one figure for several animals (see --subjects)")
    p.add_argument("--subjects", default="all", metavar="A,B,...|all",
                   help="the cohort's subjects, comma-separated, or all (default: all)")
    p.add_argument("--out", default=None, help="PNG, or vector PDF/SVG, by extension (default: SUBJECT.png or "
                                               "cohort.png)")
    p.set_defaults(func=_run_report)


def _subject_rows(store, subject: str) -> dict:
    """What the figures read of one stored subject: its rows and its sessions."""
    from ..replay import stored_sessions

    stored_sessions(store, subject)
    return {"quantities": list(store.rows("quantities", subject=subject)),
            "decisions": list(store.rows("decisions", subject=subject)),
            "trials": list(store.rows("trials", subject=subject)), "sessions": store.sessions(subject)}


def _cohort_names(store, text: str) -> list[str]:
    """The subjects ``--subjects`` names (``all``: every stored subject), each checked to be stored."""
    from ..errors import BadArgument

    known = store.subjects()
    names = known if text.strip() == "all" else [n.strip() for n in text.split(",") if n.strip()]
    missing = [n for n in names if n not in known]
    if missing or not names:
        raise BadArgument("--subjects", f"stored subjects, comma-separated, or all (stored: {', '.join(known)})",
                          text)
    return names


def _run_report(args: argparse.Namespace) -> int:
    from ..errors import BadArgument
    from ..outputs.report import check_out, plot_subject, title_for

    if not args.cohort and args.subject is None:
        raise BadArgument("--subject", "a subject's name, or --cohort for a cohort figure", None)
    out = check_out(args.out or ("cohort.png" if args.cohort else f"{args.subject}.png"))  # before any reading
    with open_store(args.db) as store:
        if args.cohort:
            from ..outputs.cohort_report import plot_cohort

            rows = {name: _subject_rows(store, name) for name in _cohort_names(store, args.subjects)}
            plot_cohort(rows, out)
            print(f"wrote {out} ({len(rows)} subjects, {sum(len(r['quantities']) for r in rows.values()):,} trials)")
            return 0
        rows = _subject_rows(store, args.subject)
    plot_subject(rows["quantities"], rows["decisions"], out, trials=rows["trials"], sessions=rows["sessions"],
                 title=title_for(args.subject, rows["sessions"]))
    print(f"wrote {out} ({len(rows['quantities']):,} trials)")
    return 0
