"""The live room page: a real daemon on random loopback ports, the page served by uvicorn
on a random loopback port, read over HTTP (httpx) and, when Chromium is installed, in a
headless browser."""

from __future__ import annotations

import html
import json
import os
import shutil
import subprocess
import time

import httpx
import pytest

from rigloop.core.trial import TrialEvent
from rigloop.outputs.report import plot_subject
from rigloop.serve.daemon import Daemon, Settings
from rigloop.serve.web import WebServer, parse_listen
from rigloop.testing import ZmqRig

RULES = "tone_reversal"
CHROMIUM = "/usr/bin/chromium"


@pytest.fixture
def room(tmp_path):
    d = Daemon(Settings(data=str(tmp_path / "data"), rules=(RULES,), zmq="tcp://127.0.0.1:*",
                        publish="tcp://127.0.0.1:*", log_trials=False, selftest_timeout_s=0.5)).start_thread()
    rig = ZmqRig(d.endpoints["zmq"], "rig1", timeout_s=2.0, retries=3)
    first = rig.open("m1", "s1", RULES, seed=3)
    web = WebServer(d.settings.data, "127.0.0.1:0", draw=plot_subject).start_thread()
    web.app.state.follower.connected.wait(5)
    yield d, rig, web, first
    web.stop()
    rig.close()
    d.stop()
    d.join()


def _trial(n: int, cue: str) -> TrialEvent:
    return TrialEvent.from_dict({"subject": "m1", "rig": "rig1", "session": "s1", "trial": n,
                                 "cues": [[cue, 0.0, 2.0]], "response": {"kind": "lick_count", "value": 3},
                                 "outcome": {"reward_ul": 4.0 if cue == "tone_hi" else 0.0,
                                             "reward_time": 2.0 if cue == "tone_hi" else None}})


def _next_subject_event(stream, want_trial: int, limit: float = 10.0) -> dict:
    """Read the event stream until a ``subject`` event for ``want_trial`` (a bounded wait)."""
    deadline = time.monotonic() + limit
    event = None
    for line in stream.iter_lines():
        if line.startswith("event: "):
            event = line[7:]
        elif line.startswith("data: ") and event == "subject":
            msg = json.loads(line[6:])
            if msg.get("trial") == want_trial:
                return msg
        if time.monotonic() > deadline:
            break
    raise AssertionError(f"no event for trial {want_trial} within {limit} s")


def test_page_and_event_stream_show_a_trial(room):
    """The page lists the subject opened before it started (from the store); a trial sent
    to the daemon reaches the event stream as the subject's new card."""
    d, rig, web, first = room
    with httpx.Client(base_url=web.url, timeout=10.0) as http:
        text = http.get("/").text
        assert 'id="s-m1"' in text and "acquisition" in text and "rig1" in text
        with http.stream("GET", "/events") as stream:
            reply = rig.trial(_trial(1, first.decision.cue or "tone_hi"))
            msg = _next_subject_event(stream, 1)
        assert msg["subject"] == "m1" and "<svg" in msg["html"]
        for reason in reply.decision.reasons:  # every reason, not only the first
            assert html.escape(reason) in msg["html"]
        state = http.get("/state.json").json()
        assert state["m1"]["trial"] == 1 and state["m1"]["decision"]["reasons"] == list(reply.decision.reasons)
        detail = http.get("/subject/m1")
        assert detail.status_code == 200 and "report.png" in detail.text
        figure = http.get("/subject/m1/report.png")
        assert figure.status_code == 200 and figure.content[:8] == b"\x89PNG\r\n\x1a\n"  # the PNG signature
        assert http.get("/subject/nobody").status_code == 404


def test_listen_address_is_checked():
    """A bad --listen names the option and the form it wants."""
    assert parse_listen("127.0.0.1:0") == ("127.0.0.1", 0)
    with pytest.raises(Exception, match="--listen"):
        parse_listen("8080")


@pytest.mark.skipif(not os.path.exists(CHROMIUM) or shutil.which(CHROMIUM) is None,
                    reason="no Chromium at /usr/bin/chromium")
def test_headless_browser_shows_the_subject(room, tmp_path):
    """Headless Chromium renders the page with the subject's card after a trial was sent."""
    d, rig, web, first = room
    rig.trial(_trial(1, first.decision.cue or "tone_hi"))
    deadline = time.monotonic() + 10
    while web.app.state.room.snapshot()["m1"].get("trial") != 1:
        assert time.monotonic() < deadline, "the trial did not reach the room"
        time.sleep(0.05)
    base = [CHROMIUM, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
            "--disable-background-networking", "--disable-component-update", "--disable-sync",
            f"--user-data-dir={tmp_path / 'chromium'}", "--timeout=4000"]
    dom = subprocess.run(base + ["--dump-dom", web.url + "/"], capture_output=True, text=True, timeout=60).stdout
    assert 'id="s-m1"' in dom and "<svg" in dom and 'class="trial">1<' in dom and "live · updated" in dom
    shot = tmp_path / "room.png"
    subprocess.run(base + ["--window-size=1100,500", f"--screenshot={shot}", web.url + "/"],
                   capture_output=True, timeout=60)
    assert shot.exists() and shot.stat().st_size > 1000
    if os.environ.get("RIGLOOP_KEEP_SCREENSHOT"):
        shutil.copy(shot, os.environ["RIGLOOP_KEEP_SCREENSHOT"])


def test_watch_shows_every_subject_from_the_start_and_wraps_reasons(room):
    """``rigloop watch --data DIR`` lists a subject that has not changed since it started,
    and every reason of its newest decision appears whole, wrapped under the reason column."""
    import io
    import re
    from types import SimpleNamespace

    from rigloop.serve.watch import Table, render
    from rigloop.serve.watch import main as watch_main

    d, rig, web, first = room
    out = io.StringIO()
    args = SimpleNamespace(publish=None, data=d.settings.data, once=False, count=None, timeout=0.5, plain=True)
    assert watch_main(args, out) == 0
    text = out.getvalue()
    assert "m1" in text and "acquisition" in text
    table = Table()
    table.load(web.app.state.room.snapshot())
    for width in (110, 220):  # reasons below the row, then beside it
        drawn = render(table, width=width)
        assert width == 110 or all(len(line) <= width for line in drawn.splitlines())
        flat = re.sub(r"\s+", " ", drawn)
        for reason in first.decision.reasons:
            assert re.sub(r"\s+", " ", reason) in flat


def test_a_card_shows_water_today_against_the_rule_files_daily_minimum(tmp_path):
    """Water today counts over the lab's day of the newest trial, beside the session rule
    file's daily minimum (tone_reversal: the default 1 mL)."""
    from rigloop.offline.simulate import preset_animal, record_session
    from rigloop.rules import load_example
    from rigloop.serve import room, web
    from rigloop.store import Store

    rules = load_example("tone_reversal")
    with Store(tmp_path / "w.sqlite") as store:
        record_session(store, rules, preset_animal("typical", rules, "bk-m01", 1), session="s1", max_trials=40)
        row = room.subject_row(store, "bk-m01")
        earned = sum(t["reward_ul"] or 0.0 for t in store.rows("trials", "bk-m01", "s1"))
    assert row["daily_min_ul"] == 1000.0 and row["ul_today"] == earned
    assert "(daily minimum 1000 µL)" in web.card(row)
