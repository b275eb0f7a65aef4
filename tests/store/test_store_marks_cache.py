"""The marks in force read from ``InForceMarks`` (only the marks written since the last read,
merged by point) equal the full read of ``_IN_FORCE_SQL`` after every write a desk makes: typed
marks, feed batches, closes, corrections of older and of the newest day, refused and rolled-back
writes, two writers on one file, and a file replaced under a cache handed to the next store.

The reference is the store's own full read (a store with a new cache reads every mark with the
``GROUP BY`` query), so these tests hold the two reading paths of one definition to each other.
"""

from __future__ import annotations

import os
import shutil
from datetime import UTC, date, datetime, timedelta
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as hs
from store_children import add_underlyings

from blotter import store
from blotter.market import Market

START = datetime(2026, 12, 1, 14, 30, tzinfo=UTC)
"""09:30 New York on Tuesday 2026-12-01, when the invented book's first mark is written."""

EXPIRIES = (date(2027, 1, 15), date(2027, 3, 19))
STRIKES = (None, 90.0, 100.0)


class Clock:
    """A clock the test moves by hand."""

    def __init__(self, t: datetime) -> None:
        self.t = t

    def __call__(self) -> datetime:
        return self.t


def full_read(path: Path) -> tuple[Market, list[store.MarkRecord]]:
    """The marks in force by the full query: a new store, so a new cache that reads everything."""
    with store.open_store(path, verify=False) as fresh:
        assert fresh.marks_cache.full_reads == 0
        market = fresh.load_market()
        assert fresh.marks_cache.full_reads == 1
        return market, fresh.marks()


def assert_same_market(got: Market, want: Market) -> None:
    """Every field of two markets equal, arrays element by element (NaN equal to NaN)."""
    assert got.version == want.version
    assert got.marks_as_of == want.marks_as_of
    assert got.spots == want.spots
    assert got.div_yields == want.div_yields
    assert got.mark_set_id == want.mark_set_id
    assert got.mark_kind == want.mark_kind
    assert got.spot_observed == want.spot_observed
    assert got.spot_intraday == want.spot_intraday
    np.testing.assert_array_equal(got.observed_at, want.observed_at)
    assert got.surfaces.keys() == want.surfaces.keys()
    for sym, surface in want.surfaces.items():
        mine = got.surfaces[sym]
        np.testing.assert_array_equal(mine.expiries, surface.expiries)
        np.testing.assert_array_equal(mine.strikes, surface.strikes)
        np.testing.assert_array_equal(mine.vols, surface.vols)
        np.testing.assert_array_equal(mine.atm_strike, surface.atm_strike)
    assert got.curves.keys() == want.curves.keys()
    for ccy, curve in want.curves.items():
        np.testing.assert_array_equal(got.curves[ccy].tenor_days, curve.tenor_days)
        np.testing.assert_array_equal(got.curves[ccy].zero_rates, curve.zero_rates)


def assert_cached_equals_full(stores: list[store.Store], path: Path) -> None:
    """Each store's cached read (market and mark records) equals the full read of the file."""
    market, records = full_read(path)
    for st in stores:
        assert_same_market(st.load_market(), market)
        assert st.marks() == records


OP = hs.one_of(
    hs.tuples(hs.just("spot"), hs.sampled_from(("TSTA", "TSTX")), hs.floats(50, 150)),
    hs.tuples(
        hs.just("vol"),
        hs.sampled_from(("TSTA", "TSTX")),
        hs.sampled_from(EXPIRIES),
        hs.sampled_from(STRIKES),
        hs.floats(0.05, 0.9),
    ),
    hs.tuples(hs.just("rate"), hs.sampled_from((30, 365, 730)), hs.floats(-0.01, 0.08)),
    hs.tuples(hs.just("div"), hs.sampled_from(("TSTA", "TSTX")), hs.floats(0.0, 0.05)),
    hs.tuples(hs.just("feed"), hs.lists(hs.floats(50, 150), min_size=2, max_size=2)),
    hs.tuples(hs.just("close")),
    hs.tuples(hs.just("correct"), hs.integers(0, 3)),
    hs.tuples(hs.just("rolled back"), hs.floats(50, 150)),
    hs.tuples(hs.just("hours"), hs.integers(1, 30)),
)
"""One thing a desk does to the marks, drawn at random."""


def apply(st: store.Store, clock: Clock, op: tuple[Any, ...]) -> None:
    """Do ``op`` through ``st``'s public writes; a write the store refuses writes nothing."""
    kind = op[0]
    clock.t += timedelta(seconds=1)
    try:
        if kind == "spot":
            st.log_spot(str(op[1]), float(op[2]))
        elif kind == "vol":
            st.log_vol(str(op[1]), op[2], float(op[4]), strike=op[3])
        elif kind == "rate":
            st.log_rate("USD", int(op[1]), float(op[2]))
        elif kind == "div":
            st.log_div_yield(str(op[1]), float(op[2]))
        elif kind == "feed":
            a, x = op[1]
            st.add_mark_set(
                "intraday",
                [
                    store.MarkPoint("spot", a, symbol="TSTA"),
                    store.MarkPoint("spot", x, symbol="TSTX"),
                ],
                source="file:feed",
            )
        elif kind == "close":
            st.commit_close()
        elif kind == "correct":
            closes = [s for s in st.mark_sets("close") if s.superseded_by is None]
            if closes:
                st.commit_close(corrects=closes[-1 - min(int(op[1]), len(closes) - 1)].id)
        elif kind == "rolled back":
            try:
                with st.atomic():
                    st.log_spot("TSTA", float(op[1]))
                    st.load_market()  # read inside the write: its row may yet be undone
                    raise RuntimeError("undo")
            except RuntimeError:
                pass
        else:
            clock.t += timedelta(hours=int(op[1]))
    except store.StoreError:
        pass  # e.g. a second close of a date, or a close with no marks: nothing written


@settings(
    max_examples=100,
    deadline=None,
    suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow],
)
@given(ops=hs.lists(hs.tuples(hs.sampled_from((0, 1)), OP), min_size=1, max_size=30))
def test_the_cached_marks_in_force_equal_the_full_read_after_every_write(
    tmp_path_factory: pytest.TempPathFactory, ops: list[tuple[int, tuple[Any, ...]]]
) -> None:
    """Two stores write in turn (each reading through its cache) while a third only reads; after
    every write all three equal a full read of the file."""
    path = Path(tmp_path_factory.mktemp("cache")) / "book.db"
    clock = Clock(START)
    with store.create_store(path, clock=clock) as first:
        add_underlyings(first)
    writers = [store.open_store(path, clock=clock, verify=False) for _ in range(2)]
    reader = store.open_store(path, read_only=True, verify=False)
    try:
        assert_cached_equals_full([*writers, reader], path)
        for who, op in ops:
            apply(writers[who], clock, op)
            assert_cached_equals_full([*writers, reader], path)
        assert reader.marks_cache.full_reads == 1  # every later read took only what was new
    finally:
        for st in (*writers, reader):
            st.close()


def test_a_read_after_a_feed_batch_takes_only_the_batch(tmp_path: Path) -> None:
    """After the first read, a feed batch is merged without a full read, and the market moves
    with it (the new spots, the batch's newest mark id as version)."""
    path = tmp_path / "book.db"
    clock = Clock(START)
    with store.create_store(path, clock=clock) as st:
        add_underlyings(st)
        st.log_vol("TSTA", EXPIRIES[0], 0.3)
        reader = store.open_store(path, read_only=True, verify=False)
        try:
            reader.load_market()
            for spot in (101.0, 102.5):
                clock.t += timedelta(seconds=1)
                set_id = st.add_mark_set(
                    "intraday", [store.MarkPoint("spot", spot, symbol="TSTA")], source="file:f"
                )
                market = reader.load_market()
                assert market.spots == {"TSTA": spot}
                assert market.version == max(m.mark_id for m in st.marks(set_id))
            assert reader.marks_cache.full_reads == 1
        finally:
            reader.close()


def test_a_cache_handed_to_the_next_store_reads_again_when_the_file_is_replaced(
    tmp_path: Path,
) -> None:
    """A cache passed from one store to the next (as the app does, one store per load) starts
    again from a full read when another file stands at the path: renamed over it, or copied
    over it in place (same inode), even one holding as many marks."""
    path = tmp_path / "book.db"
    other = tmp_path / "other.db"
    clock = Clock(START)
    for p, spot in ((path, 100.0), (other, 200.0)):
        with store.create_store(p, clock=clock) as st:
            add_underlyings(st)
            st.log_spot("TSTA", spot)
            st.log_spot("TSTX", spot + 1)
            st.checkpoint()
    with store.open_store(path, verify=False) as st:
        assert st.load_market().spots["TSTA"] == 100.0
        cache = st.marks_cache
    in_place = tmp_path / "in-place.db"
    shutil.copyfile(other, in_place)
    os.replace(in_place, path)  # another inode at the path
    with store.open_store(path, verify=False) as st:
        st.marks_cache = cache
        assert_cached_equals_full([st], path)
        assert st.load_market().spots["TSTA"] == 200.0
    assert cache.full_reads == 2
    inode = path.stat().st_ino
    third = tmp_path / "third.db"
    with store.create_store(third, clock=clock) as st:
        add_underlyings(st)
        st.log_spot("TSTA", 300.0)  # as many marks as the cache read, the newest different
        st.log_spot("TSTX", 301.0)
        st.checkpoint()
    with open(third, "rb") as src, open(path, "r+b") as dst:
        dst.write(src.read())  # copied over the book in place: the same inode
        dst.truncate()
    assert path.stat().st_ino == inode
    with store.open_store(path, verify=False) as st:
        st.marks_cache = cache
        assert_cached_equals_full([st], path)
        assert st.load_market().spots["TSTA"] == 300.0
    assert cache.full_reads == 3
