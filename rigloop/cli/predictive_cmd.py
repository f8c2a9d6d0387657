"""``rigloop predictive``: fit a stored subject, run the fitted model on the animal's own
trials many times, and show whether the animal's learning curve lies inside the model's band."""

from __future__ import annotations

import argparse

from .args import Count, add_json, add_session, add_store, open_store


def add_predictive(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("predictive", help="does the fitted model reproduce the animal? (posterior-predictive "
                                          "check; needs scipy: the 'fit' extra)")
    add_store(p, "the SQLite store")
    add_session(p, "only this session (default: every session, in order)")
    p.add_argument("--learner", default=None, metavar="NAME", help="the learner to fit (default: the rule file's)")
    p.add_argument("--runs", type=Count(20, 10_000), default=200, help="runs of the fitted model")
    p.add_argument("--window", type=Count(1, 1000), default=21,
                   help="trials of a cue in the moving average of the learning curves")
    p.add_argument("--seed", type=Count(0), default=0, help="the runs' seed (default 0)")
    p.add_argument("--out", default=None, metavar="FIG", help="write the figure here (.png, .pdf or .svg; default: none)")
    add_json(p, "print the check as JSON")
    p.set_defaults(func=_run)


def _run(args: argparse.Namespace) -> int:
    return run_predictive(args.db, args.subject, session=args.session, learner=args.learner, runs=args.runs,
                          window=args.window, seed=args.seed, out=args.out, as_json=args.json)


def run_predictive(db: str, subject: str, *, session: str | None = None, learner: str | None = None,
                   runs: int = 200, window: int = 21, seed: int = 0, out: str | None = None,
                   as_json: bool = False, stream=None) -> int:
    """Fit, check, print (or JSON) and draw; the exit status."""
    import json
    import sys

    from ..core.learners import LEARNERS
    from ..core.names import check_name
    from ..fit import fit_from_store
    from ..offline.fitted_animals import models_from_fit_json
    from ..offline.predictive import ran_under, run_check
    from ..outputs.report import check_out
    from ..replay import RulesCache, stored_sessions
    from .progress import Progress

    stream = stream or sys.stdout
    if out is not None:
        check_out(out)
    if learner is not None:
        check_name("--learner", "a learner", learner, LEARNERS)
    with open_store(db) as store:
        infos = stored_sessions(store, subject, session)
        if session is not None:
            infos = [i for i in infos if i.session == session]
        last = infos[-1]
        rules = RulesCache().get(last.rules_text, last.rules_sha256, f"session {last.session} rule file")
        bar = Progress(0, f"fitting {subject}")
        fit = fit_from_store(store, subject, learner=learner, session=session, progress=bar)
        bar.close()
        pairs = ran_under(store, subject, infos)
    model = models_from_fit_json({"subject": subject, "fits": [fit.to_dict()]}, rules)[0]
    bar = Progress(len(pairs), f"{runs} runs of the fitted model")
    check = run_check(pairs, model, runs=runs, window=window, seed=seed, progress=bar)
    bar.close()
    doc = to_json(subject, model, check)
    if out is not None:
        draw(out, subject, model, check)
    if as_json:
        print(json.dumps(doc, indent=2), file=stream)
        return 0
    print(format_check(doc), file=stream)
    if out is not None:
        print(f"figure: {out}", file=stream)
    return 0


def to_json(subject: str, model, check) -> dict:
    """The check as plain data (documented in the README)."""
    curves = {cue: {"points": int(len(c["animal"])), "outside_fraction": float(c["outside"].mean())}
              for cue, c in check.curves.items()}
    return {"subject": subject, "learner": model.learner, "link": model.link,
            "params": {**model.learner_params, **model.link_params}, "runs": check.runs, "window": check.window,
            "n_trials": int(len(check.animal)), "outside_fraction": check.outside_fraction, "curves": curves,
            "stay": check.stay}


def format_check(doc: dict) -> str:
    what = "P(right)" if doc["link"] == "choice" else "P(respond)"
    lines = [f"subject {doc['subject']}: {doc['learner']} ({doc['link']} link) fitted, then run {doc['runs']} times "
             f"on the animal's own {doc['n_trials']} trials",
             f"  learning curve ({what}, moving average over {doc['window']} trials of a cue) outside the "
             f"model's 95% band: {doc['outside_fraction']:.1%} of points (about 5% if the model reproduces "
             "the animal)"]
    for cue, c in doc["curves"].items():
        lines.append(f"    {cue:<16}{c['outside_fraction']:>7.1%} of {c['points']} points")
    if doc["stay"]:
        for key, label in (("after_reward", "after a reward"), ("after_no_reward", "after no reward")):
            s = doc["stay"][key]
            inside = s["lower"] <= s["animal"] <= s["upper"]
            lines.append(f"  P(stay) {label:<16} animal {s['animal']:.2f}, model {s['median']:.2f} "
                         f"[{s['lower']:.2f}, {s['upper']:.2f}]" + ("" if inside else "  OUTSIDE"))
    if doc["outside_fraction"] > 0.15:
        lines.append("  the model misses the animal's course: try another learner (--learner) or look at the "
                     "figure for where it departs")
    return "\n".join(lines)


def draw(path: str, subject: str, model, check) -> str:
    from ..outputs.predictive_figure import draw_predictive

    starts = [0] + [k for k in range(1, len(check.session)) if check.session[k] != check.session[k - 1]]
    ylabel = "P(right)" if model.link == "choice" else "P(respond)"
    title = (f"{subject}: {model.learner} fitted, {check.runs} runs on its own trials; "
             f"{check.outside_fraction:.0%} of the curve outside the 95% band")
    return draw_predictive(path, curves=check.curves, session_starts=starts, ylabel=ylabel, title=title,
                           stay=check.stay)
