"""Importing a trial table stores sessions that replay exactly, all or nothing."""

import pathlib

import pytest

from rigloop.cli import main
from rigloop.offline.importer import import_csv
from rigloop.offline.tables import CsvRejected
from rigloop.replay import replay_subject
from rigloop.rules import load_rules_file
from rigloop.store import Store

DATA = pathlib.Path(__file__).parent / "data"


@pytest.fixture
def rules():
    return load_rules_file(DATA / "import_rules.toml")


def test_imported_sessions_replay_identically(tmp_path, rules):
    """Every imported trial gets a decision and quantities that replay reproduces."""
    with Store(tmp_path / "i.db") as store:
        report = import_csv(store, DATA / "import_trials.csv", DATA / "import_map.toml", rules)
        assert (report.subjects, report.sessions, report.trials) == (2, 2, 5)
        for subject in store.subjects():
            result = replay_subject(store, subject)
            assert result.differing == 0 and result.trials > 0
        assert len(list(store.rows("quantities"))) == 5


def test_second_import_of_same_sessions_stores_nothing(tmp_path, rules):
    """An import adds new sessions only; a repeat is refused whole."""
    with Store(tmp_path / "i.db") as store:
        import_csv(store, DATA / "import_trials.csv", DATA / "import_map.toml", rules)
        with pytest.raises(Exception, match=r"already stored; an import adds new sessions only"):
            import_csv(store, DATA / "import_trials.csv", DATA / "import_map.toml", rules)
        assert len(list(store.rows("trials"))) == 5


def test_bad_rows_reject_the_whole_file(tmp_path, rules):
    """A CSV with a bad cell imports nothing and names the row and column."""
    bad = tmp_path / "bad.csv"
    lines = (DATA / "import_trials.csv").read_text().splitlines()
    lines[2] = lines[2].replace(",6.0,", ",-6.0,", 1)  # a negative trial length on spreadsheet row 3
    bad.write_text("\n".join(lines) + "\n")
    with Store(tmp_path / "i.db") as store:
        with pytest.raises(CsvRejected, match=r"row 3"):
            import_csv(store, bad, DATA / "import_map.toml", rules)
        assert store.subjects() == []


def test_import_and_replay_commands(tmp_path, capsys):
    """The CLI imports, replays ("... identical") and exports quantities."""
    db = str(tmp_path / "i.db")
    args = ["import", str(DATA / "import_trials.csv"), "--map", str(DATA / "import_map.toml"), "--db", db,
            "--rules", str(DATA / "import_rules.toml")]
    assert main(args) == 0
    assert "imported 5 trials in 2 sessions of 2 subjects" in capsys.readouterr().out
    assert main(["replay", "--db", db, "--subject", "nm07"]) == 0
    assert capsys.readouterr().out.strip() == "3 trials, 4 decisions identical"
    out = tmp_path / "q.csv"
    assert main(["export", "--db", db, "--what", "quantities", "--out", str(out)]) == 0
    assert out.read_text().splitlines()[0].startswith("subject,session,trial,")
