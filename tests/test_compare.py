"""rigloop compare: common random numbers, the on-the-fly truth judge, paired bootstrap
intervals, verdicts, --vary variants, and the command's outputs (JSON shape, CSV, figure, store)."""

from __future__ import annotations

import csv
import json
import tomllib

import numpy as np
import pytest

from rigloop.cli.main import main
from rigloop.errors import BadArgument
from rigloop.offline import truth
from rigloop.offline.compare import RunningTruth
from rigloop.offline.compare_stats import paired_bootstrap, verdict
from rigloop.offline.comparison import run_comparison
from rigloop.offline.population import load_population
from rigloop.offline.rule_variants import dumps, parse_vary, variants
from rigloop.offline.simulate import preset_animal, simulate_session
from rigloop.rules.load import example_names, example_text, load_example, load_rules


def _tiny(entries, animals=3, days=2, **kw):
    return run_comparison(entries, load_population("spring_cohort"), animals=animals, days=days, seed=5,
                          executor="serial", **kw)


def test_identical_rule_files_differ_by_exactly_zero():
    r = load_example("tone_reversal")
    c = _tiny([("A", r), ("B", load_example("tone_reversal"))])
    assert c.results["A"] == [type(x)(**{**vars(x), "label": "A"}) for x in c.results["B"]]
    doc = c.document()
    for d in doc["pairs"][0]["differences"].values():
        assert d["estimate"] in (0.0, None) and d["lo95"] in (0.0, None) and d["hi95"] in (0.0, None)
    assert "at the same point" in doc["pairs"][0]["verdict"] and "same water" in doc["pairs"][0]["verdict"]


def test_running_judge_equals_block_timing_over_whole_histories():
    for name, preset in (("tone_reversal", "typical"), ("tone_reversal", "slow_reverser"),
                         ("gonogo_shaping", "typical"), ("two_choice_staircase", "side_biased")):
        rules = load_example(name)
        animal = preset_animal(preset, rules, "s1", 11)
        runs, state = [], None
        for k in range(3):
            run = simulate_session(rules, animal, session=f"x{k}", state=state, start_time=1.8e9 + 86400 * k,
                                   max_trials=400)
            runs.append(run)
            state = run.state
        trials = truth.truth_trials(runs)
        timings = [t for t in truth.block_timing(trials, rules.spec) if t.ended and t.judged]
        judge = RunningTruth(rules.spec)
        n = 0
        for run in runs:
            for event, under in zip(run.events, [run.first, *run.decisions], strict=False):
                n += 1
                judge.add(n, under.stage, under.block, event.extra)
        judge.finish()
        assert judge.lags == truth.lags(timings), name
        assert judge.early == truth.ended_early(timings), name
        assert judge.judged == len(timings), name


def test_bootstrap_interval_covers_a_known_difference():
    # Paired percentile bootstrap (Efron & Tibshirani 1993, An Introduction to the Bootstrap,
    # ch. 13): for the mean of 30 normal differences its 95% interval covers the true mean
    # about 93-95% of the time (slightly under nominal at this n; from memory). 400 repeats
    # put the observed rate within about +-2.5 points of that.
    rng = np.random.default_rng(2024)
    true_diff, covered, reps = 1.8, 0, 400
    for k in range(reps):
        a = rng.normal(10.0, 3.0, 30)
        b = a + true_diff + rng.normal(0.0, 1.5, 30)
        d = paired_bootstrap(a, b, n_boot=1000, seed=k)
        covered += d["lo95"] <= true_diff <= d["hi95"]
    assert 0.89 <= covered / reps <= 0.975


def test_bootstrap_agrees_with_scipy_paired_percentile_interval():
    from scipy import stats  # test-only reference: scipy.stats.bootstrap, paired, percentile method

    rng = np.random.default_rng(3)
    a = rng.normal(5, 2, 60)
    b = a - 0.7 + rng.normal(0, 1, 60)
    ours = paired_bootstrap(a, b, n_boot=4000, seed=1)
    ref = stats.bootstrap((a, b), lambda x, y: np.mean(y - x), paired=True, vectorized=False,
                          n_resamples=4000, method="percentile", random_state=1).confidence_interval
    assert ours["estimate"] == pytest.approx(np.mean(b - a), abs=1e-4)
    assert ours["lo95"] == pytest.approx(ref.low, abs=0.05) and ours["hi95"] == pytest.approx(ref.high, abs=0.05)


def test_verdict_says_sooner_with_its_interval():
    diffs = {"days_to_leave:acq": {"estimate": -1.8, "lo95": -2.4, "hi95": -1.2, "n": 50},
             "trials_to_leave:acq": {"estimate": -300.0, "lo95": -400.0, "hi95": -200.0, "n": 50},
             "water_per_day_ul": {"estimate": 3.0, "lo95": -5.0, "hi95": 9.0, "n": 50},
             "interventions_per_100_days": {"estimate": 3.0, "lo95": 1.0, "hi95": 5.0, "n": 50}}
    summary = {"days_to_leave:acq": {"never": 0.1}, "water_per_day_ul": {"mean": 900.0}}
    text = verdict("A", "B", diffs, {"acq": "full_task"}, summary, summary)
    assert text.startswith("B reaches `full_task` 1.8 days sooner (1.2–2.4), same water, "
                           "3 more welfare interventions per 100 animal-days")


def test_toml_writer_round_trips_every_example():
    for name in example_names():
        doc = tomllib.loads(example_text(name))
        assert tomllib.loads(dumps(doc)) == doc
        load_rules(dumps(doc))


def test_vary_makes_checked_variants_and_names_valid_keys():
    text = example_text("tone_reversal")
    got = variants(text, [parse_vary("stages.acquisition.advance.when[3]=0.9,0.99"),
                          parse_vary("stages.reversal.blocks.reversed.end.min_trials=20,40")])
    assert len(got) == 4
    rules = load_rules(got[1][1])
    assert rules.spec.stages["acquisition"].advance.when.text.endswith(">= 0.9")
    assert rules.spec.stages["reversal"].blocks["reversed"].end.min_trials == 40
    with pytest.raises(BadArgument, match="keys are acquisition, reversal"):
        variants(text, [parse_vary("stages.acquisiton.advance.when=1")])
    with pytest.raises(BadArgument, match=r"\[3\] 0.95"):
        variants(text, [parse_vary("stages.acquisition.advance.when[7]=1")])
    with pytest.raises(BadArgument, match="PATH=V1"):
        parse_vary("stages.acquisition")


def test_compare_command_json_csv_figure_and_store(tmp_path, capsys):
    from rigloop.store import Store

    out, table, db = tmp_path / "c.png", tmp_path / "c.csv", tmp_path / "sim.sqlite"
    code = main(["compare", "tone_reversal", "--vary", "stages.acquisition.advance.when[3]=0.9,0.99",
                 "--animals", "2", "--days", "2", "--executor", "serial", "--json", "--out", str(out),
                 "--csv", str(table), "--db", str(db)])
    assert code == 0
    doc = json.loads(capsys.readouterr().out)
    assert set(doc) >= {"rules", "pairs"}
    names = list(doc["rules"])
    assert len(names) == 2 and doc["pairs"][0]["a"] == names[0] and doc["pairs"][0]["b"] == names[1]
    for d in doc["pairs"][0]["differences"].values():
        assert set(d) >= {"estimate", "lo95", "hi95"}
    assert isinstance(doc["pairs"][0]["verdict"], str)
    assert out.stat().st_size > 10_000 and (tmp_path / "c-tradeoff.png").stat().st_size > 10_000
    rows = list(csv.DictReader(table.open()))
    assert len(rows) == 4 and {r["rules"] for r in rows} == set(names)
    with Store(str(db)) as store:
        subjects = store.subjects()
    assert len(subjects) == 4  # each rule file's animals are subjects of their own


def test_compare_refuses_wrong_input(capsys):
    assert main(["compare", "tone_reversal", "--animals", "2", "--days", "1"]) == 2
    assert "two or more rule files" in capsys.readouterr().err
    assert main(["compare", "tone_reversal", "two_choice_staircase", "--animals", "2", "--days", "1",
                 "--executor", "serial"]) == 2
    assert "one task" in capsys.readouterr().err
    assert main(["compare", "tone_reversal", "tone_reversal", "--population", "spring_cohrt"]) == 2
    assert "did you mean 'spring_cohort'" in capsys.readouterr().err
    assert main(["compare", "tone_reversal", "tone_reversal", "--out", "fig.jpg"]) == 2


def test_animals_that_learned_nothing_never_leave_a_learning_stage():
    from rigloop.offline.population import parse_population

    pop = parse_population('[population]\n[population.groups.n]\npreset = "non_discriminator"\nfraction = 0.5\n'
                           '[population.groups.c]\npreset = "cue_blind"\nfraction = 0.5\n')
    r = load_example("tone_reversal")
    c = run_comparison([("A", r), ("B", r)], pop, animals=4, days=2, seed=2, executor="serial")
    doc = c.document()
    assert doc["rules"]["A"]["days_to_leave:acquisition"]["never"] == 1.0


def test_verdict_when_no_animal_gets_there():
    zero = {"estimate": 0.0, "lo95": 0.0, "hi95": 0.0, "n": 5}
    summary = {"days_to_leave:acq": {"never": 1.0}, "water_per_day_ul": {"mean": 500.0}}
    text = verdict("A", "B", {"days_to_leave:acq": zero, "water_per_day_ul": zero}, {"acq": "full_task"},
                   summary, summary)
    assert text.startswith("B gets no animal to `full_task`, as A does not, same water")


def test_process_pool_gives_the_serial_results():
    r = load_example("tone_reversal")
    pop = load_population("spring_cohort")
    kw = dict(animals=2, days=1, seed=9)
    serial = run_comparison([("A", r), ("B", r)], pop, executor="serial", **kw)
    pooled = run_comparison([("A", r), ("B", r)], pop, executor="local", workers=2, **kw)
    assert serial.results == pooled.results


def test_the_truth_the_animal_holds_is_the_truth_in_its_events():
    """compare reads each trial's truth from the animal (no extra map built); it must be the event's."""
    for name, preset in (("tone_reversal", "slow_reverser"), ("two_choice_staircase", "side_biased")):
        rules = load_example(name)
        animal = preset_animal(preset, rules, "s1", 4)
        held = []
        real = animal.trial
        animal.trial = lambda *a, **k: (e := real(*a, **k), held.append(animal.last_truth))[0]
        run = simulate_session(rules, animal, session="x1", max_trials=150)
        assert len(held) == len(run.events) > 100
        for event, got in zip(run.events, held, strict=True):
            assert truth.truth_of(event.extra) == got, name


def _stored(path):
    from rigloop.store import Store

    with Store(str(path)) as store:
        subjects = store.subjects()
        rows = {s: [(i.session, i.meta, [e.to_dict() for e in store.trials(s, i.session)],
                     [d.to_dict() for d in store.decisions(s, i.session)]) for i in store.sessions(s)]
                for s in subjects}
    return subjects, rows


def test_db_written_by_parallel_workers_equals_the_serial_store_and_replays(tmp_path):
    from rigloop.replay import replay_subject
    from rigloop.store import Store

    r, g = load_example("tone_reversal"), load_example("gonogo_shaping")
    pop = load_population("spring_cohort")
    kw = dict(animals=1, days=1, seed=4, sessions_per_day=2)
    serial = run_comparison([("A", r), ("B", g)], pop, executor="serial", db=str(tmp_path / "s.sqlite"), **kw)
    pooled = run_comparison([("A", r), ("B", g)], pop, executor="local", workers=2, db=str(tmp_path / "p.sqlite"),
                            **kw)
    plain = run_comparison([("A", r), ("B", g)], pop, executor="serial", **kw)
    assert serial.results == pooled.results == plain.results  # storing changes nothing
    subjects, rows = _stored(tmp_path / "s.sqlite")
    assert _stored(tmp_path / "p.sqlite") == (subjects, rows)
    assert len(subjects) == 2 and all(len(sessions) == 2 for sessions in rows.values())
    assert sum(len(t) for sessions in rows.values() for _, _, t, _ in sessions) == sum(
        x.trials for rs in plain.results.values() for x in rs)
    with Store(str(tmp_path / "p.sqlite")) as store:
        again = replay_subject(store, subjects[-1])  # the session's own rule file reproduces every decision
    assert again.trials > 0 and not again.differences


def test_db_that_holds_the_subjects_already_is_refused(tmp_path):
    r = load_example("tone_reversal")
    db = str(tmp_path / "s.sqlite")
    _tiny([("A", r), ("B", r)], animals=1, days=1, db=db)
    with pytest.raises(BadArgument, match="--db"):
        _tiny([("A", r), ("B", r)], animals=1, days=1, db=db)


def test_dask_cluster_gives_the_local_results():
    """A real dask.distributed LocalCluster (two worker processes), reached by its address as a lab's would be."""
    distributed = pytest.importorskip("dask.distributed")
    r, g = load_example("tone_reversal"), load_example("gonogo_shaping")
    pop = load_population("spring_cohort")
    kw = dict(animals=2, days=1, seed=8)
    local = run_comparison([("A", r), ("B", g)], pop, executor="local", workers=2, **kw)
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=None) as cluster:
        seen = []
        remote = run_comparison([("A", r), ("B", g)], pop, scheduler=cluster.scheduler_address,
                                progress=lambda d, t: seen.append((d, t)), **kw)
    assert remote.results == local.results  # every number of every animal, in cohort order
    assert json.dumps(remote.document(8)) == json.dumps(local.document(8))
    assert seen[0] == (0, 4) and seen[-1] == (4, 4)
