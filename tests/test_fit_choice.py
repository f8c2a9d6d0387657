"""Two-choice fits, profile intervals at bounds, unidentified-parameter warnings, the fit
CLI's --fix/--bounds/--start/--link, and a small parameter recovery."""

import json
import math
import os

import numpy as np
import pytest
from scipy import stats

from rigloop import fit
from rigloop.cli import main
from rigloop.core.learners import make_learner
from rigloop.errors import BadArgument
from rigloop.fit import synthetic as sy
from rigloop.fit.likelihood import side_values

RW = "rescorla_wagner"


@pytest.fixture(scope="module")
def choice_events():
    return sy.choice_trials({"alpha": 0.2}, beta=5.0, bias=0.5, lapse=0.05, persev=0.0,
                            n=400, seed=3, sessions=2)


def test_choice_link_is_picked_from_the_response_kind(choice_events):
    """Choice trials are all usable (not "0 of N"), their columns are cue:side."""
    data = fit.prepare(choice_events, sy.IDENTITY, reward_unit_ul=sy.UNIT_UL)
    assert data.link == "choice" and data.n_observed == 400
    assert data.representation.cues.cues == ("tone_hi:left", "tone_hi:right",
                                             "tone_lo:left", "tone_lo:right")
    assert set(np.unique(data.responded)) == {0.0, 1.0}
    gonogo = fit.prepare(choice_events, sy.IDENTITY, reward_unit_ul=sy.UNIT_UL, link="respond")
    assert gonogo.n_observed == 0


def test_choice_log_likelihood_equals_an_independent_softmax(choice_events):
    """Σ log P(choice) equals a hand-written two-way softmax over per-(cue, side)
    Rescorla–Wagner values with a side bias, lapse and an exponential choice kernel."""
    alpha, beta, bias, lapse, persev, decay = 0.25, 4.0, 0.3, 0.08, 0.6, 0.5
    data = fit.prepare(choice_events, sy.IDENTITY, reward_unit_ul=sy.UNIT_UL)
    got = fit.log_likelihood(data, RW, {"alpha": alpha, "beta": beta, "bias": bias,
                                        "lapse": lapse, "persev": persev, "decay": decay})
    # by hand: Q(cue, side) ← Q + α (r − Q) for the chosen side (Rescorla & Wagner 1972);
    # P(right) = lapse/2 + (1 − lapse) e^{zR} / (e^{zR} + e^{zL}) with zR = β Q_R + bias + persev·h,
    # zL = β Q_L (softmax over the two sides; Sutton & Barto 2018, §2.8 / §13.1);
    # h ← decay·h + (1 − decay)·c (exponentially weighted past choices, Lau & Glimcher 2005)
    Q = {}
    h, y, p = 0.0, [], []
    for e in choice_events:
        cue, side = e.cues[0].cue, e.response.value
        ql, qr = Q.get((cue, "left"), 0.0), Q.get((cue, "right"), 0.0)
        zr, zl = beta * qr + bias + persev * h, beta * ql
        p.append(lapse / 2 + (1 - lapse) * math.exp(zr) / (math.exp(zr) + math.exp(zl)))
        y.append(1 if side == "right" else 0)
        r = e.outcome.reward_ul / sy.UNIT_UL
        Q[(cue, side)] = Q.get((cue, side), 0.0) + alpha * (r - Q.get((cue, side), 0.0))
        h = decay * h + (1 - decay) * (1.0 if side == "right" else -1.0)
    # reference: scipy.stats.bernoulli.logpmf
    want = float(np.sum(stats.bernoulli.logpmf(y, p)))
    assert got == pytest.approx(want, rel=1e-10)


@pytest.mark.parametrize("name, params", [
    (RW, {"alpha": 0.3}),
    ("kalman_filter", {"diffusion": 0.01, "noise": 1.0, "prior_var": 1.0}),
])
def test_side_values_one_pass_equal_a_per_trial_loop(choice_events, name, params):
    """The one-pass values of one-hot rows equal predict() before a per-trial learn_trial."""
    data = fit.prepare(choice_events, sy.IDENTITY, reward_unit_ul=sy.UNIT_UL)
    QL, QR = side_values(data, make_learner(name, 4, **params))
    learner = make_learner(name, 4, **params)
    rep = data.representation
    for k, e in enumerate(choice_events):
        cue = e.cues[0].cue
        assert QL[k] == pytest.approx(learner.predict(rep.onset_row(f"{cue}:left"))[0], abs=1e-12)
        assert QR[k] == pytest.approx(learner.predict(rep.onset_row(f"{cue}:right"))[0], abs=1e-12)
        X, r = data.rows[k]
        learner.learn_trial(X, r)


def test_learner_free_choice_fit_equals_statsmodels_logit():
    """With α = 0 (values stay 0), β pinned and lapse 0, the choice link is a logistic
    regression of the choice on the history kernel: bias and persev, their SEs and the
    log-likelihood equal statsmodels' Logit (a general-purpose GLM reference)."""
    sm = pytest.importorskip("statsmodels.api")
    events = sy.choice_trials({"alpha": 0.0}, beta=1.0, bias=0.4, lapse=0.0, persev=1.2,
                              decay=0.6, n=500, seed=5)
    data = fit.prepare(events, sy.IDENTITY, reward_unit_ul=sy.UNIT_UL)
    r = fit.fit_subject(data, RW, fixed={"alpha": 0.0, "beta": 1.0, "lapse": 0.0, "decay": 0.6},
                        starts=2)
    h = fit.likelihood.history(data.responded, 0.6)
    ref = sm.Logit(data.responded, sm.add_constant(h)).fit(disp=0)
    assert r.params["bias"] == pytest.approx(ref.params[0], abs=2e-3)
    assert r.params["persev"] == pytest.approx(ref.params[1], abs=5e-3)
    assert r.log_likelihood == pytest.approx(ref.llf, abs=1e-5)
    assert r.se["persev"] == pytest.approx(ref.bse[1], rel=0.02)
    # profile interval ≈ Wald interval for a near-quadratic likelihood (large n; Pawitan 2001,
    # In All Likelihood, ch. 2, from memory): within 10% of the statsmodels Wald width
    lo, hi = ref.conf_int()[1]
    iv = r.ci95["persev"]
    assert iv.lo_end == iv.hi_end == "profile"
    assert (iv.hi - iv.lo) == pytest.approx(hi - lo, rel=0.1)
    assert iv.lo < r.params["persev"] < iv.hi


def test_estimate_on_a_bound_gets_a_one_sided_interval_said_in_words(choice_events):
    """A lapse bounded away from its truth sits on the bound: one-sided interval, a warning."""
    r = fit.fit_subject(choice_events, RW, sy.IDENTITY, reward_unit_ul=sy.UNIT_UL,
                        bounds={"lapse": (0.3, 0.5)}, starts=1,
                        fixed={"alpha": 0.2, "persev": 0.0, "decay": 0.7})
    iv = r.ci95["lapse"]
    assert r.params["lapse"] == pytest.approx(0.3)
    assert iv.lo_end == "estimate at bound" and iv.one_sided and iv.lo == pytest.approx(0.3)
    assert "one-sided" in iv.words("lapse")
    assert any(w.startswith("lapse = 0.3 sits on its lower bound 0.3: its 95% interval is "
                            "one-sided") for w in r.warnings)
    assert "1-sided" in fit.format_fit(r)


def test_a_parameter_without_effect_is_flagged_as_flat():
    """TD's γ has no effect on one-row-per-trial features: freed by a bound, its profile is
    flat over the whole range and the warning says the trials do not tell its value."""
    events = sy.gonogo_trials({"alpha": 0.2}, 8.0, 0.4, 0.05, n=120, seed=1)
    r = fit.fit_subject(events, "td", sy.IDENTITY, reward_unit_ul=sy.UNIT_UL,
                        bounds={"gamma": (0.0, 1.0)}, starts=1,
                        fixed={"alpha": 0.2, "lam": 0.0, "lapse": 0.05})
    assert "gamma" in r.free
    iv = r.ci95["gamma"]
    assert iv.lo_end == iv.hi_end == "search bound"
    assert any(w.startswith("gamma: the likelihood is flat across its whole search range")
               for w in r.warnings)


def test_bootstrap_go_nogo_and_refuses_choice(choice_events):
    """Percentile intervals from redrawn go/no-go responses; a choice fit is refused."""
    events = sy.gonogo_trials({"alpha": 0.2}, 8.0, 0.4, 0.05, n=200, seed=2)
    r = fit.fit_subject(events, RW, sy.IDENTITY, reward_unit_ul=sy.UNIT_UL, starts=1,
                        intervals=False, bootstrap=20, fixed={"lapse": 0.05})
    for name in ("alpha", "beta", "theta"):
        lo, hi = r.bootstrap[name]
        assert lo < hi
    with pytest.raises(BadArgument, match="a go/no-go fit"):
        fit.fit_subject(choice_events, RW, sy.IDENTITY, reward_unit_ul=sy.UNIT_UL, starts=1,
                        intervals=False, bootstrap=20)


def test_profile_interval_of_a_binomial_rate_equals_the_likelihood_ratio_interval():
    """One free parameter, no re-fit: the interval ends are where 2·(ℓ̂ − ℓ(p)) = 3.84,
    found independently with scipy.optimize.brentq (the likelihood-ratio interval of a
    binomial proportion; Agresti 2013, *Categorical Data Analysis*, §1.4.2, from memory),
    and one-sided from the bound when the estimate sits on it."""
    from scipy import optimize

    from rigloop.fit.profile import profile_intervals

    def nll_of(k, n):
        return lambda s: -(k * math.log(max(s[0], 1e-300)) + (n - k) * math.log(max(1 - s[0], 1e-300)))

    def no_refit(f, z0):  # nothing else to re-fit
        return z0, f(z0)

    for k, n in ((7, 40), (33, 50)):
        nll, p_hat = nll_of(k, n), k / n
        got, _ = profile_intervals(nll, np.array([p_hat]), nll([p_hat]), lambda s: s, ["p"],
                                   no_refit, [math.sqrt(p_hat * (1 - p_hat) / n)])
        def g(p, nll=nll, p_hat=p_hat):
            return 2 * (nll([p]) - nll([p_hat])) - 3.841458820694124
        lo, hi = optimize.brentq(g, 1e-9, p_hat), optimize.brentq(g, p_hat, 1 - 1e-9)
        assert got["p"].lo == pytest.approx(lo, abs=2e-4) and got["p"].hi == pytest.approx(hi, abs=2e-4)
    nll = nll_of(0, 30)
    got, _ = profile_intervals(nll, np.array([0.0]), nll([0.0]), lambda s: s, ["p"], no_refit)
    # 0 of 30: ℓ(p) = 30 log(1 − p); the end solves −2·30·log(1 − p) = 3.84 in closed form
    assert got["p"].lo_end == "estimate at bound" and got["p"].lo == 0.0
    assert got["p"].hi == pytest.approx(1 - math.exp(-3.841458820694124 / 60), abs=2e-4)


@pytest.mark.parametrize("full", [pytest.param(True, marks=pytest.mark.skipif(
    os.environ.get("RIGLOOP_FULL") != "1", reason="full size with RIGLOOP_FULL=1")), False])
def test_small_recovery_intervals_cover_the_truth(full):
    """Go/no-go data sets from known parameters: each 95% profile interval misses its truth
    at most once per parameter (5 data sets: P(≥ 2 misses | 95%) ≈ 0.023; 3 data sets:
    ≈ 0.007; binomial). By default α and lapse are pinned at their truth so the fits take
    seconds (β and θ profiled with the other re-fitted); RIGLOOP_FULL=1 frees all four.
    The full grid is tools/bench/recovery.py."""
    truth = {"alpha": 0.2, "beta": 8.0, "theta": 0.4, "lapse": 0.1}
    fixed = None if full else {"alpha": 0.2, "lapse": 0.1}
    free = truth if full else {"beta": 8.0, "theta": 0.4}
    misses = dict.fromkeys(free, 0)
    for seed in range(5 if full else 3):
        events = sy.gonogo_trials({"alpha": 0.2}, 8.0, 0.4, 0.1, n=250, seed=100 + seed)
        r = fit.fit_subject(events, RW, sy.IDENTITY, reward_unit_ul=sy.UNIT_UL, starts=1,
                            fixed=fixed, hessian=full)
        assert set(r.ci95) == set(free)
        for k, v in free.items():
            misses[k] += not (r.ci95[k].lo <= v <= r.ci95[k].hi)
    assert all(m <= 1 for m in misses.values()), misses


# --------------------------------------------------------------------------- the CLI


@pytest.fixture(scope="module")
def choice_store(tmp_path_factory, choice_events):
    from rigloop.rules import load_example
    from rigloop.store import Store

    path = tmp_path_factory.mktemp("choice") / "rig.db"
    rules = load_example("two_choice_staircase")
    from rigloop.offline.simulate import SimulatedAnimal, record_session

    animal = SimulatedAnimal("r07", task="choice", sides={"light_left": "left",
                                                           "light_right": "right"}, seed=4)
    state = None
    with Store(path) as store:
        for k in range(2):
            state = record_session(store, rules, animal, session=f"s{k + 1}", state=state,
                                   start_time=1.8e9 + k * 86400, max_trials=60).state
    return path


def test_cli_fits_choices_with_the_fixed_json(choice_store, capsys):
    """A two-choice animal is fitted with the softmax link; the JSON has the fixed keys and a
    cross-validated log-likelihood over the two sessions."""
    code = main(["fit", "--db", str(choice_store), "--subject", "r07", "--starts", "1",
                 "--fix", "persev=0", "--fix", "lapse=0.05", "--json"])
    doc = json.loads(capsys.readouterr().out)
    assert code == 0 and set(doc) == {"subject", "fits", "ranking"}
    f = doc["fits"][0]
    assert f["link"] == "choice" and f["n_trials"] > 100
    assert f["fixed"] == {"decay": 0.7, "persev": 0.0, "lapse": 0.05}
    assert set(f["params"]) == {"alpha", "beta", "bias", "lapse", "persev", "decay"}
    assert set(f["ci95"]) == {"alpha", "beta", "bias"}
    assert all(lo <= f["params"][k] <= hi for k, (lo, hi) in f["ci95"].items())
    assert isinstance(f["cv_log_likelihood"], float) and isinstance(f["warnings"], list)


def test_cli_refuses_bad_parameter_options(choice_store, capsys):
    """Unknown names list the valid ones; malformed pairs show the form expected."""
    code = main(["fit", "--db", str(choice_store), "--subject", "r07", "--fix", "theta=0.3"])
    err = capsys.readouterr().err
    assert code == 2
    assert "'--fix': 'theta' is not a parameter of rescorla_wagner with the choice link" in err
    assert "alpha, beta, bias, lapse, persev, decay" in err
    code = main(["fit", "--db", str(choice_store), "--subject", "r07", "--bounds", "lapse=0.2"])
    assert code == 2 and "expected NAME=LOW:HIGH" in capsys.readouterr().err
    code = main(["fit", "--db", str(choice_store), "--subject", "r07", "--bounds", "lapse=0.4:0.1"])
    assert code == 2 and "'bounds[lapse]' must be a pair (low, high)" in capsys.readouterr().err


def test_cli_go_nogo_link_on_two_choice_trials_says_to_try_choice(choice_store, capsys):
    """'0 of N trials' under --link respond on a two-choice store names the link to use."""
    code = main(["fit", "--db", str(choice_store), "--subject", "r07", "--starts", "1",
                 "--link", "respond"])
    err = capsys.readouterr().err
    assert code == 2 and "0 of 120 trials" in err
    assert "try --link choice" in err
