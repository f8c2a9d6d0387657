"""``rigloop fit``: fit a stored subject and print the table(s) or JSON."""

from __future__ import annotations

import argparse
from collections.abc import Sequence

from .args import Count, add_json, add_session, add_store, open_store


def add_fit(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("fit", help="fit learner parameters to a subject's responses (needs scipy: the 'fit' extra)")
    add_store(p, "the SQLite store")
    p.add_argument("--learner", action="append", metavar="NAME",
                   help="learner to fit (repeatable: the fits are ranked by AIC; default: the rule file's)")
    add_session(p, "fit only this session (default: every session, in order)")
    p.add_argument("--starts", type=Count(1, 1000), default=4, help="optimiser starts per learner")
    add_json(p, "print the fits as JSON")
    p.set_defaults(func=_run_fit)


def _run_fit(args: argparse.Namespace) -> int:
    return run_command(args.db, args.subject, args.learner, args.session, starts=args.starts, as_json=args.json)


def run_command(db: str, subject: str, learners: Sequence[str] | None = None,
                session: str | None = None, *, starts: int = 4, as_json: bool = False,
                out=None) -> int:
    """``rigloop fit``: fit the stored subject, print the table(s) (or JSON); exit status."""
    import json
    import sys

    from ..core.learners import LEARNERS
    from ..core.names import check_name
    from ..fit import fit_from_store, format_fit, format_ranking
    from ..replay import stored_sessions
    from .progress import Progress

    out = out or sys.stdout
    names = list(learners) if learners else None
    for name in names or ():
        check_name("--learner", "a learner", name, LEARNERS)
    with open_store(db) as store:
        stored_sessions(store, subject, session)
        bar = Progress(0, f"fitting {subject}")
        got = fit_from_store(store, subject, learner=names if names and len(names) > 1 else
                             (names[0] if names else None), session=session, starts=starts,
                             progress=bar)
        bar.close()
    results = got if isinstance(got, list) else [got]
    if as_json:
        doc = {"subject": subject, "session": session, "fits": [r.to_dict() for r in results],
               "ranking": [r.learner for r in sorted(results, key=lambda r: r.aic)]}
        print(json.dumps(doc, indent=2), file=out)
        return 0
    scope = f", session {session}" if session else ", all sessions"
    print(f"subject {subject}{scope}", file=out)
    for r in results:
        print(format_fit(r), file=out)
    if len(results) > 1:
        print("ranking by AIC (lower is better; dAIC > 10: little support, common practice)",
              file=out)
        print(format_ranking(results), file=out)
    return 0
