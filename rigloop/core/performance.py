"""Response performance, one import away: the learning curve, counting criteria and
sequential tests, which live in their own modules.

* :mod:`.curve`: the state-space learning curve (forward filter, smoother, learning trial);
* :mod:`.detection`: the exact binomial tail, signal-detection d';
* :mod:`.sequential`: Wald's SPRT and the criteria that keep testing (CUSUM, power one);
* :mod:`.checks`: the argument checks they share.
"""

# re-exports: this module is the one import for all of them (tests and older call sites)
from .checks import _binary, _count, _number, _open_unit, _positive  # noqa: F401
from .curve import (  # noqa: F401
    _INF,
    _NEWTON_MAX,
    _NEWTON_TOL,
    _NORMAL,
    LearningCurve,
    Smoothed,
    _filter_step,
    _logistic,
    _logit,
    _mu,
    _z_one_sided,
    _z_two_sided,
    learning_trial,
    smooth,
)
from .detection import binomial_p_above, dprime
from .sequential import (
    SEQUENTIAL_TESTS,
    SPRT_VERDICTS,
    BernoulliSPRT,
    cusum_step,
    cusum_threshold,
    kl_bernoulli,
    llr_drift,
    llr_steps,
    power_one_threshold,
    sequential_bounds,
    sequential_step,
    sequential_summary,
    sprt_bounds,
    wald_restart_step,
    wald_trials_to_pass,
)

__all__ = [
    "SEQUENTIAL_TESTS", "SPRT_VERDICTS", "BernoulliSPRT", "LearningCurve", "Smoothed", "binomial_p_above",
    "cusum_step", "cusum_threshold", "dprime", "kl_bernoulli", "learning_trial", "llr_drift", "llr_steps",
    "power_one_threshold", "sequential_bounds", "sequential_step", "sequential_summary", "smooth", "sprt_bounds",
    "wald_restart_step", "wald_trials_to_pass",
]
