"""The two-step task and its learners: each update against its published equation, the
successor representation against its closed form, agents and the online posterior on w."""

from __future__ import annotations

import numpy as np
import pytest

from rigloop.core.two_step import TwoStepParams, TwoStepTask, TwoStepValues, WPosterior, simulate_agent
from rigloop.core.two_step.agents import hybrid_agent
from rigloop.core.two_step.choice import first_stage_probabilities, softmax
from rigloop.core.two_step.model_based import (model_based_values, transition_probabilities,
                                               value_iteration)
from rigloop.core.two_step.model_free import sarsa_lambda_episode, two_step_update
from rigloop.core.two_step.successor import (SuccessorLearner, closed_form, expected_update,
                                             two_step_sr_update)
from rigloop.core.two_step.task import reflect
from rigloop.errors import BadArgument

# ------------------------------------------------------------------ the task


def test_task_transitions_are_common_07_rare_03():
    """Daw et al. 2011 (Neuron 69:1204): each action leads to its common state with p = 0.7."""
    task = TwoStepTask()
    assert np.allclose(task.transitions, [[0.7, 0.3], [0.3, 0.7]])
    rng = np.random.default_rng(3)
    draws = [task.transition(0, rng) for _ in range(20000)]
    common = np.mean([c for _, c in draws])
    assert abs(common - 0.7) < 0.01  # 4 binomial sd = 0.013
    assert all(s == (0 if c else 1) for s, c in draws)


def test_reward_walk_stays_in_bounds_and_steps_with_sd_0025():
    """Daw et al. 2011: Gaussian random walks, sd 0.025, reflecting bounds [0.25, 0.75]."""
    task = TwoStepTask()
    p = task.reward_walk(20000, np.random.default_rng(1))
    assert p.min() >= 0.25 and p.max() <= 0.75
    steps = np.diff(p, axis=0)
    inner = (p[:-1] > 0.3) & (p[:-1] < 0.7)  # far from a bound, a step is the Gaussian's own
    assert abs(steps[inner].std() - 0.025) < 0.001
    assert np.array_equal(p, task.reward_walk(20000, np.random.default_rng(1)))


def test_reflect_folds_back_at_both_bounds():
    assert np.allclose(reflect(np.array([0.8, 0.2, 0.5, 0.75, 1.3]), 0.25, 0.75),
                       [0.7, 0.3, 0.5, 0.75, 0.3])


def test_task_refuses_a_common_probability_below_one_half():
    with pytest.raises(BadArgument, match=r"^'p_common' must be a probability in \(0.5, 1\)"):
        TwoStepTask(p_common=0.3)


# ------------------------------------------------------------------ model-free


def test_two_step_update_worked_by_hand():
    """Daw et al. 2011 equations, worked by hand: α1 = α2 = 0.5, λ = 0.6, Q2(0, 1) = 0.4,
    Q1(0) = 0.2, reward 1: δ1 = 0.2, δ2 = 0.6; Q1(0) = 0.2 + 0.1 + 0.18 = 0.48; Q2 = 0.7."""
    q1 = np.array([0.2, 0.0])
    q2 = np.array([[0.0, 0.4], [0.0, 0.0]])
    n1, n2 = two_step_update(q1, q2, 0, 0, 1, 1.0, 0.5, 0.5, 0.6)
    assert n1 == pytest.approx([0.48, 0.0])
    assert np.allclose(n2, [[0.0, 0.7], [0.0, 0.0]])
    assert q1[0] == 0.2  # inputs are not changed


def test_sarsa_lambda_episode_is_the_two_step_update():
    """SARSA(λ) with replacing traces carrying each step's rate (Sutton & Barto 2018, §12.7)
    on the two-step episode equals Daw et al.'s written-out first- and second-stage updates."""
    rng = np.random.default_rng(0)
    for _ in range(50):
        q1, q2 = rng.uniform(0, 1, 2), rng.uniform(0, 1, (2, 2))
        a1, s2, a2 = (int(x) for x in rng.integers(0, 2, 3))
        r = float(rng.integers(0, 2))
        al1, al2, lam = rng.uniform(0, 1, 3)
        n1, n2 = two_step_update(q1, q2, a1, s2, a2, r, al1, al2, lam)
        # states: 0 = first stage, 1 + s = second-stage state s
        q = np.vstack([q1, q2])
        got, deltas = sarsa_lambda_episode(q, [0, 1 + s2], [a1, a2], [0.0, r], [al1, al2], lam)
        assert np.allclose(got[0], n1) and np.allclose(got[1:], n2)
        assert deltas[1] == pytest.approx(r - q2[s2, a2])


# ------------------------------------------------------------------ model-based


def test_transition_counts_with_a_dirichlet_prior():
    """Posterior mean of a Dirichlet(1, 1) after 7 and 3 counts: 8/12 and 4/12 (conjugacy)."""
    P = transition_probabilities(np.array([[7.0, 3.0], [0.0, 0.0]]))
    assert np.allclose(P, [[8 / 12, 4 / 12], [0.5, 0.5]])


def test_model_based_values_are_one_bellman_backup():
    """Q_MB(a) = Σ_s P(s|a) max_a' Q2(s, a') (Daw et al. 2011), worked by hand."""
    P = np.array([[0.7, 0.3], [0.3, 0.7]])
    q2 = np.array([[0.2, 0.6], [0.9, 0.1]])
    # a = 0: 0.7·0.6 + 0.3·0.9 = 0.69; a = 1: 0.3·0.6 + 0.7·0.9 = 0.81
    assert model_based_values(P, q2) == pytest.approx([0.69, 0.81])


def test_value_iteration_matches_the_bellman_fixed_point():
    """With one action per state, V = R + γTV has the solution (I − γT)⁻¹R (Bellman 1957)."""
    rng = np.random.default_rng(2)
    T = rng.dirichlet(np.ones(4), size=4)
    R = rng.uniform(0, 1, 4)
    V = value_iteration(T[:, None, :], R[:, None], 0.8, sweeps=400)
    assert V == pytest.approx(np.linalg.solve(np.eye(4) - 0.8 * T, R))


# ------------------------------------------------------------------ successor representation

RING = np.array([[0.0, 0.6, 0.4, 0.0],
                 [0.0, 0.0, 0.5, 0.5],
                 [0.3, 0.0, 0.0, 0.7],
                 [1.0, 0.0, 0.0, 0.0]])


def test_expected_sr_td_converges_to_the_closed_form():
    """Dayan 1993 (Neural Comput. 5:613): M = Σ γ^t T^t = (I − γT)⁻¹ is the fixed point."""
    M = np.eye(4)
    for _ in range(3000):
        M = expected_update(M, RING, 0.9, 0.1)
    assert np.allclose(M, closed_form(RING, 0.9), atol=1e-9)
    # each row of M sums to 1/(1 − γ) on a chain that never ends (Dayan 1993)
    assert np.allclose(M.sum(axis=1), 10.0)


def test_sampled_sr_td_converges_to_the_closed_form():
    """SR-TD from sampled transitions of a fixed policy (Russek et al. 2017, PLoS Comput.
    Biol. 13:e1005768) approaches (I − γT)⁻¹; with a small constant rate the error is a few %."""
    rng = np.random.default_rng(5)
    sr = SuccessorLearner(4, gamma=0.5, alpha_m=0.01, alpha_r=0.1)
    s = 0
    for _ in range(40000):
        s_next = int(rng.choice(4, p=RING[s]))
        sr.observe(s, 0.0, s_next)
        s = s_next
    exact = closed_form(RING, 0.5)
    assert np.max(np.abs(sr.M - exact)) < 0.05 * exact.max()


def _chain_learner():
    """States: 0 → 1 → 2 (reward 1, end) and 3 → 4 (reward 0, end) learned to convergence."""
    sr = SuccessorLearner(5, gamma=0.9, alpha_m=0.5, alpha_r=0.5)
    for _ in range(60):
        sr.observe(0, 0.0, 1)
        sr.observe(1, 0.0, 2)
        sr.observe(2, 1.0, None)
        sr.observe(3, 0.0, 4)
        sr.observe(4, 0.0, None)
    return sr


def test_sr_revalues_at_once_after_a_reward_change():
    """Russek et al. 2017; Momennejad et al. 2017 (Nat. Hum. Behav. 1:680): after the reward
    of state 2 is re-experienced (from state 2 only), the value of state 0 follows at once."""
    sr = _chain_learner()
    assert sr.values()[0] == pytest.approx(0.81, abs=1e-6)  # γ² · 1
    for _ in range(30):
        sr.observe(3, 0.0, 4)
        sr.observe(4, 5.0, None)  # state 4 now pays 5; state 2 untouched
    for _ in range(30):
        sr.observe(2, 0.0, None)  # state 2 now pays nothing
    assert sr.values()[0] == pytest.approx(0.0, abs=1e-6)


def test_sr_does_not_revalue_after_a_transition_change():
    """Russek et al. 2017: when state 1 now leads to state 4 (paying 5), learned from state 1
    onward only, state 1's value changes but state 0's stays with the old successor; a
    model-based learner (value iteration on the new model) revalues state 0 at once."""
    sr = _chain_learner()
    for _ in range(30):
        sr.observe(4, 5.0, None)
        sr.observe(1, 0.0, 4)
    v = sr.values()
    assert v[1] == pytest.approx(0.9 * 5.0, rel=1e-6)
    assert v[0] == pytest.approx(0.81, abs=1e-6)  # stale: M(0, ·) still points at state 2
    T = np.zeros((5, 1, 5))
    T[0, 0, 1] = T[1, 0, 4] = T[3, 0, 4] = 1.0
    R = np.array([0.0, 0.0, 0.0, 0.0, 5.0])[:, None]
    assert value_iteration(T, R, 0.9)[0] == pytest.approx(0.81 * 5.0)


def test_two_step_sr_is_sr_td_on_the_task_graph():
    """On the graph [action 0, action 1, state 0, state 1] with γ = 1 and the episode ending in
    the second stage, the general SR-TD learner's action rows are the two-step update's M."""
    rng = np.random.default_rng(4)
    sr = SuccessorLearner(4, gamma=1.0, alpha_m=0.3, alpha_r=0.4)
    m, r_state = np.zeros((2, 2)), np.zeros(2)
    for _ in range(200):
        a1, s2 = int(rng.integers(2)), int(rng.integers(2))
        r = float(rng.integers(2))
        sr.observe(2 + s2, r, None)
        sr.observe(a1, 0.0, 2 + s2)
        m, r_state = two_step_sr_update(m, r_state, a1, s2, r, 0.3, 0.4)
    assert np.allclose(sr.M[:2, 2:], m) and np.allclose(sr.R[2:], r_state)
    assert np.allclose(sr.values()[:2], m @ r_state)


# ------------------------------------------------------------------ agents


def test_agents_are_seeded_and_choose_by_their_softmax():
    a = simulate_agent("hybrid", 300, seed=11)
    b = simulate_agent("hybrid", 300, seed=11)
    assert np.array_equal(a.a1, b.a1) and np.array_equal(a.reward, b.reward)
    prm = a.params
    for t in (0, 1, 150):
        prev = int(a.a1[t - 1]) if t else -1
        assert np.allclose(a.p_first[t], first_stage_probabilities(a.q_first[t], prm.beta1, prm.p, prev))
    assert np.allclose(a.q_first, prm.w * a.q_mb + (1 - prm.w) * a.q_mf)
    assert np.array_equal(a.common, a.a1 == a.s2)


def test_softmax_with_perseveration_worked_by_hand():
    """exp(β(Q + p·rep)) normalised (Daw et al. 2011): β = 2, Q = (0.5, 0), p = 0.25 on action 1:
    P(0) = 1 / (1 + exp(2·(0.25 − 0.5))) = 1 / (1 + e^−0.5)."""
    assert first_stage_probabilities(np.array([0.5, 0.0]), 2.0, 0.25, 1)[0] == pytest.approx(
        1 / (1 + np.exp(-0.5)))
    assert softmax(np.array([1000.0, 0.0]), 1.0) == pytest.approx([1.0, 0.0])


def test_params_are_checked_by_name():
    with pytest.raises(BadArgument, match=r"^'w' must be a number in \[0.0, 1.0\] \(got 1.5\)$"):
        TwoStepParams(w=1.5)
    with pytest.raises(BadArgument, match="one of alpha1"):
        TwoStepParams().with_(omega=0.3)


# ------------------------------------------------------------------ the posterior on w


def _brute_force_log_post(run, params, grid):
    """Σ_t log P(a1_t | w) for each w, each w run through its own value state."""
    out = []
    for w in grid:
        v, total = TwoStepValues(), 0.0
        for t in range(run.n_trials):
            q = v.first_stage("hybrid", w)
            total += np.log(first_stage_probabilities(q, params.beta1, params.p, v.previous_a1)[run.a1[t]])
            v = v.learned(int(run.a1[t]), int(run.s2[t]), int(run.a2[t]), run.reward[t], params)
        out.append(total)
    out = np.array(out)
    return out - np.log(np.exp(out - out.max()).sum()) - out.max()


def _posterior(run, params=None, **grids):
    post = WPosterior.start(params, **grids)
    for t in range(run.n_trials):
        post = post.updated(int(run.a1[t]), int(run.s2[t]), int(run.a2[t]), run.reward[t])
    return post


def test_posterior_on_w_is_bayes_rule_on_the_grid():
    """The vectorised update equals each w's likelihood computed on its own (uniform prior;
    β1 and p fixed by one-value grids)."""
    run = hybrid_agent(0.7, 60, seed=2)
    grid = np.linspace(0, 1, 6)
    prm = run.params
    post = _posterior(run, prm, w_grid=grid, beta1_grid=[prm.beta1], p_grid=[prm.p],
                      bias_grid=[0.0])
    assert np.allclose(post.log_post, _brute_force_log_post(run, prm, grid))
    assert np.allclose(post.marginal_w(), np.exp(post.log_post))
    assert post.n_trials == 60 and post.marginal_w().sum() == pytest.approx(1.0)


@pytest.mark.parametrize("w, planner", [(1.0, True), (0.0, False)])
def test_posterior_on_w_follows_the_agent(w, planner):
    """After 400 trials a model-based agent has P(w > 0.5) ≥ 0.9 and a model-free one not."""
    run = hybrid_agent(w, 400, seed=7)
    post = _posterior(run)
    assert (post.p_above(0.5) >= 0.9) is planner
    low, high = post.interval()
    assert low <= w <= high


@pytest.mark.parametrize("params", [
    TwoStepParams(beta1=0.0, beta2=0.0, p=0.0),         # chooses at random
    TwoStepParams(beta1=12.0, beta2=3.0, p=1.0, w=0.0),  # mostly repeats its last choice
], ids=["random", "perseverating"])
def test_an_agent_that_uses_no_task_structure_does_not_look_like_a_planner(params):
    """Choices that follow no learned model give no evidence that the animal plans (β1 and p
    are on the grid: fixed, flat choices would pass for w = 1)."""
    for seed in range(3):
        run = simulate_agent("hybrid", 400, seed, params)
        assert _posterior(run).p_above(0.5) < 0.9


def test_a_side_biased_animal_does_not_look_like_a_planner():
    """An animal that takes action 0 on 90% of trials whatever happened does not pass."""
    rng = np.random.default_rng(8)
    task = TwoStepTask()
    probs = task.reward_walk(400, rng)
    post = WPosterior.start()
    for t in range(400):
        a1 = int(rng.random() > 0.9)
        s2, _ = task.transition(a1, rng)
        a2 = int(rng.integers(2))
        post = post.updated(a1, s2, a2, float(rng.random() < probs[t, s2, a2]))
    assert post.p_above(0.5) < 0.9
