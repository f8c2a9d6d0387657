"""rigloop.open: the store as pandas DataFrames, the water per lab day, the Parquet export
(read back with pandas). Real SQLite stores made by simulated sessions."""

from __future__ import annotations

import datetime as dt
import math
import subprocess
import sys
import zoneinfo

import pandas as pd
import pytest

import rigloop
from rigloop.cli.main import main
from rigloop.errors import RigloopError, StoreError
from rigloop.offline.simulate import preset_animal, record_session
from rigloop.rules.load import example_text, load_rules
from rigloop.store import Store

# 2027-01-15 04:55 UTC = 05:55 in Berlin (UTC+1 in winter): an 80-trial session of 8 s
# trials runs past the lab's 06:00 day start, so its water falls on two lab days
START = dt.datetime(2027, 1, 15, 4, 55, tzinfo=dt.UTC).timestamp()
WELFARE = '\n[welfare]\ntimezone = "Europe/Berlin"\nday_starts = "06:00"\n'


@pytest.fixture(scope="module")
def store_path(tmp_path_factory):
    """m1: two sessions a day apart, the first across the lab's day start; m2: one session."""
    rules = load_rules(example_text("gonogo_shaping") + WELFARE, source="gonogo_berlin")
    path = tmp_path_factory.mktemp("frames") / "rigloop.sqlite"
    with Store(path) as store:
        record_session(store, rules, preset_animal("typical", rules, "m1", 1), session="s1", max_trials=80,
                       start_time=START)
        record_session(store, rules, preset_animal("typical", rules, "m1", 1), session="s2", max_trials=40,
                       start_time=START + 86400.0)
        record_session(store, rules, preset_animal("typical", rules, "m2", 2), session="s1", max_trials=30,
                       start_time=START)
    return path


@pytest.fixture()
def db(store_path):
    with rigloop.open(store_path) as frames:
        yield frames


def test_import_rigloop_does_not_import_pandas():
    code = "import sys, rigloop; assert callable(rigloop.open); print('pandas' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.strip() == "False"


def test_subjects_and_sessions(db):
    subjects = db.subjects()
    assert list(subjects["subject"]) == ["m1", "m2"]
    assert list(subjects["sessions"]) == [2, 1]
    sessions = db.sessions()
    assert list(zip(sessions["subject"], sessions["session"], sessions["last_trial"], strict=True)) == [
        ("m1", "s1", 80), ("m1", "s2", 40), ("m2", "s1", 30)]
    assert list(db.sessions("m1")["session"]) == ["s1", "s2"]
    assert set(sessions["rules_name"]) == {"gonogo_shaping"}  # the name inside the rule file


def test_trials_one_row_per_trial_with_decision_and_quantities(db, store_path):
    frame = db.trials("m1")
    assert len(frame) == 120
    assert frame["trial"].is_unique is False  # two sessions
    assert not frame.duplicated(["session", "trial"]).any()
    with Store(store_path, create=False) as store:
        events = list(store.trials("m1"))
        decisions = list(store.decisions("m1"))
        quantities = list(store.rows("quantities", subject="m1"))
        first = {i.session: i.meta["first_decision"] for i in store.sessions("m1")}
    for i, (row, ev, dec) in enumerate(zip(frame.itertuples(index=False), events, decisions, strict=True)):
        row = row._asdict()
        assert (row["session"], row["trial"]) == (ev.session, ev.trial)
        assert row["cues"] == [c.cue for c in ev.cues] and row["cue"] == ev.cues[0].cue
        assert row["reward_ul"] == ev.outcome.reward_ul and row["response_result"] == ev.response.result
        assert row["reasons"] == list(dec.reasons) and isinstance(row["reasons"], list)
        assert (row["next_trial"], row["next_cue"], row["next_block"]) == (dec.trial, dec.cue, dec.block)
        # the block a trial ran under is the one the decision before it chose
        scheduled_by = first[ev.session] if ev.trial == 1 else decisions[i - 1].to_dict()
        assert (row["block"], row["stage"]) == (scheduled_by["block"], scheduled_by["stage"])
    got = frame[[c for c in frame.columns if c.startswith(("value[", "delta_", "p_respond["))]]
    for (_, row), q in zip(got.iterrows(), quantities, strict=True):
        for name, value in row.items():
            want = q.get(name)
            assert (math.isnan(value) and want is None) or value == want, name


def test_quantity_columns_are_floats_with_nan_for_missing(db):
    q = db.quantities(session="s1")
    assert list(q["subject"].unique()) == ["m1", "m2"]
    names = [c for c in q.columns if c not in ("subject", "session", "trial")]
    assert all(q[c].dtype == "float64" for c in names)
    assert q["value[odor_b]"].isna().any() and q["value[odor_b]"].notna().any()  # only on odor_b's trials
    trials = db.trials(session="s1")
    assert trials["delta_cue"].tolist() == q["delta_cue"].tolist()


def test_water_per_lab_day_with_the_rule_files_day_start(db):
    water = db.water("m1")
    # the lab's day by hand with zoneinfo (the IANA time zone database): 06:00 Berlin time
    berlin = zoneinfo.ZoneInfo("Europe/Berlin")
    trials = db.trials("m1")
    expected: dict[str, float] = {}
    for t, ul in zip(trials["wall_time"], trials["reward_ul"], strict=True):
        local = dt.datetime.fromtimestamp(t, tz=berlin)
        day = (local.date() if local.hour >= 6 else local.date() - dt.timedelta(days=1)).isoformat()
        expected[day] = expected.get(day, 0.0) + ul
    assert list(water["day"]) == ["2027-01-14", "2027-01-15", "2027-01-16"]
    assert dict(zip(water["day"], water["ul"], strict=True)) == pytest.approx(expected)
    assert water["trials"].sum() == 120
    assert list(water["sessions"]) == [1, 2, 1]  # s2 also starts at 05:55, before the day start
    assert set(water["daily_min_ul"]) == {1000.0}  # the default daily_min_ml = 1.0
    assert list(water["below_min"]) == [u < 1000.0 for u in water["ul"]]
    assert list(db.water("m1", days=1)["day"]) == ["2027-01-16"]


def test_unknown_names_and_missing_store(db, tmp_path):
    with pytest.raises(RigloopError, match="known: m1, m2"):
        db.trials("m3")
    with pytest.raises(RigloopError, match="session"):
        db.trials("m2", session="s2")
    with pytest.raises(RigloopError, match="days"):
        db.water("m1", days=0)
    with pytest.raises(StoreError, match="no store there"):
        rigloop.open(tmp_path / "none.sqlite")


def _plain(frame: pd.DataFrame) -> pd.DataFrame:
    """List cells as lists (Parquet reads them back as numpy arrays)."""
    out = frame.copy()
    for c in ("cues", "cue_onsets", "cue_offsets", "reasons", "overrides", "warnings"):
        if c in out:
            out[c] = [list(v) for v in out[c]]
    return out


@pytest.mark.parametrize("what", ["trials", "quantities", "decisions"])
def test_parquet_export_reads_back_as_the_dataframe(db, store_path, tmp_path, what):
    out = tmp_path / f"{what}.parquet"
    assert main(["export", "--db", str(store_path), "--what", what, "--format", "parquet", "--out", str(out)]) == 0
    back = pd.read_parquet(out)
    want = getattr(db, what)()
    assert list(back.columns) == list(want.columns)
    pd.testing.assert_frame_equal(_plain(back), _plain(want), check_dtype=False)


def test_parquet_export_of_one_subject_and_refusals(store_path, tmp_path, capsys):
    out = tmp_path / "m2.parquet"
    assert main(["export", "--db", str(store_path), "--subject", "m2", "--format", "parquet", "--out",
                 str(out)]) == 0
    assert len(pd.read_parquet(out)) == 30
    assert main(["export", "--db", str(store_path), "--format", "parquet"]) != 0
    assert "--out" in capsys.readouterr().err
