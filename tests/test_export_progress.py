"""rigloop export counts its rows as it goes: a bar on a terminal, nothing in a pipe or with --quiet."""

from __future__ import annotations

import io
import subprocess
import sys
from pathlib import Path

import pytest
from test_progress import _on_pty  # the same pseudo-terminal run as the other progress tests

from rigloop.offline import export as export_module
from rigloop.offline.sweep import simulate_many
from rigloop.offline.tables import export
from rigloop.rules.load import load_example
from rigloop.store import Store

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def db(tmp_path_factory) -> str:
    path = str(tmp_path_factory.mktemp("export") / "sim.sqlite")
    simulate_many(load_example("tone_reversal"), ["a1", "a2"], sessions=2, max_trials=30, db=path,
                  executor="serial")
    return path


def test_progress_counts_every_row_against_the_trials_in_scope(db, monkeypatch):
    monkeypatch.setattr(export_module, "PROGRESS_EVERY", 7)
    for what, fmt, scope in (("trials", "csv", {}), ("quantities", "jsonl", {"subject": "a2"}),
                             ("decisions", "csv", {"subject": "a1", "session": "sim02"})):
        seen = []
        with Store(db) as store:
            n = export(store, what, fmt, io.StringIO(), progress=lambda d, t: seen.append((d, t)), **scope)
        total = {0: 120, 1: 60, 2: 30}[len(scope)]
        assert n == total and seen[0] == (0, total) and seen[-1] == (total, total)
        assert [d for d, _ in seen[1:-1]] == list(range(7, total, 7))


def test_export_draws_a_bar_on_a_terminal_only(db, tmp_path):
    out = str(tmp_path / "t.csv")
    argv = [sys.executable, "-m", "rigloop", "export", "--db", db, "--out", out]
    shown = _on_pty(argv)
    assert "exporting trials" in shown and "120/120" in shown and "rows/s" in shown
    assert "120 trials rows written" in shown
    quiet = _on_pty([*argv, "--quiet"])
    assert "exporting trials" not in quiet and "120 trials rows written" in quiet
    piped = subprocess.run(argv, capture_output=True, text=True, cwd=ROOT, timeout=60)
    assert piped.returncode == 0 and piped.stderr == f"120 trials rows written to {out}\n"

