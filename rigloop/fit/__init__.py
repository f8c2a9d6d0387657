"""Fit learner parameters to an animal's behaviour by maximum likelihood.

The learner runs over the animal's trials exactly as it does live, and a behavioural
observation model links the value it holds to what the animal did. The rooms, in the
order they build on each other:

    params.py      the fitted parameters (bounds, scales, starts), pins by default, checks
    data.py        FitData: a subject's trials as learner rows and responses, made once
    results.py     FittedTrials, FitResult, AIC/BIC, the printed table and ranking
    likelihood.py  the observation model and log-likelihood (over ``core.responses``)
    search.py      fit_subject: unit box, multi-start L-BFGS-B, Hessian standard errors;
                   the only scipy import (the ``fit`` extra), made when a fit runs
    compare.py     ModelSpec, spec_from_rules, compare_learners, fit_from_store
"""

from ..core.responses import log_lik_respond, p_respond
from .compare import ModelSpec, compare_learners, fit_from_store, spec_from_rules
from .data import COUNT_RESPONSES, MIN_SCORED_TRIALS, FitData, prepare, responded
from .likelihood import fitted_trials, log_likelihood, onset_values, response_probability
from .params import OBSERVATION_PARAMS, PARAMETERS, ParamSpec, default_fixed, model_parameters
from .results import FitResult, FittedTrials, aic, bic, format_fit, format_ranking
from .search import MissingDependency, fit_subject

__all__ = [
    "COUNT_RESPONSES", "MIN_SCORED_TRIALS", "OBSERVATION_PARAMS", "PARAMETERS",
    "FitData", "FitResult", "FittedTrials", "MissingDependency", "ModelSpec", "ParamSpec",
    "aic", "bic", "compare_learners", "default_fixed", "fit_from_store", "fit_subject",
    "fitted_trials", "format_fit", "format_ranking", "log_lik_respond", "log_likelihood",
    "model_parameters", "onset_values", "p_respond", "prepare", "responded",
    "response_probability", "spec_from_rules",
]
