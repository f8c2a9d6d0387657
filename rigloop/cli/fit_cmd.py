"""``rigloop fit``: fit a stored subject and print the table(s) or JSON.

Parameter options take NAME=VALUE (``--fix``, ``--start``) or NAME=LOW:HIGH
(``--bounds``), each repeatable; names are checked against the fitted models'.
"""

from __future__ import annotations

import argparse
import math
from collections.abc import Mapping, Sequence
from typing import Any

from .args import Count, add_json, add_session, open_store
from .fit_cohort_cmd import add_cohort_arguments, run_cohort


def add_fit(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("fit", help="fit learner parameters to a subject's responses (needs scipy: the 'fit' extra)")
    p.add_argument("--db", required=True, help="the SQLite store")
    p.add_argument("--subject", default=None,
                   help="the subject's name, as stored (default: none; give it or --subjects)")
    p.add_argument("--learner", action="append", metavar="NAME",
                   help="learner to fit (repeatable: the fits are ranked by AIC; default: the rule file's)")
    add_session(p, "fit only this session (default: every session, in order)")
    p.add_argument("--link", choices=("respond", "choice"), default=None,
                   help="response link: respond (go/no-go logistic) or choice (two-choice softmax) "
                        "(default: from the trials' response kind)")
    p.add_argument("--fix", action="append", type=_pair("--fix", "NAME=VALUE", _number), default=[],
                   metavar="NAME=VALUE", help="pin a parameter at a value (repeatable)")
    p.add_argument("--bounds", action="append", type=_pair("--bounds", "NAME=LOW:HIGH", _range),
                   default=[], metavar="NAME=LOW:HIGH",
                   help="search range of a parameter (repeatable; frees a parameter pinned by default)")
    p.add_argument("--start", action="append", type=_pair("--start", "NAME=VALUE", _number), default=[],
                   metavar="NAME=VALUE",
                   help="first starting value of a parameter (repeatable; frees a parameter pinned by default)")
    p.add_argument("--starts", type=Count(1, 1000), default=4, help="optimiser starts per learner (default 4)")
    p.add_argument("--bootstrap", type=Count(20, 100000), default=0, metavar="N",
                   help="also N parametric-bootstrap refits for percentile intervals (go/no-go fits; "
                        "default: none, profile-likelihood intervals only)")
    p.add_argument("--seed", type=Count(0), default=0, help="seed of the starts and the bootstrap (default 0)")
    add_json(p, "print the fits as JSON (keys: subject, fits, ranking)")
    add_cohort_arguments(p)
    p.set_defaults(func=_run_fit)


def _number(text: str) -> float:
    value = float(text)
    if not math.isfinite(value):
        raise ValueError(text)
    return value


def _range(text: str) -> tuple[float, float]:
    lo, sep, hi = text.partition(":")
    if not sep:
        raise ValueError(text)
    return _number(lo), _number(hi)


def _pair(option: str, form: str, convert):
    """An argparse type for ``NAME=VALUE``; a malformed one is refused showing ``form``."""

    def parse(text: str):
        name, sep, value = text.partition("=")
        try:
            if not sep or not name.strip():
                raise ValueError(text)
            return name.strip(), convert(value.strip())
        except ValueError:
            raise argparse.ArgumentTypeError(f"expected {form}, e.g. "
                                             f"{'lapse=0:0.2' if ':' in form else 'lapse=0.05'} "
                                             f"(got {text!r})") from None

    parse.__name__ = form
    return parse


def _mapping(option: str, pairs: Sequence[tuple[str, Any]]) -> dict[str, Any]:
    """The pairs as a mapping; a name given twice is refused."""
    from ..errors import BadArgument

    out: dict[str, Any] = {}
    for name, value in pairs:
        if name in out:
            raise BadArgument(option, f"each parameter named once ({name} is given twice)", name)
        out[name] = value
    return out


def _run_fit(args: argparse.Namespace) -> int:
    if getattr(args, "subjects", None):
        return run_cohort(args)
    if args.subject is None:
        import sys

        print("rigloop fit: name the animal with --subject S (or a cohort with --subjects a,b,c|all)",
              file=sys.stderr)
        return 2
    return run_command(args.db, args.subject, args.learner, args.session, starts=args.starts,
                       as_json=args.json, link=args.link, fix=_mapping("--fix", args.fix),
                       bounds=_mapping("--bounds", args.bounds), start=_mapping("--start", args.start),
                       bootstrap=args.bootstrap, seed=args.seed)


def run_command(db: str, subject: str, learners: Sequence[str] | None = None,
                session: str | None = None, *, starts: int = 4, as_json: bool = False,
                out=None, link: str | None = None, fix: Mapping[str, float] | None = None,
                bounds: Mapping[str, tuple[float, float]] | None = None,
                start: Mapping[str, float] | None = None, bootstrap: int = 0, seed: int = 0) -> int:
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
                             progress=bar, link=link, fix=fix, bounds=bounds, start=start,
                             bootstrap=bootstrap, seed=seed,
                             option_names=("--fix", "--bounds", "--start"))
        bar.close()
    results = got if isinstance(got, list) else [got]
    ranking = [r.learner for r in sorted(results, key=lambda r: r.aic)]
    if as_json:
        doc = {"subject": subject, "fits": [r.record() for r in results], "ranking": ranking}
        print(json.dumps(doc, indent=2), file=out)
        return 0
    scope = f", session {session}" if session else ", all sessions"
    print(f"subject {subject}{scope}", file=out)
    for r in results:
        print(format_fit(r), file=out)
    if len(results) > 1:
        print("ranking by AIC (lower is better; dAIC > 10: little support, common practice; "
              "CV log-lik: held-out sessions, higher is better)", file=out)
        print(format_ranking(results), file=out)
    return 0
