"""Progress bars: drawn on a terminal (a real pseudo-terminal), silent in pipes and with --quiet."""

from __future__ import annotations

import os
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest

from rigloop.cli import progress
from rigloop.cli.progress import Progress

ROOT = Path(__file__).resolve().parents[1]

SCRIPT = textwrap.dedent("""
    import sys
    from rigloop.cli.progress import Progress, set_quiet
    if "--quiet" in sys.argv:
        set_quiet(True)
    bar = Progress(0, "simulating", unit="animals")
    for i in range(11):
        bar(i, 10)
    bar.close()
    print("done")
""")


def _on_pty(argv: list[str]) -> str:
    """Run ``argv`` with stdout and stderr on a fresh pseudo-terminal; what the terminal showed."""
    if not hasattr(os, "openpty"):
        pytest.skip("no pseudo-terminals here")
    main, child = os.openpty()
    proc = subprocess.Popen(argv, stdout=child, stderr=child, cwd=ROOT)
    os.close(child)
    chunks = []
    while True:
        try:
            data = os.read(main, 4096)
        except OSError:  # the child closed the terminal
            break
        if not data:
            break
        chunks.append(data)
    os.close(main)
    assert proc.wait(timeout=60) == 0
    return b"".join(chunks).decode("utf-8", "replace")


def test_a_bar_with_rate_and_time_left_on_a_terminal():
    shown = _on_pty([sys.executable, "-c", SCRIPT])
    assert "simulating" in shown and "10/10" in shown and "100%" in shown
    assert "animals/s" in shown  # the rate
    assert "<" in shown  # elapsed<remaining
    assert "done" in shown


def test_quiet_on_a_terminal_draws_nothing():
    shown = _on_pty([sys.executable, "-c", SCRIPT, "--quiet"])
    assert "simulating" not in shown and "done" in shown


def test_nothing_when_stderr_is_not_a_terminal():
    run = subprocess.run([sys.executable, "-c", SCRIPT], capture_output=True, text=True, cwd=ROOT, timeout=60)
    assert run.returncode == 0
    assert run.stderr == "" and run.stdout == "done\n"


def test_forced_bar_and_unknown_total(capsys):
    import io

    out = io.StringIO()
    with Progress(0, "importing", stream=out, force=True) as bar:
        bar(5)
        bar(7)
    assert "importing" in out.getvalue() and "7" in out.getvalue()
    quiet = Progress(10, "x")  # pytest's stderr is not a terminal
    quiet(3)
    quiet.close()
    assert not quiet.enabled and capsys.readouterr().err == ""


def test_set_quiet_round_trip():
    try:
        progress.set_quiet(True)
        assert progress.is_quiet()
    finally:
        progress.set_quiet(False)
    assert not progress.is_quiet()


SIMULATE = ["-m", "rigloop", "simulate", "tone_reversal", "--subjects", "2", "--sessions", "1", "--max-trials", "20",
            "--executor", "serial"]


def test_simulate_shows_a_bar_on_a_terminal_and_none_with_quiet():
    shown = _on_pty([sys.executable, *SIMULATE])
    assert "simulating" in shown and "2/2" in shown and "animals/s" in shown
    quiet = _on_pty([sys.executable, *SIMULATE, "--quiet"])
    assert "simulating" not in quiet and "sim002" in quiet  # the report itself still prints
