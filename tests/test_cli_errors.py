"""The command line as a newcomer meets it: every failure is one sentence on stderr with
exit status 2 and no traceback (the traceback only with --debug); an unknown subject,
session, rule file, learner, preset, choice or option names what is known and the
nearest name ("did you mean"); counts are refused with their range; every option's help
shows its default; logs are JSON lines for files and readable text on a terminal."""

from __future__ import annotations

import io
import json
import os
import subprocess
import sys

import pytest
import structlog

from rigloop.cli import build_parser, main
from rigloop.cli.args import Count
from rigloop.core.names import UnknownName, closest
from rigloop.offline.tables import export_text
from rigloop.replay import replay_subject
from rigloop.serve.daemon import configure_logging
from rigloop.store import Store


@pytest.fixture(scope="module")
def store_path(tmp_path_factory) -> str:
    """Two simulated subjects of the Brackenfield sensory-learning room, one session each."""
    path = str(tmp_path_factory.mktemp("cli") / "room.sqlite")
    assert main(["simulate", "tone_reversal", "--subjects", "2", "--sessions", "1", "--max-trials", "20",
                 "--db", path]) == 0
    with Store(path) as store:
        assert store.subjects() == ["sim001", "sim002"]
    return path


def _run(*args: str, cwd=None) -> subprocess.CompletedProcess:
    """``python -m rigloop ARGS`` as a user runs it (a real process; no shell)."""
    return subprocess.run([sys.executable, "-m", "rigloop", *args], capture_output=True, text=True,
                          timeout=120, cwd=cwd)


# (arguments, a phrase the one-sentence answer must hold); {db} is a real store, {file} a plain file
FAILURES = [
    (["replay", "--db", "{db}", "--subject", "sim01"], "is not a stored subject; did you mean 'sim001'?"),
    (["export", "--db", "{db}", "--subject", "sim01"], "did you mean 'sim001'?"),
    (["report", "--db", "{db}", "--subject", "sim01"], "did you mean 'sim001'?"),
    (["fit", "--db", "{db}", "--subject", "sim01"], "did you mean 'sim001'?"),
    (["replay", "--db", "{db}", "--subject", "sim001", "--session", "sim1"], "did you mean 'sim01'?"),
    (["fit", "--db", "{db}", "--subject", "sim001", "--learner", "kalman_fiter"], "did you mean 'kalman_filter'?"),
    (["replay", "--db", "{file}.missing", "--subject", "sim001"], "existing rigloop store file"),
    (["check", "tone_reversl"], "did you mean 'tone_reversal'?"),
    (["simulate", "tone_reversal", "--animal", "typcal"], "did you mean 'typical'?"),
    (["simulate", "tone_reversal", "--subjects", "-3"], "argument --subjects: must be 1 to 10000 (got -3)"),
    (["simulate", "tone_reversal", "--sessions", "0"], "argument --sessions: must be 1 to 1000 (got 0)"),
    (["demo", "--trials", "-1"], "argument --trials: must be 1 to 100000 (got -1)"),
    (["replay", "--db", "{db}", "--subjcet", "sim001"], "no option --subjcet; did you mean --subject?"),
    (["export", "--db", "{db}", "--what", "trails"], "did you mean 'trials'?"),
    (["replya"], "did you mean 'replay'?"),
    (["serve", "--data", "{file}/data", "--rules", "tone_reversal"],
     "data: Not a directory; give a directory this user can create and write"),
]


@pytest.mark.parametrize("argv, phrase", FAILURES, ids=[" ".join(a[:1] + a[-2:]) for a, _ in FAILURES])
def test_a_failure_is_one_sentence_exit_2_no_traceback(argv, phrase, store_path, tmp_path):
    plain = tmp_path / "not-a-directory"
    plain.write_text("a plain file\n")
    args = [a.replace("{db}", store_path).replace("{file}", str(plain)) for a in argv]
    done = _run(*args, cwd=tmp_path)
    assert done.returncode == 2, done.stderr
    assert "Traceback" not in done.stderr
    assert phrase in done.stderr
    assert done.stderr.strip().splitlines()[-1].startswith("rigloop")


def test_the_unwritable_data_directory_is_named_and_debug_shows_the_traceback(tmp_path):
    """Whoever runs serve is told which directory and why; --debug adds the traceback."""
    plain = tmp_path / "a-file"
    plain.write_text("")
    done = _run("serve", "--data", f"{plain}/data", "--rules", "tone_reversal")
    assert done.returncode == 2 and "Traceback" not in done.stderr
    assert done.stderr.strip() == (f"rigloop serve: '--data' {plain}/data: Not a directory; give a directory this "
                                   "user can create and write (the store, keys and daemon.json go there)")
    debug = _run("serve", "--data", f"{plain}/data", "--rules", "tone_reversal", "--debug")
    assert debug.returncode != 0 and "Traceback" in debug.stderr


def test_an_unexpected_fault_is_one_sentence_that_says_it_is_rigloops(store_path, tmp_path, monkeypatch):
    """A fault that is not the user's (here: a directory where the output file goes) is
    still one sentence, exit 2, pointing at --debug."""
    out = tmp_path / "out.csv"
    out.mkdir()
    code = main(["export", "--db", store_path, "--out", str(out)])
    assert code == 2


def test_the_libraries_refuse_an_unknown_subject_with_the_known_ones(store_path):
    """replay_subject and export raise instead of returning nothing for a typo."""
    with Store(store_path, create=False) as store:
        with pytest.raises(UnknownName) as err:
            replay_subject(store, "sim01")
        assert err.value.known == ("sim001", "sim002") and err.value.suggestion == "sim001"
        assert str(err.value) == ("'subject': 'sim01' is not a stored subject; did you mean 'sim001'? "
                                  "(known: sim001, sim002)")
        with pytest.raises(UnknownName, match="'session': 'nope' is not a stored session; check the spelling"):
            export_text(store, "trials", "csv", session="nope")
        assert export_text(store, "trials", "csv", subject="sim002").count("\nsim002,") == 20


def test_closest_agrees_with_difflib():
    # the reference: difflib.get_close_matches (Python standard library), cutoff 0.6
    import difflib

    known = ["sim001", "sim002", "tone_reversal", "kalman_filter"]
    for word in ["sim01", "tone_reversl", "kalman", "zzz"]:
        ref = difflib.get_close_matches(word, known, n=1, cutoff=0.6)
        assert closest(word, known) == (ref[0] if ref else None)


def _options():
    """(command, action) for every option of every command."""
    parser = build_parser()
    sub = next(a for a in parser._actions if a.__class__.__name__ == "_SubParsersAction")
    for name, p in sub.choices.items():
        for action in p._actions:
            if action.option_strings and action.dest not in ("help", "debug"):
                yield name, p, action


def test_every_option_help_shows_its_default_and_range():
    """Flags (off unless given) and required options aside, each option's help says its
    default; a counted option says its range."""
    for name, parser, action in _options():
        text = parser.formatter_class(name)._get_help_string(action) or ""
        where = f"rigloop {name} {action.option_strings[0]}"
        assert text, f"{where} has no help"
        if action.nargs != 0 and not action.required:
            assert "default" in text, f"{where}: {text!r} does not say its default"
        if isinstance(action.type, Count):
            assert action.type.range in text, f"{where}: {text!r} does not say its range"


def test_counts_are_refused_with_their_range(capsys):
    for argv in (["simulate", "x", "--max-trials", "0"], ["fit", "--db", "x", "--subject", "y", "--starts", "0"],
                 ["replay", "--db", "x", "--subject", "y", "--limit", "-1"], ["watch", "--count", "0"],
                 ["status", "--timeout", "nan"], ["serve", "--batch-max", "0"]):
        assert main(argv) == 2, argv
        err = capsys.readouterr().err
        assert "must be" in err and "(got" in err, err


@pytest.fixture
def logging_restored():
    """structlog's configuration is process-wide: put it back after the test."""
    saved = structlog.get_config()
    yield
    structlog.configure(**saved)


def test_logs_are_json_lines_in_a_file_and_on_request(logging_restored, tmp_path):
    with open(tmp_path / "log", "w+", encoding="utf-8") as fh:
        configure_logging(fh, "info")  # not a terminal: JSON lines
        structlog.get_logger("t").info("trial", subject="m1", trial=3)
        fh.seek(0)
        line = json.loads(fh.read().strip())
    assert line["event"] == "trial" and line["subject"] == "m1" and line["level"] == "info"
    buf = io.StringIO()
    configure_logging(buf, "info", "json")
    structlog.get_logger("t").warning("late")
    assert json.loads(buf.getvalue())["event"] == "late"


def test_logs_are_readable_on_a_terminal_and_on_request(logging_restored):
    """A real pseudo-terminal gets the console renderer; ``fmt="console"`` forces it."""
    master, slave = os.openpty()
    try:
        with open(slave, "w", encoding="utf-8", closefd=True) as tty:
            configure_logging(tty, "info")
            structlog.get_logger("t").info("session opened", subject="m1")
            tty.flush()
            text = os.read(master, 4096).decode("utf-8", "replace")
    finally:
        os.close(master)
    assert "session opened" in text and "subject" in text and "m1" in text
    assert not text.lstrip().startswith("{")
    buf = io.StringIO()
    configure_logging(buf, "info", "console")
    structlog.get_logger("t").info("session opened", subject="m1")
    assert "session opened" in buf.getvalue() and "subject=m1" in buf.getvalue()
    with pytest.raises(json.JSONDecodeError):
        json.loads(buf.getvalue())


def test_log_format_is_an_option_of_serve(capsys):
    args = build_parser().parse_args(["serve", "--log-format", "console"])
    assert args.log_format == "console"
    assert build_parser().parse_args(["serve"]).log_format is None
    assert main(["serve", "--log-format", "xml"]) == 2
    assert "invalid choice: 'xml'" in capsys.readouterr().err
