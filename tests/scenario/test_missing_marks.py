"""A name without a mark it needs is left out of a what-if, a ladder and an explain, and listed;
everything else is valued as before.

Sources: QuantLib 1.44 AnalyticEuropeanEngine values each remaining option on its own (through
``books.ql_price`` and ``test_whatif._ql_full``); a hedge is worth units × spot and an
expired option its intrinsic value (common practice). Which marks a position needs follows the
model: every position its spot, an option before expiry also a vol and its currency's rate.
"""

from __future__ import annotations

from datetime import UTC, datetime
from inspect import signature
from pathlib import Path

import pytest
from books import SPOTS, T0, make_book, make_market, mixed_rows, ql_price, without

from blotter.risk import value_book
from blotter.scenario import apply_move, explain, ladder, parse_move
from blotter.store import Store, create_store

from .test_whatif import _ql_full


def test_whatif_and_ladder_value_the_rest() -> None:
    """The move's full revaluation of the valued names is QuantLib's, position by position."""
    rows = mixed_rows()
    v = value_book(make_book(rows), without(make_market(), spot="FXA"), T0)
    kept = [r for r in rows if r.sym != "FXA"]
    res = apply_move(v, parse_move("spot -3% vol +2 days 1"))
    spots1 = {s: x * 0.97 for s, x in SPOTS.items()}
    expected = _ql_full(kept, spots1, {s: 0.02 for s in SPOTS}, 1, 0.0)
    assert res.full == pytest.approx(expected, rel=1e-7, abs=1e-6)
    assert res.total.full == pytest.approx(float(expected.sum()), rel=1e-9, abs=1e-6)
    assert [r.underlying for r in res.by_underlying] == ["IDX", "STK", "FUT"]
    grid = ladder(v, (-3.0,), (2.0,), days=1)
    assert grid.full[0, 0] == pytest.approx(float(expected.sum()), rel=1e-7, abs=1e-6)


T_START = datetime(2026, 11, 23, 21, 0, tzinfo=UTC)  # Monday close, 16:00 New York
T_END = datetime(2026, 11, 24, 21, 0, tzinfo=UTC)
EXPIRY = "2027-01-15"  # 16:00 New York = 21:00 UTC: 53 days after the start, 52 after the end


def clocked_store(tmp_path: Path) -> tuple[Store, dict[str, datetime]]:
    """A new store whose clock reads ``clock["now"]`` (set to the start day, 15:00 UTC)."""
    clock = {"now": T_START.replace(hour=15)}
    return create_store(tmp_path / "book.sqlite", clock=lambda: clock["now"]), clock


def test_explain_values_what_both_closes_can_and_lists_the_rest(
    tmp_path: Path,
) -> None:
    """A name added after the start close has no mark in it: explain values the other name and
    lists the newcomer with the set that lacks its marks."""
    st, clock = clocked_store(tmp_path)
    st.add_underlying("STKX", "stock", "USD", 100.0, american=False, div_yield=0.02)
    for tenor in (1, 3650):
        st.log_rate("USD", tenor, 0.04)
    st.log_spot("STKX", 100.0)
    st.log_vol("STKX", EXPIRY, 0.30)
    first = {"create_book": True} if "create_book" in signature(st.add_trade).parameters else {}
    st.add_trade("main", "STKX", 10, 5.0, EXPIRY, 100.0, True, **first)
    st.add_underlying("NEWX", "stock", "USD", 100.0, american=False)
    st.add_trade("main", "NEWX", 4, 2.0, EXPIRY, 20.0, True)  # no NEWX mark in the start close
    clock["now"] = T_START
    start_set = st.commit_close(marked_at=T_START)
    clock["now"] = T_END.replace(hour=15)
    st.log_spot("STKX", 103.0)
    st.log_spot("NEWX", 21.0)
    st.log_vol("NEWX", EXPIRY, 0.40)
    clock["now"] = T_END
    st.commit_close(marked_at=T_END)
    ex = explain(st)
    actual = 10 * 100 * (
        ql_price(True, 103.0, 100.0, 52, 0.04, 0.02, 0.30)
        - ql_price(True, 100.0, 100.0, 53, 0.04, 0.02, 0.30)
    )
    assert ex.total.actual == pytest.approx(actual, rel=1e-9)
    assert [r.underlying for r in ex.by_underlying] == ["STKX"]
    (u,) = ex.unvalued
    assert u.underlying == "NEWX" and u.where.startswith("start")
    assert f"set {start_set}" in u.where
    assert [m.kind for m in u.missing] == ["spot", "vol"]
