"""What a fit gives back: the per-trial quantities at the fitted parameters, the fit
itself with its information criteria, and the text the CLI prints for one or several fits.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np


@dataclass(frozen=True, slots=True, eq=False)
class FittedTrials:
    """Per-trial model quantities at the fitted parameters (regressors for other data).

    value:     (N,) V_t, the value at the first cue onset before the trial's update
               (nan for a trial without a cue).
    sd:        (N,) its posterior sd for Bayesian learners, else None.
    p_respond: (N,) the model's probability of a response.
    responded: (N,) 1 respond, 0 withhold, nan not in the likelihood.
    """

    sessions: tuple[str, ...]
    trials: tuple[int, ...]
    value: np.ndarray
    sd: np.ndarray | None
    p_respond: np.ndarray
    responded: np.ndarray

    def __post_init__(self) -> None:
        for arr in (self.value, self.sd, self.p_respond, self.responded):
            if arr is not None:
                arr.setflags(write=False)

    def __len__(self) -> int:
        return len(self.trials)

    def rows(self) -> list[dict[str, Any]]:
        """One plain dict per trial (for CSV/JSONL export); nan becomes None."""
        out = []
        for k in range(len(self.trials)):
            row = {"session": self.sessions[k], "trial": self.trials[k],
                   "value": _plain(self.value[k]),
                   "sd": _plain(self.sd[k]) if self.sd is not None else None,
                   "p_respond": _plain(self.p_respond[k]), "responded": _plain(self.responded[k])}
            out.append(row)
        return out


@dataclass(frozen=True, slots=True, eq=False)
class FitResult:
    """The maximum-likelihood fit of one learner to one animal.

    params:  every model parameter (fitted and fixed) by name.
    free:    the fitted ones, in order; ``fixed`` the pinned ones.
    se:      standard error per fitted parameter (None for one at a bound), or None when
             the Hessian is not positive definite; ``se_note`` says why something is missing.
    aic, bic: Akaike (1974) and Schwarz (1978) criteria with k = len(free) and
             n = n_trials (the trials in the likelihood).
    link:    "respond" (go/no-go logistic) or "choice" (two-choice softmax).
    ci95:    profile-likelihood 95% interval per fitted parameter (``profile.Interval``).
    warnings: plain sentences about parameters the trials do not pin down.
    bounds, start: the search range and first start of each fitted parameter.
    bootstrap: parametric-bootstrap 95% percentile interval per fitted parameter, if run.
    cv_log_likelihood: Σ over held-out sessions of their log-likelihood at the parameters
             fitted to the other sessions (``crossval.py``), if computed.
    calibration: the Bartlett factors of calibrated intervals (``calibrate.Calibration``),
             if calibrated; ``ci95`` then holds the calibrated intervals and
             ``ci95_uncalibrated`` the χ² ones.
    """

    learner: str
    representation: str
    params: dict[str, float]
    free: tuple[str, ...]
    fixed: dict[str, Any]
    log_likelihood: float
    n_trials: int
    n_events: int
    converged: bool
    message: str
    se: dict[str, float | None] | None
    se_note: str
    starts: int
    trials: FittedTrials | None = field(default=None, repr=False)
    link: str = "respond"
    ci95: dict[str, Any] = field(default_factory=dict)
    warnings: tuple[str, ...] = ()
    bounds: dict[str, tuple[float, float]] = field(default_factory=dict)
    start: dict[str, float] = field(default_factory=dict)
    bootstrap: dict[str, tuple[float, float]] | None = None
    cv_log_likelihood: float | None = None
    cv_sessions: int = 0
    calibration: Any = None
    ci95_uncalibrated: dict[str, Any] | None = None

    @property
    def k(self) -> int:
        return len(self.free)

    @property
    def aic(self) -> float:
        return aic(self.log_likelihood, self.k)

    @property
    def bic(self) -> float:
        return bic(self.log_likelihood, self.k, self.n_trials)

    def record(self) -> dict[str, Any]:
        """The fixed JSON record of ``rigloop fit --json`` (scripts depend on its keys):
        learner, link, params, se, ci95, fixed, log_likelihood, aic, bic, n_trials,
        converged, warnings; plus cv_log_likelihood (null without two sessions) and
        calibration (null unless calibrated: replicates, factor and mean_lr per parameter,
        and the uncalibrated ci95)."""
        se = {n: (None if self.se is None else _plain_or_none(self.se.get(n))) for n in self.free}
        return {"learner": self.learner, "link": self.link,
                "params": {n: _jsonable(v) for n, v in self.params.items()},
                "se": se,
                "ci95": {n: [iv.lo, iv.hi] for n, iv in self.ci95.items()},
                "fixed": {n: _jsonable(v) for n, v in self.fixed.items()},
                "log_likelihood": self.log_likelihood, "aic": self.aic, "bic": self.bic,
                "n_trials": self.n_trials, "converged": self.converged,
                "warnings": list(self.warnings), "cv_log_likelihood": self.cv_log_likelihood,
                "calibration": self._calibration_record()}

    def _calibration_record(self) -> dict[str, Any] | None:
        cal = self.calibration
        if cal is None:
            return None
        return {"replicates": cal.replicates, "factor": dict(cal.factor),
                "mean_lr": dict(cal.mean_lr), "se": dict(cal.se),
                "ci95_uncalibrated": {n: [iv.lo, iv.hi]
                                      for n, iv in (self.ci95_uncalibrated or {}).items()}}

    def to_dict(self) -> dict[str, Any]:
        """Plain data (no per-trial arrays) for JSON."""
        return {"learner": self.learner, "representation": self.representation,
                "params": dict(self.params), "free": list(self.free), "fixed": dict(self.fixed),
                "se": None if self.se is None else dict(self.se), "se_note": self.se_note,
                "log_likelihood": self.log_likelihood, "aic": self.aic, "bic": self.bic,
                "n_trials": self.n_trials, "n_events": self.n_events, "k": self.k,
                "converged": self.converged, "message": self.message, "starts": self.starts,
                "link": self.link, "ci95": {n: [iv.lo, iv.hi] for n, iv in self.ci95.items()},
                "warnings": list(self.warnings),
                "bounds": {n: list(b) for n, b in self.bounds.items()},
                "bootstrap": None if self.bootstrap is None else
                {n: list(b) for n, b in self.bootstrap.items()},
                "cv_log_likelihood": self.cv_log_likelihood,
                "calibration": self._calibration_record()}


def aic(log_likelihood: float, k: int) -> float:
    """AIC = 2k − 2 ln L (Akaike 1974, IEEE Trans Autom Control 19:716–723)."""
    return 2.0 * k - 2.0 * log_likelihood


def bic(log_likelihood: float, k: int, n: int) -> float:
    """BIC = k ln n − 2 ln L (Schwarz 1978, Ann Stat 6:461–464)."""
    return k * math.log(n) - 2.0 * log_likelihood


def format_fit(result: FitResult) -> str:
    """The parameter table (estimate, SE, 95% interval, search range, start), then the
    criteria, the optimiser's state and the warnings, as the CLI prints it."""
    link = "two-choice softmax" if result.link == "choice" else "go/no-go logistic"
    lines = [f"learner {result.learner} on {result.representation} features, {link} link: "
             f"{result.n_trials:,} of {result.n_events:,} trials in the likelihood, "
             f"{result.starts} starts",
             f"  {'parameter':<12}{'estimate':>11}{'SE':>10}  {'95% interval':<24}"
             f"{'search range':<20}{'start':>8}"]
    for name, value in result.params.items():
        if name in result.fixed:
            shown = value if isinstance(value, (list, tuple)) else f"{float(value):.4g}"
            lines.append(f"  {name:<12}{shown!s:>11}{'':>10}  {'(fixed)':<24}")
            continue
        se = result.se.get(name) if result.se else None
        iv = result.ci95.get(name)
        if iv is None:
            ci = "-"
        else:
            ci = f"[{iv.lo:.4g}, {iv.hi:.4g}]"
            if iv.lo_end == "estimate at bound" or iv.hi_end == "estimate at bound":
                ci += " 1-sided"
            elif "search bound" in (iv.lo_end, iv.hi_end):
                ci += " cut"
        lo, hi = result.bounds.get(name, (math.nan, math.nan))
        start = result.start.get(name)
        lines.append(f"  {name:<12}{value:>11.4g}{(f'{se:.3g}' if se is not None else '-'):>10}  "
                     f"{ci:<24}{f'[{lo:.4g}, {hi:.4g}]':<20}"
                     f"{(f'{start:.4g}' if start is not None else '-'):>8}")
    if result.calibration is not None:
        cal = result.calibration
        lines.append(f"  95% intervals calibrated ({cal.replicates} simulated data sets at the "
                     f"estimate; cutoff 3.84 x factor):")
        for name in result.free:
            iv = (result.ci95_uncalibrated or {}).get(name)
            plain = f"[{iv.lo:.4g}, {iv.hi:.4g}]" if iv is not None else "-"
            lines.append(f"    {name:<10} factor {cal.factor[name]:.2f} (mean LR "
                         f"{cal.mean_lr[name]:.2f} ± {cal.se[name]:.2f}); uncalibrated {plain}")
    if result.bootstrap:
        for name, (lo, hi) in result.bootstrap.items():
            lines.append(f"  bootstrap 95% interval of {name}: [{lo:.4g}, {hi:.4g}]")
    lines.append(f"  log-likelihood {result.log_likelihood:.3f}   AIC {result.aic:.3f}   "
                 f"BIC {result.bic:.3f}   k = {result.k}")
    if result.cv_log_likelihood is not None:
        lines.append(f"  cross-validated log-likelihood {result.cv_log_likelihood:.3f} "
                     f"({result.cv_sessions} held-out sessions)")
    state = "converged" if result.converged else "NOT converged"
    lines.append(f"  optimiser: {state} ({result.message})")
    if result.se_note:
        lines.append(f"  note: {result.se_note}")
    for w in result.warnings:
        lines.append(f"  warning: {w}")
    return "\n".join(lines)


def format_ranking(results: Sequence[FitResult]) -> str:
    """The AIC ranking of several fits (best first), with ΔAIC from the best, BIC and
    (when computed) the cross-validated log-likelihood of held-out sessions."""
    best = min(r.aic for r in results)
    cv = any(r.cv_log_likelihood is not None for r in results)
    lines = [f"  {'rank':<6}{'learner':<18}{'link':<9}{'k':>3}{'log-lik':>12}{'AIC':>12}"
             f"{'dAIC':>9}{'BIC':>12}" + (f"{'CV log-lik':>13}" if cv else "")]
    for i, r in enumerate(sorted(results, key=lambda r: r.aic)):
        row = (f"  {i + 1:<6}{r.learner:<18}{r.link:<9}{r.k:>3}{r.log_likelihood:>12.3f}"
               f"{r.aic:>12.3f}{r.aic - best:>9.2f}{r.bic:>12.3f}")
        if cv:
            row += f"{r.cv_log_likelihood:>13.3f}" if r.cv_log_likelihood is not None else f"{'-':>13}"
        lines.append(row)
    return "\n".join(lines)


def _plain_or_none(x: Any) -> float | None:
    return None if x is None else _plain(x)


def _jsonable(v: Any) -> Any:
    """A parameter value as JSON data (a per-cue rate array as a list)."""
    if isinstance(v, np.ndarray):
        return v.tolist()
    if isinstance(v, (list, tuple)):
        return list(v)
    return float(v)


def _plain(x: float) -> float | None:
    """``x`` as a float, nan as None (for JSON)."""
    x = float(x)
    return None if math.isnan(x) else x
