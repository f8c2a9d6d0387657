"""``rigloop fit``: fit a stored subject and print the table(s) or JSON.

Parameter options take NAME=VALUE (``--fix``, ``--start``) or NAME=LOW:HIGH
(``--bounds``), each repeatable; names are checked against the fitted models'.
Sessions of a two_step rule file are fitted by the two-step learners (fit/two_step.py,
``_run_two_step_fit``) in the same table and JSON shape.
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
                   help="learner to fit (repeatable: the fits are ranked by AIC; default: the rule file's); "
                        "two-step sessions: model_free, model_based, hybrid, successor (or mf, mb, sr)")
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
    p.add_argument("--calibrate", type=Count(20, 100000), default=0, metavar="B",
                   help="calibrate the 95%% profile intervals for small data: B data sets simulated from the "
                        "fitted model on the animal's own trials scale each cutoff by its mean likelihood "
                        "ratio (Bartlett); about B/5 s per learner; 100 is a good start (default: none)")
    p.add_argument("--seed", type=Count(0), default=0,
                   help="seed of the starts, the bootstrap and the calibration (default 0)")
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
        if args.calibrate:
            from ..errors import BadArgument

            raise BadArgument("--calibrate", "a fit of one animal (--subject S): a cohort's "
                              "intervals come from the population fit", args.calibrate)
        return run_cohort(args)
    if args.subject is None:
        import sys

        print("rigloop fit: name the animal with --subject S (or a cohort with --subjects a,b,c|all)",
              file=sys.stderr)
        return 2
    return run_command(args.db, args.subject, args.learner, args.session, starts=args.starts,
                       as_json=args.json, link=args.link, fix=_mapping("--fix", args.fix),
                       bounds=_mapping("--bounds", args.bounds), start=_mapping("--start", args.start),
                       bootstrap=args.bootstrap, seed=args.seed, calibrate=args.calibrate)


def run_command(db: str, subject: str, learners: Sequence[str] | None = None,
                session: str | None = None, *, starts: int = 4, as_json: bool = False,
                out=None, link: str | None = None, fix: Mapping[str, float] | None = None,
                bounds: Mapping[str, tuple[float, float]] | None = None,
                start: Mapping[str, float] | None = None, bootstrap: int = 0, seed: int = 0,
                calibrate: int = 0) -> int:
    """``rigloop fit``: fit the stored subject, print the table(s) (or JSON); exit status."""
    import json
    import sys

    from ..core.learners import LEARNERS
    from ..core.names import check_name
    from ..errors import BadArgument
    from ..fit import fit_from_store, format_fit, format_ranking
    from ..fit.two_step_results import kind_of
    from ..fit.two_step_store import is_two_step
    from ..replay import stored_sessions
    from .progress import Progress

    out = out or sys.stdout
    names = list(learners) if learners else None
    cue_learners = [n for n in LEARNERS if n != "two_step"]
    for name in names or ():
        if kind_of(name) is None:
            check_name("--learner", "a learner", name, cue_learners + ["model_free", "model_based", "hybrid",
                                                                       "successor"])
    with open_store(db) as store:
        stored_sessions(store, subject, session)
        if is_two_step(store, subject, session):
            if calibrate:
                raise BadArgument("--calibrate", "left out for two-step trials: w gets its profile-likelihood "
                                  "interval", calibrate)
            return _run_two_step_fit(store, subject, names, session, starts=starts, as_json=as_json, out=out,
                                     link=link, fix=fix or {}, bounds=bounds or {}, start=start or {},
                                     bootstrap=bootstrap, seed=seed)
        for name in names or ():
            if kind_of(name) is not None:
                raise BadArgument("--learner", f"a learner of cue values ({', '.join(cue_learners)}): "
                                  f"{subject}'s sessions are one-step trials, and {name} is a two-step learner "
                                  "(for the sessions of a two_step rule file)", name)
        bar = Progress(0, f"fitting {subject}")
        got = fit_from_store(store, subject, learner=names if names and len(names) > 1 else
                             (names[0] if names else None), session=session, starts=starts,
                             progress=bar, link=link, fix=fix, bounds=bounds, start=start,
                             bootstrap=bootstrap, seed=seed, calibrate=calibrate,
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


def _run_two_step_fit(store, subject: str, names: Sequence[str] | None, session: str | None, *, starts: int,
                      as_json: bool, out, link: str | None, fix: Mapping[str, float],
                      bounds: Mapping[str, tuple[float, float]], start: Mapping[str, float],
                      bootstrap: int, seed: int) -> int:
    """``rigloop fit`` on two-step sessions: the two-step learners (fit/two_step.py), the
    fit command's table and JSON shape, ranked by AIC."""
    import json

    from ..core.names import check_name
    from ..core.two_step.params import BOUNDS, KINDS, NAMES
    from ..errors import BadArgument
    from ..fit.two_step import fit_two_step, standard_errors
    from ..fit.two_step_results import DEFAULT_KIND, fit_record, format_fit, format_ranking, kind_of
    from ..fit.two_step_store import read_two_step
    from .progress import Progress

    cue_only = [n for n in names or () if kind_of(n) is None]
    if cue_only:
        raise BadArgument("--learner", "a two-step learner (model_free, model_based, hybrid, successor; or mf, mb, "
                          f"sr): {subject}'s sessions ran a two_step rule file, whose trials have two steps, and "
                          f"{cue_only[0]} is a learner of cue values", cue_only[0])
    if link is not None:
        raise BadArgument("--link", "left out for two-step trials: their fit models both stages' choices "
                          "itself (softmax with beta1, beta2 and perseveration p)", link)
    if bootstrap:
        raise BadArgument("--bootstrap", "left out for two-step trials: w gets its profile-likelihood "
                          "interval", bootstrap)
    if bounds:
        raise BadArgument("--bounds", "left out for two-step trials: each parameter is searched over its "
                          "natural range (pin one with --fix NAME=VALUE)", next(iter(bounds)))
    kinds = list(dict.fromkeys(kind_of(n) for n in names)) if names else [DEFAULT_KIND]
    used = sorted({p for k in kinds for p in KINDS[k]}, key=NAMES.index)
    for option, given in (("--fix", fix), ("--start", start)):
        for name in given:
            check_name(option, f"a parameter of {', '.join(kinds)}", name, used)
            low, high = BOUNDS[name]
            if not low <= given[name] <= high:
                raise BadArgument(option, f"{name} within its range [{low:g}, {high:g}]", given[name])
    stored = read_two_step(store, subject, session)
    notes = stored.notes()
    bar = Progress(len(kinds), f"fitting {subject}", unit="fits")
    fits, errors, why = [], [], []
    for i, kind in enumerate(kinds):
        mine = {n: v for n, v in fix.items() if n in KINDS[kind]}
        first = {n: v for n, v in start.items() if n in KINDS[kind] and n not in mine}
        fit = fit_two_step(stored.data, kind, starts=starts, seed=seed, fixed=mine, start=first)
        se, note = standard_errors(stored.data, fit)
        fits.append(fit)
        errors.append(se)
        why.append(notes + ([note] if note else []))
        bar(i + 1, len(kinds))
    bar.close()
    ranking = [f.kind for f in sorted(fits, key=lambda f: f.aic)]
    n = stored.data.n_trials
    if as_json:
        doc = {"subject": subject, "ranking": ranking,
               "fits": [fit_record(f, n, fix, w, se) for f, se, w in zip(fits, errors, why, strict=True)]}
        print(json.dumps(doc, indent=2), file=out)
        return 0
    scope = f"session {session}" if session else f"sessions {', '.join(stored.sessions)}"
    print(f"subject {subject}, {scope} (two-step trials over {', '.join(stored.states)})", file=out)
    for f, se, w in zip(fits, errors, why, strict=True):
        print(format_fit(f, n, starts, w, se), file=out)
    if len(fits) > 1:
        print("ranking by AIC (lower is better; dAIC > 10: little support, common practice)", file=out)
        print(format_ranking(fits), file=out)
    return 0
