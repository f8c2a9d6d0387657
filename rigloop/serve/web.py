"""``rigloop web``: the live room page. One page lists every rig and animal in the store
(stage, block, the animal's behaviour per cue with its 95% band as a sparkline, water
today, the newest decision with every reason, warnings highlighted); ``/subject/S`` is
one animal's view with its report figure, drawn on demand by the ``draw`` function the
caller hands in (``rigloop.outputs.report.plot_subject``: outputs sits beside serve, so
the command line wires the two).

The rows come from the daemon's store (read only) at start and from its observer stream
(the ``publish`` endpoint in ``daemon.json``) after that; the page gets them by
server-sent events (``/events``: one ``subject`` event per changed row, its card as
HTML). Read only, no secrets, no external assets; it listens on loopback unless told
otherwise. The only starlette and uvicorn imports are in this module.
"""

from __future__ import annotations

import asyncio
import html
import json
import os
import socket
import tempfile
import threading
import time
from collections.abc import Mapping
from pathlib import Path
from typing import Any

from ..links import zmq as zlink
from ..store import Store
from .daemon import read_state_file
from .room import Room, observer_messages, rows_from_store

STORE_FILE = "rigloop.sqlite"
POLL_S = 0.2  # how often an event stream looks for changed rows
HEARTBEAT_S = 15.0

# --------------------------------------------------------------------------- drawing


def _minimum(row: Mapping[str, Any]) -> str:
    """`` of the daily minimum N µL`` when the rule file says it (the protocol's, not rigloop's)."""
    m = row.get("daily_min_ul")
    return "" if m is None else f' <span class="min">(daily minimum {_num(m, "{:.0f}")} µL)</span>'


def sparkline(points: list, width: int = 160, height: int = 36) -> str:
    """An inline SVG of P over the trials: the 95% band shaded, the estimate as a line."""
    if not points:
        return f'<svg class="spark" width="{width}" height="{height}"></svg>'
    n = len(points)

    def x(i: int) -> float:
        return 2 + (width - 4) * (i / (n - 1) if n > 1 else 0.5)

    def y(p: float) -> float:
        return 2 + (height - 4) * (1.0 - min(1.0, max(0.0, p)))

    top = " ".join(f"{x(i):.1f},{y(pt[3]):.1f}" for i, pt in enumerate(points))
    bottom = " ".join(f"{x(i):.1f},{y(pt[2]):.1f}" for i, pt in reversed(list(enumerate(points))))
    line = " ".join(f"{x(i):.1f},{y(pt[1]):.1f}" for i, pt in enumerate(points))
    return (f'<svg class="spark" width="{width}" height="{height}" viewBox="0 0 {width} {height}">'
            f'<line x1="0" x2="{width}" y1="{y(0.5):.1f}" y2="{y(0.5):.1f}" class="half"/>'
            f'<polygon points="{top} {bottom}" class="band"/><polyline points="{line}" class="est"/></svg>')


def _num(x: Any, fmt: str = "{:.2f}") -> str:
    return "–" if x is None else fmt.format(x)


def card(row: Mapping[str, Any], detail: bool = False) -> str:
    """One animal's card as HTML (every text escaped)."""
    e = html.escape
    s = str(row.get("subject"))
    d = row.get("decision") or {}
    warn = list(d.get("warnings") or []) + list(d.get("overrides") or [])
    cls = "card warn" if warn else "card"
    session = e(str(row.get("session", "–"))) + (" (closed)" if row.get("closed") else "")
    head = (f'<h2><a href="/subject/{e(s)}">{e(s)}</a> <span class="rig">on {e(str(row.get("rig", "–")))}</span></h2>'
            f'<div class="meta">session {session} · trial <b class="trial">{e(str(row.get("trial", "–")))}</b>'
            f' · stage <b>{e(str(row.get("stage") or "–"))}</b> · block <b>{e(str(row.get("block") or "–"))}</b>'
            f' · water today <b>{_num(row.get("ul_today"), "{:.0f}")} µL</b>{_minimum(row)}</div>')
    cues = []
    for cue, pts in sorted((row.get("behaviour") or {}).items()):
        last = pts[-1] if pts else None
        band = f"{last[1]:.2f} [{last[2]:.2f}, {last[3]:.2f}]" if last else "–"
        cues.append(f'<div class="cue"><span class="cname">{e(cue)}</span> {sparkline(pts)} '
                    f'<span class="band">P {band}</span></div>')
    nxt = (f'<div class="next">next trial #{e(str(d.get("trial")))}: cue <b>{e(str(d.get("cue") or "–"))}</b>, '
           f'reward p {_num(d.get("reward_prob"))}, {_num(d.get("reward_ul"), "{:.1f}")} µL'
           f'{" · <b>ends the session</b>" if d.get("end_session") else ""}</div>') if d else ""
    reasons = "".join(f"<li>{e(str(r))}</li>" for r in d.get("reasons") or [])
    warnings = "".join(f'<li class="w">{e(str(w))}</li>' for w in warn)
    body = f'{head}<div class="cues">{"".join(cues) or "no trials yet"}</div>{nxt}'
    body += f'<ul class="reasons">{warnings}{reasons}</ul>'
    if detail:
        body += (f'<p><img class="report" alt="report figure of {e(s)}" src="/subject/{e(s)}/report.png"></p>')
    return f'<section class="{cls}" id="s-{e(s)}" data-subject="{e(s)}">{body}</section>'


STYLE = """
body{font-family:system-ui,sans-serif;margin:1em;background:#fafafa;color:#222}
h1{font-size:1.3em} .cards{display:flex;flex-wrap:wrap;gap:12px}
.card{background:#fff;border:1px solid #ccc;border-radius:6px;padding:8px 12px;width:30em}
.card.warn{border:2px solid #c60;background:#fff6ec} li.w{color:#a40;font-weight:bold}
.card h2{font-size:1.1em;margin:0 0 4px} .rig{color:#666;font-weight:normal;font-size:.85em}
.meta,.next{font-size:.9em;margin:4px 0} .cue{display:flex;align-items:center;gap:8px;font-size:.85em}
.cname{width:6em;overflow-wrap:anywhere} .reasons{font-size:.85em;margin:4px 0;padding-left:1.2em}
.spark .band{fill:#9ecae1;opacity:.6} .spark .est{fill:none;stroke:#08519c;stroke-width:1.5}
.spark .half{stroke:#bbb;stroke-dasharray:2,2} .status{color:#666;font-size:.85em}
img.report{max-width:100%}
"""

SCRIPT = """
const st=document.getElementById('live');
const es=new EventSource('/events');
es.addEventListener('subject',ev=>{const m=JSON.parse(ev.data);
 const old=document.getElementById('s-'+m.subject);
 if(old){old.outerHTML=m.html}else if(!document.body.dataset.one){document.getElementById('cards').insertAdjacentHTML('beforeend',m.html)}
 st.textContent='live · updated '+new Date().toLocaleTimeString()});
es.onerror=()=>{st.textContent='not connected to the daemon stream (retrying)'};
"""


def page(title: str, cards: list[str], one: str | None = None) -> str:
    """The whole page: cards, style and the event-stream script, all inline."""
    attr = f' data-one="{html.escape(one)}"' if one else ""
    back = '<p><a href="/">all animals</a></p>' if one else ""
    return (f'<!doctype html><html><head><meta charset="utf-8"><title>{html.escape(title)}</title>'
            f"<style>{STYLE}</style></head><body{attr}><h1>{html.escape(title)}</h1>{back}"
            f'<div class="status" id="live">loading</div><div class="cards" id="cards">{"".join(cards)}</div>'
            f"<script>{SCRIPT}</script></body></html>")


# --------------------------------------------------------------------------- live feed


class Follower:
    """Subscribes to the daemon's observer stream and folds each message into the room
    (one thread; finds the endpoint in ``daemon.json`` when not given, retrying)."""

    def __init__(self, room: Room, data: str, publish: str | None = None):
        self.room, self.data, self.publish = room, data, publish
        self.stopping = threading.Event()
        self.connected = threading.Event()
        self.thread = threading.Thread(target=self._run, name="rigloop-web-follow", daemon=True)

    def start(self) -> Follower:
        self.thread.start()
        return self

    def _endpoint(self) -> str | None:
        if self.publish:
            return self.publish
        info = read_state_file(self.data) or {}
        return info.get("publish")

    def _run(self) -> None:
        endpoint = self._endpoint()
        while endpoint is None and not self.stopping.wait(2.0):
            endpoint = self._endpoint()
        if endpoint is None:
            return
        ctx = zlink.new_context()
        sub = zlink.SubLink(ctx, endpoint)
        self.connected.set()
        try:
            for msg in observer_messages(sub, lambda: not self.stopping.is_set()):
                if msg is not None:
                    self.room.feed(msg)
        finally:
            sub.close()
            ctx.term()

    def stop(self) -> None:
        self.stopping.set()
        self.thread.join(5)


def load_room(data: str) -> Room:
    """The room from the store in ``data`` (read only; an empty room when there is none yet)."""
    path = Path(data) / STORE_FILE
    if not path.exists():
        return Room()
    with Store(path, create=False) as store:
        return Room(rows_from_store(store))


def make_app(data: str, *, publish: str | None = None, follow: bool = True, draw: Any = None):
    """The Starlette app for ``data`` (the daemon's data directory); ``draw`` makes the
    report figure (``plot_subject``'s signature), None leaves the figure out."""
    from starlette.applications import Starlette
    from starlette.responses import HTMLResponse, JSONResponse, Response, StreamingResponse
    from starlette.routing import Route

    room = load_room(data)
    follower = Follower(room, data, publish) if follow else None

    def index(request):
        rows = room.snapshot()
        return HTMLResponse(page(f"rigloop room — {len(rows)} animals", [card(rows[s]) for s in sorted(rows)]))

    def one(request):
        s = request.path_params["subject"]
        row = room.snapshot().get(s)
        if row is None:
            return HTMLResponse(f"<p>no subject {html.escape(s)} in this store</p>", status_code=404)
        return HTMLResponse(page(f"rigloop — {s}", [card(row, detail=draw is not None)], one=s))

    def state(request):
        return JSONResponse(room.snapshot())

    def report(request):
        return _report_png(data, request.path_params["subject"], Response, draw)

    async def events(request):
        async def stream():
            seen, last_beat = 0, time.monotonic()
            yield "retry: 2000\n\n"
            while True:
                version, rows = room.changed_since(seen)
                for row in rows:
                    payload = json.dumps({"subject": row["subject"], "html": card(row), "trial": row.get("trial")})
                    yield f"event: subject\ndata: {payload}\n\n"
                seen = version
                if time.monotonic() - last_beat > HEARTBEAT_S:
                    last_beat = time.monotonic()
                    yield ": still here\n\n"
                if await request.is_disconnected():
                    return
                await asyncio.sleep(POLL_S)

        return StreamingResponse(stream(), media_type="text/event-stream",
                                 headers={"Cache-Control": "no-store", "X-Accel-Buffering": "no"})

    def lifespan(app):
        from contextlib import asynccontextmanager

        @asynccontextmanager
        async def span(app):
            if follower is not None:
                follower.start()
            try:
                yield
            finally:
                if follower is not None:
                    follower.stop()

        return span(app)

    app = Starlette(routes=[Route("/", index), Route("/state.json", state), Route("/events", events),
                            Route("/subject/{subject}", one), Route("/subject/{subject}/report.png", report)],
                    lifespan=lifespan)
    app.state.room = room
    app.state.follower = follower
    return app


def _report_png(data: str, subject: str, response: Any, draw: Any) -> Any:
    """The subject's report figure, drawn now from the store by ``draw``."""
    if draw is None:
        return response("no report figures here (rigloop web draws them)", status_code=404, media_type="text/plain")
    with Store(Path(data) / STORE_FILE, create=False) as store:
        if subject not in store.subjects():
            return response(f"no subject {subject!r}", status_code=404, media_type="text/plain")
        q = list(store.rows("quantities", subject))
        d = list(store.rows("decisions", subject))
        t = list(store.rows("trials", subject))
    with tempfile.TemporaryDirectory() as tmp:
        path = draw(q, d, os.path.join(tmp, "report.png"), trials=t, title=f"subject {subject}")
        return response(Path(path).read_bytes(), media_type="image/png")


# --------------------------------------------------------------------------- serving


def parse_listen(listen: str) -> tuple[str, int]:
    """``HOST:PORT`` -> (host, port); port 0 picks a free one."""
    host, sep, port = listen.rpartition(":")
    if not sep or not host or not port.isdigit() or int(port) > 65535:
        from ..errors import BadArgument

        raise BadArgument("--listen", "HOST:PORT with a port 0-65535 (e.g. 127.0.0.1:8080)", listen)
    return host.strip("[]"), int(port)


class WebServer:
    """uvicorn in a thread on a socket bound here (so port 0 works and the URL is known)."""

    def __init__(self, data: str, listen: str = "127.0.0.1:8080", *, publish: str | None = None, draw: Any = None):
        import uvicorn

        host, port = parse_listen(listen)
        family = socket.AF_INET6 if ":" in host else socket.AF_INET
        self.sock = socket.socket(family, socket.SOCK_STREAM)
        self.sock.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        self.sock.bind((host, port))
        self.host, self.port = host, self.sock.getsockname()[1]
        self.app = make_app(data, publish=publish, draw=draw)
        config = uvicorn.Config(self.app, log_level="warning", timeout_graceful_shutdown=1, lifespan="on")
        self.server = uvicorn.Server(config)
        self.thread: threading.Thread | None = None

    @property
    def url(self) -> str:
        host = f"[{self.host}]" if ":" in self.host else self.host
        return f"http://{host}:{self.port}"

    def run(self) -> None:
        """Serve until stopped (the calling thread)."""
        self.server.run(sockets=[self.sock])

    def start_thread(self, timeout: float = 10.0) -> WebServer:
        self.thread = threading.Thread(target=self.run, name="rigloop-web", daemon=True)
        self.thread.start()
        deadline = time.monotonic() + timeout
        while not self.server.started:
            if time.monotonic() > deadline or not self.thread.is_alive():
                raise RuntimeError(f"the room page did not start on {self.url}")
            time.sleep(0.02)
        return self

    def stop(self) -> None:
        self.server.should_exit = True
        if self.thread is not None:
            self.thread.join(10)
        self.sock.close()


def serve_web(data: str, listen: str = "127.0.0.1:8080", *, publish: str | None = None, draw: Any = None,
              out=None) -> int:
    """``rigloop web``: serve the room page until Ctrl-C."""
    import sys

    server = WebServer(data, listen, publish=publish, draw=draw)
    (out or sys.stdout).write(f"rigloop room page on {server.url} (read only; Ctrl-C stops it)\n")
    server.run()
    return 0
