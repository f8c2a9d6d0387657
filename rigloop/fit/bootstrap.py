"""Parametric-bootstrap 95% intervals: responses drawn from the fitted model, refitted.

For each of ``n`` replicates the animal's responses are redrawn from the fitted
probabilities (trial by trial, on the trials in the likelihood) and the free parameters
refitted from the estimate; the interval is the 2.5th and 97.5th percentiles of the
refitted values (the percentile method, Efron & Tibshirani 1993, *An Introduction to the
Bootstrap*, ch. 13; Wichmann & Hill 2001, Percept Psychophys 63:1314, for psychometric
fits).

What is held as recorded: the trial sequence and its outcomes. With the go/no-go link the
learner's values depend only on the outcomes, so a redraw changes the responses alone and
the replicate is an exact draw of the fitted model given the outcomes. With the choice
link the chosen side decides which value learns and what the animal gets, so responses
cannot be redrawn without re-simulating the task; the bootstrap refuses it (the profile
intervals remain).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from typing import Any

import numpy as np

from ..errors import BadArgument
from .data import FitData
from .likelihood import NegLogLik, fitted_trials


def parametric_bootstrap(data: FitData, learner_name: str, free: Sequence[str],
                         pinned: Mapping[str, Any], params: Mapping[str, Any], n: int, seed: int,
                         refit: Callable[[NegLogLik], np.ndarray],
                         progress: Callable[[int, int], None] | None = None
                         ) -> dict[str, tuple[float, float]]:
    """Percentile 95% interval per free parameter from ``n`` refits of redrawn responses.

    refit(objective) returns the natural-scale free parameters minimising ``objective``.
    """
    n = int(n)
    if n < 20:
        raise BadArgument("bootstrap", "a number of replicates >= 20 (a 95% percentile "
                          "interval needs at least that many; 200 or more is common practice)", n)
    if data.link != "respond":
        raise BadArgument("bootstrap", "a go/no-go fit: a choice decides what the animal learns "
                          "next, so choices cannot be redrawn without re-simulating the task; "
                          "use the profile intervals", data.link)
    p = fitted_trials(data, learner_name, params).p_respond
    observed = ~np.isnan(data.responded)
    rng = np.random.default_rng(seed)
    draws = np.empty((n, len(free)))
    for b in range(n):
        y = np.full(data.n_events, np.nan)
        y[observed] = (rng.random(int(observed.sum())) < p[observed]).astype(np.float64)
        draws[b] = refit(NegLogLik(data, learner_name, free, pinned, responded=y))
        if progress is not None:
            progress(b + 1, n)
    lo, hi = np.percentile(draws, [2.5, 97.5], axis=0)
    return {name: (float(lo[j]), float(hi[j])) for j, name in enumerate(free)}
