"""Population files: reading, checking (every problem named), deterministic draws, fitted animals."""

from __future__ import annotations

import json

import numpy as np
import pytest

from rigloop.cli.main import main
from rigloop.errors import RuleError
from rigloop.offline.population import (
    draw_animals,
    example_population_names,
    fitted_parameters,
    load_population,
    parse_population,
)
from rigloop.rules.load import load_example

GOOD = """
[population]
name = "test_room"
[population.groups.a]
preset = "typical"
fraction = 0.75
alpha = { dist = "lognormal", median = 0.12, sigma = 0.35, hi = 1.0 }
beta = { dist = "normal", mean = 8.0, sd = 2.0, lo = 5.0, hi = 9.0 }
[population.groups.b]
preset = "non_discriminator"
fraction = 0.25
engagement = 100
"""


def test_shipped_populations_load_and_build_animals_for_every_example():
    assert {"spring_cohort", "failing_animals"} <= set(example_population_names())
    for name in example_population_names():
        pop = load_population(name)
        for ex in ("tone_reversal", "two_choice_staircase"):
            rules = load_example(ex)
            for d in draw_animals(pop, 12, 3):
                d.build(rules)  # every drawn parameter is one the animal accepts


def test_draws_are_deterministic_and_stable_as_the_cohort_grows():
    pop = parse_population(GOOD)
    a, b = draw_animals(pop, 40, 7), draw_animals(pop, 40, 7)
    assert a == b
    assert draw_animals(pop, 40, 8) != a
    assert [d.group for d in a].count("a") == 30  # largest remainder: 0.75 of 40
    assert draw_animals(pop, 20, 7)[:5] == a[:5]  # animal i depends on (seed, i) only


def test_truncation_and_lognormal_median():
    pop = parse_population(GOOD)
    draws = draw_animals(pop, 4000, 1)
    beta = np.array([d.params["beta"] for d in draws if d.group == "a"])
    assert beta.min() >= 5.0 and beta.max() <= 9.0
    alpha = np.array([d.params["alpha"] for d in draws if d.group == "a"])
    # a lognormal's median is exp(mu) (any statistics handbook; from memory); the hi = 1
    # truncation removes ~1e-9 of the mass, so the sample median stays near 0.12
    assert abs(np.median(alpha) - 0.12) < 0.006
    assert all(d.params == {"engagement": 100} for d in draws if d.group == "b")


@pytest.mark.parametrize("change, words", [
    ('preset = "typicl"', "did you mean 'typical'"),
    ('alpha = { dist = "lognormal", median = 0.1, sigma = 0.5 }', "add hi = 1"),
    ("engagment = 3", "did you mean 'engagement'"),
    ("engagement = 2.5", "whole number"),
    ('lapse = { dist = "normal", mean = 0.1 }', "needs mean and sd"),
    ('lapse = { dist = "gamma", lo = 0.0, hi = 0.2 }', "must be one of lognormal"),
    ('beta = { dist = "normal", mean = 8.0, sd = 0.1, lo = 20.0, hi = 21.0 }', "almost none"),
])
def test_faults_are_named_with_what_to_do(change, words):
    group_b = GOOD.split("[population.groups.b]")[0] + "[population.groups.b]\nfraction = 0.25\n"
    text = group_b + (change if change.startswith("preset") else change + '\npreset = "non_discriminator"') + "\n"
    with pytest.raises(RuleError) as err:
        parse_population(text)
    assert words in str(err.value)
    assert "population file" in str(err.value)


def test_fractions_must_sum_to_one_and_groups_are_needed():
    with pytest.raises(RuleError, match="sum to 0.9"):
        parse_population(GOOD.replace("fraction = 0.25", "fraction = 0.15"))
    with pytest.raises(RuleError, match="at least one"):
        parse_population("[population]\nname = 'x'\n")


def test_fitted_group_reads_the_best_ranked_fit(tmp_path):
    doc = {"subject": "m14", "ranking": ["rescorla_wagner", "kalman_filter"],
           "fits": [{"learner": "kalman_filter", "link": "respond", "params": {"diffusion": 0.01, "beta": 2.0}},
                    {"learner": "rescorla_wagner", "link": "respond",
                     "params": {"alpha": 0.21, "beta": 6.5, "theta": 0.2, "lapse": 0.04}}]}
    (tmp_path / "m14.json").write_text(json.dumps(doc))
    (tmp_path / "pop.toml").write_text('[population]\n[population.groups.m14]\nfitted = "m14.json"\nfraction = 1.0\n'
                                       "lapse = 0.1\n")
    pop = load_population(str(tmp_path / "pop.toml"))
    d = draw_animals(pop, 2, 0)[0]
    assert d.params == {"alpha": 0.21, "beta": 6.5, "threshold": 0.2, "lapse": 0.1}  # the group's own key wins
    assert fitted_parameters(doc)["alpha"] == 0.21
    (tmp_path / "bad.toml").write_text('[population]\n[population.groups.m]\nfitted = "nope.json"\nfraction = 1.0\n')
    with pytest.raises(RuleError, match="cannot read"):
        load_population(str(tmp_path / "bad.toml"))


def test_check_validates_population_files(tmp_path, capsys):
    assert main(["check", "rigloop/examples/populations/spring_cohort.toml"]) == 0
    assert "ok: population file is valid" in capsys.readouterr().out
    bad = tmp_path / "bad.toml"
    bad.write_text(GOOD.replace("fraction = 0.25", "fraction = 0.5"))
    assert main(["check", str(bad)]) == 1
    assert "sum to 1.25" in capsys.readouterr().err


def test_two_stage_animals_take_their_drawn_parameters_and_each_task_ignores_the_others():
    text = """
[population]
name = "planners_and_repeaters"
[population.groups.planners]
preset = "typical"
fraction = 1.0
w = { dist = "uniform", lo = 0.6, hi = 1.0 }
beta1 = 4.0
alpha = 0.3
"""
    pop = parse_population(text)
    draws = draw_animals(pop, 6, seed=3)
    two_step = load_example("two_step")
    for d in draws:
        animal = d.build(two_step)
        assert animal.params.w == d.params["w"] and 0.6 <= animal.params.w <= 1.0
        assert animal.params.beta1 == 4.0
    cue_animal = draws[0].build(load_example("tone_reversal"))  # w, beta1 belong to the other task
    assert cue_animal.alpha == 0.3
    assert draw_animals(parse_population(text.replace('"typical"', '"model_based"')), 1, 0)[0].preset == "model_based"
    with pytest.raises(RuleError, match="w"):
        parse_population(text.replace("lo = 0.6, hi = 1.0", "lo = 0.6, hi = 1.5"))
