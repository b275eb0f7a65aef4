"""``blotter bench --only cluster``: the scenario grid sharded over a local Dask cluster.

- ``grid 21×11 serial`` and ``grid 21×11 on a local cluster``: a 21 × 11 spot × vol grid of a
  synthetic book of 5,000,000 positions (200,000 with ``--quick``), European, in this process and
  on a ``distributed.LocalCluster`` of one single-threaded worker per core (shards pickled to the
  workers and the grids summed; the cluster's start is not timed). The note gives the throughput
  in cells × positions per second per core and the cluster's speed-up over serial.

Not part of a plain ``blotter bench`` (it takes minutes): name it with ``--only cluster``. Needs
the ``cluster`` extra (``distributed``); without it the group reports that and times nothing.
"""

from __future__ import annotations

import os
from typing import Any

import numpy as np

from blotter.benchmarks import Result, result_from, timed

SPOTS = tuple(float(x) for x in np.linspace(-20.0, 20.0, 21))
"""The grid's rows: spot moves of −20% to +20% in steps of 2%."""

VOLS = tuple(float(x) for x in np.linspace(-10.0, 10.0, 11))
"""The grid's columns: vol moves of −10 to +10 points in steps of 2."""


def run(quick: bool) -> list[Result]:
    """The serial and the cluster grid of one synthetic book."""
    try:
        import distributed
    except ImportError:
        return [
            Result(case="grid on a local cluster", positions=0, ns_per_position=float("nan"),
                   min=float("nan"), max=float("nan"),
                   note='not run: pip install "blotter[cluster]" for Dask\'s distributed')
        ]
    from blotter.benchmarks.risk import VALUATION, synthetic_book
    from blotter.risk import value_book
    from blotter.scenario.sharded import sharded_ladders
    from blotter.scenario.spot_vol_ladder import ladder

    n = 200_000 if quick else 5_000_000
    book, market = synthetic_book(n)
    v = value_book(book, market, VALUATION)
    cells = len(SPOTS) * len(VOLS)
    cores = os.cpu_count() or 1
    serial = timed(lambda: ladder(v, SPOTS, VOLS), repeat=1, warmup=0 if not quick else 1)
    with distributed.LocalCluster(
        n_workers=cores, threads_per_worker=1, processes=True, dashboard_address=None
    ) as cluster, distributed.Client(cluster) as client:
        executor: Any = client.get_executor()
        shards = max(cores, n // 250_000)
        sharded = timed(
            lambda: sharded_ladders(v, executor, SPOTS, VOLS, shards=shards),
            repeat=1 if not quick else 3,
            warmup=1 if quick else 0,
        )
    t_serial, t_cluster = float(np.median(serial)), float(np.median(sharded))
    per_core = n * cells / t_cluster / cores
    return [
        result_from(
            "grid 21×11 serial", n, serial,
            note=f"{cells} cells, {n * cells / t_serial:,.3g} cell-positions/s in this process",
        ),
        result_from(
            "grid 21×11 on a local cluster", n, sharded,
            note=f"{cores} workers × 1 thread, {shards} shards: {per_core:,.3g} cell-positions/s "
            f"per core; {t_serial / t_cluster:.2f}× the serial grid",
        ),
    ]
