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
