"""The commit pipeline: batches of stepped trials made durable, and no reply before its
commit returned.

The one other thread, the *committer*, only runs ``Store.commit_batch`` (the store
takes a lock per call); it touches no socket and no daemon state.

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
"""

from __future__ import annotations

import os
import queue
import threading
import time
from dataclasses import dataclass, field
from typing import Any

from .. import wire
from ..core.subject import SubjectState, resident
from ..core.trial import Decision, TrialEvent
from ..errors import ConflictingTrial, StoreError
from ..store import Store
from .metrics import Metrics
from .subjects import Subjects


@dataclass(slots=True)
class Pending:
    """A stepped trial waiting for the batch commit."""

    source: Any  # a ports source: where the trial came from and how to answer it
    req_id: Any
    received_ns: int
    event: TrialEvent
    decision: Decision
    update: Any
    snapshot: bytes | None
    state: SubjectState
    echo_of: Pending | None = None  # a repeat of a trial earlier in the same batch
    duplicate: bool = False
    error: BaseException | None = None


@dataclass(slots=True)
class Out:
    """One reply of a batch, in arrival order: ready, or (a trial's) made from its commit result."""

    source: Any
    reply: Any
    received_ns: int
    trial: Pending | None = None


class Fatal(Exception):
    """The store failed a commit: stop serving (nothing of the batch was acknowledged)."""


@dataclass(slots=True)
class Batch:
    """One group commit: the stepped trials and every reply of the requests in it,
    in arrival order (sent together once the commit returned)."""

    trials: list[Pending] = field(default_factory=list)
    keys: dict[tuple[str, str, int], Pending] = field(default_factory=dict)
    overlay: dict[str, SubjectState] = field(default_factory=dict)  # newest uncommitted state per subject
    out: list[Out] = field(default_factory=list)
    # filled in by the committer thread before it signals
    results: list[Any] | None = None
    error: BaseException | None = None


def commit_items(batch: Batch) -> list[tuple]:
    """What ``Store.commit_batch`` takes for the batch's stepped trials."""
    return [(p.event, p.decision, p.update.quantities, p.snapshot) for p in batch.trials]


class Committer:
    """The thread that makes batches durable, one at a time.

    ``submit`` hands it a batch with its items (the loop thread builds them); the
    thread runs ``Store.commit_batch``, stores the results (or the exception) on the
    batch and writes one byte to a pipe whose read end the loop's poller watches.
    ``wait`` blocks on that pipe. Only the loop thread calls ``submit``/``wait``."""

    def __init__(self, store: Store):
        self._store = store
        self._jobs: queue.SimpleQueue = queue.SimpleQueue()  # [batch, items] or None (stop)
        self._read_fd, self._write_fd = os.pipe()
        self._thread = threading.Thread(target=self._run, name="rigloop-commit", daemon=True)
        self._thread.start()

    def fileno(self) -> int:
        return self._read_fd

    def submit(self, batch: Batch, items: list[tuple]) -> None:
        self._jobs.put([batch, items])

    def wait(self) -> None:
        """Block until the submitted batch's commit has returned."""
        os.read(self._read_fd, 1)

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


class Warm:
    """The subjects whose states stay expanded between trials because they are running
    trials now; the others are kept in their resting form (``core.subject.resident``).

    Why not rest every state right after its commit: a Gaussian learner at rest rebuilds
    its buffers on its next trial (the same bits), and for a subject running a trial every
    few seconds that rebuild cost more than anything else the daemon does around ``step``
    (~9% of the loop under flat-out load, cProfile). So a subject rests once it has run no
    trial for ``idle_s``, or when more than ``most`` subjects are warm (the least recently
    active first): memory stays that of resting subjects plus at most ``most`` expanded
    ones (~5 kB more each at n = 32; tools/bench/memory.py measures the resting form)."""

    def __init__(self, most: int = 512, idle_s: float = 5.0, clock: Any = time.monotonic):
        self.most = most
        self.idle_s = idle_s
        self._clock = clock
        self._last: dict[str, float] = {}  # subject -> when it last committed a trial, oldest first

    def touch(self, subjects: Any) -> None:
        """These subjects just committed trials."""
        now = self._clock()
        last = self._last
        for s in subjects:
            last.pop(s, None)
            last[s] = now

    def rest_cold(self, states: dict[str, SubjectState]) -> int:
        """Rest the states of subjects idle for ``idle_s`` or beyond the ``most`` warmest;
        the number rested."""
        last = self._last
        if not last:
            return 0
        horizon = self._clock() - self.idle_s
        n = 0
        while last:  # oldest first; stops at the first warm one
            subject = next(iter(last))
            if last[subject] > horizon and len(last) <= self.most:
                break
            del last[subject]
            state = states.get(subject)
            if state is not None:
                resident(state)
            n += 1
        return n

    def __len__(self) -> int:
        return len(self._last)


class CommitPipeline:
    """The batch being stepped (``cur``), the batch in flight (``busy``), and the rule
    that a batch's replies go out (``send``) only once its commit returned.

    ``input_ready()`` says whether more input already waits (then a batch goes to the
    committer rather than being committed here); ``send(out)`` answers and publishes a
    batch's replies. Loop thread only, but for the committer it owns."""

    def __init__(self, store: Store, subjects: Subjects, metrics: Metrics, log: Any, *, inline_commit: bool,
                 budget_ms: float, input_ready: Any, send: Any):
        self.store = store
        self.subjects = subjects
        self.metrics = metrics
        self.counts = metrics.counts
        self._error = metrics.error
        self.log = log
        self.inline_commit = inline_commit
        self.budget_ms = budget_ms
        self._input_ready = input_ready
        self._send = send
        self.cur = Batch()  # the batch being stepped
        self.busy: Batch | None = None  # the batch in flight
        self._committer = Committer(store)
        self._warm = Warm()

    def fileno(self) -> int:
        """The fd that turns readable when the batch in flight is durable."""
        return self._committer.fileno()

    def process(self, work: list[tuple[Any, Any, int]], handle: Any) -> None:
        """Answer one drained batch of ``(source, request, received_ns)`` by ``handle``,
        handing over what is stepped when stepping has taken ``budget_ms``."""
        self.counts["batches"] += 1
        self.metrics.batch_peak = max(self.metrics.batch_peak, len(work))
        budget = self.budget_ms / 1000.0
        started = time.perf_counter()
        for src, req, t in work:
            if self.cur.out and time.perf_counter() - started > budget:
                # stepping takes ~1 ms a trial: hand over what is done rather than keep the
                # first rigs of a big batch waiting for the last. (Handing over as soon as
                # the committer is free made commits of ~3 trials and cost capacity.)
                self.hand_over(more=True)
                started = time.perf_counter()
            self.counts["requests"] += 1
            reply = handle(src, req, t)
            if reply is not None:
                self.cur.out.append(Out(src, reply, t))  # handle may have started a new batch
        self.hand_over()

    def hand_over(self, more: bool = False) -> None:
        """Answer the batch in flight (waiting for its commit), then commit the batch being
        stepped: here, if nothing else waits to be stepped (``more`` is False and no input
        is ready), else on the committer thread while the loop steps on. A batch without
        trials is answered at once."""
        self.settle()
        batch, self.cur = self.cur, Batch()
        if batch.trials:
            if more or not self.inline_commit or self._input_ready():
                self.counts["commits_handed_over"] += 1
                assert self.busy is None, "one batch in flight at most"
                self.busy = batch
                self._committer.submit(batch, commit_items(batch))
            else:
                self.counts["commits_here"] += 1
                self._commit_here(batch)
        elif batch.out:
            self._fill_replies(batch.out)  # trials dropped by settle get their errors
            self._send(batch.out)

    def _commit_here(self, batch: Batch) -> None:
        """Commit ``batch`` on the loop thread, then answer it (the idle path)."""
        t0 = time.perf_counter()
        try:
            batch.results = self.store.commit_batch(commit_items(batch))
        except BaseException as err:  # decided in _finish, as for a batch from the committer
            batch.error = err
        self.metrics.commit_wait_s += time.perf_counter() - t0
        self._finish(batch)

    def flush(self) -> None:
        """Commit and answer everything stepped so far (before writes outside a batch)."""
        self.hand_over()
        self.settle()

    def settle(self) -> bool:
        """If a batch is in flight: wait for its commit, take in the results, and only
        then send its replies and publish its updates. True if there was one."""
        batch = self.busy
        if batch is None:
            return False
        t0 = time.perf_counter()
        self._committer.wait()
        self.busy = None
        self.metrics.commit_wait_s += time.perf_counter() - t0
        self._finish(batch)
        return True

    def settle_for(self, subject: str) -> bool:
        """Settle the batch in flight if it holds trials of ``subject`` (so the store
        answers for them). True if it did."""
        busy = self.busy
        return busy is not None and subject in busy.overlay and self.settle()

    def _finish(self, batch: Batch) -> None:
        """A batch whose commit returned: take in its results, then answer its rigs and
        publish its updates. A failed commit stops the daemon (restart recovers)."""
        if batch.error is not None:
            if isinstance(batch.error, StoreError):  # the store refuses further writes: stop, restart recovers
                raise Fatal(batch.error) from batch.error
            raise batch.error
        self._take_results(batch)
        self._send(batch.out)
        # after the replies: subjects that stopped running trials shrink to their resting form
        self._warm.touch(p.event.subject for p in batch.trials if p.decision is not None)
        self._warm.rest_cold(self.subjects.states)

    def _take_results(self, batch: Batch) -> None:
        """Apply a committed batch's results to the subject states; fill in its replies."""
        states, snapshot_at = self.subjects.states, self.subjects.snapshot_at
        failed: set[str] = set()
        for p, res in zip(batch.trials, batch.results, strict=True):
            subject = p.event.subject
            if not res.ok:
                p.decision, p.error = None, res.error
                failed.add(subject)
            elif res.duplicate:  # cannot happen after the service's checks; answered as a retry
                p.decision, p.duplicate, p.update = res.decision, True, None
                self.counts["duplicates"] += 1
            else:
                states[subject] = p.state
                self.counts["trials"] += 1
                if p.snapshot is not None:
                    snapshot_at[subject] = (p.event.session, p.event.trial)
        for subject in failed:  # the cached state may be ahead of the store: reload it next time
            states.pop(subject, None)
            self.log.error("trial_not_stored", subject=subject)
        if failed:
            self._drop_stepped(failed)
        self._fill_replies(batch.out)

    def _drop_stepped(self, subjects: set[str]) -> None:
        """Trials of ``subjects`` in the batch being stepped were stepped on a state that
        did not reach the store: take them out, to be answered with an error."""
        cur = self.cur
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

    def _fill_replies(self, out: list[Out]) -> None:
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

    def close(self) -> None:
        """Stop the committer thread (after the batch it may be committing)."""
        self._committer.close()
