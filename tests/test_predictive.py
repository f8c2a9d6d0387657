"""Posterior-predictive checks: a model run on the animal's own trials holds the animal
it generated inside its band, and a model that cannot learn does not."""

from __future__ import annotations

import dataclasses
import json

import numpy as np
import pytest

from rigloop.core.features import CueList, make_representation
from rigloop.offline.fitted_animals import FittedModel, fitted_animal
from rigloop.offline.predictive import moving_average, ran_under, run_check, stay_probabilities
from rigloop.offline.simulate import preset_animal, record_session
from rigloop.rules.load import load_example
from rigloop.store import Store


def test_moving_average_by_hand():
    """Centred window of 3, shorter at the ends (worked by hand)."""
    assert np.allclose(moving_average(np.array([0, 1, 1, 0, 1.0]), 3), [0.5, 2 / 3, 2 / 3, 2 / 3, 0.5])


def test_stay_probabilities_by_hand():
    """R(rew) R(no) L(rew) L(rew) L, one session: after reward 2 of 3 stay... worked by hand."""
    s = np.array(["a"] * 5, dtype=object)
    y = np.array([1, 1, 0, 0, 0.0])
    rew = np.array([1, 0, 1, 1, 0.0])
    after_reward, after_none = stay_probabilities(s, y, rew)
    # pairs: (R rew -> R stay), (R no -> L switch), (L rew -> L stay), (L rew -> L stay)
    assert after_reward == pytest.approx(1.0)
    assert after_none == pytest.approx(0.0)


def _model(rules, alpha):
    rep = make_representation("identity", CueList(rules.cues))
    return FittedModel("rescorla_wagner", "respond", {"alpha": alpha}, {"beta": 6.0, "theta": 0.3, "lapse": 0.06},
                       rep, rules.reward_unit_ul, "m1")


@pytest.fixture(scope="module")
def generated(tmp_path_factory):
    """An animal that is the model (known truth), stored over two sessions (invented data)."""
    rules = load_example("gonogo_shaping")
    db = tmp_path_factory.mktemp("pp") / "store.sqlite"
    animal = fitted_animal(_model(rules, 0.15), rules, "m1", seed=5)
    with Store(db) as store:
        state = None
        for k in range(2):
            state = record_session(store, rules, animal, session=f"s{k + 1}", state=state, max_trials=250).state
        pairs = ran_under(store, "m1", store.sessions("m1"))
    return rules, pairs, str(db)


def test_the_true_model_holds_its_animal(generated):
    """Run on the trials it generated, the true model leaves few points outside its band."""
    rules, pairs, _ = generated
    check = run_check(pairs, _model(rules, 0.15), runs=100, seed=1)
    assert check.outside_fraction < 0.15
    assert check.model.shape == (100, len(pairs))


def test_a_model_that_cannot_learn_is_caught(generated):
    """A model that never learns (alpha = 0) cannot follow an animal that did: much of
    its curve falls outside the band."""
    rules, pairs, _ = generated
    check = run_check(pairs, _model(rules, 0.0), runs=100, seed=1)
    assert check.outside_fraction > 0.3


def test_outcomes_follow_the_runs_own_responses(generated):
    """A run is rewarded only on trials it responded on, whatever the animal did."""
    rules, pairs, _ = generated
    check = run_check(pairs, _model(rules, 0.15), runs=20, seed=2)
    rewarded = check.model_rewarded.astype(bool)
    assert np.all(check.model[rewarded] == 1.0)


def test_choice_check_reports_stay_switch(tmp_path):
    """A two-choice animal: curves per light and stay/switch after reward and after none."""
    rules = load_example("two_choice_staircase")
    db = tmp_path / "c.sqlite"
    with Store(db) as store:
        record_session(store, rules, preset_animal("typical", rules, "r1", seed=4), session="s1", max_trials=200)
        pairs = ran_under(store, "r1", store.sessions("r1"))
    rep = make_representation("identity", CueList(rules.cues))
    model = FittedModel("rescorla_wagner", "choice", {"alpha": 0.2},
                        {"beta": 5.0, "bias": 0.0, "lapse": 0.05, "persev": 0.0, "decay": 0.7}, rep, 5.0)
    check = run_check(pairs, model, runs=40, seed=3)
    assert set(check.curves) == {"light_left", "light_right"}
    for key in ("after_reward", "after_no_reward"):
        s = check.stay[key]
        assert 0 <= s["lower"] <= s["median"] <= s["upper"] <= 1


def test_bad_arguments(generated):
    rules, pairs, _ = generated
    with pytest.raises(ValueError, match="runs"):
        run_check(pairs, _model(rules, 0.1), runs=5)
    with pytest.raises(ValueError, match="link"):
        dataclasses.replace(_model(rules, 0.1), link="poke")


def test_command(generated, tmp_path, capsys):
    """`rigloop predictive --json` fits, runs and reports; --out writes the figure."""
    from rigloop.cli.main import main

    _, _, db = generated
    fig = tmp_path / "pp.png"
    assert main(["predictive", "--db", db, "--subject", "m1", "--learner", "rescorla_wagner", "--runs", "30",
                 "--json", "--out", str(fig)]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert {"subject", "learner", "link", "params", "runs", "outside_fraction", "curves", "stay"} <= set(doc)
    assert doc["link"] == "respond" and doc["stay"] is None
    assert 0.0 <= doc["outside_fraction"] <= 1.0
    assert fig.stat().st_size > 10_000
    assert main(["predictive", "--db", db, "--subject", "m1", "--learner", "oracle"]) == 2
    assert "rescorla_wagner" in capsys.readouterr().err
