"""Replay reproduces stored decisions exactly; recovery reaches the uninterrupted state."""

import sqlite3

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from rigloop.core.step import step
from rigloop.core.subject import new_subject
from rigloop.offline.simulate import SimulatedAnimal, record_session, simulate_session
from rigloop.replay import open_stored_session, recover, replay_subject
from rigloop.rules import load_example
from rigloop.store import Store


@pytest.fixture(scope="module")
def rules():
    return load_example("tone_reversal")


def _record(path, rules, sessions=2, trials=40, snapshot_every=0, seed=5):
    animal = SimulatedAnimal("m01", seed=seed)
    state = None
    with Store(path) as store:
        for k in range(sessions):
            run = record_session(store, rules, animal, session=f"s{k + 1}", state=state,
                                 start_time=1.8e9 + k * 86400, max_trials=trials, snapshot_every=snapshot_every)
            state = run.state
    return state


def test_replay_with_own_rules_is_identical(tmp_path, rules):
    """Every stored decision, including each session's first, is reproduced exactly."""
    path = tmp_path / "r.db"
    final = _record(path, rules)
    with Store(path) as store:
        result = replay_subject(store, "m01")
    assert result.trials == 80
    assert result.differing == 0 and result.decisions == 82
    assert result.summary() == "80 trials, 82 decisions identical"
    assert result.state.to_bytes() == final.to_bytes()


def test_replay_with_other_rules_reports_differences(tmp_path, rules):
    """A different rule file is replayed over the same trials and its differences listed."""
    path = tmp_path / "r.db"
    _record(path, rules, sessions=1, trials=40)
    text = rules.text.replace('time_up = "session_min >= 45"', 'time_up = "session_min >= 2"')
    from rigloop.rules import load_rules

    other = load_rules(text, source="shorter.toml")
    with Store(path) as store:
        result = replay_subject(store, "m01", rules=other)
    assert result.differing > 0
    first = result.differences[0]
    assert first.session == "s1" and first.field in {"end_session", "cue", "reasons", "reward_prob", "reward_ul",
                                                     "reward_armed", "warnings"}
    assert "decisions differ" in result.summary()


def test_recover_from_snapshot_equals_uninterrupted_state(tmp_path, rules):
    """Newest snapshot + replay of later trials == the state of the run that never stopped."""
    path = tmp_path / "r.db"
    final = _record(path, rules, sessions=2, trials=37, snapshot_every=10)
    with Store(path) as store:
        assert next(store.snapshots("m01")).trial == 37
        assert recover(store, "m01").to_bytes() == final.to_bytes()


def test_corrupt_snapshot_falls_back_with_warning(tmp_path, rules):
    """A damaged newest snapshot is skipped (warning) and recovery still reaches the same state."""
    path = tmp_path / "r.db"
    final = _record(path, rules, sessions=1, trials=35, snapshot_every=10)
    con = sqlite3.connect(path)
    (blob,) = con.execute("SELECT blob FROM snapshots WHERE trial = 35").fetchone()
    damaged = bytes([blob[0] ^ 0xFF]) + bytes(blob[1:])
    con.execute("UPDATE snapshots SET blob = ? WHERE trial = 35", (damaged,))
    con.commit()
    con.close()
    with Store(path) as store, pytest.warns(RuntimeWarning, match="failed its checksum"):
        state = recover(store, "m01")
    assert state.to_bytes() == final.to_bytes()


def test_recover_with_no_snapshots_is_full_replay(tmp_path, rules):
    path = tmp_path / "r.db"
    final = _record(path, rules, sessions=2, trials=20, snapshot_every=0)
    with Store(path) as store:
        assert recover(store, "m01").to_bytes() == final.to_bytes()
        assert recover(store, "nobody") is None


@settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(seed=st.integers(0, 2**16), cut=st.integers(1, 45), trials=st.integers(2, 50))
def test_snapshot_plus_replay_equals_straight_replay(tmp_path_factory, seed, cut, trials):
    """For random animals and a snapshot at a random trial, snapshot + replay == straight."""
    rules = load_example("gonogo_shaping")
    cut = min(cut, trials)
    path = tmp_path_factory.mktemp("p") / "p.db"
    animal = SimulatedAnimal("m02", seed=seed)
    straight = simulate_session(rules, SimulatedAnimal("m02", seed=seed), session="s1", max_trials=trials)
    with Store(path) as store:
        run = record_session(store, rules, animal, session="s1", max_trials=trials)
        # the state after trial `cut`, rebuilt from the stored session, becomes a snapshot
        state, _ = open_stored_session(new_subject("m02", rules), store.session("m02", "s1"), rules)
        for event in list(store.trials("m02", "s1"))[:cut]:
            state, _, _ = step(state, event, rules)
        store.save_snapshot("m02", "s1", cut, state.to_bytes())
        recovered = recover(store, "m02")
    assert recovered.to_bytes() == straight.state.to_bytes() == run.state.to_bytes()
