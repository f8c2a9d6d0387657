"""``rigloop fit`` and ``rigloop two-step --db`` on stored two-step sessions: the trials
read back from the store, the fit command's JSON shape, the ranking, and the errors for
a learner of the wrong kind of trials."""

from __future__ import annotations

import json

import numpy as np
import pytest

from rigloop.cli.main import main
from rigloop.fit.two_step import TwoStepData, TwoStepLikelihood, fit_two_step
from rigloop.fit.two_step_store import read_two_step
from rigloop.store import Store

pytest.importorskip("scipy")

RECORD_KEYS = {"learner", "link", "params", "se", "ci95", "fixed", "log_likelihood", "aic", "bic",
               "n_trials", "converged", "warnings"}


@pytest.fixture(scope="module")
def stores(tmp_path_factory):
    """A store with a model-based and a model-free mouse (300 trials of two_step each) and
    one with a one-step session (tone_reversal)."""
    root = tmp_path_factory.mktemp("two_step_store")
    two = str(root / "two_step.sqlite")
    one = str(root / "one_step.sqlite")
    assert main(["--quiet", "simulate", "two_step", "--subjects", "2", "--sessions", "1",
                 "--max-trials", "300", "--mix", "model_based=0.5,model_free=0.5", "--db", two]) == 0
    assert main(["--quiet", "simulate", "tone_reversal", "--subjects", "1", "--sessions", "1",
                 "--max-trials", "40", "--db", one]) == 0
    with Store(two, create=False) as store:
        truth = {s: next(iter(store.trials(s))).extra["true_w"] for s in store.subjects()}
    planner = next(s for s, w in truth.items() if w == 1.0)
    habitual = next(s for s, w in truth.items() if w == 0.0)
    return {"two": two, "one": one, "planner": planner, "habitual": habitual}


def _fit_json(capsys, *argv) -> dict:
    capsys.readouterr()
    assert main(["fit", *argv, "--json"]) == 0
    return json.loads(capsys.readouterr().out)


def test_stored_steps_read_back_as_the_animal_made_them(stores):
    """Each trial's (a1, s2, a2, reward) from its stored steps, spelled out by name: first
    poke right = 1, the second state port_b_light = 1, second poke right = 1, paid = 1."""
    with Store(stores["two"], create=False) as store:
        got = read_two_step(store, stores["planner"])
        events = list(store.trials(stores["planner"]))
    assert got.n_left_out == 0 and got.data.n_trials == len(events) == 300
    assert got.states == ("centre_light", "port_a_light", "port_b_light")
    expect = np.array([(e.steps[0].action == "right", e.steps[1].state == "port_b_light",
                        e.steps[1].action == "right", e.steps[1].reward_ul > 0) for e in events], float)
    assert np.array_equal(np.column_stack([got.data.a1, got.data.s2, got.data.a2, got.data.reward]), expect)
    # the task's transitions: common (0.7, the rule file's) in about 70% of trials
    assert 0.6 < got.data.common.mean() < 0.8


def test_fit_json_has_the_fit_commands_shape_and_ranks_by_aic(stores, capsys):
    doc = _fit_json(capsys, "--db", stores["two"], "--subject", stores["planner"], "--learner", "mf",
                    "--learner", "mb", "--learner", "hybrid", "--learner", "sr", "--starts", "1")
    assert set(doc) == {"subject", "fits", "ranking"} and doc["subject"] == stores["planner"]
    kinds = [f["learner"] for f in doc["fits"]]
    assert kinds == ["model_free", "model_based", "hybrid", "successor"]
    for f in doc["fits"]:
        assert RECORD_KEYS <= set(f), RECORD_KEYS - set(f)
        assert f["n_trials"] == 300 and f["n_choices"] == 600
        assert set(f["se"]) <= set(f["params"])
        # AIC = 2k − 2ℓ (Akaike 1974); BIC = k ln n − 2ℓ with n the choices (Schwarz 1978)
        k = len(f["se"])
        assert f["aic"] == pytest.approx(2 * k - 2 * f["log_likelihood"])
        assert f["bic"] == pytest.approx(k * np.log(600) - 2 * f["log_likelihood"])
    assert doc["ranking"] == [f["learner"] for f in sorted(doc["fits"], key=lambda f: f["aic"])]
    hybrid = doc["fits"][2]
    assert set(hybrid["params"]) == {"alpha1", "alpha2", "lam", "beta1", "beta2", "p", "w"}
    low, high = hybrid["ci95"]["w"]
    assert low <= hybrid["params"]["w"] <= high
    # standard errors from the observed information where the estimate is inside its range
    # (the model-based learner on this model-based mouse is identified throughout; the
    # hybrid's w runs to 1, where alpha1 and lam no longer matter: no SEs, and it says so)
    assert all(v > 0 for v in doc["fits"][1]["se"].values()), doc["fits"][1]["se"]
    assert all(v is None or v > 0 for v in hybrid["se"].values())
    if None in hybrid["se"].values():
        assert any("no standard error" in w or "not positive definite" in w for w in hybrid["warnings"])
    # the model-based mouse: the model-based learner fits its choices better than the model-free one
    by_kind = {f["learner"]: f for f in doc["fits"]}
    assert by_kind["model_based"]["aic"] < by_kind["model_free"]["aic"]


def test_the_fit_follows_the_animal_not_the_rule_file(stores, capsys):
    """Same rule file, two mice: w is high for the one that plans, low for the one that
    repeats what paid (its own choices decide), and the fit of the store equals the fit of
    the same trials handed over directly."""
    w = {}
    for who in ("planner", "habitual"):
        doc = _fit_json(capsys, "--db", stores["two"], "--subject", stores[who], "--starts", "1")
        (fit,) = doc["fits"]
        assert fit["learner"] == "hybrid" and doc["ranking"] == ["hybrid"]
        w[who] = fit["params"]["w"]
    assert w["planner"] > 0.6 and w["habitual"] < 0.4, w
    with Store(stores["two"], create=False) as store:
        data = read_two_step(store, stores["habitual"]).data
    direct = fit_two_step(data, "hybrid", starts=1)
    assert direct.params["w"] == pytest.approx(w["habitual"], abs=1e-9)


def test_fix_and_start_reach_the_two_step_fit(stores, capsys):
    doc = _fit_json(capsys, "--db", stores["two"], "--subject", stores["planner"], "--learner", "mb",
                    "--fix", "p=0", "--start", "beta1=3", "--starts", "1")
    (fit,) = doc["fits"]
    assert fit["fixed"] == {"p": 0.0} and fit["params"]["p"] == 0.0 and "p" not in fit["se"]
    with Store(stores["two"], create=False) as store:
        data = read_two_step(store, stores["planner"]).data
    prm = dict(fit["params"], alpha1=0.5, lam=0.6, w=1.0)
    assert -TwoStepLikelihood(data, "model_based")(prm) == pytest.approx(fit["log_likelihood"])


def test_fit_prints_a_table_and_a_ranking(stores, capsys):
    assert main(["fit", "--db", stores["two"], "--subject", stores["habitual"], "--learner", "mf",
                 "--learner", "hybrid", "--starts", "1"]) == 0
    out = capsys.readouterr().out
    assert "learner model_free on two-step trials" in out and "profile likelihood" in out
    assert "ranking by AIC" in out and "dAIC" in out


@pytest.mark.parametrize("argv, message", [
    (["--learner", "rescorla_wagner"], "rescorla_wagner is a learner of cue values"),
    (["--learner", "hybird"], "did you mean 'hybrid'?"),
    (["--link", "choice"], "'--link' must be left out for two-step trials"),
    (["--bounds", "w=0:0.5"], "'--bounds' must be left out for two-step trials"),
    (["--bootstrap", "50"], "'--bootstrap' must be left out for two-step trials"),
    (["--fix", "beta=3"], "'beta' is not a parameter of hybrid; did you mean"),
    (["--fix", "w=3"], "'--fix' must be w within its range [0, 1]"),
    (["--learner", "mb", "--fix", "lam=0.5"], "'lam' is not a parameter of model_based"),
])
def test_fit_refuses_what_two_step_trials_cannot_take(stores, capsys, argv, message):
    assert main(["fit", "--db", stores["two"], "--subject", stores["planner"], *argv]) == 2
    assert message in capsys.readouterr().err


@pytest.mark.parametrize("name", ["hybrid", "mf", "successor", "two_step"])
def test_fit_refuses_a_two_step_learner_for_one_step_trials(stores, capsys, name):
    assert main(["fit", "--db", stores["one"], "--subject", "sim001", "--learner", name]) == 2
    err = capsys.readouterr().err
    assert "a learner of cue values" in err and f"{name} is a two-step learner" in err


def test_two_step_command_reads_a_store(stores, capsys, tmp_path):
    fig = tmp_path / "stay.png"
    assert main(["two-step", "--db", stores["two"], "--subject", stores["planner"], "--fit", "none",
                 "--figure", str(fig)]) == 0
    out = capsys.readouterr().out
    assert f"{stores['planner']} (sim01): 300 trials" in out and "reward_x_transition" in out
    assert fig.stat().st_size > 10_000


@pytest.mark.parametrize("argv, message", [
    (["--subject", "sim001"], "'--subject' must be used only with --db"),
    (["--db", "DB"], "'--subject' must be the subject whose stored trials to read"),
    (["--db", "DB", "--subject", "sim001", "--agent", "hybrid"], "'trials' must be one source"),
    (["--db", "DB", "--subject", "nobody"], "a subject with stored sessions"),
    (["--db", "DB", "--subject", "sim001", "--session", "zz"], "one of sim001's sessions (sim01)"),
    (["--db", "ONE", "--subject", "sim001"], "a subject whose sessions ran a two_step rule file"),
])
def test_two_step_command_refuses_wrong_store_arguments(stores, capsys, argv, message):
    argv = [{"DB": stores["two"], "ONE": stores["one"]}.get(a, a) for a in argv]
    assert main(["two-step", *argv, "--fit", "none", "--figure", ""]) == 2
    assert message in capsys.readouterr().err


def test_trials_without_both_steps_are_left_out_and_said(tmp_path):
    """An omitted second choice (one step only) is left out and counted in the notes."""
    from rigloop.fit.two_step_store import StoredTwoStep

    data = TwoStepData.of(*(np.zeros(30),) * 4)
    note = StoredTwoStep(data, ("s1",), ("a", "b", "c"), 32, 2).notes()
    assert note and note[0].startswith("2 of 32 stored trials have no complete first and second step")
