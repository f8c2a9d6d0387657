"""The streaming daemon: links -> step -> store -> reply/publish, the commit pipelined.

The loop thread owns everything that talks to the outside (context, sockets, serial
ports, subject states); one ``Poller`` watches the ROUTER, the serial file descriptors,
(with CURVE) the handshake monitor, and the committer's pipe. The one other thread, the
*committer*, only runs ``Store.commit_batch`` (the store takes a lock per call); it
touches no socket and no daemon state.

When a batch is done and nothing else is waiting (no message on the ROUTER, no line on
a serial port), the loop commits it itself and answers at once: a rig alone pays for no
hand-off between threads. When more input is waiting, trials go through a two-stage
pipeline of *group commits*, at most one batch in flight:

1. drain what is ready (at most ``batch_max`` messages from the ROUTER, plus every
   complete line from each serial port), decoding each with ``wire`` (every bad
   message gets an error reply and is counted by code);
2. step batch k+1 in arrival order on the newest in-memory states -- those already
   include batch k's stepped trials while k commits (the same subject twice sees the
   state after the first); replies to anything that is not a trial wait in the batch;
3. when stepping has taken ``batch_budget_ms`` or the drain is done, wait for batch
   k's commit to return (the committer writes one byte to a pipe; the loop blocks on
   it, or the poller wakes on it when the loop is idle -- never a busy-wait), take in
   its results, **only then** reply to batch k's rigs and publish its updates, and
   hand batch k+1 to the committer.

So the fsync of batch k overlaps with stepping batch k+1 (sqlite3 releases the GIL while
SQLite runs), and an ack still means the trial is durable.

Anything that must see committed trials first waits for the batch in flight and sends
its replies: opening or closing a session (which also commits the trials stepped
before it, so the store sees everything in arrival order), and a retry's dedup lookup
for a subject that has trials in flight. If an item of batch k is not stored while
batch k+1 was already stepped on that subject's uncommitted state, batch k+1's trials
of that subject are answered with an ``internal`` error (the rig retries) and the
subject's state is reloaded from the store. A failed commit (``StoreError``) is fatal:
nothing more is acknowledged, the process exits 1 and a restart recovers.

Retries: a trial already stored is answered with the stored decision and
``duplicate=True``; nothing is counted twice. A trial number that skips ahead or a
trial for a session that is not open gets an error naming what was expected.

Opening a session that is already open (a rig that restarted and re-sent its open)
is answered with the session's *current* next decision (its first decision if no
trial was stored yet), marked ``duplicate=True``, so the rig can resume.

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

import json
import math
import os
import queue
import signal
import threading
import time
import tomllib
from collections import deque
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field, fields, replace
from pathlib import Path
from typing import Any

import structlog

from .. import wire
from ..core.step import begin_session, step
from ..core.subject import ModelView, SubjectState, new_subject, representation_for
from ..core.trial import Decision, TrialEvent
from ..errors import (
    BadArgument,
    BadEvent,
    ConflictingTrial,
    RigloopError,
    RuleError,
    StoreError,
    WireError,
)
from ..links import zmq as zlink
from ..links.curve import (
    SecurityError,
    ephemeral_client,
    is_loopback,
    load_allowed,
    load_server_keys,
)
from ..links.serial import SerialLink
from ..replay import RulesCache, recover
from ..store import SessionInfo, Store
from ..version import __version__
from ..wire import MessageError

DEFAULT_ZMQ = "tcp://127.0.0.1:5570"
DEFAULT_PUBLISH = "tcp://127.0.0.1:5571"
STATE_FILE = "daemon.json"
STORE_FILE = "rigloop.sqlite"


# --------------------------------------------------------------------------- settings


@dataclass(frozen=True, slots=True)
class Settings:
    """Everything the daemon is told, fixed before it starts.

    ``rules``: rule files, directories of them, or names of shipped examples; a rig's
    open-session message names one by file stem. ``serial``: ``(port, rig)`` pairs.
    ``profiles``: ``(rig, profile)`` pairs, for valve calibration. Times in seconds
    unless the name says ms.
    """

    data: str
    rules: tuple[str, ...]
    zmq: str = DEFAULT_ZMQ
    publish: str | None = DEFAULT_PUBLISH
    serial: tuple[tuple[str, str], ...] = ()
    profiles: tuple[tuple[str, str], ...] = ()
    insecure: bool = False
    batch_max: int = 64
    batch_budget_ms: float = 8.0
    inline_commit: bool = True  # commit on the loop thread when no other input waits
    snapshot_every: int = 50
    serial_baudrate: int = 115200
    serial_max_line: int = 512
    require_checksum: bool = False
    sndhwm: int = 10_000
    rcvhwm: int = 10_000
    max_msg_size: int = 64 * 1024
    heartbeat_ivl_ms: int = 1000
    heartbeat_timeout_ms: int = 3000
    handshake_ivl_ms: int = 5000
    linger_ms: int = 200
    send_retry_ms: int = 1000
    latency_window: int = 10_000
    selftest_timeout_s: float = 1.0
    log_trials: bool = True

    def __post_init__(self) -> None:
        if not self.data:
            raise BadArgument("data", "a data directory", self.data)
        if not self.rules:
            raise BadArgument("rules", "at least one rule file, directory or example name", self.rules)
        for name in ("batch_max", "snapshot_every", "serial_baudrate", "serial_max_line", "latency_window"):
            v = getattr(self, name)
            if isinstance(v, bool) or not isinstance(v, int) or v < 1:
                raise BadArgument(name, "a whole number >= 1", v)
        for port, rig in self.serial:
            if not port or not rig:
                raise BadArgument("serial", "PORT=RIG pairs", f"{port}={rig}")

    def router_options(self) -> zlink.RouterOptions:
        return zlink.RouterOptions(
            sndhwm=self.sndhwm, rcvhwm=self.rcvhwm, max_msg_size=self.max_msg_size,
            heartbeat_ivl=self.heartbeat_ivl_ms, heartbeat_timeout=self.heartbeat_timeout_ms,
            heartbeat_ttl=2 * self.heartbeat_timeout_ms, handshake_ivl=self.handshake_ivl_ms,
            linger=self.linger_ms, send_retry_ms=self.send_retry_ms,
        )

    @classmethod
    def from_toml(cls, path: str | os.PathLike, **overrides: Any) -> Settings:
        """Settings from a TOML file (keys as the field names; ``serial`` and ``profiles``
        as tables ``{port = rig}`` / ``{rig = profile}``), then ``overrides`` (non-None
        command-line values) on top."""
        p = Path(path)
        try:
            data = tomllib.loads(p.read_text(encoding="utf-8"))
        except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError) as err:
            raise BadArgument("config", "a readable TOML settings file", f"{p}: {err}") from None
        data = dict(data.get("serve", data))
        known = {f.name for f in fields(cls)}
        unknown = sorted(set(data) - known)
        if unknown:
            raise BadArgument("config", f"known settings only ({', '.join(sorted(known))})", f"{p}: {unknown[0]}")
        for key in ("serial", "profiles"):
            if isinstance(data.get(key), Mapping):
                data[key] = tuple((str(k), str(v)) for k, v in data[key].items())
            elif key in data:
                data[key] = tuple(tuple(x) for x in data[key])
        if isinstance(data.get("rules"), str):
            data["rules"] = (data["rules"],)
        elif "rules" in data:
            data["rules"] = tuple(data["rules"])
        data.update({k: v for k, v in overrides.items() if v is not None})
        return cls(**data)


def load_rule_set(specs: Iterable[str]) -> dict[str, Any]:
    """Rule files by name (file stem; a shipped example by its name). A directory
    contributes every ``*.toml`` in it. Two files with one name are an error."""
    from ..rules import load_example, load_rules_file

    out: dict[str, Any] = {}

    def add(name: str, rules: Any, where: str) -> None:
        if name in out and out[name].sha256 != rules.sha256:
            raise RuleError([f"two different rule files are named {name!r} ({where})"], where)
        out[name] = rules

    for spec in specs:
        p = Path(spec)
        if p.is_dir():
            files = sorted(p.glob("*.toml"))
            if not files:
                raise RuleError([f"directory {p} holds no *.toml rule files"], str(p))
            for f in files:
                add(f.stem, load_rules_file(f), str(f))
        elif p.exists() or p.suffix == ".toml":
            add(p.stem, load_rules_file(p), str(p))
        else:
            add(spec, load_example(spec), f"example:{spec}")
    return out


# --------------------------------------------------------------------------- logging


def configure_logging(stream=None, level: str = "info") -> None:
    """structlog JSON lines to ``stream`` (stderr by default). Call once, at start-up
    of a daemon process (not at import, and never with a cached logger in tests)."""
    import logging
    import sys

    structlog.configure(
        processors=[
            structlog.contextvars.merge_contextvars,
            structlog.processors.add_log_level,
            structlog.processors.TimeStamper(fmt="iso", utc=True),
            structlog.processors.dict_tracebacks,
            structlog.processors.JSONRenderer(),
        ],
        wrapper_class=structlog.make_filtering_bound_logger(getattr(logging, level.upper(), logging.INFO)),
        logger_factory=structlog.WriteLoggerFactory(file=stream or sys.stderr),
        cache_logger_on_first_use=False,
    )


# --------------------------------------------------------------------------- pieces


@dataclass(slots=True)
class _Source:
    """Where a request came from and how to answer it."""

    kind: str  # "zmq" or "serial"
    rig: str | None  # authenticated rig (CURVE User-Id) or the serial port's rig
    envelope: tuple[bytes, ...] = ()
    link: SerialLink | None = None


@dataclass(slots=True)
class _Pending:
    """A stepped trial waiting for the batch commit."""

    source: _Source
    req_id: Any
    received_ns: int
    event: TrialEvent
    decision: Decision
    update: Any
    snapshot: bytes | None
    state: SubjectState
    echo_of: _Pending | None = None  # a repeat of a trial earlier in the same batch
    duplicate: bool = False
    error: BaseException | None = None


@dataclass(slots=True)
class _Out:
    source: _Source
    reply: Any
    received_ns: int
    trial: _Pending | None = None


class _Fatal(Exception):
    """The store failed a commit: stop serving (nothing of the batch was acknowledged)."""


@dataclass(slots=True)
class _Batch:
    """One group commit: the stepped trials and every reply of the requests in it,
    in arrival order (sent together once the commit returned)."""

    trials: list[_Pending] = field(default_factory=list)
    keys: dict[tuple[str, str, int], _Pending] = field(default_factory=dict)
    overlay: dict[str, SubjectState] = field(default_factory=dict)  # newest uncommitted state per subject
    out: list[_Out] = field(default_factory=list)
    # filled in by the committer thread before it signals
    results: list[Any] | None = None
    error: BaseException | None = None


class _Committer:
    """The thread that makes batches durable, one at a time.

    ``submit`` hands it a batch (the loop thread builds the items); the thread runs
    ``Store.commit_batch``, stores the results (or the exception) on the batch and
    writes one byte to a pipe whose read end the loop's poller watches. ``wait``
    blocks on that pipe and returns the batch. Only the loop thread calls
    ``submit``/``wait``; at most one batch is in flight."""

    def __init__(self, store: Store):
        self._store = store
        self._jobs: queue.SimpleQueue = queue.SimpleQueue()  # [batch, items] or None (stop)
        self._read_fd, self._write_fd = os.pipe()
        self.busy: _Batch | None = None  # the batch in flight (loop thread only)
        self._thread = threading.Thread(target=self._run, name="rigloop-commit", daemon=True)
        self._thread.start()

    def fileno(self) -> int:
        return self._read_fd

    def submit(self, batch: _Batch) -> None:
        assert self.busy is None, "one batch in flight at most"
        self.busy = batch
        self._jobs.put([batch, self.items(batch)])

    @staticmethod
    def items(batch: _Batch) -> list[tuple]:
        """What ``Store.commit_batch`` takes for the batch's stepped trials."""
        return [(p.event, p.decision, p.update.quantities, p.snapshot) for p in batch.trials]

    def wait(self) -> _Batch:
        """The batch in flight, once its commit has returned (blocks until then)."""
        batch = self.busy
        assert batch is not None
        os.read(self._read_fd, 1)
        self.busy = None
        return batch

    def _run(self) -> None:
        while True:
            job = self._jobs.get()
            if job is None:
                return
            batch, items = job
            try:
                batch.results = self._store.commit_batch(items)
            except BaseException as err:  # handed to the loop thread, which decides
                batch.error = err
            os.write(self._write_fd, b"\x01")

    def close(self) -> None:
        """Stop the thread (after the batch it may be committing) and close the pipe."""
        self._jobs.put(None)
        self._thread.join()
        os.close(self._read_fd)
        os.close(self._write_fd)


class Daemon:
    """The daemon. Build it with frozen ``Settings``; ``run()`` serves until ``stop()``
    or a signal. ``start_thread()`` runs it in a background thread for tests."""

    def __init__(self, settings: Settings, *, logger: Any = None, clock: Any = time.time):
        self.settings = settings
        self.clock = clock  # wall clock for session open/close times (injectable for tests)
        self.rules = load_rule_set(settings.rules)
        self.data = Path(settings.data)
        self.log = logger if logger is not None else structlog.get_logger("rigloop.daemon")
        self._secure = not is_loopback(settings.zmq) or (settings.publish is not None and not is_loopback(settings.publish))
        if self._secure and not settings.insecure:
            if not zlink.has_curve():
                raise SecurityError("this libzmq was built without CURVE; binding beyond loopback needs it "
                                    "(or --insecure)")
            # checked before anything binds: refuse to start without usable keys
            self._server_keys = load_server_keys(self.data)
            self._allowed = load_allowed(self.data)
        else:
            self._server_keys = None
            self._allowed = {}
        self._stop = threading.Event()
        self.ready = threading.Event()
        self.exit_code = 0
        self.endpoints: dict[str, Any] = {}
        self._thread: threading.Thread | None = None
        self.error: BaseException | None = None
        # state (touched only by the loop thread)
        self.states: dict[str, SubjectState] = {}
        self.open: dict[str, SessionInfo] = {}
        self._snapshot_at: dict[str, tuple[str, int]] = {}
        self._rules_cache = RulesCache()
        self._by_sha = {r.sha256: r for r in self.rules.values()}
        self.counts: dict[str, int] = {"requests": 0, "trials": 0, "duplicates": 0, "sessions_opened": 0,
                                       "sessions_closed": 0, "batches": 0, "commits_here": 0, "commits_handed_over": 0,
                                       "errors": 0, "replies_dropped": 0}
        self.errors_by_code: dict[str, int] = {}
        self._latency_ns: deque[int] = deque(maxlen=settings.latency_window)
        self._batch_peak = 0  # largest batch seen
        self.busy_s = 0.0  # loop thread handling batches (the rest is waiting for input or the committer)
        self.commit_wait_s = 0.0  # loop thread waiting on commits (one in flight, or its own when idle)
        self._cur = _Batch()  # the batch being stepped
        self._committer: _Committer | None = None
        self.started = time.time()

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
        self.ready.set()
        try:
            self._loop()
        except _Fatal as err:
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

    def install_signal_handlers(self) -> None:
        """SIGTERM/SIGINT -> ``stop()`` (main thread only)."""
        for sig in (signal.SIGTERM, signal.SIGINT):
            signal.signal(sig, lambda *_: self.stop())

    # -- start / stop -------------------------------------------------------------

    def _start(self) -> None:
        s = self.settings
        self.data.mkdir(parents=True, exist_ok=True)
        self.ctx = zlink.new_context()
        self.router = None
        self.pub = None
        self.auth = None
        self.serial_links: list[SerialLink] = []
        self.decoders: dict[int, Any] = {}
        self.store = Store(self.data / STORE_FILE)
        for info in self.store.sessions():
            if info.closed_at is None:
                self.open[info.subject] = info  # later sessions of a subject replace earlier ones
        curve = None
        if self._server_keys is not None:
            curve = self._server_keys
            self.auth = zlink.Authenticator(self.ctx, self._allowed)
        elif self._secure:
            self.log.warning("insecure_bind", endpoint=s.zmq, publish=s.publish,
                             message="INSECURE: binding beyond loopback without CURVE; anyone who can reach "
                                     "this port can send trials and read decisions")
        self.router = zlink.RouterLink(self.ctx, s.zmq, s.router_options(), curve=curve)
        self.poller = zlink.Poller()
        self.poller.register(self.router.socket)
        self._committer = _Committer(self.store)
        self.poller.register(self._committer.fileno())
        self._monitor = None
        if curve is not None:
            self._monitor = self.router.start_monitor()
            self.poller.register(self._monitor)
            self._self_test()
        if s.publish:
            self.pub = zlink.PubLink(self.ctx, s.publish, curve=curve)
        self._fd_links: dict[int, SerialLink] = {}
        for port, rig in s.serial:
            link = SerialLink(port, rig, baudrate=s.serial_baudrate, on_event=self._serial_event)
            self.serial_links.append(link)
            self.decoders[id(link)] = [wire.LineDecoder(max_line=s.serial_max_line,
                                                        require_checksum=s.require_checksum), 0]
            if link.open(first=True):
                self._register_link(link)
        self.endpoints = {
            "pid": os.getpid(),
            "zmq": self.router.endpoint,
            "publish": self.pub.endpoint if self.pub else None,
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

    def _self_test(self) -> None:
        """With CURVE on: an unlisted key and a NULL client must be refused, a listed key
        (a temporary one, listed for the test only) must get through."""
        t = self.settings.selftest_timeout_s
        endpoint = self.router.endpoint
        if "0.0.0.0" in endpoint:
            endpoint = endpoint.replace("0.0.0.0", "127.0.0.1")
        good = ephemeral_client(self._server_keys.public)
        self.auth.set_allowed({**self._allowed, good.public: "#selftest"})
        probes = [("unlisted", ephemeral_client(self._server_keys.public), False), ("null", None, False),
                  ("listed", good, True)]
        try:
            for name, keys, expect in probes:
                client = zlink.DealerLink(self.ctx, endpoint, curve=keys)
                try:
                    client.send(b"#selftest")
                    got = None
                    deadline = time.monotonic() + (t if expect else t / 2)
                    while time.monotonic() < deadline and got is None:
                        if self.router.socket.poll(20):
                            got = self.router.recv()
                    passed = (got is not None and got.user_id == "#selftest") if expect else got is None
                    if not passed:
                        raise SecurityError(f"CURVE self-test failed: a {name} client was "
                                            f"{'refused' if expect else 'let through'}; refusing to serve")
                finally:
                    client.close()
        finally:
            self.auth.set_allowed(self._allowed)
        self.router.read_monitor()
        self.router.auth_failures = 0
        self.log.info("curve_self_test_passed", allowed_rigs=len(self._allowed))

    def _shutdown(self) -> None:
        try:
            self._settle()  # the batch in flight: its commit returns, its rigs are answered
            self._snapshot_open()
        except _Fatal as err:
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
        for link in getattr(self, "serial_links", []):
            link.close()
        for name in ("router", "pub"):
            obj = getattr(self, name, None)
            if obj is not None:
                obj.close()
                setattr(self, name, None)
        if getattr(self, "auth", None) is not None:
            self.auth.stop()
        ctx = getattr(self, "ctx", None)
        if ctx is not None:
            ctx.term()  # every socket is closed with a bounded linger, so this returns
            self.ctx = None
        if self._committer is not None:
            self._committer.close()
            self._committer = None
        store = getattr(self, "store", None)
        if store is not None:
            store.close()
            self.store = None

    def _snapshot_open(self) -> None:
        for subject, state in self.states.items():
            info = self.open.get(subject)
            if info is None or state.context is None or state.context.session != info.session:
                continue
            self._save_snapshot(subject, state)

    def _save_snapshot(self, subject: str, state: SubjectState) -> None:
        at = (state.context.session, state.last_trial)
        if self._snapshot_at.get(subject) == at:
            return
        self.store.save_snapshot(subject, at[0], at[1], state.to_bytes())
        self._snapshot_at[subject] = at

    # -- the loop -------------------------------------------------------------------

    def _loop(self) -> None:
        router = self.router
        done_fd = self._committer.fileno()
        while not self._stop.is_set():
            ready = self.poller.poll(self._timeout_ms())
            if done_fd in ready:  # the batch in flight is durable: answer it first
                self._timed(self._settle)
                ready.discard(done_fd)
            work: list[tuple[_Source, Any, int]] = []
            if router.socket in ready:
                self._drain_router(work)
            for fd in [r for r in ready if isinstance(r, int)]:
                link = self._fd_links.get(fd)
                if link is not None:
                    self._drain_serial(link, work)
            if self._monitor is not None and self._monitor in ready:
                for kind in router.read_monitor():
                    self.log.warning("handshake_refused", reason=kind)
            if work:
                self._timed(self._process, work)
            router.flush()
            for link in self.serial_links:
                link.flush()
            self._tend_serial()

    def _timed(self, fn: Any, *args: Any) -> None:
        """Run ``fn`` and count its time in ``busy_s``, less the time spent waiting on a
        commit (one in flight, or one run here when idle; counted in ``commit_wait_s``)."""
        t0, w0 = time.perf_counter(), self.commit_wait_s
        fn(*args)
        self.busy_s += time.perf_counter() - t0 - (self.commit_wait_s - w0)

    def _timeout_ms(self) -> float:
        timeout = 100.0
        now = time.monotonic()
        deadline = self.router.next_deadline()
        if deadline is not None:
            timeout = min(timeout, 5.0)
        for link in self.serial_links:
            if link.pending_out:
                timeout = min(timeout, 5.0)
            if link.reopen_at is not None:
                timeout = min(timeout, max(0.0, (link.reopen_at - now) * 1000))
        return timeout

    def _drain_router(self, work: list) -> None:
        for _ in range(self.settings.batch_max):
            msg = self.router.recv()
            if msg is None:
                return
            src = _Source("zmq", msg.user_id if self.router.curve else None, msg.envelope)
            if msg.payload is None:
                work.append((src, MessageError("bad_message", f"expected a routing id and one payload frame (or an "
                                                          f"empty delimiter and one payload frame), got {msg.frames} "
                                                          "frames"), msg.received_ns))
                continue
            try:
                req = wire.decode_request(msg.payload)
            except WireError as err:
                req = _status_request(msg.payload) if err.code == "unknown_type" else None
                if req is None:
                    req = err
            except Exception as err:  # the codec promises WireError only; never die on input
                req = MessageError("internal", f"could not decode the message ({type(err).__name__})")
            work.append((src, req, msg.received_ns))

    def _drain_serial(self, link: SerialLink, work: list) -> None:
        data = link.read()
        slot = self.decoders[id(link)]
        if slot[1] != link.generation:
            slot[0].reset()
            slot[1] = link.generation
        if data:
            now = time.monotonic_ns()
            slot[0].feed(data)
            src = _Source("serial", link.rig, link=link)
            for item in slot[0]:
                work.append((src, item, now))

    def _register_link(self, link: SerialLink) -> None:
        fd = link.fileno()
        self._fd_links[fd] = link
        self.poller.register(fd)

    def _tend_serial(self) -> None:
        for fd, link in list(self._fd_links.items()):
            if not link.connected or link.fileno() != fd:
                self.poller.unregister(fd)
                del self._fd_links[fd]
        now = time.monotonic()
        for link in self.serial_links:
            if link.due(now) and link.open():
                self._register_link(link)

    def _serial_event(self, event: str, **kw: Any) -> None:
        (self.log.info if event == "serial_open" else self.log.warning)(event, **kw)

    # -- one batch ----------------------------------------------------------------

    def _process(self, work: list[tuple[_Source, Any, int]]) -> None:
        self.counts["batches"] += 1
        self._batch_peak = max(self._batch_peak, len(work))
        budget = self.settings.batch_budget_ms / 1000.0
        started = time.perf_counter()
        for src, req, t in work:
            if self._cur.out and time.perf_counter() - started > budget:
                # stepping takes ~1 ms a trial: hand over what is done rather than keep the
                # first rigs of a big batch waiting for the last. (Handing over as soon as
                # the committer is free made commits of ~3 trials and cost capacity.)
                self._hand_over(more=True)
                started = time.perf_counter()
            self.counts["requests"] += 1
            try:
                reply = self._handle(src, req, t)
            except WireError as err:
                reply = self._error(_req_id(req), err.code if err.code in wire.ERROR_CODES else "bad_message",
                                    str(err), err.field)
            except BadEvent as err:
                reply = self._error(_req_id(req), "bad_field", str(err), err.field)
            except (RuleError, BadArgument) as err:
                reply = self._error(_req_id(req), "bad_field", str(err), getattr(err, "argument", None))
            except ConflictingTrial as err:
                reply = self._error(_req_id(req), "conflict", str(err), "trial")
            except StoreError as err:
                reply = self._error(_req_id(req), "internal", f"the store refused the request: {err}")
            if reply is not None:
                self._cur.out.append(_Out(src, reply, t))  # _handle may have started a new batch
        self._hand_over()

    # -- the pipeline -----------------------------------------------------------------

    def _hand_over(self, more: bool = False) -> None:
        """Answer the batch in flight (waiting for its commit), then commit the batch being
        stepped: here, if nothing else waits to be stepped (``more`` is False and no input
        is ready), else on the committer thread while the loop steps on. A batch without
        trials is answered at once."""
        self._settle()
        batch, self._cur = self._cur, _Batch()
        if batch.trials:
            if more or not self.settings.inline_commit or self._input_ready():
                self.counts["commits_handed_over"] += 1
                self._committer.submit(batch)
            else:
                self.counts["commits_here"] += 1
                self._commit_here(batch)
        elif batch.out:
            self._fill_replies(batch.out)  # trials dropped by _settle get their errors
            self._send_all(batch.out)

    def _input_ready(self) -> bool:
        """Whether a message or a serial line is already waiting (the ROUTER is asked
        directly; serial ports, if any, by a zero-timeout poll)."""
        return self.router.waiting() or (bool(self._fd_links) and bool(self.poller.poll(0)))

    def _commit_here(self, batch: _Batch) -> None:
        """Commit ``batch`` on the loop thread, then answer it (the idle path)."""
        t0 = time.perf_counter()
        try:
            batch.results = self.store.commit_batch(self._committer.items(batch))
        except BaseException as err:  # decided in _finish, as for a batch from the committer
            batch.error = err
        self.commit_wait_s += time.perf_counter() - t0
        self._finish(batch)

    def _flush(self) -> None:
        """Commit and answer everything stepped so far (before writes outside a batch)."""
        self._hand_over()
        self._settle()

    def _settle(self) -> bool:
        """If a batch is in flight: wait for its commit, take in the results, and only
        then send its replies and publish its updates. True if there was one."""
        committer = self._committer
        if committer is None or committer.busy is None:
            return False
        t0 = time.perf_counter()
        batch = committer.wait()
        self.commit_wait_s += time.perf_counter() - t0
        self._finish(batch)
        return True

    def _finish(self, batch: _Batch) -> None:
        """A batch whose commit returned: take in its results, then answer its rigs and
        publish its updates. A failed commit stops the daemon (restart recovers)."""
        if batch.error is not None:
            if isinstance(batch.error, StoreError):  # the store refuses further writes: stop, restart recovers
                raise _Fatal(batch.error) from batch.error
            raise batch.error
        self._take_results(batch)
        self._send_all(batch.out)

    def _settle_for(self, subject: str) -> bool:
        """Settle the batch in flight if it holds trials of ``subject`` (so the store
        answers for them). True if it did."""
        busy = self._committer.busy
        return busy is not None and subject in busy.overlay and self._settle()

    def _take_results(self, batch: _Batch) -> None:
        """Apply a committed batch's results to the daemon's state; fill in its replies."""
        failed: set[str] = set()
        for p, res in zip(batch.trials, batch.results, strict=True):
            subject = p.event.subject
            if not res.ok:
                p.decision, p.error = None, res.error
                failed.add(subject)
            elif res.duplicate:  # cannot happen after the checks in _trial; answered as a retry
                p.decision, p.duplicate, p.update = res.decision, True, None
                self.counts["duplicates"] += 1
            else:
                self.states[subject] = p.state
                self.counts["trials"] += 1
                if p.snapshot is not None:
                    self._snapshot_at[subject] = (p.event.session, p.event.trial)
        for subject in failed:  # the cached state may be ahead of the store: reload it next time
            self.states.pop(subject, None)
            self.log.error("trial_not_stored", subject=subject)
        if failed:
            self._drop_stepped(failed)
        self._fill_replies(batch.out)

    def _drop_stepped(self, subjects: set[str]) -> None:
        """Trials of ``subjects`` in the batch being stepped were stepped on a state that
        did not reach the store: take them out, to be answered with an error."""
        cur = self._cur
        if not any(s in cur.overlay for s in subjects):
            return
        keep = []
        for p in cur.trials:
            if p.event.subject in subjects:
                p.decision, p.update, p.snapshot = None, None, None
                p.error = StoreError(f"trial {p.event.trial} of session {p.event.session!r} was stepped on a trial "
                                     f"of subject {p.event.subject!r} that could not be stored; send it again")
                cur.keys.pop(p.event.key, None)
            else:
                keep.append(p)
        cur.trials = keep
        for s in subjects:
            cur.overlay.pop(s, None)

    def _fill_replies(self, out: list[_Out]) -> None:
        """The reply of each trial in ``out``, from its commit result."""
        for o in out:
            p = o.trial
            if p is None or o.reply is not None:
                continue
            base = p.echo_of or p
            if base.decision is None:
                err = base.error
                code = "conflict" if isinstance(err, ConflictingTrial) else "internal"
                o.reply = self._error(p.req_id, code, str(err) if err else "the trial could not be stored")
                p.decision = None
            else:
                if p.echo_of is not None:
                    self.counts["duplicates"] += 1
                o.reply = wire.DecisionReply(p.req_id, base.decision, p.echo_of is not None or base.duplicate)

    def _send_all(self, out: list[_Out]) -> None:
        log_trials = self.settings.log_trials
        published = []
        for o in out:
            reply = o.reply
            try:
                if o.source.kind == "zmq":
                    frame = reply.encode() if isinstance(reply, _StatusReply) else wire.encode_reply(reply)
                    ok = self.router.send(o.source.envelope, frame)
                else:
                    ok = o.source.link.write(wire.format_reply_line(reply))
            except WireError as err:  # a reply that cannot be encoded (e.g. names too long for a line)
                self.log.error("reply_not_encodable", code=err.code, error=str(err))
                ok = False
            if not ok:
                self.counts["replies_dropped"] += 1
            latency_ns = time.monotonic_ns() - o.received_ns
            self._latency_ns.append(latency_ns)
            p = o.trial
            if p is not None and p.decision is not None:
                if log_trials:
                    self.log.info("trial", subject=p.event.subject, rig=p.event.rig, session=p.event.session,
                                  trial=p.event.trial, latency_ms=round(latency_ns / 1e6, 3),
                                  duplicate=bool(getattr(reply, "duplicate", False)), sent=ok)
                if p.update is not None and p.echo_of is None:
                    published.append(p)
        if self.pub is not None:
            for p in published:
                if self.pub.wants(p.event.subject):  # no observer: no summary to build
                    self._publish_trial(p)

    # -- requests -------------------------------------------------------------------

    def _handle(self, src: _Source, req: Any, t: int) -> Any:
        if isinstance(req, WireError):
            self._count_error(req.code)
            return wire.ErrorReply.from_error(req)
        if isinstance(req, wire.TrialReport):
            pending = self._trial(src, req, t)
            if isinstance(pending, _Pending):
                self._cur.out.append(_Out(src, None, t, pending))
                return None
            return pending
        if isinstance(req, wire.Ping):
            return wire.Pong(req.id)
        if isinstance(req, _StatusRequest):
            return _StatusReply(req.id, self.status())
        if isinstance(req, wire.OpenSession):
            self._flush()
            return self._open_session(src, req)
        if isinstance(req, wire.CloseSession):
            self._flush()
            return self._close_session(src, req)
        if isinstance(req, wire.QueryState):
            return self._query_state(req)
        return self._error(_req_id(req), "unknown_type", f"request type {type(req).__name__} is not served here")

    def _count_error(self, code: str) -> None:
        self.counts["errors"] += 1
        self.errors_by_code[code] = self.errors_by_code.get(code, 0) + 1

    def _error(self, req_id: Any, code: str, message: str, field_name: str | None = None) -> Any:
        self._count_error(code)
        if len(message) > wire.messages.MAX_MESSAGE:
            message = message[: wire.messages.MAX_MESSAGE - 3] + "..."
        return wire.ErrorReply(req_id, code, message, field_name)

    def _check_rig(self, src: _Source, claimed: str, req_id: Any) -> Any:
        """An error reply when the payload's rig is not the connection's rig, else None."""
        if src.rig is not None and claimed != src.rig:
            return self._error(req_id, "bad_field", f"this connection belongs to rig {src.rig!r}; a message for "
                                                    f"rig {claimed!r} cannot come from it", "rig")
        return None

    def _state(self, subject: str) -> SubjectState | None:
        """The subject's newest state: stepped in this batch, else in the batch in flight,
        else committed, else recovered from the store (a subject with no trial in flight)."""
        state = self._cur.overlay.get(subject)
        busy = self._committer.busy if self._committer is not None else None
        if state is None and busy is not None:
            state = busy.overlay.get(subject)
        if state is None:
            state = self.states.get(subject)
        if state is None:
            state = recover(self.store, subject)
            if state is not None:
                self.states[subject] = state
        return state

    def _rules_for(self, info: SessionInfo) -> Any:
        rules = self._by_sha.get(info.rules_sha256)
        if rules is None:
            rules = self._rules_cache.get(info.rules_text, info.rules_sha256,
                                          f"session {info.session} rule file {info.rules_name}")
        return rules

    def _trial(self, src: _Source, req: Any, t: int) -> Any:
        ev: TrialEvent = req.event
        bad = self._check_rig(src, ev.rig, req.id)
        if bad is not None:
            return bad
        key = ev.key
        cur = self._cur
        earlier = cur.keys.get(key)
        if earlier is not None:
            if not _same_trial(ev, earlier.event):
                return self._error(req.id, "conflict", str(ConflictingTrial(*key)), "trial")
            return _Pending(src, req.id, t, ev, earlier.decision, None, None, earlier.state, echo_of=earlier)
        info = self.open.get(ev.subject)
        state = self._state(ev.subject) if info is not None and info.session == ev.session else None
        if state is None or state.context is None or state.context.session != ev.session:
            if self._settle_for(ev.subject):  # the store must answer for the trials in flight
                return self._trial(src, req, t)
            stored = self.store.lookup(ev.subject, ev.session, ev.trial)
            if stored is not None:  # a retry for a session that has since closed
                return self._duplicate(req.id, ev, stored)
            known = self.store.session(ev.subject, ev.session)
            if known is not None and known.closed_at is not None:
                return self._error(req.id, "unknown_session", f"session {ev.session!r} of subject {ev.subject!r} "
                                                             "is closed; open a new session", "session")
            return self._error(req.id, "unknown_session", f"subject {ev.subject!r} has no open session "
                                                          f"{ev.session!r}; open it first", "session")
        if ev.trial <= state.last_trial:
            if self._settle_for(ev.subject):  # a retry of a trial in flight: answer from the store
                return self._trial(src, req, t)
            stored = self.store.lookup(ev.subject, ev.session, ev.trial)
            if stored is None:
                return self._error(req.id, "out_of_order", f"trial {ev.trial} is not stored and is behind the "
                                                           f"session (expected {state.last_trial + 1})", "trial")
            return self._duplicate(req.id, ev, stored)
        if ev.trial != state.last_trial + 1:
            return self._error(req.id, "out_of_order", f"trial {ev.trial} of session {ev.session!r} arrived "
                                                       f"before trial {state.last_trial + 1} (expected "
                                                       f"{state.last_trial + 1})", "trial")
        if info.rig != ev.rig:
            return self._error(req.id, "bad_field", f"session {ev.session!r} runs on rig {info.rig!r}, not on "
                                                    f"{ev.rig!r}", "rig")
        rules = self._rules_for(info)
        if ev.wall_time == 0.0:
            # the rig sent no start time: stamp ours before step, so the stored event (and
            # so replay) has the time the schedule saw; retries match it by _same_trial
            ev = replace(ev, wall_time=float(self.clock()))
        new_state, decision, update = step(state, ev, rules)
        snapshot = None
        if new_state.trials_total % self.settings.snapshot_every == 0 or decision.end_session:
            snapshot = new_state.to_bytes()
        pending = _Pending(src, req.id, t, ev, decision, update, snapshot, new_state)
        cur.overlay[ev.subject] = new_state
        cur.trials.append(pending)
        cur.keys[key] = pending
        return pending

    def _duplicate(self, req_id: Any, ev: TrialEvent, stored: tuple[TrialEvent, Decision]) -> Any:
        stored_event, decision = stored
        if not _same_trial(ev, stored_event):
            return self._error(req_id, "conflict", str(ConflictingTrial(*ev.key)), "trial")
        self.counts["duplicates"] += 1
        return wire.DecisionReply(req_id, decision, True)

    def _open_session(self, src: _Source, req: Any) -> Any:
        bad = self._check_rig(src, req.rig, req.id)
        if bad is not None:
            return bad
        subject, session = req.subject, req.session
        stored = self.store.session(subject, session)
        if stored is not None:
            if stored.closed_at is not None:
                return self._error(req.id, "unknown_session", f"session {session!r} of subject {subject!r} was "
                                                             "closed; use a new session id", "session")
            if stored.rig != req.rig:
                return self._error(req.id, "bad_field", f"session {session!r} runs on rig {stored.rig!r}", "rig")
            return wire.DecisionReply(req.id, self._current_decision(stored), True)
        rules = self.rules.get(req.rules)
        if rules is None:
            return self._error(req.id, "bad_field", f"no rule file named {req.rules!r} is served here "
                                                        f"(served: {', '.join(sorted(self.rules))})", "rules")
        state = self._state(subject)
        previous = self.open.get(subject)
        if previous is not None:
            self._close(previous, self.clock(), reason="replaced by a new session")
            state = self._state(subject)
        if state is None:
            state = new_subject(subject, rules)
        profile_name = getattr(req, "profile", None) or dict(self.settings.profiles).get(req.rig)
        valve = self._valve(profile_name)
        opened_at = float(getattr(req, "wall_time", None) or self.clock())
        state, first = begin_session(state, rules, session=session, rig=req.rig, wall_time=opened_at,
                                     seed=getattr(req, "seed", None), valve=valve)
        meta: dict[str, Any] = {"first_decision": first.to_dict()}
        if valve is not None:
            meta["valve"] = list(valve)
        name = req.rules
        info = SessionInfo.new(subject, session, req.rig, name, rules.text, state.context.seed, opened_at,
                               profile=profile_name, meta=meta)
        info = self.store.open_session(info)
        self.store.save_snapshot(subject, session, 0, state.to_bytes())
        self._snapshot_at[subject] = (session, 0)
        self.states[subject] = state
        self.open[subject] = info
        self.counts["sessions_opened"] += 1
        self.log.info("session_opened", subject=subject, session=session, rig=req.rig, rules=name)
        if self.pub is not None and self.pub.wants(subject):
            self.pub.publish(subject, wire_pack({"type": "session_opened", "subject": subject, "session": session,
                                                  "rig": req.rig, "decision": first.to_dict(),
                                                  "summary": self._summary(state, rules, first)}))
        return wire.DecisionReply(req.id, first, False)

    def _valve(self, profile_name: str | None) -> tuple[float, float] | None:
        if not profile_name:
            return None
        from ..rules import load_profile

        profile = load_profile(profile_name)
        if not profile.slope:
            return None
        # ul = intercept + slope * ms  =>  ms = ul / slope - intercept / slope
        return (1.0 / profile.slope, -profile.intercept / profile.slope)

    def _current_decision(self, info: SessionInfo) -> Decision:
        last = self.store.last_trial(info.subject, info.session)
        if last == 0:
            return Decision.from_dict(info.meta["first_decision"])
        return self.store.lookup(info.subject, info.session, last)[1]

    def _close(self, info: SessionInfo, closed_at: float, reason: str) -> None:
        state = self._state(info.subject)
        if state is not None and state.context is not None and state.context.session == info.session:
            self._save_snapshot(info.subject, state)
        self.store.close_session(info.subject, info.session, closed_at)
        if self.open.get(info.subject) is info or (self.open.get(info.subject) or info).session == info.session:
            self.open.pop(info.subject, None)
        self.counts["sessions_closed"] += 1
        self.log.info("session_closed", subject=info.subject, session=info.session, reason=reason)

    def _close_session(self, src: _Source, req: Any) -> Any:
        info = self.store.session(req.subject, req.session)
        if info is None:
            return self._error(req.id, "unknown_session", f"subject {req.subject!r} has no session "
                                                          f"{req.session!r}", "session")
        bad = self._check_rig(src, info.rig, req.id)
        if bad is not None:
            return bad
        if info.closed_at is None:
            self._close(info, float(getattr(req, "wall_time", None) or self.clock()), reason="closed by the rig")
            if self.pub is not None and self.pub.wants(req.subject):
                self.pub.publish(req.subject, wire_pack({"type": "session_closed", "subject": req.subject,
                                                          "session": req.session}))
        return wire.Ack(req.id, "close")

    def _query_state(self, req: Any) -> Any:
        state = self._state(req.subject)
        if state is None:
            return self._error(req.id, "unknown_session", f"no subject {req.subject!r} in this store", "subject")
        info = self.open.get(req.subject)
        if info is None:
            infos = self.store.sessions(req.subject)
            last = infos[-1] if infos else None
            rules = self._rules_for(last) if last is not None else None
        else:
            rules = self._rules_for(info)
        summary = self._summary(state, rules, None) if rules is not None else {"subject": req.subject}
        summary["open_session"] = info.session if info is not None else None
        return wire.StateReply(req.id, req.subject, summary)

    # -- observers and status ---------------------------------------------------------

    def _summary(self, state: SubjectState, rules: Any, decision: Decision | None) -> dict[str, Any]:
        """What the watch table shows for one subject."""
        sched = state.schedule
        out: dict[str, Any] = {
            "subject": state.subject,
            "session": state.context.session if state.context else None,
            "trial": state.last_trial,
            "trials_total": state.trials_total,
            "block": getattr(sched, "block", None),
            "stage": getattr(sched, "stage", None),
            "ul_today": getattr(sched, "ul_today", None),
            "ul_session": getattr(sched, "ul_session", None),
        }
        try:
            rep = representation_for(rules)
            view = ModelView(state.learner, rep, state.curves, rules.performance.chance, rules.performance.sigma2)
            values = {cue: {"mean": _finite(view.value_mean(cue)), "sd": _finite(view.value_sd(cue))}
                      for cue in list(rules.cues)[:32]}
            if values:
                out["values"] = values
            lo, hi = view.p_interval("all", 0.95)
            out["p_correct"] = {"p": _finite(view.p_correct("all")), "lo": _finite(lo), "hi": _finite(hi)}
        except Exception as err:  # a summary must never stop serving
            out["summary_error"] = type(err).__name__
        if decision is not None:
            reason = decision.reasons[0] if decision.reasons else None
            out["decision"] = {"trial": decision.trial, "cue": decision.cue, "reward_prob": decision.reward_prob,
                               "reward_ul": decision.reward_ul, "end_session": decision.end_session,
                               "reason": reason[:250] if reason else None}
        return out

    def _publish_trial(self, p: _Pending) -> None:
        info = self.open.get(p.event.subject)
        rules = self._rules_for(info) if info is not None else self._by_sha.get(p.state.context.rules_sha256)
        msg = {"type": "trial", "subject": p.event.subject, "rig": p.event.rig, "session": p.event.session,
               "trial": p.event.trial, "decision": p.decision.to_dict(), "update": p.update.to_dict()}
        if rules is not None:
            msg["summary"] = self._summary(p.state, rules, p.decision)
        self.pub.publish(p.event.subject, wire_pack(msg))

    def latency_ms(self) -> dict[str, Any]:
        data = sorted(self._latency_ns)
        if not data:
            return {"n": 0, "p50": None, "p90": None, "p99": None, "max": None}

        def q(f: float) -> float:
            return round(data[min(len(data) - 1, int(math.ceil(f * len(data))) - 1)] / 1e6, 3)

        return {"n": len(data), "p50": q(0.50), "p90": q(0.90), "p99": q(0.99), "max": round(data[-1] / 1e6, 3)}

    def status(self) -> dict[str, Any]:
        """The map ``rigloop status`` prints (plain builtins, msgpack/JSON-safe)."""
        open_sessions = []
        for subject, info in sorted(self.open.items()):
            st = self.states.get(subject)
            open_sessions.append({"subject": subject, "session": info.session, "rig": info.rig,
                                  "rules": info.rules_name,
                                  "last_trial": st.last_trial if st is not None and st.context is not None
                                  and st.context.session == info.session else None})
        return {
            "version": __version__,
            "pid": os.getpid(),
            "uptime_s": round(time.time() - self.started, 3),
            "endpoints": {"zmq": self.endpoints.get("zmq"), "publish": self.endpoints.get("publish"),
                          "curve": self.endpoints.get("curve")},
            "subjects_loaded": len(self.states),
            "subjects": sorted(self.states),
            "open_sessions": open_sessions,
            "counts": dict(self.counts),
            "busy_s": round(self.busy_s, 3),
            "commit_wait_s": round(self.commit_wait_s, 3),
            "errors_by_code": dict(sorted(self.errors_by_code.items())),
            "latency_ms": self.latency_ms(),
            "queues": {"router": self.router.statistics() if self.router else None,
                       "batch": {"peak": self._batch_peak, "bound": self.settings.batch_max},
                       "latency_window": {"depth": len(self._latency_ns), "bound": self._latency_ns.maxlen}},
            "serial": [link.statistics() | {"decoder": _decoder_stats(self.decoders[id(link)][0])}
                       for link in self.serial_links],
            "rules": sorted(self.rules),
        }


def _same_trial(incoming: TrialEvent, stored: TrialEvent) -> bool:
    """A retry matches the stored trial; one sent without a start time matches the
    stored trial that the daemon stamped on its first arrival."""
    if incoming == stored:
        return True
    return incoming.wall_time == 0.0 and incoming == replace(stored, wall_time=0.0)


def _req_id(req: Any) -> Any:
    rid = getattr(req, "id", None)
    return rid if rid is not None else getattr(req, "request_id", None)


@dataclass(frozen=True, slots=True)
class _StatusRequest:
    """``{"type": "status", "id": ...}`` over the ROUTER: not a rig message, so it is not
    in ``wire``; answered with ``{"type": "status", "id": ..., "status": {...}}``."""

    id: Any


@dataclass(frozen=True, slots=True)
class _StatusReply:
    id: Any
    status: Mapping[str, Any]

    def encode(self) -> bytes:
        return wire_pack({"type": "status", "id": self.id, "status": self.status})


def _status_request(payload: bytes) -> _StatusRequest | None:
    """A status request, or None (only tried when ``wire`` found an unknown type)."""
    import msgpack

    try:
        body = msgpack.unpackb(payload, raw=False, strict_map_key=True)
    except Exception:  # msgpack's errors share no base class
        return None
    if isinstance(body, dict) and body.get("type") == "status" and set(body) <= {"type", "id"}:
        rid = body.get("id")
        if rid is None or (isinstance(rid, int) and not isinstance(rid, bool)) or (isinstance(rid, str) and len(rid) <= 32):
            return _StatusRequest(rid)
    return None


def _finite(x: Any) -> float | None:
    try:
        x = float(x)
    except (TypeError, ValueError):
        return None
    return x if math.isfinite(x) else None


def _decoder_stats(decoder: Any) -> Any:
    import dataclasses

    stats = decoder.statistics()
    return dataclasses.asdict(stats) if dataclasses.is_dataclass(stats) else dict(stats)


def wire_pack(obj: Mapping[str, Any]) -> bytes:
    """msgpack for the observer stream (plain maps, not request/reply types)."""
    import msgpack

    return msgpack.packb(obj, use_bin_type=True)


def read_state_file(data: str | os.PathLike) -> dict[str, Any] | None:
    """The running daemon's ``daemon.json`` (pid, endpoints), or None."""
    try:
        return json.loads((Path(data) / STATE_FILE).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None


def serve(settings: Settings, *, log_stream=None, log_level: str = "info") -> int:
    """``rigloop serve``: configure logging, build the daemon, serve until a signal."""
    configure_logging(log_stream, log_level)
    daemon = Daemon(settings)
    daemon.install_signal_handlers()
    return daemon.run()
