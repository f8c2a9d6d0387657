"""The last stage of a batch, once its commit returned: each reply sent to where its
request came from, its latency recorded, each stepped trial logged and published to
the observers subscribed to its subject."""

from __future__ import annotations

import time
from typing import Any

from ..errors import WireError
from .metrics import Metrics
from .observers import Publisher
from .pipeline import Out
from .rulebook import RuleBook
from .subjects import Subjects


class Delivery:
    """Sends a batch's replies (loop thread only); see the module docstring."""

    def __init__(self, metrics: Metrics, publisher: Publisher | None, subjects: Subjects, rulebook: RuleBook,
                 log: Any, *, log_trials: bool):
        self.counts = metrics.counts
        self.latency_ns = metrics.latency_ns
        self.publisher = publisher
        self.subjects = subjects
        self.rulebook = rulebook
        self.log = log
        self.log_trials = log_trials

    def send(self, out: list[Out]) -> None:
        """Answer every request of ``out`` in order, then publish its new trials."""
        log_trials = self.log_trials
        latency = self.latency_ns
        published = []
        logged = []
        for o in out:
            reply = o.reply
            try:
                ok = o.source.send(reply)
            except WireError as err:  # a reply that cannot be encoded (e.g. names too long for a line)
                self.log.error("reply_not_encodable", code=err.code, error=str(err))
                ok = False
            if not ok:
                self.counts["replies_dropped"] += 1
            latency_ns = time.monotonic_ns() - o.received_ns
            latency.append(latency_ns)
            p = o.trial
            if p is not None and p.decision is not None:
                if log_trials:
                    logged.append((p, latency_ns, reply, ok))
                if p.update is not None and p.echo_of is None:
                    published.append(p)
        # every reply of the batch is out before any trial is logged: a log line costs about
        # as much as decoding a trial (tools/bench/latency.py --breakdown), and a rig late in a
        # batch of 64 would otherwise wait for 63 of them
        for p, latency_ns, reply, ok in logged:
            self.log.info("trial", subject=p.event.subject, rig=p.event.rig, session=p.event.session,
                          trial=p.event.trial, latency_ms=round(latency_ns / 1e6, 3),
                          duplicate=bool(getattr(reply, "duplicate", False)), sent=ok)
        pub = self.publisher
        if pub is not None:
            for p in published:
                subject = p.event.subject
                if pub.wants(subject):  # no observer: no summary to build
                    pub.trial(p, self.rulebook.for_trial(self.subjects.open.get(subject), p.state))
