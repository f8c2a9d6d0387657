"""Fitted parameters as simulated animals: the model's own response probabilities, drawn
and learned from trial by trial, and `rigloop simulate --animals-from fit.json`."""

from __future__ import annotations

import json

import numpy as np
import pytest

from rigloop.core.features import CueList, make_representation
from rigloop.core.learners import make_learner
from rigloop.core.responses import p_respond, p_right
from rigloop.offline.fitted_animals import (
    FittedModel,
    ModelRuns,
    fitted_animal,
    models_from_fit_json,
)
from rigloop.offline.simulate import simulate_session
from rigloop.rules.load import load_example


def _rw(link="respond", **link_params):
    rep = make_representation("identity", CueList(["a", "b"]))
    params = {"beta": 6.0, "theta": 0.4, "lapse": 0.05} if link == "respond" else \
        {"beta": 4.0, "bias": 0.3, "lapse": 0.04, "persev": 0.5, "decay": 0.6}
    params.update(link_params)
    return FittedModel("rescorla_wagner", link, {"alpha": 0.2}, params, rep, 5.0)


def test_runs_give_the_single_learners_probability():
    """Every run's P(respond) is the go/no-go link of a single learner taught the same
    trials (core.responses.p_respond over RescorlaWagner; the batch is the oracle's twin)."""
    model = _rw()
    runs = ModelRuns(model, 3, seed=1)
    single = make_learner("rescorla_wagner", 2, alpha=0.2)
    rep = model.rows_representation
    for k in range(30):
        y = np.ones(3)
        reward = np.full(3, 5.0 if k % 2 == 0 else 0.0)
        runs.learn([("a", 0.5, 1.5)], 2.5, y, reward, 1.5)
        tr = rep.rows([("a", 0.5, 1.5)], [(1.5, 1.0)] if k % 2 == 0 else [], 2.5)
        single.learn_trial(tr.X, tr.r)
    v = float(rep.onset_row("a") @ single.w)
    assert np.allclose(runs.probability("a"), p_respond(v, 6.0, 0.4, 0.05), rtol=1e-12)


def test_choice_runs_read_cue_side_values_and_the_history_kernel():
    """Choice link: P(right) = p_right(Q_L, Q_R, ...) with the kernel after the choices made."""
    model = _rw("choice")
    runs = ModelRuns(model, 2, seed=2)
    runs.learn([("a", 0.5, 1.5)], 2.5, np.array([1.0, 0.0]), np.array([5.0, 0.0]), 1.8)
    # run 0 chose right and was rewarded: Q(a:right) = 0.2; run 1 chose left, got nothing
    h = np.array([0.4, -0.4])  # h = (1 - decay)·c from 0
    expected = p_right(np.array([0.0, 0.0]), np.array([0.2, 0.0]), 4.0, 0.3, 0.04, 0.5, h)
    assert np.allclose(runs.probability("a"), expected, rtol=1e-12)


def test_a_fitted_animal_draws_what_its_truth_says():
    """Through simulate_session the animal's responses follow the model's probability
    (the mean of the recorded truth over its trials, within binomial error)."""
    rules = load_example("gonogo_shaping")
    rep = make_representation("identity", CueList(rules.cues))
    model = FittedModel("rescorla_wagner", "respond", {"alpha": 0.15}, {"beta": 5.0, "theta": 0.3, "lapse": 0.1},
                        rep, rules.reward_unit_ul, "m1")
    animal = fitted_animal(model, rules, "m1-sim", seed=3)
    run = simulate_session(rules, animal, session="s1", max_trials=300)
    truth = [e.extra[f"true_p_respond[{e.cues[0].cue}]"] for e in run.events if e.cues]
    licked = [e.response.value > 0 for e in run.events if e.cues]
    n = len(licked)
    assert n > 100
    assert abs(np.mean(licked) - np.mean(truth)) < 3 * np.sqrt(0.25 / n)


def test_bad_fit_documents_are_named():
    rules = load_example("gonogo_shaping")
    with pytest.raises(ValueError, match="rigloop fit --json"):
        models_from_fit_json({"subject": "x"}, rules)
    with pytest.raises(ValueError, match="learner"):
        models_from_fit_json({"subject": "x", "fits": [{"learner": "oracle", "params": {}}]}, rules)


@pytest.fixture(scope="module")
def fitted_json(tmp_path_factory):
    """A simulated mouse stored, fitted with `rigloop fit --json` (invented data)."""
    from rigloop.cli.main import main
    from rigloop.offline.simulate import preset_animal, record_session
    from rigloop.store import Store

    d = tmp_path_factory.mktemp("fa")
    db = d / "store.sqlite"
    rules = load_example("gonogo_shaping")
    with Store(db) as store:
        record_session(store, rules, preset_animal("typical", rules, "m7", seed=7), session="s1", max_trials=300)
    out = d / "fit.json"
    import contextlib
    import io

    buf = io.StringIO()
    with contextlib.redirect_stdout(buf):
        assert main(["fit", "--db", str(db), "--subject", "m7", "--learner", "rescorla_wagner", "--json"]) == 0
    out.write_text(buf.getvalue())
    return out


def test_fitted_subject_becomes_a_simulated_animal(fitted_json, tmp_path, capsys):
    """An animal fitted, turned into a preset and simulated: `rigloop simulate --animals-from`."""
    from rigloop.cli.main import main
    from rigloop.store import Store

    doc = json.loads(fitted_json.read_text())
    model = models_from_fit_json(doc, load_example("gonogo_shaping"))[0]
    assert model.learner == "rescorla_wagner" and model.subject == "m7"
    assert model.learner_params["alpha"] == pytest.approx(doc["fits"][0]["params"]["alpha"])
    db = tmp_path / "sim.sqlite"
    assert main(["simulate", "gonogo_shaping", "--animals-from", str(fitted_json), "--subjects", "2",
                 "--sessions", "1", "--max-trials", "120", "--db", str(db)]) == 0
    out = capsys.readouterr().out
    assert "m7-sim01" in out and "m7-sim02" in out and "rescorla_wagner / respond" in out
    with Store(db, create=False) as store:
        assert store.subjects() == ["m7-sim01", "m7-sim02"]


def test_simulate_refuses_a_file_that_is_not_a_fit(tmp_path, capsys):
    from rigloop.cli.main import main

    bad = tmp_path / "bad.json"
    bad.write_text("{not json")
    assert main(["simulate", "gonogo_shaping", "--animals-from", str(bad)]) == 2
    assert "--animals-from" in capsys.readouterr().err
