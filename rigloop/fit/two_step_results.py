"""Two-step fits as ``rigloop fit`` shows them: the learner names it accepts, the fixed
JSON record of ``--json`` (the keys of the cue-value fits) and the printed table.

Learner names are those of ``core/two_step`` (model_free, model_based, hybrid,
successor) and the short ones mf, mb, sr; ``two_step`` (the rule file's learner) is the
hybrid. BIC counts n as the number of choices (two per trial), as ``fit/two_step.py``
does; AIC ranks, as for every ``rigloop fit``.
"""

from __future__ import annotations

from collections.abc import Sequence

from ..core.two_step.params import BOUNDS, KINDS
from .two_step import TwoStepFit

LINK = "two_stage_softmax"  # both stages' choices: softmax, perseveration at the first stage
ALIASES = {"mf": "model_free", "mb": "model_based", "sr": "successor", "two_step": "hybrid"}
DEFAULT_KIND = "hybrid"


def learner_names() -> tuple[str, ...]:
    """Every name ``--learner`` accepts for two-step trials."""
    return tuple(KINDS) + tuple(ALIASES)


def kind_of(name: str) -> str | None:
    """The two-step learner kind ``name`` stands for, or None when it names none."""
    if name in KINDS:
        return name
    return ALIASES.get(name)


def _at_bound(name: str, value: float) -> str | None:
    low, high = BOUNDS[name]
    tol = 1e-3 * (high - low)
    if value - low <= tol:
        return f"lower bound {low:g}"
    if high - value <= tol:
        return f"upper bound {high:g}"
    return None


def fit_warnings(fit: TwoStepFit, notes: Sequence[str] = ()) -> list[str]:
    """Sentences about what the fit cannot tell (bounds, a one-sided or wide interval on w,
    no convergence), after ``notes`` about the trials read."""
    out = list(notes)
    for name in fit.free:
        where = _at_bound(name, fit.params[name])
        if where and name == "w":
            looks = ("purely model-free (it repeats what paid)" if fit.params[name] < 0.5
                     else "purely model-based (it plans)")
            out.append(f"w = {fit.params[name]:.4g} sits on its {where}: the animal's choices look "
                       f"{looks}; its interval is one-sided, from the bound")
        elif where:
            out.append(f"{name} = {fit.params[name]:.4g} sits on its {where}: the trials push it to the edge "
                       "of its range; read it as 'at least' or 'at most' that, not as a measured value "
                       "(pin it with --fix to see whether the other estimates move)")
    if fit.w_interval is not None:
        low, high = fit.w_interval
        if high - low >= 0.6:
            out.append(f"w: the 95% interval [{low:.2f}, {high:.2f}] spans most of [0, 1]: these trials "
                       "hardly tell planning from repeating (more trials narrow it; a few hundred tell "
                       "w = 0 from w = 1)")
    if not fit.converged:
        out.append("The optimiser did not converge: fit again with more --starts")
    return out


def fit_record(fit: TwoStepFit, n_trials: int, fixed: dict[str, float] | None = None,
               notes: Sequence[str] = (), se: dict[str, float | None] | None = None) -> dict:
    """The fixed record of ``rigloop fit --json``: learner, link, params, se, ci95, fixed,
    log_likelihood, aic, bic, n_trials, converged, warnings, cv_log_likelihood (null:
    one joined sequence), plus n_choices. params holds the parameters the learner uses;
    se: ``two_step.standard_errors`` (null at a bound, or when not given); ci95 holds w
    (the hybrid's profile interval)."""
    fixed = {n: float(v) for n, v in (fixed or {}).items() if n in KINDS[fit.kind]}
    se = se or {}
    return {"learner": fit.kind, "link": LINK,
            "params": {n: fit.params[n] for n in KINDS[fit.kind]},
            "se": {n: se.get(n) for n in fit.free},
            "ci95": {} if fit.w_interval is None else {"w": list(fit.w_interval)},
            "fixed": fixed,
            "log_likelihood": fit.log_likelihood, "aic": fit.aic, "bic": fit.bic,
            "n_trials": int(n_trials), "converged": fit.converged,
            "warnings": fit_warnings(fit, notes), "cv_log_likelihood": None,
            "n_choices": fit.n_choices}


def format_fit(fit: TwoStepFit, n_trials: int, starts: int, notes: Sequence[str] = (),
               se: dict[str, float | None] | None = None) -> str:
    """One fit as the table ``rigloop fit`` prints."""
    se = se or {}
    lines = [f"learner {fit.kind} on two-step trials (softmax over both stages' choices, perseveration "
             f"p at the first): {n_trials} trials, {fit.n_choices} choices, {starts} starts",
             "  parameter   estimate        SE  95% interval"]
    for name in KINDS[fit.kind]:
        value = fit.params[name]
        if name not in fit.free:
            lines.append(f"  {name:<10}{value:>10.4g}            (fixed)")
            continue
        shown = "-" if se.get(name) is None else f"{se[name]:.3g}"
        line = f"  {name:<10}{value:>10.4g}{shown:>10}"
        if name == "w" and fit.w_interval is not None:
            low, high = fit.w_interval
            line += f"  [{low:.3f}, {high:.3f}] profile likelihood"
        lines.append(line)
    lines.append(f"  log-likelihood {fit.log_likelihood:.3f}   AIC {fit.aic:.3f}   "
                 f"BIC {fit.bic:.3f} (n = {fit.n_choices} choices)   k = {fit.k}")
    lines.append(f"  optimiser: {'converged' if fit.converged else 'did NOT converge'}")
    lines += [f"  warning: {w}" for w in fit_warnings(fit, notes)]
    return "\n".join(lines)


def format_ranking(fits: Sequence[TwoStepFit]) -> str:
    """The fits ranked by AIC, with dAIC and BIC."""
    ranked = sorted(fits, key=lambda f: f.aic)
    best = ranked[0].aic
    lines = ["  learner        k   log-lik        AIC     dAIC        BIC"]
    for f in ranked:
        d = f.aic - best
        lines.append(f"  {f.kind:<13}{f.k:>3}{f.log_likelihood:>10.2f}{f.aic:>11.2f}"
                     f"{d:>9.2f}{f.bic:>11.2f}")
    return "\n".join(lines)
