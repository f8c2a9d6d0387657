"""Hypothesis strategies for learner tests: parameters, feature rows, rewards, sequences.

Ranges are "sane" ones a rule file would use (rates up to 1, variances 1e-4..10, rows
of 0/1 cue indicators or reals in [-2, 2], rewards in [-10, 10]); within them every
learner must keep finite outputs and a symmetric positive semi-definite covariance.
"""

from __future__ import annotations

import numpy as np
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp

LEARNER_NAMES = ("rescorla_wagner", "kalman_filter", "td", "kalman_td")

unit_rates = st.floats(min_value=0.0, max_value=1.0)
# an RW/TD rate above 2/(xᵀx) diverges; keep rows small enough that 0..0.2 stays stable
rates = st.floats(min_value=0.0, max_value=0.2)
unit = st.floats(min_value=0.0, max_value=1.0)
variances = st.floats(min_value=1e-4, max_value=10.0)
small_variances = st.floats(min_value=0.0, max_value=0.5)
rewards = st.floats(min_value=-10.0, max_value=10.0)


def params_for(name: str, n: int) -> st.SearchStrategy[dict]:
    """Constructor parameters of learner ``name`` with n features (alpha scalar or per-feature)."""
    alpha = st.one_of(rates, st.lists(rates, min_size=n, max_size=n))
    if name == "rescorla_wagner":
        return st.fixed_dictionaries({"alpha": alpha})
    if name == "td":
        return st.fixed_dictionaries({"alpha": alpha, "gamma": unit, "lam": unit})
    gaussian = {"diffusion": small_variances, "noise": variances, "prior_var": variances}
    if name == "kalman_filter":
        return st.fixed_dictionaries(gaussian)
    return st.fixed_dictionaries({"gamma": unit, **gaussian})


def feature_rows(n: int, steps: int) -> st.SearchStrategy[np.ndarray]:
    """(steps, n) rows: 0/1 cue indicators, or reals in [-1, 1] (sparse or dense)."""
    binary = hnp.arrays(np.float64, (steps, n), elements=st.sampled_from([0.0, 1.0]))
    real = hnp.arrays(np.float64, (steps, n),
                      elements=st.floats(min_value=-1.0, max_value=1.0, width=32))
    return st.one_of(binary, real)


def reward_vectors(steps: int) -> st.SearchStrategy[np.ndarray]:
    """(steps,) rewards in [-10, 10], often 0 or 1 as in conditioning."""
    return hnp.arrays(np.float64, (steps,),
                      elements=st.one_of(st.sampled_from([0.0, 1.0]), rewards))


@st.composite
def learner_cases(draw, names: tuple[str, ...] = LEARNER_NAMES, max_n: int = 6,
                  max_steps: int = 60) -> tuple[str, int, dict, np.ndarray, np.ndarray]:
    """(name, n, params, X (T, n), r (T,)): a learner and a random sequence to feed it."""
    name = draw(st.sampled_from(names))
    n = draw(st.integers(1, max_n))
    params = draw(params_for(name, n))
    steps = draw(st.integers(1, max_steps))
    return name, n, params, draw(feature_rows(n, steps)), draw(reward_vectors(steps))
