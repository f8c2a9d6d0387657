"""Run one function over many items on this process, a local process pool or a Dask cluster.

``run_ordered(fn, items, executor=...)`` is the one way offline work (simulating many
animals, comparing rule files) fans out. Results come back in the order of ``items``
whatever order the workers finish in, and every executor returns the same values: each
item carries its own seed, so where it runs changes nothing (bit-identical results).

- ``"serial"``: in this process, one item after another (debugging, one item, a store
  with one writer).
- ``"local"``: a process pool on this machine (default: one worker per core).
- ``"dask"``: a ``dask.distributed`` cluster, either the scheduler at ``scheduler``
  (``tcp://HOST:8786``) or, when none is given, a local cluster of worker processes.
  Items travel in batches (a task per batch), so a thousand animals do not cost a
  thousand scheduler round trips. Dask is the optional 'cluster' extra and is imported
  here only, when asked for.

``fn`` must be a top-level function and ``items`` picklable values; ``fn(item)`` is
called once per item. ``progress(done, total)`` is called as items finish.
"""

from __future__ import annotations

import math
import os
from collections.abc import Callable, Sequence
from concurrent.futures import Executor, ProcessPoolExecutor, as_completed
from typing import Any

from ..errors import BadArgument, RigloopError

EXECUTORS = ("serial", "local", "dask")
CONNECT_TIMEOUT_S = 30.0  # how long to wait for a named scheduler before saying it is not there
_BATCHES_PER_WORKER = 4  # dask: enough batches to balance uneven animals, few enough to stay cheap


class MissingExtra(RigloopError, ImportError):
    """An optional dependency is not installed; the message names the extra that brings it."""


def cores() -> int:
    """Cores this process may use (the affinity mask where the system has one)."""
    try:
        return max(len(os.sched_getaffinity(0)), 1)
    except AttributeError:  # not on Linux
        return max(os.cpu_count() or 1, 1)


def run_ordered(fn: Callable[[Any], Any], items: Sequence[Any], *, executor: str | Executor = "local",
                scheduler: str | None = None, workers: int | None = None,
                progress: Callable[[int, int], None] | None = None, batch: int | None = None) -> list:
    """``[fn(item) for item in items]``, computed on ``executor``, in the order of ``items``.

    executor: ``"serial"``, ``"local"`` or ``"dask"`` (or any ``concurrent.futures.Executor``,
    which is used and left open); a ``scheduler`` address implies ``"dask"``.
    workers: processes for ``"local"`` and for the local Dask cluster (default: cores).
    batch: items per Dask task (default: spread over about four tasks per worker).
    An error in any item is raised here, after the remaining work is cancelled.
    """
    items = list(items)
    kind = _executor_kind(executor, scheduler)
    if workers is not None and (isinstance(workers, bool) or not isinstance(workers, int) or workers < 1):
        raise BadArgument("workers", "a whole number of processes >= 1 (or None for one per core)", workers)
    if batch is not None and (isinstance(batch, bool) or not isinstance(batch, int) or batch < 1):
        raise BadArgument("batch", "a whole number of items per task >= 1 (or None)", batch)
    total = len(items)
    if progress is not None:
        progress(0, total)
    if total == 0:
        return []
    if kind == "serial":
        return _run_serial(fn, items, progress)
    if kind == "pool":
        return _run_futures(executor, fn, items, progress)
    if kind == "local":
        n = min(workers or cores(), total)
        if n == 1:
            return _run_serial(fn, items, progress)
        with ProcessPoolExecutor(max_workers=n) as pool:
            return _run_futures(pool, fn, items, progress)
    return _run_dask(fn, items, scheduler=scheduler, workers=workers, batch=batch, progress=progress)


def _executor_kind(executor, scheduler) -> str:
    """Which runner ``executor`` (and ``scheduler``) asks for; a clear error otherwise."""
    if isinstance(executor, Executor):
        if scheduler is not None:
            raise BadArgument("scheduler", "None when an executor object is passed", scheduler)
        return "pool"
    if executor not in EXECUTORS:
        raise BadArgument("executor", f"one of {', '.join(EXECUTORS)}", executor)
    if scheduler is not None:
        if not isinstance(scheduler, str) or not scheduler.strip():
            raise BadArgument("scheduler", "a Dask scheduler address such as tcp://HOST:8786", scheduler)
        if executor == "serial":
            raise BadArgument("executor", "'dask' (or left out) when a --scheduler address is given", executor)
        return "dask"
    return executor


def _run_serial(fn, items, progress) -> list:
    out = []
    for i, item in enumerate(items):
        out.append(fn(item))
        if progress is not None:
            progress(i + 1, len(items))
    return out


def _run_futures(pool: Executor, fn, items, progress) -> list:
    """Submit every item to ``pool``; collect in order, counting as each finishes."""
    futures = [pool.submit(fn, item) for item in items]
    index = {f: i for i, f in enumerate(futures)}
    out: list = [None] * len(items)
    try:
        for done, f in enumerate(as_completed(futures), 1):
            out[index[f]] = f.result()
            if progress is not None:
                progress(done, len(items))
    except BaseException:
        for f in futures:
            f.cancel()
        raise
    return out


def run_batch(fn, items: list) -> list:
    """One Dask task: ``fn`` over a batch of items (a top-level function so it pickles)."""
    return [fn(item) for item in items]


def batches(n: int, size: int) -> list[range]:
    """``range(n)`` cut into consecutive pieces of ``size`` (the last may be shorter)."""
    return [range(i, min(i + size, n)) for i in range(0, n, size)]


def _import_distributed():
    """``dask.distributed``, or an error saying how to install the 'cluster' extra."""
    try:
        import dask.distributed as distributed
    except ImportError as exc:
        raise MissingExtra(
            "running on a Dask cluster needs the 'cluster' extra: pip install rigloop[cluster] "
            f"(or use --executor local); importing dask.distributed failed: {exc}") from exc
    return distributed


def _run_dask(fn, items, *, scheduler, workers, batch, progress) -> list:
    """Batches of items as Dask tasks on ``scheduler`` (or a local cluster); gathered in order."""
    distributed = _import_distributed()
    cluster = None
    try:
        if scheduler is None:
            cluster = distributed.LocalCluster(n_workers=min(workers or cores(), len(items)), threads_per_worker=1,
                                               processes=True, dashboard_address=None)
            client = distributed.Client(cluster)
        else:
            try:
                client = distributed.Client(scheduler, timeout=CONNECT_TIMEOUT_S)
            except (OSError, TimeoutError) as exc:
                raise BadArgument("scheduler", "the address of a running Dask scheduler (tcp://HOST:8786)",
                                  f"{scheduler} ({exc})") from None
        with client:
            n_workers = max(len(client.scheduler_info().get("workers", {})), 1)
            size = batch or max(math.ceil(len(items) / (n_workers * _BATCHES_PER_WORKER)), 1)
            pieces = batches(len(items), size)
            futures = [client.submit(run_batch, fn, [items[i] for i in r], pure=False) for r in pieces]
            where = {f.key: r for f, r in zip(futures, pieces, strict=True)}
            out: list = [None] * len(items)
            done = 0
            try:
                for f in distributed.as_completed(futures):
                    r = where[f.key]
                    for i, value in zip(r, f.result(), strict=True):
                        out[i] = value
                    done += len(r)
                    if progress is not None:
                        progress(done, len(items))
            except BaseException:
                client.cancel(futures)
                raise
            return out
    finally:
        if cluster is not None:
            cluster.close()
