"""Import refuses a table whose columns look like another unit (ms for s, mL for µL,
epoch ms for epoch s), names the columns, the median seen and the likely unit, and
converts the units a user states with --units. All or nothing, as every import."""

import pathlib

import pytest

from rigloop.cli import main
from rigloop.errors import BadArgument
from rigloop.offline.csv_units import UnitsRejected, apply_units, check_units, parse_units
from rigloop.offline.importer import import_csv
from rigloop.offline.tables import load_mapping, parse_csv
from rigloop.rules import load_rules_file
from rigloop.store import Store

DATA = pathlib.Path(__file__).parent / "data"
MAP = DATA / "import_map.toml"
CSV = DATA / "import_trials.csv"
TIME_COLUMNS = ("trial_len_s", "tone_off_s", "light_on_s", "light_off_s", "reward_s", "lick_latency_s")


@pytest.fixture
def rules():
    return load_rules_file(DATA / "import_rules.toml")


def rewrite(tmp_path: pathlib.Path, columns, scale, name="scaled.csv") -> pathlib.Path:
    """The sample table with ``columns`` multiplied by ``scale`` (blank cells kept)."""
    lines = CSV.read_text().splitlines()
    header = lines[0].split(",")
    out = [lines[0]]
    for line in lines[1:]:
        cells = line.split(",")
        for i, h in enumerate(header):
            if h in columns and cells[i]:
                cells[i] = repr(float(cells[i]) * scale)
        out.append(",".join(cells))
    path = tmp_path / name
    path.write_text("\n".join(out) + "\n")
    return path


def reward_column_map(tmp_path: pathlib.Path) -> pathlib.Path:
    """The sample mapping with a reward volume column (``drop``) instead of rewarded x volume_ul."""
    text = MAP.read_text().replace('rewarded = "rewarded"         # 1/0, true/false, yes/no: a reward of volume_ul\n'
                                   'volume_ul = 4.0\n', 'reward_ul = "drop"\n')
    path = tmp_path / "map.toml"
    path.write_text(text)
    return path


def reward_table(tmp_path: pathlib.Path, per_drop: str) -> pathlib.Path:
    """The sample table with a ``drop`` column: ``per_drop`` on rewarded rows, 0 elsewhere."""
    lines = CSV.read_text().splitlines()
    rewarded = lines[0].split(",").index("rewarded")
    out = [lines[0] + ",drop"]
    for line in lines[1:]:
        cells = line.split(",")
        out.append(line + "," + (per_drop if cells[rewarded] in ("1", "yes") else "0"))
    path = tmp_path / "drops.csv"
    path.write_text("\n".join(out) + "\n")
    return path


def stored_trials(db: pathlib.Path) -> list:
    with Store(db) as store:
        return list(store.rows("trials"))


def test_times_in_ms_are_refused_with_columns_median_and_unit(tmp_path, rules):
    """A table in ms imports nothing; each time column group is named with its median."""
    ms = rewrite(tmp_path, TIME_COLUMNS, 1000)
    with Store(tmp_path / "i.db") as store:
        with pytest.raises(UnitsRejected) as err:
            import_csv(store, ms, MAP, rules)
        assert store.subjects() == []
    problems = err.value.problems
    assert problems == [
        "trial lengths (trial.duration) (column 'trial_len_s') look like ms, not s: median 6000 over 5 rows; "
        "give --units time=ms, or fix the column",
        "cue, reward and punishment times (columns 'tone_off_s', 'light_on_s', 'light_off_s', 'reward_s') "
        "look like ms, not s: median 2500 over 5 rows; give --units time=ms, or fix the columns",
        "latencies (response.latency) (column 'lick_latency_s') look like ms, not s: median 800 over 3 rows; "
        "give --units time=ms, or fix the column",
    ]
    assert "nothing was imported" in str(err.value)


def test_stated_ms_converts_to_exactly_the_seconds_import(tmp_path, rules):
    """time=ms on the ms table stores the same trials as the table in s (x / 1000 is exact here)."""
    ms = rewrite(tmp_path, TIME_COLUMNS, 1000)
    with Store(tmp_path / "ms.db") as store:
        import_csv(store, ms, MAP, rules, units="time=ms")
    with Store(tmp_path / "s.db") as store:
        import_csv(store, CSV, MAP, rules)
    assert stored_trials(tmp_path / "ms.db") == stored_trials(tmp_path / "s.db")


def test_stating_ms_for_a_table_in_seconds_is_refused(tmp_path, rules):
    """The check runs after the conversion, so a wrong statement is caught too; it comes
    before the row problems that follow from it (cue offsets now before the mapping's
    constant onset of 0.5 s), which are counted."""
    with Store(tmp_path / "i.db") as store:
        with pytest.raises(UnitsRejected) as err:
            import_csv(store, CSV, MAP, rules, units={"time": "ms"})
        assert store.subjects() == []
    assert err.value.problems[0] == (
        "trial lengths (trial.duration) (column 'trial_len_s') look wrong after --units time=ms: median 0.006 s "
        "over 1 row, as if the column held s; drop time=ms from --units")
    assert str(err.value).endswith("(and 4 rows refused, which may follow from the units)")


def test_reward_in_ml_is_refused_then_converted(tmp_path, rules):
    """Rewards of 0.004 read as µL look like mL; reward=mL stores 4 µL, as the µL table does."""
    mapping = reward_column_map(tmp_path)
    with Store(tmp_path / "ml.db") as store:
        with pytest.raises(UnitsRejected) as err:
            import_csv(store, reward_table(tmp_path, "0.004"), mapping, rules)
        assert store.subjects() == []
        assert err.value.problems == ["rewards (outcome.reward_ul) (column 'drop') look like mL, not µL: "
                                      "median 0.004 over 3 rows; give --units reward=mL, or fix the column"]
        import_csv(store, reward_table(tmp_path, "0.004"), mapping, rules, units="reward=mL")
    with Store(tmp_path / "ul.db") as store:
        import_csv(store, reward_table(tmp_path, "4"), mapping, rules)
    rewards = [t["reward_ul"] for t in stored_trials(tmp_path / "ml.db")]
    assert rewards == [4.0, 0.0, 4.0, 0.0, 4.0]  # 0.004 * 1000 is 4.0 exactly in binary floating point
    assert stored_trials(tmp_path / "ml.db") == stored_trials(tmp_path / "ul.db")


def test_epoch_wall_times_in_ms(tmp_path):
    """Epoch milliseconds (1.8e12) look like ms; wall_time=ms converts them to epoch seconds."""
    text = MAP.read_text().replace('wall_time = { column = "started", format = "iso", timezone = "Asia/Tokyo" }',
                                   'wall_time = "started"')
    mapping = tmp_path / "map.toml"
    mapping.write_text(text)
    lines = CSV.read_text().splitlines()
    rows = [lines[0]] + [",".join(c if i != 3 else str(1_800_000_000_000 + 20_000 * n) for i, c in
                                  enumerate(line.split(","))) for n, line in enumerate(lines[1:])]
    table = tmp_path / "epoch.csv"
    table.write_text("\n".join(rows) + "\n")
    m = load_mapping(mapping)
    events, problems = parse_csv(table, m)
    assert problems == []
    assert check_units(events, m) == [
        "wall times (trial.wall_time) (column 'started') look like ms, not s: median 1800000040000 over 5 rows; "
        "give --units wall_time=ms, or fix the column"]
    converted = apply_units(m, {"wall_time": "ms"})
    events, _ = parse_csv(table, converted)
    assert [e.wall_time for e in events][:2] == [1.8e9, 1.8e9 + 20.0]
    assert check_units(events, converted, {"wall_time": "ms"}) == []


def test_plausible_sample_table_passes_the_check():
    """The sample table (s, µL, ISO times) raises no unit problem."""
    m = load_mapping(MAP)
    events, _ = parse_csv(CSV, m)
    assert check_units(events, m) == []


def test_units_text_is_checked():
    """Unknown names or units, repeats and units for columns the mapping does not read are named."""
    assert parse_units("time=ms, reward=mL") == {"time": "ms", "reward": "mL"}
    assert parse_units("") == {}
    with pytest.raises(BadArgument, match=r"'speed' is not one of time, wall_time, reward"):
        parse_units("speed=ms")
    with pytest.raises(BadArgument, match=r"reward takes µL, uL, mL, nL"):
        parse_units("reward=l")
    with pytest.raises(BadArgument, match=r"time is given twice"):
        parse_units("time=ms,time=s")
    with pytest.raises(BadArgument, match=r"reward only when outcome.reward_ul is a column"):
            apply_units(load_mapping(MAP), {"reward": "mL"})


def test_import_command_takes_units(tmp_path, capsys):
    """``rigloop import --units time=ms`` imports the ms table; without it the command fails
    with one sentence per column and stores nothing."""
    ms = rewrite(tmp_path, TIME_COLUMNS, 1000)
    db = tmp_path / "i.db"
    args = ["import", str(ms), "--map", str(MAP), "--db", str(db), "--rules", str(DATA / "import_rules.toml")]
    assert main(args) != 0
    err = capsys.readouterr().err
    assert "3 unit problems; nothing was imported" in err and "give --units time=ms" in err
    assert main(args + ["--units", "time=ms"]) == 0
    assert "imported 5 trials in 2 sessions of 2 subjects" in capsys.readouterr().out
