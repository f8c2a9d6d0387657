"""Sequential criteria that test again: Page's CUSUM, Robbins' test of power one, and
Wald's SPRT restarting after it accepts p0 -- their statistics against independent
formulas, their error guarantees by simulation, and the rule-file criterion end to end.

Simulations run many animals at once with numpy (one array op per trial); every
generator is seeded, so each run of the file sees the same animals.
"""

import math
import re

import numpy as np
import pytest
from scipy import stats

from rigloop import CuePresentation, Outcome, Response, TrialEvent
from rigloop.core.performance import (
    SEQUENTIAL_TESTS,
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
from rigloop.core.step import begin_session, step
from rigloop.core.subject import new_subject
from rigloop.errors import BadArgument, RuleError
from rigloop.rules import load_rules
from rigloop.rules.model import Sprt

P0, P1, ALPHA, HORIZON = 0.6, 0.85, 0.05, 2000
T0 = 1.7e9


def _tolerance(p, n):
    """Three binomial standard deviations of a rate estimated from n runs (common practice)."""
    return 3.0 * math.sqrt(p * (1.0 - p) / n)


def _simulate(test, p_of_trial, runs, trials, seed, p0=P0, p1=P1, alpha=ALPHA, beta=0.2, horizon=HORIZON):
    """Trial (1-based) of each run's first pass, 0 if it never passed: `runs` animals at once,
    animal correct with probability p_of_trial(t) on trial t (0-based)."""
    up, down, upper, lower = sequential_bounds(test, p0, p1, alpha, beta, horizon)
    rng = np.random.default_rng(seed)
    s = np.zeros(runs)
    passed = np.zeros(runs, dtype=int)
    for t in range(trials):
        s += np.where(rng.random(runs) < p_of_trial(t), up, down)
        if test == "cusum":
            np.maximum(s, 0.0, out=s)  # S_n = max(0, S_{n-1} + step)
        elif test == "wald":
            s[s <= lower] = 0.0  # accepted p0: a new test from 0
        new = (s >= upper) & (passed == 0)
        passed[new] = t + 1
    return passed


def _ramp(t):
    """An animal improving from 55% to 95% correct: a logistic ramp centred on trial 450, most
    of the rise between about trials 300 and 600."""
    return 0.55 + 0.40 / (1.0 + np.exp(-(t - 450.0) / 40.0))


# --------------------------------------------------------------------------- statistics


def test_log_likelihood_steps_and_drift():
    """A success adds ln(p1/p0), a failure ln((1-p1)/(1-p0)) (Wald 1945, Bernoulli likelihoods);
    the mean step at p is p ln(p1/p0) + (1-p) ln((1-p1)/(1-p0)), which is KL(p1||p0) at p1
    and -KL(p0||p1) at p0; KL against scipy.stats.entropy (relative entropy, the reference)."""
    up, down = llr_steps(P0, P1)
    assert up == pytest.approx(math.log(0.85 / 0.6), rel=1e-15)
    assert down == pytest.approx(math.log(0.15 / 0.4), rel=1e-15)
    for p, q in ((0.85, 0.6), (0.6, 0.85), (0.95, 0.5), (0.3, 0.31)):
        assert kl_bernoulli(p, q) == pytest.approx(stats.entropy([p, 1 - p], [q, 1 - q]), rel=1e-12)
    assert llr_drift(P1, P0, P1) == pytest.approx(kl_bernoulli(P1, P0), rel=1e-12)
    assert llr_drift(P0, P0, P1) == pytest.approx(-kl_bernoulli(P0, P1), rel=1e-12)
    with pytest.raises(BadArgument) as info:
        llr_steps(0.8, 0.6)
    assert info.value.argument == "p1"


def test_thresholds():
    """CUSUM h = ln(horizon/alpha) (the union bound over starts with Ville's inequality:
    horizon e^-h = alpha); power one ln(1/alpha) (Robbins 1970); Wald's ln A, ln B (Wald 1945)."""
    assert cusum_threshold(2000, 0.05) == pytest.approx(math.log(40000.0), rel=1e-15)
    assert 2000 * math.exp(-cusum_threshold(2000, 0.05)) == pytest.approx(0.05, rel=1e-12)
    assert power_one_threshold(0.05) == pytest.approx(math.log(20.0), rel=1e-15)
    up, down, upper, lower = sequential_bounds("wald", P0, P1, 0.05, 0.2)
    assert (upper, lower) == (sprt_bounds(0.05, 0.2)[1], sprt_bounds(0.05, 0.2)[0])
    assert sequential_bounds("cusum", P0, P1)[3] == -math.inf
    for bad, arg in ((lambda: cusum_threshold(0, 0.05), "horizon"), (lambda: cusum_threshold(2000, 1.0), "alpha"),
                     (lambda: sequential_bounds("page", P0, P1), "test")):
        with pytest.raises(BadArgument) as info:
            bad()
        assert info.value.argument == arg
    assert SEQUENTIAL_TESTS == ("cusum", "power_one", "wald")


def test_cusum_recursion_equals_max_over_starts():
    """Page's recursion S_n = max(0, S_{n-1} + X_n) equals the direct formula
    S_n = max(0, max_{k <= n} sum_{i=k..n} X_i) (Page 1954), on random streams."""
    rng = np.random.default_rng(1954)
    for _ in range(20):
        p0 = float(rng.uniform(0.3, 0.7))
        p1 = float(rng.uniform(p0 + 0.05, 0.97))
        up, down = llr_steps(p0, p1)
        x = np.where(rng.random(150) < rng.uniform(0.2, 1.0), up, down)
        s, s2 = 0.0, 0.0
        for n in range(len(x)):
            s = cusum_step(s, float(x[n]))
            s2, verdict = sequential_step("cusum", s2, bool(x[n] == up), up, down, math.inf, -math.inf)
            direct = max(0.0, max(float(x[k:n + 1].sum()) for k in range(n + 1)))
            assert s == pytest.approx(direct, abs=1e-9)
            assert s2 == s and verdict == "continue"


def test_the_vectorised_simulation_is_the_scalar_step():
    """The numpy simulation used below passes each run on the trial the per-trial
    sequential_step does, for every test."""
    for test in SEQUENTIAL_TESTS:
        up, down, upper, lower = sequential_bounds(test, P0, P1, ALPHA, 0.2, 50)
        got = _simulate(test, lambda t: 0.75, 40, 300, seed=7, horizon=50)
        rng = np.random.default_rng(7)
        draws = rng.random((300, 40)) < 0.75
        for run in range(40):
            llr, verdict, first = 0.0, "continue", 0
            for t in range(300):
                llr, verdict = sequential_step(test, llr if verdict == "continue" else 0.0, bool(draws[t, run]),
                                               up, down, upper, lower)
                if verdict == "accept_h1":
                    first = t + 1
                    break
            assert got[run] == first, (test, run)


# --------------------------------------------------------------------------- CUSUM guarantees


def test_cusum_rarely_passes_an_animal_at_p0():
    """An animal at p0 = 0.6 for 1,500 trials (p1 0.85, alpha 0.05, horizon 2000): the union
    bound gives P(pass within n trials) <= n e^-h = 1500/2000 * 0.05; the empirical rate must
    be within a binomial tolerance of alpha and below that bound, and far below 10%."""
    runs = 2000
    rate = float(np.mean(_simulate("cusum", lambda t: P0, runs, 1500, seed=1) > 0))
    assert rate <= 0.10
    assert rate <= ALPHA + _tolerance(ALPHA, runs)
    assert rate <= 1500 * math.exp(-cusum_threshold(HORIZON, ALPHA)) + _tolerance(0.0375, runs)


def test_cusum_mean_trials_to_a_false_pass_is_at_least_e_to_the_h():
    """Lorden (1971): the in-control average run length ARL0 >= e^h. With h = ln(20 / 0.5)
    (small, so that runs end) the mean trials to a pass at p0, truncated at 4,000 trials
    (which can only shorten it), is at least e^h = 40."""
    h_horizon, h_alpha = 20, 0.5
    passed = _simulate("cusum", lambda t: P0, 2000, 4000, seed=2, alpha=h_alpha, horizon=h_horizon)
    run_length = np.where(passed > 0, passed, 4000)
    assert run_length.mean() >= math.exp(cusum_threshold(h_horizon, h_alpha))


def test_cusum_passes_an_improving_animal_soon_after_it_reaches_p1():
    """An animal improving from 55% to 95% over trials ~300-600: >= 95% of 1,500-trial runs pass,
    the median delay from the first trial with true p >= p1 to the pass is small (about 20
    trials here; bound 150), and false passes during the poor stretch stay below alpha."""
    runs = 1000
    passed = _simulate("cusum", _ramp, runs, 1500, seed=3)
    t = np.arange(1500)
    reach_p1 = int(np.argmax(_ramp(t) >= P1)) + 1  # 1-based, as `passed`
    above_p0 = int(np.argmax(_ramp(t) > P0)) + 1
    assert np.mean(passed > 0) >= 0.95
    delay = float(np.median(passed[passed > 0] - reach_p1))
    assert delay <= 150, f"median delay {delay} trials after p reached p1"
    early = np.mean((passed > 0) & (passed < above_p0))
    assert early <= ALPHA + _tolerance(ALPHA, runs)


def test_summary_trials_to_pass_agree_with_simulation():
    """The README's table: the summary's expected trials to pass at p1 (Wald's identity,
    overshoot and CUSUM's floor ignored: approximate) are within 20% of the simulated mean;
    animals at p0 pass within 1,500 trials at most at rate alpha (binomial tolerance) for
    cusum and power_one, and mostly for wald."""
    for test in SEQUENTIAL_TESTS:
        for p0, p1, alpha, horizon in ((0.6, 0.85, 0.05, 2000), (0.5, 0.8, 0.05, 2000), (0.5, 0.8, 0.01, 5000)):
            kw = {"p0": p0, "p1": p1, "alpha": alpha, "horizon": horizon}
            expected = sequential_summary(test, p0, p1, alpha, 0.2, horizon)["trials_to_pass_p1"]
            passed = _simulate(test, lambda t, p1=p1: p1, 2000, 1000, seed=4, **kw)
            assert (passed > 0).all()
            assert passed.mean() == pytest.approx(expected, rel=0.2), (test, kw)
            false_rate = float(np.mean(_simulate(test, lambda t, p0=p0: p0, 2000, 1500, seed=11, **kw) > 0))
            if test == "wald":
                assert false_rate > 0.5, kw
            else:
                assert false_rate <= alpha + _tolerance(alpha, 2000), (test, kw)


# --------------------------------------------------------------------------- power one


def test_power_one_bounds_false_passes_for_ever_and_passes_at_p1():
    """Robbins (1970) / Ville (1939): P(ever pass | p0) <= alpha. 2,000 runs of 3,000 trials at
    p0 (a truncated run can only pass less) stay within a binomial tolerance of alpha; at p1
    every run passes within 1,500 trials."""
    runs = 2000
    rate = float(np.mean(_simulate("power_one", lambda t: P0, runs, 3000, seed=5) > 0))
    assert rate <= ALPHA + _tolerance(ALPHA, runs)
    assert (_simulate("power_one", lambda t: P1, 500, 1500, seed=6) > 0).all()


def test_power_one_is_slow_after_a_long_poor_stretch():
    """The drawback (the log LR has no floor, so it must climb back from far below 0): on the
    same improving animal its median delay after p reaches p1 is longer than CUSUM's."""
    reach_p1 = int(np.argmax(_ramp(np.arange(1500)) >= P1)) + 1
    delays = {}
    for test in ("cusum", "power_one"):
        passed = _simulate(test, _ramp, 500, 1500, seed=8)
        delays[test] = float(np.median(passed[passed > 0] - reach_p1))
    assert delays["power_one"] > delays["cusum"] + 50


# --------------------------------------------------------------------------- Wald, restarting


def test_wald_restart_step():
    """At llr <= ln B the test accepts p0 and starts again from 0; at >= ln A it passes."""
    ln_b, ln_a = sprt_bounds(0.05, 0.2)
    assert wald_restart_step(ln_b + 0.1, -0.2, ln_b, ln_a) == (0.0, "accept_h0")
    assert wald_restart_step(ln_a - 0.1, 0.2, ln_b, ln_a) == (pytest.approx(ln_a + 0.1), "accept_h1")
    assert wald_restart_step(0.0, 0.3, ln_b, ln_a) == (0.3, "continue")


def test_wald_restarting_passes_an_animal_that_improves_late():
    """55% correct for 300 trials, then 95%: the old test froze on its first 'accept p0'
    (most runs never pass); the restarting one passes every run."""
    def late(t):
        return 0.55 if t < 300 else 0.95

    passed = _simulate("wald", late, 500, 1500, seed=9)
    assert (passed > 0).all()
    frozen = BernoulliSPRT(P0, P1, alpha=ALPHA, beta=0.2)
    rng = np.random.default_rng(9)
    stuck = 0
    for _ in range(200):
        frozen.reset()
        for t in range(1500):
            if frozen.update(bool(rng.random() < late(t))) != "continue":
                break
        stuck += frozen.verdict == "accept_h0"
    assert stuck / 200 > 0.8


def test_wald_restarting_has_no_bound_over_restarts():
    """Each restart spends alpha again: an animal that stays at p0 almost always passes within
    1,500 trials, after about the summary's number of trials (Wald's OC and ASN
    approximations over geometric restarts; approximate)."""
    passed = _simulate("wald", lambda t: P0, 1000, 1500, seed=10)
    assert np.mean(passed > 0) > 0.95
    up, down, upper, lower = sequential_bounds("wald", P0, P1, ALPHA, 0.2)
    assert passed[passed > 0].mean() == pytest.approx(wald_trials_to_pass(P0, up, down, lower, upper), rel=0.35)


def test_wald_operating_characteristic_at_p0_and_p1():
    """Wald's approximations at p0 (theta = 1): P(accept p0) = (A - 1)/(A - B) and at p1
    (theta = -1): (1/A - 1)/(1/A - 1/B) (Wald 1945 [from memory]); with E[N] = (L ln B +
    (1 - L) ln A) / drift per test, the restarting test's expected trials are E[N] / (1 - L)."""
    ln_b, ln_a = sprt_bounds(0.05, 0.2)
    a, b = math.exp(ln_a), math.exp(ln_b)
    up, down = llr_steps(P0, P1)
    for p, accept0, drift in ((P0, (a - 1) / (a - b), -kl_bernoulli(P0, P1)),
                              (P1, (1 / a - 1) / (1 / a - 1 / b), kl_bernoulli(P1, P0))):
        n = (accept0 * ln_b + (1 - accept0) * ln_a) / drift
        assert wald_trials_to_pass(p, up, down, ln_b, ln_a) == pytest.approx(n / (1 - accept0), rel=1e-9)


# --------------------------------------------------------------------------- summary


def test_summary_states_threshold_guarantee_and_trials():
    """The numbers a person needs, for each test."""
    c = sequential_summary("cusum", P0, P1, ALPHA, horizon=HORIZON, p=0.95)
    assert c["threshold"] == pytest.approx(math.log(40000.0))
    assert c["false_pass_bound"] == 0.05 and c["mean_trials_to_false_pass"] == pytest.approx(40000.0)
    assert c["guarantee"].startswith("an animal at p0 throughout passes within 2000 trials with probability at "
                                     "most 0.05")
    assert c["trials_to_pass_p1"] == pytest.approx(math.log(40000.0) / kl_bernoulli(P1, P0))
    assert c["trials_to_pass_at_p"] == pytest.approx(math.log(40000.0) / llr_drift(0.95, P0, P1))
    assert sequential_summary("cusum", P0, P1, p=P0)["trials_to_pass_at_p"] is None
    po = sequential_summary("power_one", P0, P1, ALPHA, p=P0)
    assert po["threshold"] == pytest.approx(math.log(20.0)) and po["trials_to_pass_at_p"] == math.inf
    assert "ever passes" in po["guarantee"] and po["restart_at"] is None
    w = sequential_summary("wald", P0, P1, ALPHA, 0.2)
    assert w["restart_at"] == sprt_bounds(0.05, 0.2)[0] and w["false_pass_bound"] == pytest.approx(0.0625)
    assert "every restart spends that again" in w["guarantee"]


# --------------------------------------------------------------------------- rule file


RULES = """
name = "criterion"
reward_unit_ul = 4.0
[learner]
model = "rescorla_wagner"
[features]
kind = "identity"
[cues]
tone = "go"
[stages.s.blocks.training]
contingency.tone = {{ p = 1.0, ul = 4.0 }}
sprt = {{ {sprt} }}
end = {{ when = "sprt_accept", then = "done" }}
[stages.s.blocks.done]
contingency.tone = {{ p = 1.0, ul = 4.0 }}
"""


def _rules(sprt="p0 = 0.6, p1 = 0.85"):
    return load_rules(RULES.format(sprt=sprt))


def _problems(sprt):
    with pytest.raises(RuleError) as info:
        _rules(sprt)
    return info.value.problems


def _session(rules, p_of_trial, seed, trials=1500):
    """A session driven through begin_session / step: correct with probability p_of_trial(t),
    trials 2 s apart (inside the welfare session cap). Returns (trial the block ended or
    None, final state, the outcomes the criterion saw)."""
    rng = np.random.default_rng(seed)
    state, decision = begin_session(new_subject("m1", rules), rules, session="s1", rig="r1", wall_time=T0)
    seen = []
    for trial in range(1, trials + 1):
        correct = bool(rng.random() < p_of_trial(trial - 1))
        ul = decision.reward_ul if correct and decision.reward_armed else 0.0
        event = TrialEvent(subject="m1", rig="r1", session="s1", trial=trial,
                           cues=(CuePresentation(decision.cue, 0.0, 1.0),),
                           outcome=Outcome(reward_ul=ul, reward_time=1.0 if ul > 0 else None),
                           response=Response(kind="licks", result="correct" if correct else "incorrect"),
                           wall_time=T0 + 2.0 * trial)
        state, decision, _ = step(state, event, rules)
        seen.append(correct)
        if decision.block == "done":
            return trial, state, seen
    return None, state, seen


def test_rule_file_criterion_defaults_to_cusum():
    """`sprt = { p0, p1 }` is Page's CUSUM with alpha 0.05 and horizon 2000."""
    t = _rules().spec.stages["s"].blocks["training"].sprt
    assert t == Sprt(0.6, 0.85, "cusum", 0.05, 0.2, 2000, "all")


def test_block_holds_an_animal_at_p0_and_ends_after_it_improves():
    """Through step: at p = p0 the block does not end in 1,500 trials (most seeds; the sprt_llr the
    engine carries is the CUSUM of what it saw); the improving animal's block ends, after it improved."""
    rules = _rules()
    up, down, upper, lower = sequential_bounds("cusum", P0, P1, ALPHA, 0.2, HORIZON)
    ended = 0
    for seed in range(4):
        end, state, seen = _session(rules, lambda t: P0, seed)
        ended += end is not None
        if end is None:
            s = 0.0
            for correct in seen:
                s, _ = sequential_step("cusum", s, correct, up, down, upper, lower)
            assert state.schedule.sprt_llr == s and state.schedule.sprt_verdict == "continue"
    assert ended <= 1
    above_p0 = int(np.argmax(_ramp(np.arange(1500)) > P0)) + 1
    for seed in range(2):
        end, _, _ = _session(rules, _ramp, 100 + seed)
        assert end is not None and end > above_p0


def test_engine_wald_restarts_and_sprt_reject_means_just_accepted_p0():
    """test = "wald": at ln B the engine records accept_h0 (sprt_reject), sets the llr to 0 and
    tests again on the next trial; a pass then stays."""
    from rigloop.rules import StaticView
    from rigloop.rules.engine import ScheduleEnv

    rules = _rules('test = "wald", p0 = 0.6, p1 = 0.85, beta = 0.2')
    s = rules.open_session(rules.start_subject(), "s1", T0)
    block = rules.spec.stages["s"].blocks["training"]

    def ev(trial, result):
        return TrialEvent(subject="m1", rig="r1", session="s1", trial=trial, cues=(CuePresentation("tone", 0.0, 1.0),),
                          response=Response(kind="licks", result=result), wall_time=T0 + trial)

    s = rules.observe(s, ev(1, "incorrect"))  # ln(0.15/0.4) = -0.98 > ln B = -1.56
    assert s.sprt_verdict == "continue"
    s = rules.observe(s, ev(2, "incorrect"))
    assert (s.sprt_verdict, s.sprt_llr) == ("accept_h0", 0.0)
    assert ScheduleEnv(s, StaticView(), block).name("sprt_reject") is True
    s = rules.observe(s, ev(3, "correct"))
    assert s.sprt_verdict == "continue" and s.sprt_llr == pytest.approx(math.log(0.85 / 0.6))
    for t in range(4, 12):
        s = rules.observe(s, ev(t, "correct"))
    assert s.sprt_verdict == "accept_h1"
    llr = s.sprt_llr
    s = rules.observe(s, ev(12, "incorrect"))
    assert (s.sprt_verdict, s.sprt_llr) == ("accept_h1", llr)


def test_loader_errors_name_the_key():
    """beta only with wald, horizon only with cusum (whole number in [10, 1e7]), known tests only."""
    path = "stages.s.blocks.training.sprt"
    assert _problems('test = "cusum", p0 = 0.6, p1 = 0.85, beta = 0.2') == [
        f'{path}.beta: is allowed only with test = "wald" (this test is "cusum", which has no '
        "'performing at p0' boundary and so no miss rate)"]
    # a table with beta and no test was written for Wald's SPRT, before the CUSUM default: it stays Wald
    legacy = _rules("p0 = 0.6, p1 = 0.85, beta = 0.2").spec.stages["s"].blocks["training"]
    assert legacy.sprt.test == "wald"
    assert _problems('test = "power_one", p0 = 0.6, p1 = 0.85, beta = 0.2')[0].startswith(
        f'{path}.beta: is allowed only with test = "wald" (this test is "power_one"')
    assert _problems('test = "wald", p0 = 0.6, p1 = 0.85, horizon = 500') == [
        f'{path}.horizon: is allowed only with test = "cusum" (this test is "wald"; only the CUSUM states its '
        "guarantee over a horizon of trials)"]
    assert _problems('test = "page", p0 = 0.6, p1 = 0.85') == [
        f"{path}.test: must be one of cusum, power_one, wald (got 'page')"]
    assert _problems("p0 = 0.6, p1 = 0.85, horizon = 5") == [
        f"{path}.horizon: must be a whole number in [10, 10000000] (got 5)"]
    assert _problems("p0 = 0.6, p1 = 0.85, horizon = 100.5") == [
        f"{path}.horizon: must be a whole number in [10, 10000000] (got 100.5)"]
    w = _rules('test = "wald", p0 = 0.6, p1 = 0.85, alpha = 0.01, beta = 0.1').spec.stages["s"].blocks["training"]
    assert (w.sprt.test, w.sprt.alpha, w.sprt.beta) == ("wald", 0.01, 0.1)


def test_check_words_the_criterion_and_warns_for_wald():
    """`rigloop check` states the test's threshold, guarantee and expected trials at p1, and for
    Wald's SPRT warns that each restart spends alpha again."""
    text = _rules().describe()
    assert "sequential criterion on all (Page's CUSUM; Page 1954): p0 0.6 vs p1 0.85" in text
    assert "reaches h = ln(horizon 2000 / alpha 0.05) = 10.597" in text
    assert ("guarantee: an animal at p0 throughout passes within 2000 trials with probability at most 0.05; "
            "mean trials to a false pass at least e^h = 40000") in text
    assert "expect about 71 trials to pass once the animal performs at p1" in text
    assert "warning" not in text
    wald = _rules('test = "wald", p0 = 0.6, p1 = 0.85').describe()
    assert re.search(r"warning: Wald's SPRT spends alpha again at every restart", wald)
    power = _rules('test = "power_one", p0 = 0.6, p1 = 0.85').describe()
    assert "ever passes, however long it trains, with probability at most 0.05" in power
