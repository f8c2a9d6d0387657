"""The water ledger (rigloop.outputs.water, ``rigloop water``) on real stores made by
simulated sessions, and the store's schema 2 -> 3 migration (the supplements table)."""

from __future__ import annotations

import csv
import datetime as dt
import json
import sqlite3
from pathlib import Path

import pytest

from rigloop.cli.main import main
from rigloop.errors import BadArgument
from rigloop.offline.simulate import preset_animal, record_session
from rigloop.outputs import water
from rigloop.replay import replay_subject
from rigloop.rules import load_example, load_rules
from rigloop.rules.load import example_text
from rigloop.store import SCHEMA_VERSION, Store

DAY = 86400.0
T0 = 1.8e9  # 2027-01-15 08:00:00 UTC


@pytest.fixture(scope="module")
def rules():
    return load_example("tone_reversal")


def _two_days(path, rules, supplement=True):
    """m1 trains on two lab days, m2 on the first only; m1 gets 0.9 mL on day two."""
    with Store(path) as s:
        record_session(s, rules, preset_animal("typical", rules, "m1", 1), session="s1", max_trials=60, start_time=T0)
        record_session(s, rules, preset_animal("typical", rules, "m1", 1), session="s2", max_trials=60,
                       start_time=T0 + DAY)
        record_session(s, rules, preset_animal("typical", rules, "m2", 2), session="s1", max_trials=60, start_time=T0)
        if supplement:
            s.add_supplement("m1", "2027-01-16", 900.0, "top-up after the session")
    return path


def _earned_by_utc_day(store, subject):
    """Independent sum: each stored trial's reward_ul by its UTC calendar date (datetime)."""
    out = {}
    for r in store.rows("trials", subject=subject):
        day = dt.datetime.fromtimestamp(r["wall_time"], tz=dt.timezone.utc).date().isoformat()
        out[day] = out.get(day, 0.0) + r["reward_ul"]
    return out


def test_ledger_after_two_days_with_a_supplement(tmp_path, rules):
    """Earned water per lab day equals the stored trials' rewards summed by UTC date (the
    rule file's default day); the supplement adds to its day; a day under 1 mL is flagged,
    the day the supplement lifts over it is not, and m2's day without a session is 0 mL."""
    path = _two_days(tmp_path / "w.sqlite", rules)
    with Store(path) as s:
        rows = water.ledger(s)
        by = {(r.subject, r.day): r for r in rows}
        assert [(r.subject, r.day) for r in rows] == [("m1", "2027-01-15"), ("m1", "2027-01-16"),
                                                     ("m2", "2027-01-15"), ("m2", "2027-01-16")]
        for subject in ("m1", "m2"):
            for day, ul in _earned_by_utc_day(s, subject).items():
                assert by[(subject, day)].earned_ul == pytest.approx(ul, abs=1e-9)
        day1, day2 = by[("m1", "2027-01-15")], by[("m1", "2027-01-16")]
        assert day1.sessions == ("s1",) and day2.sessions == ("s2",)
        assert 0 < day1.earned_ul < 1000 and day1.supplement_ul == 0 and day1.below
        assert day2.supplement_ul == 900.0 and day2.total_ul == day2.earned_ul + 900.0
        assert day2.total_ul >= 1000 and not day2.below and day2.notes == ("top-up after the session",)
        weekend = by[("m2", "2027-01-16")]
        assert weekend.sessions == () and weekend.total_ul == 0 and weekend.daily_min_ml == 1.0 and weekend.below
        assert [(r.subject, r.day) for r in water.ledger(s, subject="m1", days=1)] == [("m1", "2027-01-16")]
        text = water.printable(s, rows)
    assert "cohort tone_reversal" in text and "veterinary staff govern" in text
    assert "  m1 2027-01-15: " in text and "m1 2027-01-16:" not in text
    assert max(len(line) for line in text.splitlines()) <= 100


def test_lab_day_follows_the_rule_file(tmp_path):
    """A rule file whose day starts at 09:00 UTC puts trials at 08:00 UTC on the day before."""
    text = example_text("tone_reversal").replace("[welfare]\n", '[welfare]\nday_starts = "09:00"\ndaily_min_ml = 1.2\n', 1)
    late = load_rules(text, "tone_reversal_9am")
    with Store(tmp_path / "w.sqlite") as s:
        record_session(s, late, preset_animal("typical", late, "m1", 1), session="s1", max_trials=20, start_time=T0)
        rows = water.ledger(s)
    assert [(r.day, r.daily_min_ml) for r in rows] == [("2027-01-14", 1.2)]


def test_csv_reads_back(tmp_path, rules):
    """The CSV's rows are the ledger's, volumes in mL to the µL."""
    path = _two_days(tmp_path / "w.sqlite", rules)
    with Store(path) as s:
        rows = water.ledger(s)
    out = tmp_path / "ledger.csv"
    with open(out, "w", newline="", encoding="utf-8") as fh:
        assert water.write_csv(rows, fh) == 4
    with open(out, newline="", encoding="utf-8") as fh:
        back = list(csv.DictReader(fh))
    assert tuple(back[0]) == water.CSV_COLUMNS
    for r, b in zip(rows, back, strict=True):
        assert (b["subject"], b["day"], b["sessions"]) == (r.subject, r.day, ";".join(r.sessions))
        assert float(b["total_ml"]) == pytest.approx(r.total_ul / 1000, abs=5e-4)
        assert float(b["supplement_ml"]) == pytest.approx(r.supplement_ul / 1000, abs=5e-4)
        assert b["below_min"] == ("yes" if r.below else "no") and float(b["daily_min_ml"]) == 1.0


@pytest.mark.parametrize("text, ul", [("0.4mL", 400.0), ("0.4 ml", 400.0), ("400uL", 400.0), ("400µL", 400.0),
                                      ("400μL", 400.0), ("400", 400.0), ("1e3uL", 1000.0), ("10mL", 10000.0)])
def test_volumes_as_typed(text, ul):
    assert water.parse_volume(text) == pytest.approx(ul)


@pytest.mark.parametrize("text, says", [("-0.4mL", "more than 0"), ("0", "more than 0"), ("10.5mL", "at most 10 mL"),
                                        ("20000", "at most 10 mL"), ("0.4 L", "a volume such as"),
                                        ("nan", "a volume such as"), ("", "a volume such as")])
def test_volumes_refused(text, says):
    with pytest.raises(BadArgument, match=f"^'volume' must be {says}"):
        water.parse_volume(text)


def test_store_refuses_bad_supplements(tmp_path):
    with Store(tmp_path / "w.sqlite") as s:
        with pytest.raises(BadArgument, match=r"^'volume_ul' must be at most 10 mL"):
            s.add_supplement("m1", "2027-01-15", 10_001.0)
        with pytest.raises(BadArgument, match=r"^'volume_ul' must be a volume in µL > 0 \(got -5"):
            s.add_supplement("m1", "2027-01-15", -5.0)
        with pytest.raises(BadArgument, match=r"^'day' must be a date YYYY-MM-DD \(got '2027-02-30'\)"):
            s.add_supplement("m1", "2027-02-30", 5.0)
        assert s.supplements() == []


def test_cli_add_and_ledger(tmp_path, rules, capsys):
    """`rigloop water add` records a supplement (refusing slips and unknown names);
    `rigloop water` prints the page and writes the CSV; --data finds the daemon's store."""
    data = tmp_path / "data"
    data.mkdir()
    db = str(_two_days(data / "rigloop.sqlite", rules, supplement=False))
    assert main(["water", "add", "m1", "0.9mL", "--note", "top-up", "--day", "2027-01-16", "--db", db]) == 0
    assert "recorded 0.900 mL for m1 on lab day 2027-01-16 (top-up)" in capsys.readouterr().out
    assert main(["water", "add", "m1", "12mL", "--db", db]) == 2
    assert "'volume' must be at most 10 mL in one entry" in capsys.readouterr().err
    assert main(["water", "add", "m11", "400", "--db", db]) == 2
    assert "did you mean 'm1'?" in capsys.readouterr().err
    assert main(["water", "add", "m3", "400", "--new", "--day", "2027-01-16", "--db", db]) == 0
    assert main(["water", "add", "m1", "400", "--days", "3", "--db", db]) == 2
    assert "'--days' must be left out for add" in capsys.readouterr().err
    out_csv = tmp_path / "w.csv"
    assert main(["water", "--data", str(data), "--csv", str(out_csv)]) == 0
    page = capsys.readouterr().out
    assert "cohort tone_reversal" in page and "cohort no sessions" in page and "\f" in page
    assert "  m1 2027-01-15: " in page and "m1 2027-01-16:" not in page
    back = {(r["subject"], r["day"]): r for r in csv.DictReader(out_csv.open(encoding="utf-8"))}
    assert back[("m1", "2027-01-16")]["supplement_ml"] == "0.900" and back[("m1", "2027-01-16")]["below_min"] == "no"
    assert back[("m3", "2027-01-16")]["daily_min_ml"] == "" and back[("m3", "2027-01-16")]["below_min"] == "no"
    assert main(["water", "--db", db, "--until", "2027-13-01"]) == 2
    assert "'until' must be a date YYYY-MM-DD (got '2027-13-01')" in capsys.readouterr().err
    assert main(["water", "--db", db, "--data", str(data)]) == 2
    assert "exactly one of them" in capsys.readouterr().err


def test_store_of_schema_version_2_is_migrated(tmp_path):
    """A store written by schema version 2 (tests/data/store_v2.sql, made with that code)
    opens as the current schema: sessions, trials, decisions, quantities and snapshots
    unchanged, replay identical, an empty supplements table that takes entries."""
    path = tmp_path / "v2.sqlite"
    raw = sqlite3.connect(path)
    raw.executescript((Path(__file__).parent / "data" / "store_v2.sql").read_text(encoding="utf-8"))
    assert raw.execute("PRAGMA user_version").fetchone()[0] == 2
    old = {t: raw.execute(f"SELECT * FROM {t} ORDER BY id").fetchall() for t in ("sessions", "trials", "snapshots")}
    raw.close()
    with Store(path) as s:
        assert s._conn.execute("PRAGMA user_version").fetchone()[0] == SCHEMA_VERSION == 3
        assert s.check() == []
        for table, rows in old.items():
            assert s._conn.execute(f"SELECT * FROM {table} ORDER BY id").fetchall() == rows
        assert s.statistics()["trials"] == len(old["trials"]) == 10 and s.statistics()["supplements"] == 0
        for subject in ("v2-m01", "v2-m02"):
            assert replay_subject(s, subject).differing == 0
        assert [json.loads(r[-1]) for r in old["trials"]] == [
            json.loads(r[0]) for r in s._conn.execute("SELECT data FROM quantities ORDER BY subject, trial")]
        s.add_supplement("v2-m01", "2027-01-15", 400.0, "first entry")
        assert [x.volume_ul for x in s.supplements("v2-m01")] == [400.0]
        assert water.ledger(s)[0].supplement_ul == 400.0
