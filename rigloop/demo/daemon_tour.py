"""The daemon part of the demo: a morning in the (invented) Brackenfield room.

Starts ``rigloop serve`` on a data directory, drives it with three virtual rigs at
accelerated speed — two over ZeroMQ, one over a pseudo-terminal serial port — each
with a simulated animal, then shows what rigloop decided and why, stops the daemon
with SIGTERM, checks that replay reproduces every stored decision, and writes an
export and a plot.
"""

from __future__ import annotations

import threading
import time
from dataclasses import dataclass, field
from pathlib import Path

from ..offline.simulate import SimulatedAnimal
from ..offline.sweep import animal_for
from ..rules.load import load_example
from ..testing import DaemonProcess, PtyPort, SerialRig, ZmqRig, drive_session

# (subject, rig, rule file, link, trials in the session)
RIGS = (
    ("bk-m07", "lick1", "tone_reversal", "zmq", 420),
    ("bk-m12", "lever2", "gonogo_shaping", "serial", 200),
    ("bk-r03", "poke3", "two_choice_staircase", "zmq", 260),
)


@dataclass
class RigRun:
    subject: str
    rig: str
    rules: str
    link: str
    pairs: list = field(default_factory=list)  # (event, decision)
    first: object = None
    error: str | None = None
    resends: int = 0


def _drive(run: RigRun, client, animal: SimulatedAnimal, trials: int, start: float) -> None:
    try:
        first = client.open(animal.subject, "am1", run.rules, wall_time=start).decision
        run.first = first
        run.pairs = drive_session(client, animal, session="am1", rules=run.rules, trials=trials,
                                  start_time=start, trial_s=6.0, first=first)
        run.resends = client.resends
    except Exception as err:  # shown in the summary; the demo goes on with the other rigs
        run.error = f"{type(err).__name__}: {err}"


def _changes(run: RigRun, out) -> None:
    prev = run.first
    for event, d in run.pairs:
        if d.stage != prev.stage:
            out(f"    trial {event.trial:>4}: stage {prev.stage} -> {d.stage}")
            out(f"                {_why(d, 'stage')}")
        elif d.block != prev.block:
            out(f"    trial {event.trial:>4}: block {prev.block} -> {d.block}")
            out(f"                {_why(d, 'block')}")
        prev = d


def _why(d, word: str) -> str:
    for r in d.reasons:
        if r.startswith(word) or f" {word} " in r[:40]:
            return r
    return d.reasons[0] if d.reasons else ""


def run(data: Path, out=print) -> int:
    """Run the daemon demo in ``data`` (created); returns 0 when everything checked out."""
    data.mkdir(parents=True, exist_ok=True)
    port = PtyPort(data, "lever2.tty")
    daemon = DaemonProcess(data, ["tone_reversal", "gonogo_shaping", "two_choice_staircase"],
                           ["--serial", f"{port.path}=lever2"])
    runs: list[RigRun] = []
    try:
        info = daemon.wait_ready()
        out(f"daemon up: rigs on {info['zmq']}, observers on {info['publish']}, serial lever2 on {port.path}")
        threads = []
        start = time.time()
        for i, (subject, rig, rules_name, link, trials) in enumerate(RIGS):
            rules = load_example(rules_name)
            animal = animal_for(rules, subject, seed=11 + i)
            client = SerialRig(port, rig, timeout_s=2.0) if link == "serial" else ZmqRig(daemon.endpoint, rig, 2.0)
            r = RigRun(subject, rig, rules_name, link)
            runs.append(r)
            threads.append(threading.Thread(target=_drive, args=(r, client, animal, trials, start), daemon=True))
        t0 = time.perf_counter()
        for t in threads:
            t.start()
        for t in threads:
            t.join(300)
        elapsed = time.perf_counter() - t0
        total = sum(len(r.pairs) for r in runs)
        out(f"{total} trials from {len(runs)} rigs in {elapsed:.1f} s (accelerated: 6 s of rig time per trial)")
        out("")
        for r in runs:
            out(f"{r.subject} on {r.rig} ({r.link}), rule file '{r.rules}'")
            if r.error:
                out(f"    FAILED: {r.error}")
                continue
            events = [e for e, _ in r.pairs]
            ul = sum(e.outcome.reward_ul for e in events)
            correct = sum(e.response.result == "correct" for e in events)
            out(f"    {len(events)} trials, {correct} correct, {ul:.0f} µL delivered, {r.resends} resends")
            _changes(r, out)
            last = r.pairs[-1][1] if r.pairs else r.first
            if last.end_session:
                out(f"    session ended: {last.reasons[0] if last.reasons else ''}")
            overrides = sum(1 for _, d in r.pairs if d.overrides)
            if overrides:
                example = next(d.overrides[0] for _, d in r.pairs if d.overrides)
                out(f"    welfare overrode a policy on {overrides} trials, e.g. \"{example}\"")
            warn = [w for w in last.warnings]
            if warn:
                out(f"    last warning: {warn[0]}")
            out(f"    last decision: trial {last.trial}, cue {last.cue}, p(reward) {last.reward_prob:.2f}, "
                f"block '{last.block}', stage '{last.stage}'")
            out(f"      because: {'; '.join(last.reasons[:2])}")
            out("")
        status = daemon.terminate(15)
        out(f"daemon stopped with SIGTERM (exit status {status})")
        return 0 if status == 0 and not any(r.error for r in runs) else 1
    finally:
        daemon.close()
        port.close()


def after(data: Path, out=print) -> int:
    """Replay, export and plot from the stopped daemon's store."""
    from ..offline.tables import export
    from ..replay import replay_subject
    from ..serve.daemon import STORE_FILE
    from ..store import Store

    db = data / STORE_FILE
    ok = True
    with Store(db, create=False) as store:
        for subject in store.subjects():
            result = replay_subject(store, subject)
            ok &= result.differing == 0
            out(f"replay {subject}: {result.summary()}")
        exported = data / "quantities.csv"
        with open(exported, "w", newline="", encoding="utf-8") as fh:
            n = export(store, "quantities", "csv", fh)
        q = list(store.rows("quantities", subject=RIGS[0][0]))
        d = list(store.rows("decisions", subject=RIGS[0][0]))
        t = list(store.rows("trials", subject=RIGS[0][0]))
    out(f"exported {n} rows of per-trial model quantities to {exported}")
    try:
        from ..outputs.report import plot_subject

        png = plot_subject(q, d, str(data / f"{RIGS[0][0]}.png"), trials=t, title=f"{RIGS[0][0]}: tone discrimination")
        out(f"plot of {RIGS[0][0]}'s learning: {png}")
    except ImportError:
        out("(matplotlib is not installed: no plot; pip install 'rigloop[report]')")
    out(f"the store: {db}   (try: rigloop replay --db {db} --subject {RIGS[0][0]})")
    return 0 if ok else 1
