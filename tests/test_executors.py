"""run_ordered: the same values, in the order of the items, on every executor."""

from __future__ import annotations

import sys

import numpy as np
import pytest

from rigloop.errors import BadArgument
from rigloop.offline import executors
from rigloop.offline.executors import batches, run_ordered


def draw(seed: int) -> tuple[int, float, bytes]:
    """A seeded computation whose floats would differ if anything but the seed mattered."""
    rng = np.random.default_rng(seed)
    x = rng.standard_normal(200)
    return seed, float(np.cumsum(x * x)[-1]), x.tobytes()


def slow_first(i: int) -> int:
    """Items that finish out of order (the first is the slowest)."""
    import time

    time.sleep(0.2 if i == 0 else 0.0)
    return i * i


def boom(i: int) -> int:
    if i == 3:
        raise ValueError(f"item {i} failed")
    return i


ITEMS = list(range(11))


def test_serial_is_the_list_comprehension():
    assert run_ordered(draw, ITEMS, executor="serial") == [draw(i) for i in ITEMS]


def test_local_pool_keeps_the_order_and_the_values():
    assert run_ordered(slow_first, list(range(6)), executor="local", workers=2) == [i * i for i in range(6)]
    assert run_ordered(draw, ITEMS, executor="local", workers=2) == [draw(i) for i in ITEMS]


def test_progress_counts_every_item_once():
    seen = []
    run_ordered(draw, ITEMS, executor="local", workers=2, progress=lambda d, t: seen.append((d, t)))
    assert seen[0] == (0, len(ITEMS)) and seen[-1] == (len(ITEMS), len(ITEMS))
    assert [d for d, _ in seen] == sorted(d for d, _ in seen)


def test_empty_and_errors():
    assert run_ordered(draw, [], executor="local") == []
    with pytest.raises(ValueError, match="item 3 failed"):
        run_ordered(boom, list(range(6)), executor="local", workers=2)
    with pytest.raises(BadArgument, match="executor"):
        run_ordered(draw, ITEMS, executor="cloud")
    with pytest.raises(BadArgument, match="workers"):
        run_ordered(draw, ITEMS, workers=0)
    with pytest.raises(BadArgument, match="executor"):
        run_ordered(draw, ITEMS, executor="serial", scheduler="tcp://somewhere:8786")


def test_batches_cover_every_item_once():
    for n, size in [(0, 3), (1, 3), (10, 3), (9, 3), (5, 10)]:
        pieces = batches(n, size)
        assert [i for r in pieces for i in r] == list(range(n))
        assert all(len(r) <= size for r in pieces)


def test_missing_dask_names_the_cluster_extra(monkeypatch):
    monkeypatch.setitem(sys.modules, "dask.distributed", None)  # import fails as if not installed
    with pytest.raises(ImportError, match=r"pip install rigloop\[cluster\]"):
        run_ordered(draw, ITEMS, executor="dask")


def test_unreachable_scheduler_is_a_clear_error(monkeypatch):
    pytest.importorskip("dask.distributed")
    monkeypatch.setattr(executors, "CONNECT_TIMEOUT_S", 1.0)
    with pytest.raises(BadArgument, match="scheduler"):
        executors._run_dask(draw, ITEMS, scheduler="tcp://127.0.0.1:9", workers=None, batch=None, progress=None)


def test_dask_cluster_equals_the_local_pool():
    """A real LocalCluster of two worker processes, reached by its scheduler address."""
    distributed = pytest.importorskip("dask.distributed")
    local = run_ordered(draw, ITEMS, executor="local", workers=2)
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=None) as cluster:
        seen = []
        remote = run_ordered(draw, ITEMS, scheduler=cluster.scheduler_address, batch=3,
                             progress=lambda d, t: seen.append(d))
        out_of_order = run_ordered(slow_first, list(range(6)), scheduler=cluster.scheduler_address, batch=1)
    assert remote == local  # bit-identical: same floats, same bytes
    assert seen[-1] == len(ITEMS)
    assert out_of_order == [i * i for i in range(6)]


def test_dask_without_a_scheduler_starts_its_own_local_cluster():
    pytest.importorskip("dask.distributed")
    assert run_ordered(draw, ITEMS, executor="dask", workers=2) == [draw(i) for i in ITEMS]
