"""The daemon's settings: one frozen record of everything it is told, checked when it
is built, read from a TOML file with command-line values on top."""

from __future__ import annotations

import os
import tomllib
from collections.abc import Mapping
from dataclasses import dataclass, fields
from pathlib import Path
from typing import Any

from ..errors import BadArgument
from ..links import zmq as zlink

DEFAULT_ZMQ = "tcp://127.0.0.1:5570"
DEFAULT_PUBLISH = "tcp://127.0.0.1:5571"


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
    max_msg_size: int = 1024 * 1024  # transport cap: frames up to it reach the decoder (over 64 KiB: too_large)
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
