"""``rigloop psychometric``: a psychometric function fitted to a stored subject's graded
trials, its threshold with a profile-likelihood interval, the staircase comparison, and
the figure."""

from __future__ import annotations

import argparse
import math

from .args import Count, add_json, add_session, add_store, open_store


def add_psychometric(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("psychometric", help="fit P(correct | level) to staircase or other graded-difficulty trials "
                                            "(needs scipy: the 'fit' extra)")
    add_store(p, "the SQLite store")
    add_session(p, "only this session (default: every session)")
    p.add_argument("--function", choices=("logistic", "normal", "weibull"), default="weibull",
                   help="the psychometric function F")
    p.add_argument("--level", type=_probability, default=0.75,
                   help="the performance level the threshold is read at")
    p.add_argument("--guess", default="auto", metavar="auto|free|P",
                   help="the guess rate: auto (1/n for a choice task, free for yes/no), free, or a number")
    p.add_argument("--band-runs", type=Count(0, 10_000), default=200,
                   help="bootstrap refits for the curve's band (0: no band)")
    p.add_argument("--out", default=None, metavar="FIG", help="write the figure here (.png, .pdf or .svg; default: none)")
    add_json(p, "print the fit as JSON")
    p.set_defaults(func=_run)


def _probability(text: str) -> float:
    try:
        v = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"must be a probability between 0 and 1 (got {text!r})") from None
    if not 0.0 < v < 1.0:
        raise argparse.ArgumentTypeError(f"must be a probability between 0 and 1 (got {text})")
    return v


def _guess(text: str, default: float | None) -> float | None:
    from ..errors import BadArgument

    if text == "auto":
        return default
    if text == "free":
        return None
    try:
        v = float(text)
    except ValueError:
        raise BadArgument("--guess", "auto, free, or a probability in [0, 1)", text) from None
    if not 0.0 <= v < 1.0:
        raise BadArgument("--guess", "auto, free, or a probability in [0, 1)", text)
    return v


def _run(args: argparse.Namespace) -> int:
    return run_psychometric(args.db, args.subject, session=args.session, function=args.function,
                            level=args.level, guess=args.guess, band_runs=args.band_runs, out=args.out,
                            as_json=args.json)


def run_psychometric(db: str, subject: str, *, session: str | None = None, function: str = "weibull",
                     level: float = 0.75, guess: str = "auto", band_runs: int = 200,
                     out: str | None = None, as_json: bool = False, stream=None) -> int:
    """Fit, print the table (or JSON) and write the figure; the exit status."""
    import json
    import sys

    from ..fit.psychometric import fit_psychometric
    from ..fit.psychometric_data import graded_trials, staircase_comparison
    from ..outputs.report import check_out

    stream = stream or sys.stdout
    if out is not None:
        check_out(out)
    if 0 < band_runs < 20:
        from ..errors import BadArgument

        raise BadArgument("--band-runs", "0 (no band) or at least 20 bootstrap refits", band_runs)
    with open_store(db) as store:
        data = graded_trials(store, subject, session)
    direction = -1 if data.staircase is not None and data.staircase.harder == "higher" else 1
    fit = fit_psychometric(data.x, data.y, function=function, level=level, guess=_guess(guess, data.guess),
                           direction=direction, band_runs=band_runs)
    stair = staircase_comparison(data, fit)
    doc = to_json(subject, data, fit, stair)
    if out is not None:
        draw(out, subject, data, fit, stair)
    if as_json:
        print(json.dumps(doc, indent=2), file=stream)
    else:
        print(format_psychometric(doc), file=stream)
        if out is not None:
            print(f"figure: {out}", file=stream)
    return 0


def to_json(subject: str, data, fit, stair) -> dict:
    """The fixed JSON document (see the README's "Psychometric fits")."""
    return {"subject": subject, "function": fit.function, "params": dict(fit.params),
            "ci95": {k: (list(v) if v is not None else None) for k, v in fit.ci95.items()},
            "level": fit.level, "n_trials": fit.n_trials,
            "kind": data.kind, "fixed": list(fit.fixed), "one_sided": list(fit.one_sided),
            "direction": "rises" if fit.direction > 0 else "falls", "log_likelihood": fit.log_likelihood,
            "staircase": stair, "warnings": list(fit.warnings)}


def format_psychometric(doc: dict) -> str:
    """The printed result."""
    task = "choice task" if doc["kind"] == "afc" else "yes/no task"
    kind = f"{task}, guess {'fixed' if 'guess' in doc['fixed'] else 'fitted'}"
    lines = [f"subject {doc['subject']}: {doc['function']} psychometric function, {doc['n_trials']} trials, "
             f"{kind}; performance {doc['direction']} with the level",
             f"  {'parameter':<11}{'estimate':>10}   95% profile-likelihood interval"]
    for name, value in doc["params"].items():
        ci = doc["ci95"].get(name)
        if ci is None:
            shown = "(fixed)"
        else:
            shown = f"[{ci[0]:.4g}, {ci[1]:.4g}]"
            if name in doc["one_sided"]:
                shown += " one-sided: the estimate is on its bound"
        label = f"threshold ({doc['level']:.0%})" if name == "threshold" else name
        lines.append(f"  {label:<16}{value:>8.4g}   {shown}" if name == "threshold"
                     else f"  {label:<11}{value:>10.4g}   {shown}")
    lines.append(f"  log-likelihood {doc['log_likelihood']:.3f}; lapse has a uniform prior on [0, 0.1]")
    s = doc.get("staircase")
    if s is not None:
        lines.append(f"staircase {s['rule']}: " + _stair_words(s))
    for w in doc["warnings"]:
        lines.append(f"  warning: {w}")
    return "\n".join(lines)


def _stair_words(s: dict) -> str:
    target = s["target"]
    parts = []
    if target is None:
        parts.append("no closed-form target for this rule (Levitt 1971 covers 1-up-k-down and k-up-1-down)")
    else:
        parts.append(f"Levitt (1971) target {target:.1%} correct")
    if s["level"] is None:
        parts.append(f"only {s['reversals']} reversals: too few for a convergence point")
    else:
        parts.append(f"the track converged at {s['level']:.4g} (mean level at its reversals after the first quarter, {s['reversals']} in all), "
                     f"where the fitted curve gives {s['p_fit_at_level']:.1%}")
    if s["threshold_at_target"] is not None:
        lo, hi = s["threshold_at_target_ci95"]
        inside = s["level"] is not None and lo <= s["level"] <= hi
        parts.append(f"the curve reaches {target:.1%} at {s['threshold_at_target']:.4g} [{lo:.4g}, {hi:.4g}]"
                     + ("" if s["level"] is None else
                        ("; the track's point lies inside that interval" if inside else
                         "; the track's point lies OUTSIDE that interval (not yet converged, or the "
                         "animal changed during the track)")))
    if not s["equal_steps"]:
        parts.append("the steps up and down differ, which moves the target away from Levitt's value")
    return "; ".join(parts)


def draw(path: str, subject: str, data, fit, stair) -> str:
    """The psychometric figure for this fit."""
    from ..fit.psychometric import binned, curve_grid
    from ..outputs.psychometric_figure import draw_psychometric

    grid = fit.band[0] if fit.band is not None else curve_grid(fit)
    name = data.staircase.parameter if data.staircase is not None else "level"
    ylabel = "P(correct)" if data.kind == "afc" else "P(respond | signal)"
    ci = fit.ci95.get("threshold")
    t = fit.params["threshold"]
    return draw_psychometric(
        path, bins=binned(fit), grid=grid, curve=fit.predict(grid),
        band=(fit.band[1], fit.band[2]) if fit.band is not None else None, level=fit.level,
        threshold=t if math.isfinite(t) else float("nan"), threshold_ci=tuple(ci) if ci else None,
        guess=fit.params["guess"], title=f"{subject}: {fit.function} fit, {fit.n_trials} trials",
        xlabel=name, ylabel=ylabel, staircase=stair)
