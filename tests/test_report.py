"""`rigloop report` draws a subject's learning, the animal's own responses beside what the
learner predicts, from a real store."""

from __future__ import annotations

import pytest

pytest.importorskip("matplotlib")

from rigloop.cli import main  # noqa: E402
from rigloop.offline.simulate import preset_animal, record_session  # noqa: E402
from rigloop.rules import load_example  # noqa: E402
from rigloop.store import Store  # noqa: E402


@pytest.mark.parametrize("example", ["tone_reversal", "two_choice_staircase"])
def test_report_draws_the_animal_beside_the_learner(tmp_path, example):
    """The figure is a PNG; its rows carry the behaviour estimates and p_model it plots."""
    db = tmp_path / "r.sqlite"
    rules = load_example(example)
    with Store(db) as store:
        record_session(store, rules, preset_animal("typical", rules, "bk-m01", 1), session="s1", max_trials=120)
        rows = list(store.rows("quantities"))
    names = {k for r in rows for k in r}
    kind = "p_right" if example == "two_choice_staircase" else "p_respond"
    assert {f"{kind}[{c}]" for c in rules.cues} <= names and any(k.startswith("p_model[") for k in names)
    out = tmp_path / "r.png"
    assert main(["report", "--db", str(db), "--subject", "bk-m01", "--out", str(out)]) == 0
    assert out.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n" and out.stat().st_size > 20_000


# ---------------------------------------------------------------------------- lab-meeting figures


def _two_days(db, example, subjects):
    """A store with two sessions a day apart per subject (the Brackenfield sensory-learning room)."""
    rules = load_example(example)
    with Store(db) as store:
        for i, name in enumerate(subjects):
            for k in range(2):
                record_session(store, rules, preset_animal("typical", rules, name, 10 * i + k), session=f"d{k + 1}",
                               max_trials=80, start_time=1.8e9 + 86_400 * k)
    return rules


def test_okabe_ito_colours_are_shared_per_cue():
    """Okabe & Ito (2008), Color Universal Design: the eight colours, first one #E69F00."""
    from rigloop.outputs.report import OKABE_ITO, cue_colours

    assert len(set(OKABE_ITO)) == 8 and OKABE_ITO[0] == "#E69F00"
    assert cue_colours(["tone_lo", "tone_hi"]) == cue_colours(["tone_hi", "tone_lo", "tone_hi"])


def test_hit_and_false_alarm_split_by_what_the_block_rewards():
    """A trial counts toward the hit rate of a cue its block rewards, else the false-alarm rate."""
    from rigloop.outputs.report import hit_false_alarm, runs

    q = [{"p_respond[a]": 0.8, "p_respond_lo95[a]": 0.6, "p_respond_hi95[a]": 0.9}] * 3
    d = [{"block": "fwd", "cue": "a", "reward_prob": 1.0}, {"block": "rev", "cue": "a", "reward_prob": 0.0},
         {"block": "fwd", "cue": "b", "reward_prob": 1.0}]
    split = hit_false_alarm(q, d, "a")
    assert [p[0] for p in split["hit"]][::2] == [0.8, 0.8] and split["false_alarm"][1] == (0.8, 0.6, 0.9)
    assert runs(["x", "x", "y", "x"]) == [(0, 1, "x"), (2, 2, "y"), (3, 3, "x")]


def test_daily_water_counts_each_lab_day_against_the_rule_files_minimum(tmp_path):
    """µL per lab day add up to the trials' reward_ul; the minimum is welfare.daily_min_ml in µL."""
    from rigloop.outputs.report import daily_water

    db = tmp_path / "w.sqlite"
    rules = _two_days(db, "tone_reversal", ["bk-m01"])
    with Store(db) as store:
        trials, sessions = list(store.rows("trials", subject="bk-m01")), store.sessions("bk-m01")
    days = daily_water(trials, sessions)
    assert [d for d, _, _ in days] == ["2027-01-15", "2027-01-16"]  # 1.8e9 s is 2027-01-15 08:00 UTC
    assert sum(ul for _, ul, _ in days) == pytest.approx(sum(t["reward_ul"] for t in trials))
    assert {low for _, _, low in days} == {rules.welfare.daily_min_ml * 1000.0}


@pytest.mark.parametrize("example", ["tone_reversal", "two_choice_staircase"])
def test_report_writes_png_and_vector_pdf_with_title(tmp_path, example, capsys):
    """The per-animal figure as PNG and as a vector PDF (text kept as text: the title is findable)."""
    from rigloop.outputs.report import title_for

    db = tmp_path / "r.sqlite"
    _two_days(db, example, ["bk-m01"])
    png, pdf = tmp_path / "m.png", tmp_path / "m.pdf"
    assert main(["report", "--db", str(db), "--subject", "bk-m01", "--out", str(png)]) == 0
    assert main(["report", "--db", str(db), "--subject", "bk-m01", "--out", str(pdf)]) == 0
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n" and pdf.read_bytes()[:5] == b"%PDF-"
    with Store(db) as store:
        title = title_for("bk-m01", store.sessions("bk-m01"))
    assert example in title and "2027-01-15 to 2027-01-16" in title and "2 sessions" in title


def test_cohort_report_and_its_arguments(tmp_path, capsys):
    """One figure for the cohort; unknown subjects and unknown formats are refused by name."""
    db = tmp_path / "c.sqlite"
    _two_days(db, "tone_reversal", ["bk-m01", "bk-m02"])
    out = tmp_path / "cohort.pdf"
    assert main(["report", "--db", str(db), "--cohort", "--subjects", "bk-m01,bk-m02", "--out", str(out)]) == 0
    assert out.read_bytes()[:5] == b"%PDF-" and "2 subjects" in capsys.readouterr().out
    assert main(["report", "--db", str(db), "--cohort", "--out", str(tmp_path / "all.png")]) == 0
    assert main(["report", "--db", str(db), "--cohort", "--subjects", "bk-m09", "--out", str(out)]) != 0
    assert "--subjects" in capsys.readouterr().err
    assert main(["report", "--db", str(db), "--subject", "bk-m01", "--out", str(tmp_path / "m.jpg")]) != 0
    assert "--out" in capsys.readouterr().err
