"""What the daemon counts and times, for ``rigloop status``: requests, trials, errors by
code, batches and where they were committed, the window of reply latencies, the time
the loop thread was busy and the time it waited on commits.

Every error reply the daemon builds goes through ``Metrics.error``, so each is counted
once, by its code. The parts that count per trial hold ``counts`` itself (one dict),
so counting costs them no more than before the daemon was split."""

from __future__ import annotations

import math
import time
from collections import deque
from typing import Any

from .. import wire


class Metrics:
    """The loop thread's counters and timers (the committer thread touches none)."""

    def __init__(self, latency_window: int):
        self.counts: dict[str, int] = {"requests": 0, "trials": 0, "duplicates": 0, "sessions_opened": 0,
                                       "sessions_closed": 0, "batches": 0, "commits_here": 0, "commits_handed_over": 0,
                                       "errors": 0, "replies_dropped": 0}
        self.errors_by_code: dict[str, int] = {}
        self.latency_ns: deque[int] = deque(maxlen=latency_window)  # receipt to reply sent, per reply
        self.batch_peak = 0  # largest batch seen
        self.busy_s = 0.0  # loop thread handling batches (the rest is waiting for input or the committer)
        self.commit_wait_s = 0.0  # loop thread waiting on commits (one in flight, or its own when idle)

    def count_error(self, code: str) -> None:
        self.counts["errors"] += 1
        self.errors_by_code[code] = self.errors_by_code.get(code, 0) + 1

    def error(self, req_id: Any, code: str, message: str, field_name: str | None = None) -> Any:
        """An error reply, counted by its code; a message longer than the wire allows is cut."""
        self.count_error(code)
        if len(message) > wire.messages.MAX_MESSAGE:
            message = message[: wire.messages.MAX_MESSAGE - 3] + "..."
        return wire.ErrorReply(req_id, code, message, field_name)

    def timed(self, fn: Any, *args: Any) -> None:
        """Run ``fn`` and count its time in ``busy_s``, less the time spent waiting on a
        commit (one in flight, or one run here when idle; counted in ``commit_wait_s``)."""
        t0, w0 = time.perf_counter(), self.commit_wait_s
        fn(*args)
        self.busy_s += time.perf_counter() - t0 - (self.commit_wait_s - w0)

    def latency_ms(self) -> dict[str, Any]:
        """Quantiles of the latency window, in ms (nearest rank)."""
        data = sorted(self.latency_ns)
        if not data:
            return {"n": 0, "p50": None, "p90": None, "p99": None, "max": None}

        def q(f: float) -> float:
            return round(data[min(len(data) - 1, int(math.ceil(f * len(data))) - 1)] / 1e6, 3)

        return {"n": len(data), "p50": q(0.50), "p90": q(0.90), "p99": q(0.99), "max": round(data[-1] / 1e6, 3)}

    def statistics(self) -> dict[str, Any]:
        """The counters and timers as ``status()`` shows them (plain builtins, copies)."""
        return {
            "counts": dict(self.counts),
            "busy_s": round(self.busy_s, 3),
            "commit_wait_s": round(self.commit_wait_s, 3),
            "errors_by_code": dict(sorted(self.errors_by_code.items())),
            "latency_ms": self.latency_ms(),
        }

    def queues(self, batch_bound: int) -> dict[str, Any]:
        """The batch and latency-window depths beside their bounds."""
        return {"batch": {"peak": self.batch_peak, "bound": batch_bound},
                "latency_window": {"depth": len(self.latency_ns), "bound": self.latency_ns.maxlen}}
