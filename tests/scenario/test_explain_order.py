"""Which close a trade belongs to: the store's own order decides, not the terminals' clocks.

A close holds the trades written to the store before it. A trade booked in the same second as
the close, just before it, and a trade booked from a terminal whose clock runs an hour ahead, are
both the period's new trades up to that close and held positions after it. Two closes of one
business date are one close: the second is refused, and a correction stands in its place.

Sources: QuantLib 1.44 values each option at each close (flat curves, Actual365Fixed, whole days
to expiry); new-trade P&L = (end value − trade price) × quantity × multiplier and held P&L =
the change in value of the positions held (common practice).
"""

from __future__ import annotations

from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

import pytest
from books import ql_price

from blotter.scenario import explain
from blotter.store import StoreError, create_store

T0 = datetime(2026, 11, 23, 21, 0, tzinfo=UTC)  # Monday close, 16:00 New York
T1 = datetime(2026, 11, 24, 21, 0, 0, 700_000, tzinfo=UTC)  # Tuesday close, 0.7 s past 16:00
T2 = datetime(2026, 11, 25, 21, 0, tzinfo=UTC)  # Wednesday close
EXPIRY = "2027-01-15"  # cut-off 16:00 New York = 21:00 UTC: 53, 52 and 51 days after the closes
RATE, DIV = 0.04, 0.02
SPOTS = (100.0, 103.0, 101.0)
VOLS = (0.30, 0.32, 0.31)
PRICE = 4.0  # the new 105 call's trade price


def _value(strike: float, close: int) -> float:
    """QuantLib's value of one call on ``EXPIRY`` at close 0, 1 or 2."""
    return ql_price(True, SPOTS[close], strike, 53 - close, RATE, DIV, VOLS[close])


class Clock:
    """The store's clock (its ``clock``), set by the test."""

    def __init__(self) -> None:
        self.now = T0 - timedelta(hours=6)

    def __call__(self) -> datetime:
        return self.now


def _book(tmp_path: Path, clock: Clock) -> Any:
    """A book long ten 100 calls before the Monday close, with marks and that close written."""
    st = create_store(tmp_path / "book.sqlite", clock=clock)
    st.add_underlying("STKX", "stock", "USD", 100.0, american=False, div_yield=DIV)
    for tenor in (1, 3650):
        st.log_rate("USD", tenor, RATE)
    st.log_spot("STKX", SPOTS[0])
    st.log_vol("STKX", EXPIRY, VOLS[0])
    st.add_trade("main", "STKX", 10, 5.0, EXPIRY, 100.0, True, create_book=True)
    clock.now = T0
    st.commit_close(marked_at=T0)
    clock.now = T0 + timedelta(hours=18)
    st.log_spot("STKX", SPOTS[1])
    st.log_vol("STKX", EXPIRY, VOLS[1])
    return st


def _close(st: Any, clock: Clock, at: datetime, close: int) -> None:
    """Write close ``close`` at ``at`` (the store's clock then), after its marks."""
    if close == 2:
        clock.now = at - timedelta(hours=1)
        st.log_spot("STKX", SPOTS[2])
        st.log_vol("STKX", EXPIRY, VOLS[2])
    clock.now = at
    st.commit_close(marked_at=at)


def _close_id(st: Any, close: int) -> int:
    """Id of the ``close``-th close set written (0 = Monday's)."""
    return int(st.mark_sets("close")[close].id)


def _check_new_then_held(st: Any) -> None:
    """The new 105 call is the Monday→Tuesday period's new trade and held from Tuesday on."""
    monday_tuesday = explain(st, from_set=_close_id(st, 0), to_set=_close_id(st, 1))
    assert monday_tuesday.total.new_trades == pytest.approx(
        2 * 100 * (_value(105, 1) - PRICE), rel=1e-9
    )
    assert monday_tuesday.total.actual == pytest.approx(
        10 * 100 * (_value(100, 1) - _value(100, 0)), rel=1e-9
    )
    tuesday_wednesday = explain(st)
    assert tuesday_wednesday.total.new_trades == 0.0
    assert tuesday_wednesday.total.actual == pytest.approx(
        100 * (10 * (_value(100, 2) - _value(100, 1)) + 2 * (_value(105, 2) - _value(105, 1))),
        rel=1e-9,
    )
    assert tuesday_wednesday.late_trades == () and tuesday_wednesday.total.corrections == 0.0


@pytest.mark.parametrize(
    "booked",
    [
        T1 - timedelta(milliseconds=400),  # 0.4 s before the close, inside the same whole second
        T1 + timedelta(minutes=50),  # ten minutes before it, on a terminal an hour fast
    ],
    ids=["same-second", "fast-terminal"],
)
def test_a_trade_written_before_a_close_is_in_it_whatever_its_clock_said(
    tmp_path: Path, booked: datetime
) -> None:
    """The new 105 call is written to the store before the Tuesday close; its own times (kept as
    its terminal's clock gave them) may read the same second as the close or after it."""
    clock = Clock()
    st = _book(tmp_path, clock)
    clock.now = booked
    st.add_trade("main", "STKX", 2, PRICE, EXPIRY, 105.0, True)
    record = st.trades()[-1]
    assert record.booked_at == record.trade_time == booked
    _close(st, clock, T1, 1)
    _close(st, clock, T2, 2)
    _check_new_then_held(st)


def test_a_second_close_of_the_day_is_refused_and_a_correction_stands_in_its_place(
    tmp_path: Path
) -> None:
    """A second Tuesday close is refused (two equal sets gave a default explain of no P&L); the
    correction of Tuesday's close is explained from Monday's, also when the original is named."""
    clock = Clock()
    st = _book(tmp_path, clock)
    _close(st, clock, T1, 1)
    sets_before = len(st.mark_sets())
    clock.now = T1 + timedelta(seconds=2)
    with pytest.raises(StoreError, match="the close of 2026-11-24 is already written"):
        st.commit_close()
    assert len(st.mark_sets()) == sets_before
    ex = explain(st)
    assert ex.total.actual == pytest.approx(10 * 100 * (_value(100, 1) - _value(100, 0)), rel=1e-9)
    # Tuesday's vol was wrong: log the fixed one and correct the close by its date.
    st.log_vol("STKX", EXPIRY, 0.33)
    fixed = st.commit_close_info(corrects="2026-11-24")
    assert fixed.corrects == _close_id(st, 1) and str(fixed.business_date) == "2026-11-24"
    ex = explain(st)
    assert (ex.from_set.id, ex.to_set.id) == (_close_id(st, 0), fixed.id)
    want = 10 * 100 * (ql_price(True, SPOTS[1], 100, 52, RATE, DIV, 0.33) - _value(100, 0))
    assert ex.total.actual == pytest.approx(want, rel=1e-9)
    named = explain(st, from_set=_close_id(st, 0), to_set=_close_id(st, 1))  # the original's id
    assert named.to_set.id == fixed.id and named.total.actual == pytest.approx(want, rel=1e-9)
    assert any("corrected" in note for note in named.notes)


def test_a_late_booking_keeps_its_pnl_from_the_trade_price(
    tmp_path: Path
) -> None:
    """A 105 call dealt on Tuesday before the close but written after it (a terminal two hours
    slow) is a late booking of the Tuesday→Wednesday period: its P&L from the trade price to the
    Tuesday marks is in that period's new trades, the rest in actual, so none of it is lost."""
    clock = Clock()
    st = _book(tmp_path, clock)
    _close(st, clock, T1, 1)
    clock.now = T1 + timedelta(minutes=5) - timedelta(hours=2)  # the slow terminal's clock
    st.add_trade("main", "STKX", 2, PRICE, EXPIRY, 105.0, True)
    _close(st, clock, T2, 2)
    ex = explain(st)
    assert ex.late_trades == (st.trades()[-1].trade_id,)
    assert ex.total.new_trades == pytest.approx(2 * 100 * (_value(105, 1) - PRICE), rel=1e-9)
    held_moves = 10 * (_value(100, 2) - _value(100, 1)) + 2 * (_value(105, 2) - _value(105, 1))
    assert ex.total.actual == pytest.approx(100 * held_moves, rel=1e-9)
    # Over both periods the trade counts once from its price: new trades + actual add up.
    assert ex.total.total == pytest.approx(
        100 * (10 * (_value(100, 2) - _value(100, 1)) + 2 * (_value(105, 2) - PRICE)), rel=1e-9
    )


def test_a_cancel_takes_back_the_pnl_reported_before_the_start(
    tmp_path: Path
) -> None:
    """The ten 100 calls, held at the Tuesday close, are cancelled on Wednesday: that period
    takes back their P&L from the trade price to the Tuesday marks (reported up to Tuesday), so
    the cancelled trade adds up to nothing over all periods."""
    clock = Clock()
    st = _book(tmp_path, clock)
    _close(st, clock, T1, 1)
    clock.now = T1 + timedelta(hours=16)
    st.cancel_trade(st.trades()[0].trade_id, reason="booked in error")
    _close(st, clock, T2, 2)
    ex = explain(st)
    assert ex.corrected_trades == (st.trades()[0].trade_id,)
    assert ex.total.actual == 0.0
    assert ex.total.new_trades == pytest.approx(-10 * 100 * (_value(100, 1) - 5.0), rel=1e-9)
    first = explain(st, from_set=_close_id(st, 0), to_set=_close_id(st, 1))
    reported = first.total.total + 10 * 100 * (_value(100, 0) - 5.0)  # the first period's own
    assert reported + ex.total.total == pytest.approx(0.0, abs=1e-6)
