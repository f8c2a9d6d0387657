"""CSV import through a column mapping (all or nothing, with row and column in every
problem) and CSV/JSONL export of trials, decisions and quantities."""

from __future__ import annotations

import csv
import io
import json
import tempfile
from datetime import datetime, timezone
from pathlib import Path

import pytest
from hypothesis import HealthCheck, assume, given, settings
from strategies_store import events

from rigloop.core.trial import CuePresentation, Decision, Outcome, Response, TrialEvent
from rigloop.errors import RuleError
from rigloop.offline.tables import (
    CsvRejected,
    MappingError,
    RowProblem,
    export,
    export_text,
    group_events,
    load_mapping,
    parse_csv,
    read_events,
)
from rigloop.store import SessionInfo, Store

DATA = Path(__file__).with_name("data")
MAP = DATA / "import_map.toml"
CSV = DATA / "import_trials.csv"


def tokyo(text: str) -> float:
    """Epoch seconds of a Tokyo wall-clock time (UTC+9 all year, no daylight saving)."""
    return datetime.fromisoformat(text + "+09:00").timestamp()


# --------------------------------------------------------------------------- import


def test_sample_file_imports_with_every_kind_of_source():
    """The sample mapping reads columns, constants, value maps, a 1/0 reward column times a
    volume, ISO times in a named zone or with an offset, and typed extra columns."""
    events, problems = parse_csv(CSV, load_mapping(MAP))
    assert problems == []
    assert events[0] == TrialEvent(
        subject="nm07", rig="north_box2", session="d01", trial=1,
        cues=(CuePresentation("tone_hi", 0.5, 2.5),),
        outcome=Outcome(reward_ul=4.0, reward_time=2.5),
        response=Response(kind="licks", value=4.0, result="correct", latency=0.8),
        duration=6.0, wall_time=tokyo("2031-03-02T09:15:00"), extra={"tone_db": 70.0, "note": None},
    )
    assert events[1].cue_ids == ("light", "tone_lo") and events[1].extra["note"] == "light only probe"
    assert events[1].outcome.reward_ul == 0.0 and events[1].response.result == "incorrect"
    assert events[2].outcome.reward_ul == 4.0  # "yes" in the rewarded column
    assert events[3].response.result == "omitted" and events[3].response.value is None
    assert events[3].wall_time == datetime(2031, 3, 2, 10, 2, 5, tzinfo=timezone.utc).timestamp()
    assert events[4].cue_ids == ("light",) and events[4].extra["tone_db"] is None
    groups = group_events(events)
    assert list(groups) == [("nm07", "d01"), ("nm11", "d01")]
    assert [e.trial for e in groups[("nm07", "d01")]] == [1, 2, 3]
    assert read_events(CSV, load_mapping(MAP)) == groups


def bad_csv(tmp_path: Path, body: str) -> Path:
    path = tmp_path / "bad.csv"
    header = CSV.read_text().splitlines()[0]
    path.write_text(header + "\n" + body)
    return path


def test_bad_rows_reject_the_whole_file_with_rows_and_columns(tmp_path):
    """Every bad row is reported with its spreadsheet row number and column; the good
    rows are not imported either."""
    path = bad_csv(tmp_path, (
        "nm07,d01,1,2031-03-02T09:15:00,6.0,hi,2.5,0,,,1,2.5,4,1,0.8,70,\n"        # row 2: fine
        "nm07,d01,2,2031-03-02T09:15:20,6.0,mid,2.5,0,,,0,,0,0,,65,\n"             # row 3: unknown tone
        '"nm07",d01,3,2031-03-02T09:15:41,6.0,hi,2.5,0,,,1,,6,1,0.6,70,"two\nlines"\n'  # row 4: reward w/o time
        "\n"                                                                        # row 5: blank, skipped
        "nm07,d01,4,2031-03-02T09:16:02,6.0,hi,abc,0,,,0,,0,0,,70,\n"              # row 6: not a number
        "nm07,d01,5,yesterday,6.0,hi,2.5,0,,,0,,0,0,,70,\n"                        # row 7: bad time
        "nm07,d01,6,2031-03-02T09:16:44,6.0,hi,2.5,0,,,0,,0,0\n"                   # row 8: short row
        "nm07,d01,1,2031-03-02T09:17:05,6.0,hi,2.5,0,,,0,,0,0,,70,\n"              # row 9: repeated key
        "nm07,d01,9,2031-03-02T09:17:26,6.0,hi,2.5,0,,,0,,0,maybe,,70,\n"          # row 10: result not in map
        "nm07,d01,10,2031-03-02T09:17:47,6.0,hi,2.5,1,0.5,,0,,0,0,,70,\n"          # row 11: light without offset
    ))
    events, problems = parse_csv(path, load_mapping(MAP))
    assert [(p.row, p.column) for p in problems] == [
        (3, "tone"), (4, "reward_s"), (6, "tone_off_s"), (7, "started"), (8, None), (9, "trial_no"),
        (10, "outcome"), (11, "light_off_s")]
    assert str(problems[0]) == (
        "row 3, column 'tone': 'mid' is not in the map for cue[1].cue (allowed: 'hi', 'lo', '')")
    assert str(problems[1]) == ("row 4, column 'reward_s': 'outcome.reward_time' is required when "
                                "reward_ul > 0 (got None)")
    assert str(problems[2]) == "row 6, column 'tone_off_s': 'abc' is not a number"
    assert str(problems[3]) == "row 7, column 'started': 'yesterday' is not an ISO-8601 time"
    assert str(problems[4]) == "row 8: has 14 cells, the header has 17"
    assert str(problems[5]) == ("row 9, column 'trial_no': repeats trial 1 of session 'd01' for subject 'nm07' "
                                "from row 2")
    assert str(problems[7]) == "row 11, column 'light_off_s': is blank, but cue 'light' needs its offset time"
    with pytest.raises(CsvRejected, match=r"bad.csv: 8 problems; nothing was imported:\n  - row 3, column 'tone'"):
        read_events(path, load_mapping(MAP))


def test_trial_numbers_must_run_on_and_header_must_have_mapped_columns(tmp_path):
    """A gap in a session's numbering is a problem at the row where it happens; a mapped
    column missing from the header is reported at row 1 and no row is read."""
    path = bad_csv(tmp_path, (
        "nm07,d01,4,2031-03-02T09:15:00,6.0,hi,2.5,0,,,0,,0,0,,70,\n"
        "nm07,d01,6,2031-03-02T09:15:20,6.0,hi,2.5,0,,,0,,0,0,,70,\n"
    ))
    _, problems = parse_csv(path, load_mapping(MAP))
    assert problems == [RowProblem(3, "trial_no", "trial 6 follows trial 4 of session 'd01' for subject 'nm07'; "
                                                  "a session's trials must run on by one in file order")]
    short = tmp_path / "short.csv"
    short.write_text("mouse,sess,trial_no\nnm07,d01,1\n")
    events, problems = parse_csv(short, load_mapping(MAP))
    assert events == [] and problems[0].row == 1 and problems[0].column == "started"
    assert "is named in the mapping but not in the header (header: mouse, sess, trial_no)" in problems[0].reason


def test_mapping_problems_are_all_reported():
    """load_mapping reports every fault with its key path, as a RuleError."""
    text = """
    [trial]
    subject = "mouse"
    trial = { column = "t", value = 3 }
    rig = { value = "" }
    wall_time = { column = "w", format = "excel" }
    [[cue]]
    cue = "c"
    onset = { value = "soon" }
    [outcome]
    rewarded = "r"
    reward_ul = "ul"
    [response]
    result = { column = "res", map = { "1" = "right" } }
    [extra]
    x = { column = "x", type = "complex" }
    [plots]
    """
    with pytest.raises(MappingError) as info:
        load_mapping(text)
    err = info.value
    assert isinstance(err, RuleError)
    assert err.problems == [
        "plots is not a known section (known: csv, cue, extra, outcome, response, step, trial)",
        "trial.session is required (a column name or { value = ... })",
        "trial.trial needs exactly one of column or value",
        "trial.wall_time.format must be epoch or iso (got 'excel')",
        "cue[1].onset.value: 'soon' is not a number",
        "cue[1].offset is required",
        "outcome needs reward_ul or rewarded (with volume_ul), not both",
        "outcome.volume_ul must be a number of µL > 0 when outcome.rewarded is used (got None)",
        "response.result.map['1']: 'right' is not one of correct, incorrect, omitted",
        "extra.x.type must be one of str, float, int, bool, auto (got 'complex')",
    ]
    assert str(err).startswith("10 problems in column mapping:\n  - plots is not a known section")


def test_mapping_file_errors_name_the_file(tmp_path):
    """Unreadable files and bad TOML are MappingErrors naming the path."""
    with pytest.raises(MappingError, match=r"nope.toml: 1 problem in column mapping:\n  - cannot read the mapping file"):
        load_mapping(tmp_path / "nope.toml")
    bad = tmp_path / "bad.toml"
    bad.write_text("[trial\n")
    with pytest.raises(MappingError, match=r"not valid TOML"):
        load_mapping(bad)


def test_epoch_times_and_constant_reward_column():
    """wall_time in epoch seconds and reward_ul from a column; blank optional cells are none."""
    m = load_mapping("""
    [trial]
    subject = "s"
    session = { value = "imported" }
    trial = "n"
    rig = "rig"
    wall_time = "t"
    [outcome]
    reward_ul = "ul"
    reward_time = "rt"
    """)
    events, problems = parse_csv(io.StringIO("s,n,rig,t,ul,rt\nm1,1,b1,1700000000.25,2.5,1.0\nm1,2.0,b1,,,\n"), m)
    assert problems == []
    assert events[0].wall_time == 1700000000.25 and events[0].outcome.reward_ul == 2.5
    assert events[1].trial == 2 and events[1].wall_time == 0.0 and events[1].outcome.reward_ul == 0.0


# --------------------------------------------------------------------------- export


def filled_store(path: Path) -> Store:
    s = Store(path)
    events = read_events(CSV, load_mapping(MAP))
    for (subject, session), evs in events.items():
        s.open_session(SessionInfo.new(subject, session, "north_box2", "pav.toml", "x = 1\n", 3, 0.0))
        for e in evs:
            d = Decision(subject, session, e.trial + 1, "tone_hi", 0.75, 4.0, True, "b1", "pavlov",
                         reasons=("block b1: 3 of 20 trials", 'said "x, y"'))
            q = {"v_tone_hi": 0.1 * e.trial, "sd_tone_hi": 0.5}
            if subject == "nm11":
                q = {"delta_outcome": -0.25, "v_tone_hi": None}
            s.commit_trial(e, d, q)
    return s


def export_mapping(header: list[str]) -> str:
    """A mapping that reads the trials CSV written by export() back in."""
    lines = ["[trial]", 'subject = "subject"', 'session = "session"', 'trial = "trial"', 'rig = "rig"',
             'wall_time = "wall_time"', 'duration = "duration"']
    i = 1
    while f"cue{i}" in header:
        lines += ["[[cue]]", f'cue = "cue{i}"', f'onset = "cue{i}_onset"', f'offset = "cue{i}_offset"']
        i += 1
    lines += ["[outcome]", 'reward_ul = "reward_ul"', 'reward_time = "reward_time"', 'punishment = "punishment"',
              'punishment_time = "punishment_time"', 'timeout_s = "timeout_s"',
              "[response]", 'kind = "response_kind"', 'value = "response_value"', 'result = "response_result"',
              'latency = "response_latency"', "[extra]"]
    quote = lambda text: json.dumps(text, ensure_ascii=False)  # a TOML basic string for these names
    lines += [f'{quote(h[6:])} = {{ column = {quote(h)}, type = "float" }}' for h in header if h.startswith("extra_")]
    return "\n".join(lines) + "\n"


def test_trials_csv_export_reads_back_exactly(tmp_path):
    """Exported trials, read back through a mapping, equal the stored events."""
    with filled_store(tmp_path / "a.db") as s:
        text = export_text(s, "trials", "csv")
        stored = [e for subj in s.subjects() for e in s.trials(subj)]
    header = next(csv.reader(io.StringIO(text)))
    assert header[:12] == ["subject", "session", "trial", "rig", "wall_time", "duration",
                           "cue1", "cue1_onset", "cue1_offset", "cue2", "cue2_onset", "cue2_offset"]
    assert header[-2:] == ["extra_note", "extra_tone_db"]
    mapping = export_mapping(header).replace('"note" = { column = "extra_note", type = "float" }',
                                             '"note" = { column = "extra_note", type = "str" }')
    events, problems = parse_csv(io.StringIO(text), load_mapping(mapping))
    assert problems == [] and events == stored


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(ev=events(subject="m1", session="s1", trial=1))
def test_generated_trials_survive_csv_export(ev):
    """Any event (float extras, non-numeric text responses) survives export to CSV and back."""
    assume(all(isinstance(v, float) for v in ev.extra.values()))
    if isinstance(ev.response.value, str):
        try:
            float(ev.response.value)
            assume(False)
        except ValueError:
            pass
    with tempfile.TemporaryDirectory() as d, Store(Path(d) / "g.db") as s:
        s.open_session(SessionInfo.new("m1", "s1", "r", "x.toml", "", 1, 0.0))
        s.commit_trial(ev, Decision("m1", "s1", 2, None, 0.5, 1.0, False, "b", "st"), {})
        text = export_text(s, "trials", "csv")
    header = next(csv.reader(io.StringIO(text)))
    events, problems = parse_csv(io.StringIO(text), load_mapping(export_mapping(header)))
    assert problems == [] and events == [ev]


def test_quantities_csv_has_one_column_per_name(tmp_path):
    """Quantities flatten to the sorted union of names; a missing or None value is blank."""
    with filled_store(tmp_path / "a.db") as s:
        out = io.StringIO()
        n = export(s, "quantities", "csv", out)
    rows = list(csv.reader(io.StringIO(out.getvalue())))
    assert n == 5
    assert rows[0] == ["subject", "session", "trial", "delta_outcome", "sd_tone_hi", "v_tone_hi"]
    assert rows[1] == ["nm07", "d01", "1", "", "0.5", "0.1"]
    assert rows[4] == ["nm11", "d01", "1", "-0.25", "", ""]


def test_jsonl_and_decision_exports(tmp_path):
    """JSONL writes one object per row with exact floats; decision CSV keeps the key of the
    trial that produced it and JSON-encodes reason lists; filters by subject and session."""
    with filled_store(tmp_path / "a.db") as s:
        lines = export_text(s, "quantities", "jsonl", subject="nm07").splitlines()
        assert [json.loads(x) for x in lines][2] == {"subject": "nm07", "session": "d01", "trial": 3,
                                                     "sd_tone_hi": 0.5, "v_tone_hi": 0.30000000000000004}
        text = export_text(s, "decisions", "csv", subject="nm11", session="d01")
        trials_jsonl = [json.loads(x) for x in export_text(s, "trials", "jsonl").splitlines()]
    rows = list(csv.DictReader(io.StringIO(text)))
    assert len(rows) == 2 and rows[0]["trial"] == "1" and rows[0]["next_trial"] == "2"
    assert rows[0]["reward_armed"] == "true" and rows[0]["end_session"] == "false"
    assert json.loads(rows[0]["reasons"]) == ["block b1: 3 of 20 trials", 'said "x, y"']
    assert trials_jsonl[0]["cues"] == [["tone_hi", 0.5, 2.5]] and len(trials_jsonl) == 5
