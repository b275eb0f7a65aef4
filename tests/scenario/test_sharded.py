"""The grid over an executor equals the serial grid: positions in shards on threads, on a local
process pool and on a local Dask cluster started here, summed (to 1e-9 relative)."""

from __future__ import annotations

import warnings
from concurrent.futures import ThreadPoolExecutor

import numpy as np
import pytest
from books import (
    T0,
    TWO_CCY,
    TWO_CCY_ROWS,
    make_book,
    make_market,
    mixed_american_rows,
    two_ccy_market,
)

from blotter.risk import BookValuation, value_book
from blotter.scenario import ladder, ladders
from blotter.scenario.sharded import (
    ClusterUnavailable,
    grid_executor,
    local_pool,
    shard_rows,
    sharded_ladders,
)

SPOTS = (-15.0, -5.0, -1.0, 0.0, 2.0, 10.0)
VOLS = (-8.0, 0.0, 3.0)


def _valuation() -> BookValuation:
    # one STK option expires inside the 3-day roll
    return value_book(make_book(mixed_american_rows()), make_market(), T0)


def _same(a: np.ndarray, b: np.ndarray) -> None:
    np.testing.assert_allclose(a, b, rtol=1e-9, atol=1e-9 * float(np.abs(b).max() or 1.0))


def test_shards_cover_every_row_once() -> None:
    for n, k in [(0, 3), (1, 4), (10, 3), (10, 10), (10, 50), (7, 1)]:
        parts = shard_rows(n, k)
        assert all(p.size for p in parts) or n == 0
        assert np.array_equal(np.concatenate(parts), np.arange(n))


@pytest.mark.parametrize("shards", [1, 2, 5, 40])
def test_threads_sum_to_the_serial_grid(shards: int) -> None:
    v = _valuation()
    serial = ladder(v, SPOTS, VOLS, days=3.0)
    with ThreadPoolExecutor(2) as pool:
        [grid] = sharded_ladders(v, pool, SPOTS, VOLS, days=3.0, shards=shards)
    for name in ("full", "estimate", "estimate_1", "error"):
        _same(getattr(grid, name), getattr(serial, name))
    assert grid.worst == serial.worst
    assert grid.n_through_expiry == serial.n_through_expiry == 1
    assert grid.currency == serial.currency


def test_each_currency_is_its_own_grid() -> None:
    v = value_book(make_book(TWO_CCY_ROWS, TWO_CCY, ref="USI"), two_ccy_market(), T0)
    serial = ladders(v, SPOTS, VOLS)
    assert len(serial) == 2
    with ThreadPoolExecutor(2) as pool:
        grids = sharded_ladders(v, pool, SPOTS, VOLS, shards=3)
    assert [g.currency for g in grids] == [g.currency for g in serial]
    for g, s in zip(grids, serial, strict=True):
        _same(g.full, s.full)
        _same(g.estimate, s.estimate)


def test_a_process_pool_sums_to_the_serial_grid() -> None:
    v = _valuation()
    serial = ladder(v, SPOTS, VOLS, days=1.0, rule="sticky moneyness")
    with local_pool(2) as pool:
        [grid] = sharded_ladders(v, pool, SPOTS, VOLS, 1.0, "sticky moneyness", shards=3)
    _same(grid.full, serial.full)
    _same(grid.estimate, serial.estimate)
    assert grid.worst == serial.worst


def test_a_local_dask_cluster_sums_to_the_serial_grid() -> None:
    distributed = pytest.importorskip("distributed", reason="the cluster extra is not installed")
    import dask

    v = _valuation()
    serial = ladder(v, SPOTS, VOLS, days=2.0)
    with distributed.LocalCluster(
        n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None
    ) as cluster:
        with grid_executor(len(v), cluster=cluster.scheduler_address) as executor:
            assert executor is not None
            # every shard is over the threshold of Dask's large-task warning, which is not shown
            with dask.config.set({"distributed.admin.large-graph-warning-threshold": "1kB"}), \
                    warnings.catch_warnings(record=True) as seen:
                warnings.simplefilter("always")
                [grid] = sharded_ladders(v, executor, SPOTS, VOLS, days=2.0, shards=4)
    assert not [w for w in seen if "large graph" in str(w.message)]
    _same(grid.full, serial.full)
    _same(grid.estimate, serial.estimate)
    _same(grid.estimate_1, serial.estimate_1)
    assert grid.worst == serial.worst


def test_an_unreachable_cluster_is_said_in_words() -> None:
    pytest.importorskip("distributed", reason="the cluster extra is not installed")
    with pytest.raises(ClusterUnavailable, match="cannot reach the cluster"):
        with grid_executor(10, cluster="tcp://127.0.0.1:9"):
            pass


def test_small_books_stay_in_this_process() -> None:
    with grid_executor(1_000) as executor:
        assert executor is None
    with grid_executor(1_000, workers=2) as executor:
        assert executor is not None
