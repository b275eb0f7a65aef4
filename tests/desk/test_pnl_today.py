"""P&L today against a hand computation: invented hedge trades and marks over two closes.

Hedges have delta one and no model in their value, so the P&L is exact arithmetic (common
practice: a position's P&L since the close is its held quantity times the price change, plus
each new trade's quantity times the change from its trade price; a future settles daily, so its
P&L is units × ΔF although its value is zero).
"""

from __future__ import annotations

from datetime import UTC, datetime
from pathlib import Path

import numpy as np
import pytest

from blotter.desk.pnl_today import pnl_today
from blotter.store import create_store, open_store, use_clock


def _at(text: str) -> datetime:
    return datetime.fromisoformat(text).replace(tzinfo=UTC)


def _instant(text: str) -> np.datetime64:
    return np.datetime64(text, "s")


@pytest.fixture
def day_book(tmp_path: Path) -> Path:
    path = tmp_path / "day.db"
    clock = {"now": _at("2026-11-30T15:00:00")}
    with use_clock(lambda: clock["now"]), create_store(path) as s:
        s.add_book("cash")
        s.add_book("futures")
        s.add_underlying("HSTK", "stock", "USD", 100, description="invented stock")
        s.add_underlying("HFUT", "future", "USD", 50, description="invented future")
        s.add_trade("cash", "HSTK", 100, 50.00)
        s.add_trade("futures", "HFUT", 2, 4000.0)
        clock["now"] = _at("2026-11-30T21:30:00")  # 16:30 New York, Monday
        s.log_spot("HSTK", 51.0)
        s.log_spot("HFUT", 4010.0)
        s.log_rate("USD", 365, 0.04)
        s.commit_close()
        clock["now"] = _at("2026-12-01T16:00:00")
        s.add_trade("cash", "HSTK", -30, 52.50)
        s.add_trade("futures", "HFUT", 1, 4020.0)
        clock["now"] = _at("2026-12-01T21:30:00")  # Tuesday's close
        s.log_spot("HSTK", 53.0)
        s.log_spot("HFUT", 4030.0)
        s.commit_close()
        clock["now"] = _at("2026-12-02T15:00:00")
        s.add_trade("cash", "HSTK", 10, 53.20)
        s.log_spot("HSTK", 54.0)
        s.log_spot("HFUT", 4025.0)
    return path


def test_pnl_today_is_the_hand_computation_since_the_last_close(day_book: Path) -> None:
    with open_store(day_book, read_only=True) as s:
        book = s.load_book()
        units = dict(zip(book.underlyings.symbols, [0.0] * 2, strict=True))
        for i in range(len(book)):
            units[book.underlyings.symbols[int(book.underlying_idx[i])]] = float(
                book.multipliers[i]
            )
        got = pnl_today(s, _instant("2026-12-02T16:00:00"))
        cash = pnl_today(s, _instant("2026-12-02T16:00:00"), book="cash")
        futures = pnl_today(s, _instant("2026-12-02T16:00:00"), book="futures")
    m_stk, m_fut = units["HSTK"], units["HFUT"]
    # Held at Tuesday's close: 70 HSTK at 53, 3 HFUT at 4030. Since: HSTK 54, HFUT 4025, and
    # 10 HSTK bought at 53.20.
    stk = 70 * m_stk * (54.0 - 53.0) + 10 * m_stk * (54.0 - 53.20)
    fut = 3 * m_fut * (4025.0 - 4030.0)
    assert got.of("HSTK") == pytest.approx(stk, rel=1e-12)
    assert got.of("HFUT") == pytest.approx(fut, rel=1e-12)
    assert got.total("USD") == pytest.approx(stk + fut, rel=1e-12)
    # Not against Monday's close: that would hold 100 HSTK and 2 HFUT from 51 and 4010.
    assert got.total("USD") != pytest.approx(
        100 * m_stk * 3 + 2 * m_fut * 15 - 30 * m_stk * (54 - 52.5) + m_fut * 5, rel=1e-6
    )
    assert cash.total("USD") == pytest.approx(stk, rel=1e-12)
    assert futures.total("USD") == pytest.approx(fut, rel=1e-12)


def test_no_close_yet_says_so(tmp_path: Path) -> None:
    path = tmp_path / "new.db"
    create_store(path).close()
    with open_store(path, read_only=True) as s:
        got = pnl_today(s, _instant("2026-12-02T16:00:00"))
    assert got.close_id is None and "no close yet" in got.words
    assert np.isnan(got.total("USD"))


def test_moving_on_from_a_valuation_equals_explaining_again(day_book: Path) -> None:
    """Between two valuations with no trade, cancel or close between, P&L today moves by the
    change of the positions' marked values (``advanced``), which equals a new explain from the
    close; an option held makes it more than arithmetic."""
    from zoneinfo import ZoneInfo

    from blotter.desk import session
    from blotter.desk.pnl_today import advanced, marked_values

    tz = ZoneInfo("America/New_York")
    clock = {"now": _at("2026-12-02T15:30:00")}
    with use_clock(lambda: clock["now"]), open_store(day_book) as s:
        s.log_vol("HSTK", "2027-03-19", 0.30)
        s.add_trade("cash", "HSTK", 5, 4.0, expiry="2027-03-19", strike=55.0, is_call=True)
        first_at = _at("2026-12-02T16:00:00")
        first = session.value(session.read(s), first_at, tz).valuation
        p1 = pnl_today(s, _instant("2026-12-02T16:00:00"))
        clock["now"] = _at("2026-12-02T16:30:00")
        s.log_spot("HSTK", 55.5)
        s.log_spot("HFUT", 4001.0)
        second_at = _at("2026-12-02T17:00:00")
        second = session.value(session.read(s), second_at, tz).valuation
        p2 = pnl_today(s, _instant("2026-12-02T17:00:00"))
    moved = advanced(p1, marked_values(first), marked_values(second))
    assert moved.close_id == p2.close_id
    for name in ("HSTK", "HFUT"):
        assert moved.of(name) == pytest.approx(p2.of(name), rel=1e-9, abs=1e-6), name
    assert moved.total("USD") == pytest.approx(p2.total("USD"), rel=1e-9)
    assert moved.of("HSTK") != pytest.approx(p1.of("HSTK"), rel=1e-3)  # it did move
