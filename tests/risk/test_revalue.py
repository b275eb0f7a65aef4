"""``risk.revalue``: a valuation moved on to new marks by valuing again only the positions of the
underlyings whose marks moved equals ``value_book`` of the whole book on those marks.

The reference is ``value_book`` itself, run on a copy of the same solved boundaries, whose
values are checked against QuantLib in ``test_risk.py``; the demo book (invented) has American
and European options, futures and hedges on five names, and a sloped rate curve.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import replace
from datetime import timedelta
from pathlib import Path

import numpy as np
import pytest

from blotter import risk, store
from blotter.book import Book
from blotter.demo import DEMO_AS_OF
from blotter.market import Market, RateCurve, VolSurface
from blotter.risk import BookValuation, UnitGreeks

AT = np.datetime64(f"{DEMO_AS_OF + timedelta(days=1)}T15:00:00", "s")
"""The valuation instant: the day after the demo book's last close, 10:00 in New York."""


@pytest.fixture
def demo_book_and_marks(demo_db: Path) -> tuple[Book, Market]:
    with store.open_store(demo_db, read_only=True) as st:
        return st.load_book(), st.load_market()


def spot_times(symbol: str, factor: float) -> Callable[[Market], Market]:
    def move(m: Market) -> Market:
        return replace(m, spots={**m.spots, symbol: m.spots[symbol] * factor})

    return move


def vols_times(symbol: str, factor: float) -> Callable[[Market], Market]:
    def move(m: Market) -> Market:
        s = m.surfaces[symbol]
        moved = VolSurface(s.expiries, s.strikes, s.vols * factor, s.atm_strike)
        return replace(m, surfaces={**m.surfaces, symbol: moved})

    return move


def rates_plus(bp: float) -> Callable[[Market], Market]:
    def move(m: Market) -> Market:
        c = m.curves["USD"]
        return replace(m, curves={"USD": RateCurve(c.tenor_days, c.zero_rates + bp / 1e4)})

    return move


def assert_same(got: BookValuation, want: BookValuation) -> None:
    """Every per-position array, raw greek, spot per underlying, note and total equal."""
    for name in risk._PER_POSITION:
        np.testing.assert_array_equal(getattr(got, name), getattr(want, name), err_msg=name)
    for name in UnitGreeks.__dataclass_fields__:
        np.testing.assert_array_equal(
            getattr(got.greeks, name), getattr(want.greeks, name), err_msg=name
        )
    np.testing.assert_array_equal(got.underlying_spots, want.underlying_spots)
    assert got.notes == want.notes and got.bucket_labels == want.bucket_labels
    assert risk.total(got) == risk.total(want)


@pytest.mark.parametrize(
    "move, moved",
    [
        (spot_times("DEMOA", 1.02), {"DEMOA"}),
        (vols_times("DEMOB", 1.05), {"DEMOB"}),
        (lambda m: spot_times("DEMOC", 0.97)(vols_times("DEMOA", 0.9)(m)), {"DEMOA", "DEMOC"}),
        (rates_plus(25.0), "every USD name"),
    ],
)
def test_moving_only_the_moved_names_equals_valuing_the_whole_book(
    demo_book_and_marks: tuple[Book, Market],
    move: Callable[[Market], Market],
    moved: set[str] | str,
) -> None:
    book, marks = demo_book_and_marks
    before = risk.value_book(book, marks, AT)
    assert before.book.american.any() and (~before.book.is_option).any()
    after = move(marks)
    names = risk.moved_underlyings(book.underlyings, marks, after)
    und = book.underlyings
    usd = {s for s, c in zip(und.symbols, und.currencies, strict=True) if c == "USD"}
    expected = usd if moved == "every USD name" else moved
    assert {s for s, m in zip(und.symbols, names.tolist(), strict=True) if m} == expected
    whole = risk.value_book(book, after, AT, boundaries=before.boundaries.copy())
    assert_same(risk.revalue(before, after), whole)


def test_no_move_keeps_every_row_and_takes_the_new_marks(
    demo_book_and_marks: tuple[Book, Market],
) -> None:
    book, marks = demo_book_and_marks
    before = risk.value_book(book, marks, AT)
    later = replace(marks, version=marks.version + 1)
    again = risk.revalue(before, later)
    assert again.market is later
    assert_same(again, before)


def test_a_mark_gone_missing_values_the_whole_book_and_leaves_the_name_out(
    demo_book_and_marks: tuple[Book, Market],
) -> None:
    book, marks = demo_book_and_marks
    before = risk.value_book(book, marks, AT)
    without = replace(marks, spots={k: v for k, v in marks.spots.items() if k != "DEMOB"})
    got = risk.revalue(before, without)
    assert {u.underlying for u in got.unvalued} == {"DEMOB"}
    assert_same(got, risk.value_book(book, without, AT, boundaries=before.boundaries.copy()))
