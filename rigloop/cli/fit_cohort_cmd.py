"""``rigloop fit --subjects a,b,c|all``: fit each animal, then the cohort's population.

``cli/fit_cmd.py`` adds these options to ``rigloop fit`` (``add_cohort_arguments``) and
hands a run with ``--subjects`` to ``run_cohort``. The fit options of ``rigloop fit``
(--learner, --link, --fix, --bounds, --start, --starts, --seed, --json) apply to every
animal.
"""

from __future__ import annotations

import argparse
import sys


def add_cohort_arguments(p: argparse.ArgumentParser) -> None:
    """--subjects and --out (the cohort figure)."""
    p.add_argument("--subjects", default=None, metavar="A,B,C|all",
                   help="fit a cohort: these stored subjects (comma-separated) or 'all', each on its own, "
                        "then a population over them (mean and sd per parameter, shrunken estimates, "
                        "outliers); at least 3; default: none, one animal by --subject")
    p.add_argument("--out", default=None, metavar="FILE",
                   help="with --subjects: write the cohort figure here (.png, .pdf or .svg; default: none)")


def _mapping(option: str, pairs) -> dict | None:
    out: dict = {}
    for name, value in pairs or ():
        if name in out:
            from ..errors import BadArgument

            raise BadArgument(option, "each parameter named once", name)
        out[name] = value
    return out or None


def run_cohort(args: argparse.Namespace, out=None) -> int:
    """Fit the cohort, print its table (or JSON), write its figure; the exit status."""
    import json

    from ..core.learners import LEARNERS
    from ..core.names import check_name
    from ..errors import BadArgument
    from ..fit.cohort import cohort_from_store, format_cohort, resolve_subjects
    from .args import open_store
    from .progress import Progress

    out = out or sys.stdout
    if getattr(args, "subject", None):
        raise BadArgument("--subject", "left out when --subjects names a cohort (one animal: "
                          "--subject S alone)", args.subject)
    if getattr(args, "session", None):
        raise BadArgument("--session", "left out with --subjects (a cohort fits every session "
                          "of each animal)", args.session)
    learners = list(getattr(args, "learner", None) or [])
    if len(learners) > 1:
        raise BadArgument("--learner", "one learner for a cohort (compare learners per animal "
                          "with --subject)", ", ".join(learners))
    for name in learners:
        check_name("--learner", "a learner", name, LEARNERS)
    if args.out is not None:
        from ..outputs.report import check_out

        check_out(args.out)
    options = {"link": getattr(args, "link", None),
               "fix": _mapping("--fix", getattr(args, "fix", None)),
               "bounds": _mapping("--bounds", getattr(args, "bounds", None)),
               "start": _mapping("--start", getattr(args, "start", None))}
    with open_store(args.db) as store:
        names = resolve_subjects(store, args.subjects)
        bar = Progress(len(names), f"fitting {len(names)} animals")
        try:
            cohort = cohort_from_store(store, names, learners[0] if learners else None,
                                       starts=getattr(args, "starts", 4), seed=getattr(args, "seed", 0),
                                       progress=bar, **options)
        finally:
            bar.close()
    if args.out is not None:
        from ..outputs.cohort_fit import draw_cohort_fit

        draw_cohort_fit(cohort, args.out)
    if getattr(args, "json", False):
        print(json.dumps(cohort.to_dict(), indent=2), file=out)
    else:
        print(format_cohort(cohort), file=out)
        if args.out is not None:
            print(f"figure: {args.out}", file=out)
    return 0
