"""The four learners: a 2 × 2 of point or Bayesian estimate × immediate reward or value.

  rescorla_wagner  RescorlaWagner  point,    reward   update(x, r)
  kalman_filter    KalmanFilter    Bayesian, reward   update(x, r)
  td               TD              point,    value    update(x, x_next, r)
  kalman_td        KalmanTD        Bayesian, value    update(x, x_next, r)

Every learner has ``w`` (n,), ``predict(x) -> (mean, var)``, ``learn_trial(X, r) ->
TrialResult``, ``params()``, ``state()`` / ``from_state()``; Bayesian ones also ``cov``
(n, n). ``make_learner(name, n_features, **params)`` builds one by name.
"""

from __future__ import annotations

from typing import Any

from ...errors import BadArgument
from ._shared import Learner, TrialResult
from .kalman_filter import KalmanFilter, kalman_correct, kalman_predict
from .kalman_td import KalmanTD
from .rescorla_wagner import RescorlaWagner
from .td import TD
from .two_step import TwoStepLearner

LEARNERS: dict[str, type[Learner]] = {
    cls.name: cls for cls in (RescorlaWagner, KalmanFilter, TD, KalmanTD, TwoStepLearner)
}


def make_learner(name: str, n_features: int, **params: Any) -> Learner:
    """A fresh learner by registry name; ``params`` are its constructor parameters."""
    cls = LEARNERS.get(name) if isinstance(name, str) else None
    if cls is None:
        raise BadArgument("name", f"one of {', '.join(map(repr, LEARNERS))}", name)
    unknown = sorted(set(params) - set(cls._param_names))
    if unknown:
        raise BadArgument(
            "params", f"parameters of {name} ({', '.join(cls._param_names)})", unknown
        )
    return cls(n_features, **params)


__all__ = [
    "LEARNERS",
    "TD",
    "KalmanFilter",
    "KalmanTD",
    "Learner",
    "RescorlaWagner",
    "TrialResult",
    "kalman_correct",
    "kalman_predict",
    "make_learner",
]
