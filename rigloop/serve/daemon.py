"""The streaming daemon: links -> step -> store -> reply/publish, the commit pipelined.

The loop thread owns everything that talks to the outside (context, sockets, serial
ports, subject states); one ``Poller`` watches the ROUTER, the serial file descriptors,
(with CURVE) the handshake monitor, and the committer's pipe. ``Daemon`` is the
lifecycle -- start, the poll loop, stop, teardown, signals -- and wires the parts
(``rigloop.serve`` lists them): a drained batch goes ports -> service (``step``) ->
pipeline (commit) -> delivery (reply, publish).

Shutdown (SIGTERM/SIGINT or ``stop()``): the batch in hand is finished (its commit
returns and its rigs are answered), every loaded subject with an open session is
snapshotted, the committer thread stops, sockets close with a bounded linger and
the context terminates; the process exits 0. Restart recovers each subject lazily
from its newest snapshot plus the trials after it.

When ready, the daemon writes ``daemon.json`` in the data directory with its pid and
the endpoints it bound (ports chosen with ``:*`` are read back from the socket), so
tools and tests know where to connect; it is removed on a clean exit.
"""

from __future__ import annotations

import gc
import json
import os
import signal
import threading
import time
from dataclasses import replace
from pathlib import Path
from typing import Any

import structlog

from ..errors import RigloopError
from ..links import zmq as zlink
from ..links.curve import OPERATOR, SecurityError, allow_list_stamp
from ..store import Store
from ..version import __version__
from .curve_check import allowed_keys, plan_curve, self_test
from .delivery import Delivery
from .metrics import Metrics
from .observers import Publisher, wire_pack
from .pipeline import CommitPipeline, Fatal
from .ports import SerialPorts, ZmqPort
from .rulebook import RuleBook, load_rule_set
from .service import Service
from .settings import DEFAULT_PUBLISH, DEFAULT_ZMQ, Settings
from .subjects import Subjects

__all__ = ["DEFAULT_PUBLISH", "DEFAULT_ZMQ", "STATE_FILE", "STORE_FILE", "Daemon", "Settings", "configure_logging",
           "load_rule_set", "read_state_file", "serve", "wire_pack"]

STATE_FILE = "daemon.json"
STORE_FILE = "rigloop.sqlite"


LOG_FORMATS = ("json", "console")


def configure_logging(stream=None, level: str = "info", fmt: str | None = None) -> None:
    """structlog lines to ``stream`` (stderr by default): JSON lines (``fmt="json"``) for
    files and programs, or structlog's console renderer (``"console"``) for people; None
    picks console when ``stream`` is a terminal, else JSON. Call once, at start-up of a
    daemon process (not at import, and never with a cached logger in tests)."""
    import logging
    import sys

    from ..errors import BadArgument

    stream = stream or sys.stderr
    if fmt is None:
        fmt = "console" if getattr(stream, "isatty", lambda: False)() else "json"
    if fmt not in LOG_FORMATS:
        raise BadArgument("log format", f"one of {', '.join(LOG_FORMATS)}", fmt)
    if fmt == "json":
        last = [structlog.processors.dict_tracebacks, structlog.processors.JSONRenderer()]
    else:
        last = [structlog.dev.ConsoleRenderer(colors=bool(getattr(stream, "isatty", lambda: False)()))]
    structlog.configure(
        processors=[
            structlog.contextvars.merge_contextvars,
            structlog.processors.add_log_level,
            structlog.processors.TimeStamper(fmt="iso", utc=True),
            *last,
        ],
        wrapper_class=structlog.make_filtering_bound_logger(getattr(logging, level.upper(), logging.INFO)),
        logger_factory=structlog.WriteLoggerFactory(file=stream),
        cache_logger_on_first_use=False,
    )


class Daemon:
    """The daemon. Build it with frozen ``Settings``; ``run()`` serves until ``stop()``
    or a signal. ``start_thread()`` runs it in a background thread for tests."""

    def __init__(self, settings: Settings, *, logger: Any = None, clock: Any = time.time):
        self.settings = settings
        self.clock = clock  # wall clock for session open/close times (injectable for tests)
        self.rules = load_rule_set(settings.rules)
        self.rulebook = RuleBook(self.rules)
        self.data = Path(settings.data)
        self.log = logger if logger is not None else structlog.get_logger("rigloop.daemon")
        self.curve = plan_curve(settings, self.data)  # refuses to start without usable keys, before any bind
        self._stop = threading.Event()
        self._reload = threading.Event()  # SIGHUP: re-read the allow-list now
        self._allow_stamp = allow_list_stamp(self.data) if self.curve.server_keys is not None else None
        self._allow_due = 0.0  # monotonic time of the next allow-list check
        self.ready = threading.Event()
        self.exit_code = 0
        self.endpoints: dict[str, Any] = {}
        self._thread: threading.Thread | None = None
        self.error: BaseException | None = None
        self.metrics = Metrics(settings.latency_window)
        self.started = time.time()
        # the parts, built by _start and touched only by the loop thread (in teardown order)
        self.serial: SerialPorts | None = None
        self.router: zlink.RouterLink | None = None
        self.publisher: Publisher | None = None
        self.auth: zlink.Authenticator | None = None
        self.ctx: Any = None
        self.pipeline: CommitPipeline | None = None
        self.store: Store | None = None
        self.poller: zlink.Poller | None = None
        self._monitor: Any = None
        self.zmq_port: ZmqPort | None = None
        self.subjects: Subjects | None = None
        self.service: Service | None = None
        self.freeze_heap = False  # serve() sets it: the process is the daemon's alone

    # -- running ----------------------------------------------------------------

    def run(self) -> int:
        """Serve until stopped; returns the exit status (0 after a clean stop)."""
        try:
            self._start()
        except BaseException as err:
            self.error = err
            self._teardown()
            self.ready.set()
            raise
        if self.freeze_heap:
            # everything built so far (modules, rule files, sockets) lives as long as the
            # process: out of the cyclic collector's sight, a full collection need not walk
            # it (~37,000 objects, 14 ms of CPU on the shared 2-core machine, during which
            # no rig is answered); garbage made from now on is collected as before
            gc.collect()
            gc.freeze()
        self.ready.set()
        try:
            self._loop()
        except Fatal as err:
            self.log.critical("store_failed", error=str(err.__cause__ or err))
            self.exit_code = 1
        finally:
            self._shutdown()
        return self.exit_code

    def stop(self) -> None:
        """Ask the loop to finish its batch and shut down (safe from any thread)."""
        self._stop.set()

    def start_thread(self, timeout: float = 10.0) -> Daemon:
        """Run in a daemon thread; returns once bound and ready (raises its start error)."""
        self._thread = threading.Thread(target=self._run_quiet, name="rigloop-daemon", daemon=True)
        self._thread.start()
        if not self.ready.wait(timeout):
            raise TimeoutError(f"the daemon did not become ready within {timeout} s")
        if self.error is not None:
            raise self.error
        return self

    def _run_quiet(self) -> None:
        try:
            self.run()
        except BaseException as err:  # reported through self.error / start_thread
            self.error = err

    def join(self, timeout: float = 10.0) -> None:
        if self._thread is not None:
            self._thread.join(timeout)
            if self._thread.is_alive():
                raise TimeoutError(f"the daemon thread did not stop within {timeout} s")

    def reload_keys(self) -> None:
        """Ask the loop to re-read the allow-list now (SIGHUP; safe from any thread)."""
        self._reload.set()

    def install_signal_handlers(self) -> None:
        """SIGTERM/SIGINT -> ``stop()``, SIGHUP -> ``reload_keys()`` (main thread only)."""
        for sig in (signal.SIGTERM, signal.SIGINT):
            signal.signal(sig, lambda *_: self.stop())
        if hasattr(signal, "SIGHUP"):
            signal.signal(signal.SIGHUP, lambda *_: self.reload_keys())

    # -- start / stop -------------------------------------------------------------

    def _start(self) -> None:
        """Open the store, bind (CURVE self-tested), open the serial ports, build the
        parts and write ``daemon.json``."""
        s = self.settings
        self.data.mkdir(parents=True, exist_ok=True)
        self.ctx = zlink.new_context()
        # checkpoints on their own thread and connection: no trial's commit waits for one
        self.store = Store(self.data / STORE_FILE, background_checkpoint=True)
        if self.store.presize_error is not None:
            self.log.warning("wal_not_presized", error=self.store.presize_error,
                             message="the store's write-ahead log could not be sized at open (16 MiB); commits "
                                     "still work and grow it as they need, each fsync a little slower. Check the "
                                     "free space on the data disk")
        self.subjects = Subjects(self.store)
        curve = self.curve.server_keys
        if curve is not None:
            self.auth = zlink.Authenticator(self.ctx, self.curve.allowed, loopback_only=(OPERATOR,))
        elif self.curve.beyond_loopback:
            self.log.warning("insecure_bind", endpoint=s.zmq, publish=s.publish,
                             message="INSECURE: binding beyond loopback without CURVE; anyone who can reach "
                                     "this port can send trials and read decisions")
        self.router = zlink.RouterLink(self.ctx, s.zmq, s.router_options(), curve=curve)
        self.zmq_port = ZmqPort(self.router, s.batch_max)
        self.poller = zlink.Poller()
        self.poller.register(self.router.socket)
        if curve is not None:
            self._monitor = self.router.start_monitor()
            self.poller.register(self._monitor)
            self_test(self.ctx, self.router, self.auth, self.curve, s.selftest_timeout_s, self.log)
        if s.publish:
            self.publisher = Publisher(zlink.PubLink(self.ctx, s.publish, curve=curve))
        self.serial = SerialPorts(s, self.poller, self._serial_event)
        delivery = Delivery(self.metrics, self.publisher, self.subjects, self.rulebook, self.log,
                            log_trials=s.log_trials)
        self.pipeline = CommitPipeline(self.store, self.subjects, self.metrics, self.log,
                                       inline_commit=s.inline_commit, budget_ms=s.batch_budget_ms,
                                       input_ready=self._input_ready, send=delivery.send)
        self.poller.register(self.pipeline.fileno())
        self.service = Service(self.store, self.subjects, self.rulebook, self.pipeline, self.metrics, self.publisher,
                               snapshot_every=s.snapshot_every, profiles=dict(s.profiles), clock=self.clock,
                               status=self.status, log=self.log)
        self.serial.open()
        self._write_state_file(curve)

    def _write_state_file(self, curve: zlink.CurveServerKeys | None) -> None:
        s = self.settings
        self.endpoints = {
            "pid": os.getpid(),
            "zmq": self.router.endpoint,
            "publish": self.publisher.endpoint if self.publisher else None,
            "serial": [{"port": p, "rig": r} for p, r in s.serial],
            "curve": curve is not None,
            "server_key": curve.public.decode() if curve is not None else None,
            "rules": sorted(self.rules),
            "started_at": self.started,
            "version": __version__,
        }
        tmp = self.data / (STATE_FILE + ".tmp")
        tmp.write_text(json.dumps(self.endpoints, indent=1) + "\n", encoding="utf-8")
        os.replace(tmp, self.data / STATE_FILE)
        self.log.info("serving", **{k: v for k, v in self.endpoints.items() if k not in ("server_key",)})

    def _shutdown(self) -> None:
        try:
            self.pipeline.settle()  # the batch in flight: its commit returns, its rigs are answered
            self.subjects.snapshot_open()
        except Fatal as err:
            self.log.critical("store_failed", error=str(err.__cause__ or err))
            self.exit_code = 1
        except RigloopError as err:
            self.log.error("shutdown_snapshot_failed", error=str(err))
        finally:
            self._teardown()  # stops the committer thread before the store closes
        try:
            (self.data / STATE_FILE).unlink()
        except OSError:
            pass
        self.log.info("stopped", exit_code=self.exit_code)

    def _teardown(self) -> None:
        """Close whatever ``_start`` got to build (after a failed start too)."""
        if self.serial is not None:
            self.serial.close()
        if self.router is not None:
            self.router.close()
            self.router = None
        if self.publisher is not None:
            self.publisher.close()
            self.publisher = None
        if self.auth is not None:
            self.auth.stop()
        if self.ctx is not None:
            self.ctx.term()  # every socket is closed with a bounded linger, so this returns
            self.ctx = None
        if self.pipeline is not None:
            self.pipeline.close()
            self.pipeline = None
        if self.store is not None:
            self.store.close()
            self.store = None

    # -- the loop -------------------------------------------------------------------

    def _loop(self) -> None:
        router, poller, zmq_port, serial = self.router, self.poller, self.zmq_port, self.serial
        pipeline, handle, timed = self.pipeline, self.service.handle, self.metrics.timed
        monitor = self._monitor
        done_fd = pipeline.fileno()
        keyed = self.auth is not None
        while not self._stop.is_set():
            ready = poller.poll(self._timeout_ms())
            if keyed and (self._reload.is_set() or time.monotonic() >= self._allow_due):
                self._check_allow_list()
            if done_fd in ready:  # the batch in flight is durable: answer it first
                timed(pipeline.settle)
                ready.discard(done_fd)
            work: list[tuple[Any, Any, int]] = []
            if router.socket in ready:
                zmq_port.drain(work)
            if serial.by_fd:
                serial.drain(ready, work)
            if monitor is not None and monitor in ready:
                for kind in router.read_monitor():
                    self.log.warning("handshake_refused", reason=kind)
            if work:
                timed(pipeline.process, work, handle)
            router.flush()
            if serial.ports:
                serial.tend()

    def _check_allow_list(self) -> None:
        """Re-read the allow-list on SIGHUP, or when its files changed (looked at once a
        second): new keys get in, and removed ones are cut off (ZAP refuses their new
        connections; their open ones get no answer). A list that cannot be read is
        refused loudly and the one in force stays."""
        forced = self._reload.is_set()
        self._reload.clear()
        self._allow_due = time.monotonic() + 1.0
        stamp = allow_list_stamp(self.data)
        if not forced and stamp == self._allow_stamp:
            return
        self._allow_stamp = stamp
        try:
            allowed = allowed_keys(self.data, self.curve.server_keys)
        except SecurityError as err:
            self.log.error("allow_list_refused", error=str(err),
                           message="the allow-list could not be read; the previous one stays in force until it is "
                                   "fixed")
            return
        old = set(self.curve.allowed.values())
        now = set(allowed.values())
        self.auth.set_allowed(allowed)
        self.curve = replace(self.curve, allowed=allowed)
        self.service.revoked = frozenset((self.service.revoked | (old - now)) - now)
        self.log.info("allow_list_reloaded", reason="signal" if forced else "file_changed",
                      rigs=len(now - {OPERATOR}), added=sorted(now - old), removed=sorted(old - now))

    def _timeout_ms(self) -> float:
        timeout = 5.0 if self.router.next_deadline() is not None else 100.0
        serial = self.serial
        return serial.timeout_ms(timeout) if serial.ports else timeout

    def _input_ready(self) -> bool:
        """Whether a message or a serial line is already waiting (the ROUTER is asked
        directly; serial ports, if any, by a zero-timeout poll)."""
        return self.router.waiting() or (bool(self.serial.by_fd) and bool(self.poller.poll(0)))

    def _serial_event(self, event: str, **kw: Any) -> None:
        (self.log.info if event == "serial_open" else self.log.warning)(event, **kw)

    # -- status -----------------------------------------------------------------------

    def latency_ms(self) -> dict[str, Any]:
        return self.metrics.latency_ms()

    def status(self) -> dict[str, Any]:
        """The map ``rigloop status`` prints (plain builtins, msgpack/JSON-safe)."""
        subjects = self.subjects
        return {
            "version": __version__,
            "pid": os.getpid(),
            "uptime_s": round(time.time() - self.started, 3),
            "endpoints": {"zmq": self.endpoints.get("zmq"), "publish": self.endpoints.get("publish"),
                          "curve": self.endpoints.get("curve")},
            "subjects_loaded": len(subjects.states),
            "subjects": sorted(subjects.states),
            "open_sessions": subjects.open_sessions(),
            **self.metrics.statistics(),
            "queues": {"router": self.router.statistics() if self.router else None,
                       **self.metrics.queues(self.settings.batch_max)},
            "serial": self.serial.statistics() if self.serial is not None else [],
            "rules": sorted(self.rules),
            # the cyclic collector: objects kept out of its walks, and collections per generation
            "gc": {"frozen": gc.get_freeze_count(), "collections": [g["collections"] for g in gc.get_stats()]},
        }


def read_state_file(data: str | os.PathLike) -> dict[str, Any] | None:
    """The running daemon's ``daemon.json`` (pid, endpoints), or None."""
    try:
        return json.loads((Path(data) / STATE_FILE).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None


def serve(settings: Settings, *, log_stream=None, log_level: str = "info", log_format: str | None = None) -> int:
    """``rigloop serve``: configure logging (``log_format``: see ``configure_logging``), build
    the daemon, serve until a signal."""
    configure_logging(log_stream, log_level, log_format)
    # a logger bound once, after configure: structlog's module-level proxy rebuilds its
    # logger on every call (a trial's log line: 37 -> 19 µs in a hot loop)
    daemon = Daemon(settings, logger=structlog.get_logger("rigloop.daemon").bind())
    daemon.freeze_heap = True
    daemon.install_signal_handlers()
    return daemon.run()
