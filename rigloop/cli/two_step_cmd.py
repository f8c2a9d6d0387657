"""The ``two-step`` command: the stay analysis and the learner fits of one animal's
two-step trials.

``rigloop two-step TRIALS.csv|TRIALS.npz [--fit all|hybrid|none] [--figure OUT.png]``
reads columns (or arrays) a1, s2, a2, reward (0/1 each: first action, second-stage
state, second action, reward); ``rigloop two-step --db F --subject S [--session X]``
reads a subject's stored two-step trials (fit/two_step_store.py); ``rigloop two-step
--agent hybrid --w 0.5`` runs a simulated agent instead (for trying it out). Prints the stay table, the regression of
stay on reward × transition, the fits (MF, MB, hybrid with a 95% profile interval on w,
SR; AIC/BIC), and writes the stay-probability figure.
"""

from __future__ import annotations

import argparse
import csv
import sys

import numpy as np

from ..core.two_step import PRESETS, simulate_agent, stay_regression, stay_table
from ..core.two_step.stay import TERMS
from ..errors import BadArgument
from .args import Count

COLUMNS = ("a1", "s2", "a2", "reward")


def add_two_step(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("two-step", help="stay analysis and model-based vs model-free fits of two-step trials")
    p.add_argument("trials", nargs="?", default=None,
                   help="CSV with columns a1,s2,a2,reward (0/1), or .npz with those arrays "
                        "(default: none, give this, --db or --agent)")
    p.add_argument("--db", default=None, help="read a subject's stored two-step trials from this store "
                                              "(with --subject; default: none)")
    p.add_argument("--subject", default=None, help="--db: the subject, as stored (default: none)")
    p.add_argument("--session", default=None,
                   help="--db: only this session (default: every session of the subject, in order)")
    p.add_argument("--agent", choices=sorted(PRESETS), default=None,
                   help="analyse a simulated agent instead of a file (default: none)")
    p.add_argument("--w", type=Count(0, 1, kind=float), default=None,
                   help="--agent hybrid: its weight on model-based values (default: the preset's 0.5)")
    p.add_argument("--trials-count", dest="n_trials", type=Count(20, 100000), default=400,
                   help="--agent: number of trials")
    p.add_argument("--seed", type=Count(0), default=0, help="--agent: the simulation's seed (default 0)")
    p.add_argument("--fit", choices=("all", "hybrid", "none"), default="all",
                   help="all: MF, MB, hybrid and SR compared; hybrid: only the hybrid; none: no fits")
    p.add_argument("--figure", default="two_step_stay.png", metavar="OUT",
                   help="where to write the stay-probability figure (PNG, PDF or SVG; '' for none)")
    p.set_defaults(func=_run_two_step)


def _read_trials(path: str):
    if path.lower().endswith(".npz"):
        with np.load(path) as z:
            missing = [c for c in COLUMNS if c not in z.files]
            if missing:
                raise BadArgument("trials", f"an .npz with arrays {', '.join(COLUMNS)} "
                                  f"(missing {', '.join(missing)})", path)
            return [np.asarray(z[c]) for c in COLUMNS]
    with open(path, newline="") as f:
        rows = list(csv.DictReader(f))
    if not rows or any(c not in rows[0] for c in COLUMNS):
        have = ", ".join(rows[0]) if rows else "no rows"
        raise BadArgument("trials", f"a CSV with a header naming {', '.join(COLUMNS)} (it has {have})", path)
    out = []
    for c in COLUMNS:
        try:
            out.append(np.array([float(r[c]) for r in rows]))
        except ValueError as err:
            raise BadArgument(c, "a number (0 or 1) in every row", str(err)) from None
    return out


def _run_two_step(args) -> int:
    from ..fit.two_step import TwoStepData, fit_two_step
    from ..outputs.two_step_figure import stay_figure

    if args.db is None and (args.subject is not None or args.session is not None):
        raise BadArgument("--subject" if args.subject is not None else "--session",
                          "used only with --db (the store to read)",
                          args.subject if args.subject is not None else args.session)
    given = [x for x in (args.trials, args.db and f"--db {args.db}",
                         args.agent and f"--agent {args.agent}") if x]
    if len(given) != 1:
        raise BadArgument("trials", "one source: a trials file, --db F --subject S, or --agent KIND",
                          " and ".join(given) if given else "none")
    if args.db is not None:
        from ..fit.two_step_store import read_two_step
        from .args import open_store

        if args.subject is None:
            raise BadArgument("--subject", "the subject whose stored trials to read (with --db)",
                              "no --subject")
        with open_store(args.db) as store:
            stored = read_two_step(store, args.subject, args.session)
        data = stored.data
        source = f"{args.subject} ({', '.join(stored.sessions)})"
        for note in stored.notes():
            print(f"note: {note}", file=sys.stderr)
    elif args.agent is not None:
        params = None
        if args.w is not None:
            if args.agent != "hybrid":
                raise BadArgument("--w", "used only with --agent hybrid", args.w)
            params = PRESETS["hybrid"][1].with_(w=args.w)
        run = simulate_agent(args.agent, args.n_trials, args.seed, params)
        data = TwoStepData.of(run.a1, run.s2, run.a2, run.reward)
        source = f"simulated {args.agent} agent" + (f" (w = {run.params.w:g})" if args.agent == "hybrid" else "")
    else:
        data = TwoStepData.of(*_read_trials(args.trials))
        source = args.trials
    print(f"{source}: {data.n_trials} trials")
    cells = stay_table(data.a1, data.reward, data.common)
    print("\nP(stay) after           n   stays  P      95% interval")
    for c in cells:
        print(f"  {c.label:<20}{c.n:>5} {c.stays:>6}  {c.p:.3f}  [{c.low:.3f}, {c.high:.3f}]")
    reg = stay_regression(data.a1, data.reward, data.common)
    print("\nlogistic regression of stay (reward, transition coded +1/-1):")
    print("  term                   coef     se       z      p")
    for name in TERMS:
        t = reg.term(name)
        print(f"  {name:<20}{t['coef']:>7.3f}{t['se']:>8.3f}{t['z']:>8.2f}  {t['p_value']:.2g}")
    print("  (model-free use shows as a reward effect; model-based use as reward_x_transition)")
    hybrid = None
    if args.fit != "none":
        kinds = ("model_free", "model_based", "hybrid", "successor") if args.fit == "all" else ("hybrid",)
        fits = []
        for k in kinds:
            print(f"fitting {k} ...", file=sys.stderr, flush=True)
            fits.append(fit_two_step(data, k))
        fits.sort(key=lambda f: f.bic)
        print("\nfits (best BIC first; n = 2 choices per trial):")
        print("  learner        k   log-lik      AIC      BIC   parameters")
        for f in fits:
            shown = ", ".join(f"{n}={f.params[n]:.3g}" for n in f.free)
            print(f"  {f.kind:<13}{f.k:>3}{f.log_likelihood:>10.2f}{f.aic:>9.1f}{f.bic:>9.1f}   {shown}")
            if f.kind == "hybrid":
                hybrid = f
        if hybrid is not None and hybrid.w_interval is not None:
            low, high = hybrid.w_interval
            print(f"\nhybrid w = {hybrid.params['w']:.2f}, 95% profile-likelihood interval [{low:.2f}, {high:.2f}]")
    if args.figure:
        stay_figure(cells, args.figure, title=f"{source}, {data.n_trials} trials", hybrid=hybrid)
        print(f"\nwrote {args.figure}")
    return 0
