"""``rigloop watch``: a live table of subjects from the daemon's observer stream, and
``rigloop status``: the daemon's counts, errors, latency and queues.

The daemon publishes one msgpack map per event on its PUB socket, topic = subject id:
``{"type": "trial" | "session_opened" | "session_closed", "subject", "session", ...,
"summary": {...}}``. ``Table`` folds those maps into one row per subject; ``render``
draws it as text, every reason of the newest decision wrapped under the reason
column (never cut). With ``--data`` the table starts with every subject in the store
(read only), so subjects show before they change. The screen is redrawn with plain
ANSI codes (home + clear), no curses; ``--plain`` prints each table below the last instead.
"""

from __future__ import annotations

import json
import sys
import textwrap
import time
from collections.abc import Mapping
from typing import Any

from ..links import zmq as zlink
from .room import observer_messages

CLEAR = "\x1b[H\x1b[2J"


class Table:
    """One row per subject, updated from published events."""

    def __init__(self):
        self.rows: dict[str, dict[str, Any]] = {}
        self.updates = 0

    def feed(self, msg: Mapping[str, Any]) -> None:
        subject = msg.get("subject")
        if not isinstance(subject, str):
            return
        row = self.rows.setdefault(subject, {"subject": subject})
        kind = msg.get("type")
        summary = msg.get("summary") or {}
        row.update({k: v for k, v in summary.items() if k != "decision"})
        if kind == "session_closed":
            row["session"] = f"{msg.get('session')} (closed)"
        elif msg.get("session"):
            row["session"] = msg.get("session")
        if msg.get("rig"):
            row["rig"] = msg["rig"]
        decision = msg.get("decision")
        if isinstance(decision, Mapping):
            reasons = decision.get("reasons") or []
            row["last"] = {"trial": decision.get("trial"), "cue": decision.get("cue"),
                           "reward_prob": decision.get("reward_prob"), "reason": "; ".join(map(str, reasons))}
        self.updates += 1

    def load(self, rows: Mapping[str, Mapping[str, Any]]) -> None:
        """Start from the room's rows (``serve.room``: the store), before any update."""
        for subject, r in rows.items():
            row = self.rows.setdefault(subject, {"subject": subject})
            for key in ("rig", "trial", "stage", "block", "ul_today", "values", "p_correct"):
                if r.get(key) is not None:
                    row[key] = r[key]
            row["session"] = f"{r.get('session')} (closed)" if r.get("closed") else r.get("session")
            d = r.get("decision")
            if d:
                row["last"] = {"trial": d.get("trial"), "cue": d.get("cue"), "reward_prob": d.get("reward_prob"),
                               "reason": "; ".join(map(str, d.get("reasons") or []))}


def _num(x: Any, fmt: str = "{:.2f}") -> str:
    return "-" if x is None else fmt.format(x)


def render(table: Table, width: int = 160) -> str:
    """The table as text: subject, rig, session, trial, block, stage, value ± sd per
    cue, response probability with its 95% band, µL today, last decision and its reasons
    (wrapped under the reason column, or on their own lines below the row when fewer
    than 30 characters of ``width`` are left for them)."""
    head = ["subject", "rig", "session", "trial", "stage", "block", "values (mean ± sd)", "p(correct) [95%]",
            "µL today", "next", "reason"]
    lines = []
    for subject in sorted(table.rows):
        r = table.rows[subject]
        values = r.get("values") or {}
        vtext = "  ".join(f"{cue} {_num(v.get('mean'))}±{_num(v.get('sd'))}" for cue, v in values.items())
        p = r.get("p_correct") or {}
        ptext = f"{_num(p.get('p'))} [{_num(p.get('lo'))}, {_num(p.get('hi'))}]" if p else "-"
        last = r.get("last") or {}
        nxt = f"#{last.get('trial')} {last.get('cue') or '-'} p={_num(last.get('reward_prob'))}" if last else "-"
        lines.append([subject, r.get("rig", "-"), str(r.get("session", "-")), str(r.get("trial", "-")),
                      str(r.get("stage", "-")), str(r.get("block", "-")), vtext or "-", ptext,
                      _num(r.get("ul_today"), "{:.0f}"), nxt, str(last.get("reason") or "")])
    widths = [max(len(h), *(len(row[i]) for row in lines)) if lines else len(h) for i, h in enumerate(head)]
    widths[-1] = len(head[-1])
    indent = sum(widths[:-1]) + 2 * (len(widths) - 1)
    beside = width - indent >= 30  # else the reasons go on their own lines below the row

    def fmt(row: list[str]) -> list[str]:
        left = "  ".join(c.ljust(w) for c, w in zip(row[:-1], widths[:-1], strict=True)) + "  "
        if not beside:
            parts = textwrap.wrap(row[-1], max(30, width - 4), break_on_hyphens=False)
            return [left.rstrip()] + ["    " + p for p in parts]
        parts = textwrap.wrap(row[-1], width - indent, break_on_hyphens=False) or [""]
        return [(left + parts[0]).rstrip()] + [" " * indent + p for p in parts[1:]]

    out = [f"rigloop watch — {len(table.rows)} subjects, {table.updates} updates", *fmt(head),
           *fmt(["-" * w for w in widths])]
    for row in lines:
        out += fmt(row)
    return "\n".join(out) + "\n"


def _endpoint(args: Any, key: str, default: str) -> str:
    given = getattr(args, key, None)
    if given:
        return given
    if getattr(args, "data", None):
        from .daemon import read_state_file

        info = read_state_file(args.data)
        if info and info.get(key):
            return info[key]
        raise SystemExit(f"rigloop: no running daemon found in {args.data} (no daemon.json with a {key} endpoint)")
    return default


def _stored_rows(data: str) -> dict[str, dict[str, Any]]:
    """Every subject of the store in ``data`` (read only; none when there is no store yet)."""
    from pathlib import Path

    from ..store import Store
    from .room import rows_from_store

    path = Path(data) / "rigloop.sqlite"
    if not path.exists():
        return {}
    with Store(path, create=False) as store:
        return rows_from_store(store)


def main(args: Any, out=None) -> int:
    """Subscribe and redraw until ``--count``/``--once``/``--timeout`` or Ctrl-C."""
    out = out or sys.stdout
    endpoint = _endpoint(args, "publish", "tcp://127.0.0.1:5571")
    count = 1 if getattr(args, "once", False) else getattr(args, "count", None)
    timeout = getattr(args, "timeout", None)
    plain = getattr(args, "plain", False) or not out.isatty()
    ctx = zlink.new_context()
    sub = zlink.SubLink(ctx, endpoint)
    table = Table()
    if getattr(args, "data", None):
        table.load(_stored_rows(args.data))
        if count is None and table.rows:
            out.write(("" if plain else CLEAR) + render(table))
            out.flush()
    deadline = None if timeout is None else time.monotonic() + timeout
    last_draw = 0.0
    def keep_going() -> bool:
        return (count is None or table.updates < count) and (deadline is None or time.monotonic() < deadline)

    try:
        for msg in observer_messages(sub, keep_going):
            if msg is None:
                continue
            table.feed(msg)
            now = time.monotonic()
            if count is None and now - last_draw < 0.25:
                continue  # redraw at most 4 times a second
            last_draw = now
            if count is None or table.updates >= count:
                out.write(("" if plain else CLEAR) + render(table))
                out.flush()
    finally:
        sub.close()
        ctx.term()
    return 0


def status_main(args: Any, out=None) -> int:
    """``rigloop status``: one status request over the ROUTER, printed."""
    from .client import ZmqRig

    out = out or sys.stdout
    endpoint = _endpoint(args, "zmq", "tcp://127.0.0.1:5570")
    curve = None
    if getattr(args, "key", None):
        from ..links.curve import load_client_keys

        if not args.server_key:
            raise SystemExit("rigloop status: --key needs --server-key (the daemon's server.key)")
        curve = load_client_keys(args.key, args.server_key)
    rig = ZmqRig(endpoint, "status", timeout_s=max(0.1, args.timeout / 2), retries=2, curve=curve)
    try:
        status = rig.status()
    finally:
        rig.close()
    if getattr(args, "json", False):
        out.write(json.dumps(status, indent=1, sort_keys=True, default=str) + "\n")
    else:
        out.write(format_status(status))
    return 0


def format_status(s: Mapping[str, Any]) -> str:
    lat = s.get("latency_ms") or {}
    c = s.get("counts") or {}
    lines = [
        f"rigloop {s.get('version')}  pid {s.get('pid')}  up {s.get('uptime_s', 0):.0f} s  "
        f"rigs at {s.get('endpoints', {}).get('zmq')}  curve {'on' if s.get('endpoints', {}).get('curve') else 'off'}",
        f"subjects loaded {s.get('subjects_loaded')}  open sessions {len(s.get('open_sessions') or [])}",
        "counts   " + "  ".join(f"{k} {v}" for k, v in c.items()),
        "errors   " + ("  ".join(f"{k} {v}" for k, v in (s.get("errors_by_code") or {}).items()) or "none"),
        f"latency  receive->reply ms: p50 {lat.get('p50')}  p90 {lat.get('p90')}  p99 {lat.get('p99')}  "
        f"max {lat.get('max')}  (n {lat.get('n')})",
    ]
    router = (s.get("queues") or {}).get("router") or {}
    pend = router.get("pending") or {}
    lines.append(f"queues   replies waiting: depth {pend.get('depth')} peak {pend.get('peak')} dropped "
                 f"{pend.get('dropped')}  bad frames {router.get('bad_frames')}  unroutable "
                 f"{router.get('dropped_unroutable')}  batch peak {(s.get('queues') or {}).get('batch', {}).get('peak')}")
    for link in s.get("serial") or []:
        dec = link.get("decoder") or {}
        lines.append(f"serial   {link.get('port')} ({link.get('rig')}): {'up' if link.get('connected') else 'DOWN'}  "
                     f"opens {link.get('opens')}  disconnects {link.get('disconnects')}  lines {dec.get('lines')} "
                     f"bad {dec.get('bad')}")
    for o in s.get("open_sessions") or []:
        lines.append(f"session  {o['subject']} / {o['session']} on {o['rig']} ({o['rules']}), last trial "
                     f"{o.get('last_trial') if o.get('last_trial') is not None else '?'}")
    return "\n".join(lines) + "\n"
