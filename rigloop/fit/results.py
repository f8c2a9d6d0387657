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

    @property
    def k(self) -> int:
        return len(self.free)

    @property
    def aic(self) -> float:
        return aic(self.log_likelihood, self.k)

    @property
    def bic(self) -> float:
        return bic(self.log_likelihood, self.k, self.n_trials)

    def to_dict(self) -> dict[str, Any]:
        """Plain data (no per-trial arrays) for JSON."""
        return {"learner": self.learner, "representation": self.representation,
                "params": dict(self.params), "free": list(self.free), "fixed": dict(self.fixed),
                "se": None if self.se is None else dict(self.se), "se_note": self.se_note,
                "log_likelihood": self.log_likelihood, "aic": self.aic, "bic": self.bic,
                "n_trials": self.n_trials, "n_events": self.n_events, "k": self.k,
                "converged": self.converged, "message": self.message, "starts": self.starts}


def aic(log_likelihood: float, k: int) -> float:
    """AIC = 2k − 2 ln L (Akaike 1974, IEEE Trans Autom Control 19:716–723)."""
    return 2.0 * k - 2.0 * log_likelihood


def bic(log_likelihood: float, k: int, n: int) -> float:
    """BIC = k ln n − 2 ln L (Schwarz 1978, Ann Stat 6:461–464)."""
    return k * math.log(n) - 2.0 * log_likelihood


def format_fit(result: FitResult) -> str:
    """The parameter table with log-likelihood, AIC and BIC, as the CLI prints it."""
    lines = [f"learner {result.learner} on {result.representation} features: "
             f"{result.n_trials:,} of {result.n_events:,} trials in the likelihood, "
             f"{result.starts} starts",
             f"  {'parameter':<12}{'estimate':>12}{'SE':>12}"]
    for name, value in result.params.items():
        if name in result.fixed:
            shown = value if isinstance(value, (list, tuple)) else f"{float(value):.4g}"
            lines.append(f"  {name:<12}{shown!s:>12}{'(fixed)':>12}")
            continue
        se = result.se.get(name) if result.se else None
        lines.append(f"  {name:<12}{value:>12.4g}{(f'{se:.3g}' if se is not None else '-'):>12}")
    lines.append(f"  log-likelihood {result.log_likelihood:.3f}   AIC {result.aic:.3f}   "
                 f"BIC {result.bic:.3f}   k = {result.k}")
    state = "converged" if result.converged else "NOT converged"
    lines.append(f"  optimiser: {state} ({result.message})")
    if result.se_note:
        lines.append(f"  note: {result.se_note}")
    return "\n".join(lines)


def format_ranking(results: Sequence[FitResult]) -> str:
    """The AIC ranking of several fits (best first), with ΔAIC from the best."""
    best = min(r.aic for r in results)
    lines = [f"  {'rank':<6}{'learner':<18}{'k':>3}{'log-lik':>12}{'AIC':>12}{'dAIC':>9}"
             f"{'BIC':>12}"]
    for i, r in enumerate(sorted(results, key=lambda r: r.aic)):
        lines.append(f"  {i + 1:<6}{r.learner:<18}{r.k:>3}{r.log_likelihood:>12.3f}{r.aic:>12.3f}"
                     f"{r.aic - best:>9.2f}{r.bic:>12.3f}")
    return "\n".join(lines)


def _plain(x: float) -> float | None:
    """``x`` as a float, nan as None (for JSON)."""
    x = float(x)
    return None if math.isnan(x) else x
