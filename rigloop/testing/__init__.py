"""Helpers for tests (ours and a lab's own): virtual rig clients, pseudo-terminal serial
ports, and a daemon run as a subprocess.

``ZmqRig``     (from rigloop.serve.client) a DEALER client with Lazy-Pirate retries (poll with a timeout, resend the
               same request, recreate the socket with LINGER 0 after a timeout, give up
               after N tries, match replies by id and ignore stale ones)
``SerialRig``  the same over the serial line protocol, on the master side of a pty
``PtyPort``    a pseudo-terminal behind a stable symlink: the daemon opens the link,
               ``unplug()`` closes the master (what a USB unplug looks like to
               pyserial), ``replug()`` makes a new pty behind the same link
``DaemonProcess``  ``rigloop serve`` in a subprocess; knows its endpoints from
               ``daemon.json``; ``kill()`` is SIGKILL
``drive_session``  run a simulated animal through a live daemon, trial by trial
"""

from __future__ import annotations

import json
import os
import pty
import select
import signal
import subprocess
import sys
import time
import tty
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

from .. import wire
from ..core.trial import Decision, TrialEvent
from ..serve.client import RigRefused, RigTimeout, ZmqRig, _Client

__all__ = ["DaemonProcess", "PtyPort", "RigRefused", "RigTimeout", "SerialRig", "ZmqRig", "drive_session"]


# --------------------------------------------------------------------------- serial


class PtyPort:
    """A pseudo-terminal behind ``path`` (a symlink, like /dev/serial/by-id/...).

    The daemon opens ``path``; the rig side reads and writes ``master``.
    """

    def __init__(self, directory: str | os.PathLike, name: str = "rig.tty"):
        self.path = str(Path(directory) / name)
        self.master = -1
        self.slave = -1
        self.replug()

    def replug(self) -> None:
        self.unplug()
        master, slave = pty.openpty()
        tty.setraw(master)
        self.master, self.slave = master, slave
        tmp = self.path + ".new"
        if os.path.lexists(tmp):
            os.unlink(tmp)
        os.symlink(os.ttyname(slave), tmp)
        os.replace(tmp, self.path)

    def unplug(self) -> None:
        """Close both ends: reads on the daemon's side now fail as on a real unplug."""
        for name in ("master", "slave"):
            fd = getattr(self, name)
            if fd >= 0:
                try:
                    os.close(fd)
                except OSError:
                    pass
                setattr(self, name, -1)

    def write(self, data: bytes) -> None:
        view = memoryview(data)
        while view:
            n = os.write(self.master, view)
            view = view[n:]

    def read(self, timeout_s: float) -> bytes:
        r, _, _ = select.select([self.master], [], [], max(0.0, timeout_s))
        if not r:
            return b""
        try:
            return os.read(self.master, 65536)
        except OSError:  # EIO while the daemon has the port closed
            return b""

    def close(self) -> None:
        self.unplug()
        try:
            os.unlink(self.path)
        except OSError:
            pass


class SerialRig(_Client):
    """A rig speaking the line protocol on a ``PtyPort``'s master side, with the same
    Lazy-Pirate retries as ``ZmqRig`` (resend the same line; match replies by id)."""

    def __init__(self, port: PtyPort, rig: str, timeout_s: float = 1.0, retries: int = 5, *, checksum: bool = True):
        super().__init__()
        self.port, self.rig, self.timeout_s, self.retries, self.checksum = port, rig, timeout_s, retries, checksum
        self._buf = b""

    def request(self, req: Any) -> Any:
        line = wire.format_request_line(req, checksum=self.checksum)
        for attempt in range(self.retries):
            if attempt:
                self.resends += 1
            try:
                self.port.write(line)
            except OSError:
                time.sleep(min(self.timeout_s, 0.05))
                continue
            deadline = time.monotonic() + self.timeout_s
            while time.monotonic() < deadline:
                reply = self._next_reply(deadline - time.monotonic())
                if reply is None:
                    continue
                if reply.id == req.id:
                    return reply
                self.stale += 1
            self._buf = b""
        raise RigTimeout(f"no reply on {self.port.path} after {self.retries} tries of {self.timeout_s} s")

    def _next_reply(self, timeout: float) -> Any:
        while b"\n" not in self._buf:
            data = self.port.read(timeout)
            if not data:
                return None
            self._buf += data
        line, self._buf = self._buf.split(b"\n", 1)
        try:
            return wire.parse_reply_line(line)
        except wire.MessageError:
            self.stale += 1
            return None

    def send_raw(self, data: bytes) -> None:
        """Write bytes as they are (noise, torn lines) for tests."""
        self.port.write(data)

    def read_replies(self, timeout_s: float, count: int | None = None) -> list[Any]:
        """Replies (parsed) that arrive within ``timeout_s`` (stop early at ``count``)."""
        out: list[Any] = []
        deadline = time.monotonic() + timeout_s
        while time.monotonic() < deadline and (count is None or len(out) < count):
            reply = self._next_reply(deadline - time.monotonic())
            if reply is not None:
                out.append(reply)
        return out


# --------------------------------------------------------------------------- simulated sessions


def drive_session(client: _Client, animal: Any, *, session: str, rules: str, trials: int,
                  start_time: float | None = None, trial_s: float = 8.0, seed: int | None = None,
                  first: Decision | None = None, on_trial: Callable[[TrialEvent, Any], None] | None = None,
                  close: bool = True) -> list[tuple[TrialEvent, Decision]]:
    """Open ``session`` for ``animal.subject`` and run up to ``trials`` trials through the
    daemon (each next trial made by the animal from the last decision). Returns
    ``[(event, decision after it)]``; stops early when a decision ends the session.

    Trials are accelerated: the session opens at ``start_time`` on the rig's clock (now,
    by default) and each trial's ``wall_time`` advances ``trial_s`` however fast the
    daemon answers, so session minutes, time limits and water pace run accelerated too."""
    t = time.time() if start_time is None else start_time
    if first is None:
        first = client.open(animal.subject, session, rules, seed=seed, wall_time=t).decision
    decision = first
    out: list[tuple[TrialEvent, Decision]] = []
    while len(out) < trials and not decision.end_session:
        event = animal.trial(decision, client.rig, t)
        reply = client.trial(event)
        if on_trial is not None:
            on_trial(event, reply)
        decision = reply.decision
        out.append((event, decision))
        t += trial_s
    if close:
        client.close_session(animal.subject, session)
    return out


# --------------------------------------------------------------------------- a daemon process


class DaemonProcess:
    """``rigloop serve`` in a subprocess, bound to random loopback ports.

    ``args`` are extra command-line arguments (e.g. ``["--serial", "PATH=rig1"]``).
    Logs go to ``data/serve.log``. ``info`` is its ``daemon.json`` once ready.
    """

    def __init__(self, data: str | os.PathLike, rules: Sequence[str], args: Sequence[str] = (), *,
                 zmq: str = "tcp://127.0.0.1:*", publish: str | None = "tcp://127.0.0.1:*",
                 env: dict[str, str] | None = None):
        self.data = Path(data)
        self.data.mkdir(parents=True, exist_ok=True)
        cmd = [sys.executable, "-m", "rigloop", "serve", "--data", str(self.data), "--zmq", zmq]
        for r in rules:
            cmd += ["--rules", str(r)]
        cmd += ["--publish", publish] if publish else ["--no-publish"]
        cmd += list(args)
        self.cmd = cmd
        self.log_path = self.data / "serve.log"
        self._log = open(self.log_path, "ab")
        root = str(Path(__file__).resolve().parents[2])  # the folder holding this rigloop package, whatever the cwd
        path = os.pathsep.join([root, os.environ["PYTHONPATH"]]) if os.environ.get("PYTHONPATH") else root
        self.proc = subprocess.Popen(cmd, stdout=self._log, stderr=subprocess.STDOUT, stdin=subprocess.DEVNULL,
                                     env={**os.environ, "PYTHONPATH": path, **(env or {})})
        self.info: dict[str, Any] | None = None

    def wait_ready(self, timeout: float = 20.0) -> dict[str, Any]:
        deadline = time.monotonic() + timeout
        path = self.data / "daemon.json"
        while time.monotonic() < deadline:
            if self.proc.poll() is not None:
                raise RuntimeError(f"rigloop serve exited with {self.proc.returncode}:\n{self.log_tail()}")
            try:
                info = json.loads(path.read_text(encoding="utf-8"))
                if info.get("pid") == self.proc.pid:
                    self.info = info
                    return info
            except (OSError, ValueError):
                pass
            time.sleep(0.02)
        raise TimeoutError(f"rigloop serve was not ready within {timeout} s:\n{self.log_tail()}")

    @property
    def endpoint(self) -> str:
        return self.info["zmq"]

    @property
    def publish(self) -> str | None:
        return self.info["publish"]

    def log_tail(self, n: int = 30) -> str:
        try:
            return "\n".join(self.log_path.read_text(encoding="utf-8", errors="replace").splitlines()[-n:])
        except OSError:
            return ""

    def kill(self) -> None:
        """SIGKILL: no chance to flush, snapshot or say goodbye."""
        if self.proc.poll() is None:
            self.proc.send_signal(signal.SIGKILL)
        self.proc.wait(10)

    def terminate(self, timeout: float = 10.0) -> int:
        """SIGTERM and wait; returns the exit status."""
        if self.proc.poll() is None:
            self.proc.send_signal(signal.SIGTERM)
        return self.proc.wait(timeout)

    def close(self) -> None:
        if self.proc.poll() is None:
            self.kill()
        self._log.close()

    def __enter__(self) -> DaemonProcess:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()
