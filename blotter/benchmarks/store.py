"""``blotter bench`` cases for the store.

- ``store load_book``: the first ``load_book()`` plus ``load_market()`` on a newly opened store
  of a synthetic demo book (``build_demo(positions=100_000)``) into engine arrays; target 1 s
  for 100k positions. ``store load_book (reload)`` repeats it on the same store.
- ``store open check``: ``integrity_problems`` (``PRAGMA integrity_check`` of an in-memory
  snapshot, CHECK constraints included), which ``open_store`` runs once per file state; the note
  gives a viewer's own ``PRAGMA quick_check`` (no CHECKs, no index contents) for comparison.
- ``store mark_visible``: from calling ``log_spot`` in this process to a second *process*,
  polling ``PRAGMA data_version`` every millisecond, holding a ``Market`` with the new spot;
  target 100 ms. Times come from ``CLOCK_MONOTONIC``, which both processes share.
- ``store feed``: one second's worth of a 1,000-quotes-a-second feed (1,000 JSON spot lines
  spread over the book's underlyings) parsed, taken and written as the default throttle writes
  it (one batch); the note gives the share of one core that rate costs, and the cost of one
  unthrottled write (one transaction per quote) for comparison.
"""

from __future__ import annotations

import sqlite3
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

import numpy as np

from blotter.benchmarks import Result, result_from, timed

LOAD_TARGET_S = 1.0
"""Target for loading a 100k-position book and its marks, seconds."""

VISIBLE_TARGET_S = 0.100
"""Target from logging a mark to another process seeing it, seconds."""

_VIEWER = r"""
import sys, time
from blotter.store import open_store
s = open_store(sys.argv[1], read_only=True)
seen = s.data_version()
print("ready", flush=True)
while True:
    v = s.data_version()
    if v != seen:
        seen = v
        m = s.load_market()
        print(f"{time.monotonic_ns()} {m.spots['DEMOA']!r}", flush=True)
    else:
        time.sleep(0.001)
"""


def run(quick: bool) -> list[Result]:
    """The store cases on a temporary synthetic book (10k positions when ``quick``)."""
    from blotter.store import open_store
    from blotter.store.demo import build_demo

    n = 10_000 if quick else 100_000
    results: list[Result] = []
    with tempfile.TemporaryDirectory(prefix="blotter-bench-") as d:
        path = build_demo(Path(d) / "bench.db", positions=n)
        repeat = 3 if quick else 7
        stores = [open_store(path, read_only=True) for _ in range(repeat + 1)]
        fresh = iter(stores)
        cold = timed(lambda: _load(next(fresh)), repeat=repeat)
        book, market = _load(stores[0])
        warm = timed(lambda: _load(stores[0]), repeat=repeat)
        opened = timed(lambda: open_store(path, read_only=True).close(), repeat=repeat)
        for s in stores:
            s.close()
        points = sum(s.vols.size for s in market.surfaces.values())
        results.append(
            result_from(
                "store load_book",
                len(book),
                cold,
                target_ns=LOAD_TARGET_S * 1e9 / 100_000,
                note=f"first load of book + market ({points:,} vol points) on a new Store, median "
                f"{np.median(cold) * 1e3:,.0f} ms; target 1 s per 100k; opening the file "
                f"(its check already passed) {np.median(opened) * 1e3:,.0f} ms more",
            )
        )
        results.append(
            result_from(
                "store load_book (reload)",
                len(book),
                warm,
                target_ns=LOAD_TARGET_S * 1e9 / 100_000,
                note=f"reload on the same Store (contracts cached: they never change), median "
                f"{np.median(warm) * 1e3:,.0f} ms",
            )
        )
        results.append(_open_check(path, len(book), repeat))
        results.append(_mark_visible(path, repeat=5 if quick else 21))
        results.append(_feed(path, repeat))
    return results


def _load(store: Any) -> tuple[Any, Any]:
    return store.load_book(), store.load_market()


def _open_check(path: Path, positions: int, repeat: int) -> Result:
    """The check ``open_store`` runs on a file it has not checked in this state."""
    from blotter.store import integrity_problems, open_store

    with open_store(path, read_only=True) as store:
        conn = store.connection
        assert isinstance(conn, sqlite3.Connection)  # the bench's books are files
        full = timed(lambda: integrity_problems(conn), repeat=repeat)
        quick = timed(lambda: conn.execute("PRAGMA quick_check").fetchall(), repeat=repeat)
    return result_from(
        "store open check",
        positions,
        full,
        note=f"integrity_check of an in-memory snapshot (CHECKs and index contents), median "
        f"{np.median(full) * 1e3:,.0f} ms, once per file state; a viewer's own quick_check "
        f"{np.median(quick) * 1e3:,.0f} ms",
    )


def _mark_visible(path: Path, repeat: int) -> Result:
    from blotter.store import open_store

    writer = open_store(path)
    viewer = subprocess.Popen(
        [sys.executable, "-c", _VIEWER, str(path)], stdout=subprocess.PIPE, text=True
    )
    try:
        assert viewer.stdout is not None
        if viewer.stdout.readline().strip() != "ready":
            raise RuntimeError("the viewer process did not start")
        seconds = np.empty(repeat)
        for i in range(repeat):
            price = 150.0 + i * 0.25
            t0 = time.monotonic_ns()
            writer.log_spot("DEMOA", price)
            line = viewer.stdout.readline().split()
            if float(line[1]) != price:
                raise RuntimeError(f"the viewer saw {line[1]}, expected {price}")
            seconds[i] = (int(line[0]) - t0) * 1e-9
            time.sleep(0.02)
    finally:
        viewer.kill()
        viewer.wait()
        writer.close()
    return result_from(
        "store mark_visible",
        1,
        seconds,
        target_ns=VISIBLE_TARGET_S * 1e9,
        note="log_spot (synchronous=FULL) -> other process polls data_version "
        "every 1 ms and reloads the market; per mark",
    )


FEED_RATE = 1_000
"""Quotes a second the feed must sustain (issue target)."""


def _feed(path: Path, repeat: int) -> Result:
    """One second of a ``FEED_RATE`` feed, batched as the default throttle writes it."""
    import io
    import json

    from blotter.desk.feed import Feed, run_feed
    from blotter.store import open_store

    with open_store(path) as store:
        market = store.load_market()
        symbols = sorted(market.spots)
        lines = "".join(
            json.dumps({"symbol": symbols[i % len(symbols)],
                        "spot": market.spots[symbols[i % len(symbols)]] * (1 + 1e-4 * (i % 7))})
            + "\n"
            for i in range(FEED_RATE)
        )
        batched = timed(
            lambda: run_feed(Feed(store, 3600.0, time.monotonic), io.StringIO(lines)),
            repeat=repeat,
        )
        one = "".join(lines.splitlines(keepends=True)[:20])
        single = timed(
            lambda: run_feed(Feed(store, 0.0, time.monotonic), io.StringIO(one)), repeat=repeat
        )
    return result_from(
        "store feed",
        FEED_RATE,
        batched,
        note=f"{FEED_RATE:,} quotes over {len(symbols)} underlyings in one second's batch, "
        f"median {np.median(batched) * 1e3:,.0f} ms: {np.median(batched) * 100:.1f}% of a core "
        f"at {FEED_RATE:,} quotes/s; unthrottled, one write per quote costs "
        f"{np.median(single) / 20 * 1e3:.2f} ms",
    )
