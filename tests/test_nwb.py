"""NWB export: a real store written through rigloop, the file read back with pynwb."""

from __future__ import annotations

import math
from datetime import UTC, datetime

import numpy as np
import pytest

from rigloop.core.names import UnknownName
from rigloop.offline.simulate import preset_animal, record_session
from rigloop.outputs.nwb import column_name, write_nwb
from rigloop.rules.load import load_example
from rigloop.store import Store

pynwb = pytest.importorskip("pynwb")

DAY = 86400.0


def _store(path, example: str, subject: str = "m1"):
    """Two sessions of one simulated subject, a day apart (invented Brackenfield animals)."""
    rules = load_example(example)
    animal = preset_animal("typical", rules, subject, 1)
    with Store(path) as store:
        run = record_session(store, rules, animal, session="s1", max_trials=60)
        record_session(store, rules, animal, session="s2", max_trials=30, state=run.state,
                       start_time=1.8e9 + DAY)
    return rules


def _read(path):
    io = pynwb.NWBHDF5IO(str(path), "r")
    return io, io.read()


@pytest.fixture(scope="module")
def tone(tmp_path_factory):
    """A serial-compound Kalman TD subject exported to NWB, with its store's rows."""
    d = tmp_path_factory.mktemp("nwb")
    db, out = d / "tone.sqlite", d / "m1.nwb"
    rules = _store(db, "tone_reversal")
    with Store(db) as store:
        done = write_nwb(store, "m1", out, species="Mus musculus")
        rows = {k: list(store.rows(k, subject="m1")) for k in ("trials", "decisions", "quantities")}
        infos = store.sessions("m1")
    io, nwb = _read(out)
    yield done, nwb, rows, infos, rules
    io.close()


def test_subject_and_session_metadata(tone):
    done, nwb, rows, infos, _ = tone
    assert (done.sessions, done.trials) == (2, len(rows["trials"])) == (2, 90)
    assert nwb.subject.subject_id == "m1" and nwb.subject.species == "Mus musculus"
    assert nwb.session_start_time == datetime.fromtimestamp(infos[0].opened_at, tz=UTC)
    assert nwb.session_start_time.utcoffset().total_seconds() == 0
    assert nwb.session_id == "s1,s2" and "tone_reversal" in nwb.experiment_description
    epochs = nwb.epochs.to_dataframe()
    assert list(epochs["start_time"]) == [0.0, DAY]
    assert [t[0] for t in epochs["tags"]] == ["s1", "s2"]


def test_trials_table_holds_the_trials_and_the_decisions_they_ran_under(tone):
    _, nwb, rows, infos, _ = tone
    df = nwb.trials.to_dataframe()
    zero = infos[0].opened_at
    assert len(df) == 90
    np.testing.assert_array_equal(df["start_time"], [t["wall_time"] - zero for t in rows["trials"]])
    np.testing.assert_array_equal(df["stop_time"] - df["start_time"],
                                  [t["duration"] for t in rows["trials"]])
    assert list(df["session"]) == [t["session"] for t in rows["trials"]]
    assert list(df["trial"]) == [t["trial"] for t in rows["trials"]]
    assert list(df["cue"]) == [t["cues"][0][0] for t in rows["trials"]]
    assert list(df["reward_ul"]) == [t["reward_ul"] for t in rows["trials"]]
    assert list(df["response_result"]) == [t["response_result"] or "" for t in rows["trials"]]
    assert list(df["response_value"]) == [t["response_value"] for t in rows["trials"]]  # licks
    # trial 1 of a session ran under the session's first decision, trial n under the one after n - 1
    by_key = {(d["session"], d["next_trial"]): d for d in rows["decisions"]}
    for info in infos:
        by_key[(info.session, 1)] = info.meta["first_decision"]
    for (_, row), t in zip(df.iterrows(), rows["trials"], strict=True):
        under = by_key[(t["session"], t["trial"])]
        assert (row["block"], row["stage"], row["reward_prob"]) == (under["block"], under["stage"],
                                                                    under["reward_prob"])
        assert row["reasons"].split("\n") == under["reasons"]


def test_every_quantity_is_a_trial_column_nan_where_missing(tone):
    _, nwb, rows, _, _ = tone
    df = nwb.trials.to_dataframe()
    names = sorted({k for q in rows["quantities"] for k in q} - {"subject", "session", "trial"})
    assert {"value[tone_hi]", "sd[tone_lo]", "delta_cue", "delta_outcome", "p_respond[tone_hi]",
            "p_respond_lo95[tone_lo]", "p_model[tone_hi]", "surprise"} <= set(names)
    for name in names:
        want = [math.nan if q.get(name) is None else q[name] for q in rows["quantities"]]
        np.testing.assert_array_equal(df[column_name(name)].to_numpy(), want, err_msg=name)
    other = sum(t["cues"][0][0] != "tone_lo" for t in rows["trials"])
    assert df["value[tone_lo]"].isna().sum() == other


def test_td_errors_are_a_time_series_that_agrees_with_the_stored_errors(tone):
    done, nwb, rows, _, rules = tone
    ts = nwb.processing["model"]["td_errors"]
    data, times = ts.data[:], ts.timestamps[:]
    df = nwb.trials.to_dataframe()
    dt = rules.features.dt
    assert len(data) == done.td_errors == int(df["td_error_count"].sum())
    assert np.all(np.diff(times) >= 0) and ts.unit == "reward units (4 µL = 1)"
    for (_, row), t, q in zip(df.iterrows(), rows["trials"], rows["quantities"], strict=True):
        i, n = int(row["td_error_index"]), int(row["td_error_count"])
        # one error per time step: T = ceil(duration / dt) (core/features.py's bin convention)
        assert n == math.ceil(t["duration"] / dt - 1e-9)
        errs, at = data[i:i + n], times[i:i + n] - row["start_time"]
        np.testing.assert_allclose(at, dt * np.arange(1, n + 1), rtol=0, atol=1e-9)
        # the stored regressors are these errors read at the cue's onset and at the outcome's time
        onset = int(math.floor(t["cues"][0][1] / dt + 1e-9))
        assert errs[onset - 1] == q["delta_cue"]
        due = t["reward_time"] if t["reward_ul"] > 0 else t["cues"][0][2]
        assert errs[int(math.floor(due / dt + 1e-9)) - 1] == q["delta_outcome"]
    assert np.any(data != 0.0)  # the learner did learn something


def test_two_choice_action_values_and_trial_level_errors(tmp_path):
    _store(tmp_path / "c.sqlite", "two_choice_staircase")
    with Store(tmp_path / "c.sqlite") as store:
        quantities = list(store.rows("quantities", subject="m1"))
        write_nwb(store, "m1", tmp_path / "c.nwb")
    io, nwb = _read(tmp_path / "c.nwb")
    with io:
        df = nwb.trials.to_dataframe()
        data = nwb.processing["model"]["td_errors"].data[:]
        q_names = {k for q in quantities for k in q if k.startswith("q[")}
        assert q_names and all(":" in k for k in q_names)
        for name in q_names:  # ':' is NWB's separator: q[cue:left] is the column q[cue.left]
            want = [math.nan if q.get(name) is None else q[name] for q in quantities]
            np.testing.assert_array_equal(df[name.replace(":", ".")].to_numpy(), want)
        assert set(df["response_text"]) <= {"left", "right", ""} and "p_right[light_left]" in df
        assert list(df["td_error_count"]) == [1] * len(df)  # a trial-level learner: one a trial
        np.testing.assert_array_equal(data, [q["delta_outcome"] for q in quantities])


def test_unknown_subject_is_named(tmp_path):
    _store(tmp_path / "a.sqlite", "gonogo_shaping")
    with Store(tmp_path / "a.sqlite") as store, pytest.raises(UnknownName, match="m1"):
        write_nwb(store, "m2", tmp_path / "x.nwb")
    assert not (tmp_path / "x.nwb").exists()


def test_file_passes_pynwb_schema_validation(tone):
    """pynwb's own validator checks the file against the NWB schema."""
    assert pynwb.validate(path=tone[0].path) == []


def test_nwb_inspector_finds_no_critical_problem(tone, tmp_path):
    """The NWB inspector (when installed) on the exported file."""
    inspector = pytest.importorskip("nwbinspector")
    done = tone[0]
    found = [m for m in inspector.inspect_nwbfile(nwbfile_path=done.path)
             if m.importance.name in ("CRITICAL", "PYNWB_VALIDATION")]
    assert not found, found


def test_export_command_writes_nwb_and_needs_a_subject(tmp_path, capsys):
    from rigloop.cli import main

    _store(tmp_path / "a.sqlite", "gonogo_shaping")
    out = tmp_path / "m1.nwb"
    argv = ["export", "--db", str(tmp_path / "a.sqlite"), "--format", "nwb"]
    assert main([*argv, "--subject", "m1", "--out", str(out)]) == 0
    assert "90 trials of 2 session(s)" in capsys.readouterr().err
    io, nwb = _read(out)
    with io:
        assert len(nwb.trials) == 90 and nwb.subject.subject_id == "m1"
    assert main([*argv, "--out", str(tmp_path / "x.nwb")]) == 2
    assert "--subject" in capsys.readouterr().err
    assert main([*argv, "--subject", "m1"]) == 2  # standard output is no place for HDF5
    assert "--out" in capsys.readouterr().err
    assert not (tmp_path / "x.nwb").exists()
