"""`make demo` works end to end: daemon, virtual rigs over ZeroMQ and serial, replay, export."""

from rigloop.cli import main


def test_demo_runs_and_replays_identically(tmp_path, capsys):
    """The demo exits 0, its three subjects replay with every decision identical, and it
    says where the data, the export and the plot are."""
    assert main(["demo", "--trials", "20", "--data", str(tmp_path / "demo")]) == 0
    out = capsys.readouterr().out
    assert out.count("decisions identical") == 3
    assert "daemon stopped with SIGTERM (exit status 0)" in out
    assert (tmp_path / "demo" / "quantities.csv").exists()
    assert (tmp_path / "demo" / "bk-m07.png").exists()
    assert "stage lever_shaping -> nogo_intro" in out
    assert (tmp_path / "demo" / "compare.png").exists() and "reaches `full_task`" in out  # part 4


def test_demo_refuses_a_directory_it_did_not_make(tmp_path, capsys):
    """The demo never deletes a data directory that is not its own."""
    precious = tmp_path / "lab-data"
    precious.mkdir()
    (precious / "rigloop.sqlite").write_bytes(b"not the demo's")
    assert main(["demo", "--trials", "10", "--data", str(precious)]) == 1
    assert (precious / "rigloop.sqlite").read_bytes() == b"not the demo's"
    assert "was not made by the demo" in capsys.readouterr().err
