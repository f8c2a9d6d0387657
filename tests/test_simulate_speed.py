"""simulate on many processes, a Dask cluster and into a store: the same animals and the same rows.

The reference for the stored rows is the trial-by-trial loop (``begin_session``, ``step``,
``Store.commit_trial`` after each trial), written out here; the fast path commits each
simulated animal-day in one transaction and must store exactly what that loop stores.
"""

from __future__ import annotations

import pytest

from rigloop.core.step import step
from rigloop.offline.export import export_text
from rigloop.offline.simulate import open_simulated_session, preset_animal
from rigloop.offline.sweep import simulate_many
from rigloop.rules.load import load_example
from rigloop.store import Store

SUBJECTS = ["sim001", "sim002", "sim003"]
PRESETS = ["typical", "side_biased", "lapsing"]
KW = dict(seed=4, sessions=2, max_trials=60, animals=PRESETS)


@pytest.fixture(scope="module")
def rules():
    return load_example("two_choice_staircase")


def _rows(db: str, subjects) -> dict:
    """Every stored row of each subject, per table (subject by subject: across subjects the
    session rows of parallel runs interleave in finishing order)."""
    with Store(db) as store:
        out = {"subjects": store.subjects()}
        for s in subjects:
            for what in ("trials", "decisions", "quantities"):
                out[(s, what)] = export_text(store, what, "jsonl", subject=s)
    return out


def _reference_store(db: str, rules, subjects, presets, *, seed: int, sessions: int, max_trials: int) -> None:
    """The trial-by-trial loop: one commit per trial, as the daemon stores them."""
    with Store(db) as store:
        for i, (subject, preset) in enumerate(zip(subjects, presets, strict=True)):
            animal = preset_animal(preset, rules, subject, seed * 1000 + i)
            state = None
            for k in range(sessions):
                state, decision, info = open_simulated_session(rules, subject, f"sim{k + 1:02d}", state=state,
                                                               start_time=1.8e9 + 86400 * k)
                store.open_session(info)
                t, n = 1.8e9 + 86400 * k, 0
                while not decision.end_session and n < max_trials:
                    event = animal.trial(decision, "sim-rig", t)
                    state, decision, update = step(state, event, rules)
                    store.commit_trial(event, decision, update.quantities)
                    n += 1
                    t += 8.0


def test_every_executor_simulates_the_same_animals(rules):
    serial = simulate_many(rules, SUBJECTS, executor="serial", **KW)
    local = simulate_many(rules, SUBJECTS, executor="local", workers=2, **KW)
    assert local == serial
    assert [s.subject for s in local] == SUBJECTS and [s.animal for s in local] == PRESETS


def test_a_dask_cluster_simulates_the_same_animals(rules):
    pytest.importorskip("dask.distributed")
    serial = simulate_many(rules, SUBJECTS, executor="serial", **KW)
    assert simulate_many(rules, SUBJECTS, executor="dask", workers=2, **KW) == serial


def test_stored_rows_equal_the_trial_by_trial_commits(rules, tmp_path):
    ref, fast = str(tmp_path / "ref.sqlite"), str(tmp_path / "fast.sqlite")
    _reference_store(ref, rules, SUBJECTS, PRESETS, seed=4, sessions=2, max_trials=60)
    summaries = simulate_many(rules, SUBJECTS, executor="local", workers=2, db=fast, **KW)
    assert _rows(fast, SUBJECTS) == _rows(ref, SUBJECTS)
    assert _rows(fast, SUBJECTS)["subjects"] == SUBJECTS  # listed in the order given, not finishing order
    assert summaries == simulate_many(rules, SUBJECTS, executor="serial", **KW)  # storing changes nothing


def test_a_second_run_into_the_same_store_stores_nothing_new(rules, tmp_path):
    db = str(tmp_path / "again.sqlite")
    simulate_many(rules, SUBJECTS[:2], executor="serial", db=db, **{**KW, "animals": PRESETS[:2]})
    before = _rows(db, SUBJECTS[:2])
    simulate_many(rules, SUBJECTS[:2], executor="local", workers=2, db=db, **{**KW, "animals": PRESETS[:2]})
    assert _rows(db, SUBJECTS[:2]) == before


def test_progress_counts_the_animals(rules):
    seen = []
    simulate_many(rules, SUBJECTS, executor="serial", progress=lambda d, t: seen.append((d, t)), **KW)
    assert seen[0] == (0, 3) and seen[-1] == (3, 3)
