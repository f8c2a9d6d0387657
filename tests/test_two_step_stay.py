"""The stay analysis: the table and the logistic regression against reference libraries,
and the published qualitative pattern of the shipped agents."""

from __future__ import annotations

import numpy as np
import pytest

from rigloop.core.two_step import simulate_agent, stay_regression, stay_table
from rigloop.core.two_step.stay import design, logistic_irls, stay_flags, wilson_interval
from rigloop.errors import BadArgument

sm = pytest.importorskip("statsmodels.api")
from statsmodels.stats.proportion import proportion_confint  # noqa: E402


def test_irls_matches_statsmodels_logit():
    """Reference: statsmodels Logit (Newton), coefficients and standard errors."""
    run = simulate_agent("hybrid", 600, seed=3)
    X, y = design(run.a1, run.reward, run.common)
    b, cov, converged = logistic_irls(X, y)
    ref = sm.Logit(y, X).fit(disp=0)
    assert converged
    assert np.allclose(b, ref.params, atol=1e-8)
    assert np.allclose(np.sqrt(np.diagonal(cov)), ref.bse, atol=1e-8)
    reg = stay_regression(run.a1, run.reward, run.common)
    assert np.allclose(reg.p_value, ref.pvalues, atol=1e-8)


def test_wilson_interval_matches_statsmodels():
    """Reference: statsmodels proportion_confint(method='wilson')."""
    for k, n in [(0, 10), (7, 10), (55, 80), (80, 80)]:
        assert wilson_interval(k, n) == pytest.approx(proportion_confint(k, n, method="wilson"))


def test_stay_table_counts_by_hand():
    """Trials: a1 = 0 0 1 1 0, reward 1 0 1 1 0, common T F T T F. After trial 1 (rewarded,
    common) the animal stayed; after 2 (unrewarded, rare) it switched; after 3 and 4
    (rewarded, common) it stayed, then switched."""
    cells = {(c.rewarded, c.common): c for c in stay_table([0, 0, 1, 1, 0], [1, 0, 1, 1, 0],
                                                         [True, False, True, True, False])}
    assert (cells[True, True].n, cells[True, True].stays) == (3, 2)
    assert (cells[False, False].n, cells[False, False].stays) == (1, 0)
    assert cells[True, False].n == 0 and np.isnan(cells[True, False].p)
    stay, rew, com = stay_flags([0, 0, 1], [1, 0, 1], [True, False, True])
    assert stay.tolist() == [True, False] and rew.tolist() == [True, False]


def test_regression_refuses_an_animal_that_never_switches():
    with pytest.raises(BadArgument, match="both stays and switches"):
        stay_regression([0] * 20, [1, 0] * 10, [True] * 20)


N = 3000  # enough trials for each effect to stand well clear of its standard error


def test_model_free_agent_shows_a_reward_main_effect_only():
    """Daw et al. 2011 (Neuron 69:1204, Fig. 2): model-free → stay follows reward,
    not reward × transition."""
    run = simulate_agent("model_free", N, seed=1)
    reg = stay_regression(run.a1, run.reward, run.common)
    assert reg.term("reward")["coef"] > 0 and reg.term("reward")["p_value"] < 1e-6
    assert reg.term("reward_x_transition")["p_value"] > 0.01
    assert abs(reg.term("reward_x_transition")["coef"]) < 0.25 * reg.term("reward")["coef"]


def test_model_based_agent_shows_a_reward_by_transition_interaction_only():
    """Daw et al. 2011, Fig. 2: model-based → stay after reward with a common transition and
    after no reward with a rare one (the interaction); no main effect of reward."""
    run = simulate_agent("model_based", N, seed=1)
    reg = stay_regression(run.a1, run.reward, run.common)
    assert reg.term("reward_x_transition")["coef"] > 0
    assert reg.term("reward_x_transition")["p_value"] < 1e-6
    # what is left of a main effect is small beside the interaction and not significant at 1%
    assert abs(reg.term("reward")["coef"]) < 0.25 * reg.term("reward_x_transition")["coef"]
    assert reg.term("reward")["p_value"] > 0.01
    cells = {(c.rewarded, c.common): c.p for c in stay_table(run.a1, run.reward, run.common)}
    assert cells[True, True] > cells[True, False] and cells[False, False] > cells[False, True]


def test_hybrid_agent_shows_both_effects():
    """A hybrid (w = 0.5) shows both the main effect and the interaction (Daw et al. 2011)."""
    run = simulate_agent("hybrid", N, seed=1)
    reg = stay_regression(run.a1, run.reward, run.common)
    assert reg.term("reward")["p_value"] < 1e-3 and reg.term("reward_x_transition")["p_value"] < 1e-3
