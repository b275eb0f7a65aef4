"""A name without a mark it needs is left out and listed; everything else is valued as before.

Sources: QuantLib 1.44 AnalyticEuropeanEngine values each remaining option on its own (through
``scenario_books.ql_price`` and ``test_whatif._ql_full``); a hedge is worth units × spot and an
expired option its intrinsic value (common practice). Which marks a position needs follows the
model: every position its spot, an option before expiry also a vol and its currency's rate.
"""

from __future__ import annotations

from dataclasses import replace
from datetime import UTC, datetime
from inspect import signature
from pathlib import Path

import numpy as np
import pytest

from blotter.book import Underlyings
from blotter.market import Market
from blotter.risk import missing_marks, total, value_book
from blotter.scenario import apply_move, explain, ladder, parse_move
from blotter.store import Store, create_store

from .scenario_books import RATE, SPOTS, T0, Row, make_book, make_market, mixed_rows, ql_price
from .test_whatif import _ql_full

DIVS = {"IDX": 0.015, "STK": 0.02, "FUT": RATE, "FXA": 0.045}
"""The q QuantLib takes per name: dividend yield, the rate itself for a future (b = 0), the
foreign rate for FX."""
VOLS = {"IDX": 0.20, "STK": 0.35, "FUT": 0.30, "FXA": 0.10}


def _without(market: Market, spot: str | None = None, surface: str | None = None) -> Market:
    spots = {k: v for k, v in market.spots.items() if k != spot}
    surfaces = {k: v for k, v in market.surfaces.items() if k != surface}
    return replace(market, spots=spots, surfaces=surfaces)


def _ql_value(r: Row) -> float:
    units = r.qty * r.mult
    if r.strike is None:
        return 0.0 if r.sym == "FUT" else units * SPOTS[r.sym]
    return units * ql_price(r.call, SPOTS[r.sym], r.strike, r.days, RATE, DIVS[r.sym], VOLS[r.sym])


def test_a_name_without_a_spot_is_left_out_listed_and_the_rest_valued() -> None:
    rows = mixed_rows()
    v = value_book(make_book(rows), _without(make_market(), spot="FUT"), T0)
    kept = [r for r in rows if r.sym != "FUT"]
    assert [str(s) for s in v.book.labels] == [
        lbl for r, lbl in zip(rows, make_book(rows).labels, strict=True) if r.sym != "FUT"
    ]
    assert v.value == pytest.approx([_ql_value(r) for r in kept], rel=1e-9)
    assert total(v).value == pytest.approx(sum(_ql_value(r) for r in kept), rel=1e-9)
    assert v.partial and len(v.unvalued) == 3  # two FUT options and the FUT hedge
    for u in v.unvalued:
        assert u.underlying == "FUT" and u.currency == "USD"
        assert [(m.kind, m.name) for m in u.missing] == [("spot", "FUT")]
        assert u.missing[0].command == "blotter mark spot FUT PRICE"
        assert u.as_dict()["missing"] == [
            {"mark": "spot", "of": "FUT", "command": "blotter mark spot FUT PRICE"}
        ]


def test_a_missing_vol_leaves_out_the_options_but_not_the_hedge_or_an_expired_option() -> None:
    rows = [
        Row("STK", 10, 125.0, 30, True),
        Row("STK", 500, mult=1),
        Row("STK", 3, 100.0, -2, True),  # expired two days ago: intrinsic, needs no vol
        Row("IDX", 2, 4500.0, 30, False),
    ]
    v = value_book(make_book(rows), _without(make_market(), surface="STK"), T0)
    assert [u.label for u in v.unvalued] == [make_book(rows).labels[0]]
    assert [(m.kind, m.name) for m in v.unvalued[0].missing] == [("vol", "STK")]
    assert v.unvalued[0].missing[0].command == "blotter mark vol STK YYYY-MM-DD VOL"
    assert v.value == pytest.approx(
        [500 * 120.0, 3 * 100 * 20.0, _ql_value(rows[3])], rel=1e-9
    )


def test_a_currency_without_a_rate_curve_leaves_out_its_live_options_only() -> None:
    und = Underlyings(
        symbols=("STK", "EUS"),
        kinds=("stock", "stock"),
        currencies=("USD", "EUR"),
        betas=np.array([1.0, 1.0]),
        div_yields=np.array([0.02, 0.0]),
        calendars=("NYSE", "NYSE"),
    )
    rows = [Row("STK", 10, 125.0, 30), Row("EUS", 4, 50.0, 30), Row("EUS", 100, mult=1)]
    market = replace(make_market(), spots={"STK": 120.0, "EUS": 52.0})
    v = value_book(make_book(rows, und, ref=None), market, T0)
    (u,) = v.unvalued
    assert (u.underlying, u.currency) == ("EUS", "EUR")
    assert [(m.kind, m.name, m.command) for m in u.missing] == [
        ("vol", "EUS", "blotter mark vol EUS YYYY-MM-DD VOL"),
        ("rate", "EUR", "blotter mark rate EUR DAYS RATE"),
    ]
    stk = 10 * 100 * ql_price(True, 120.0, 125.0, 30, RATE, 0.02, VOLS["STK"])
    assert v.value == pytest.approx([stk, 100 * 52.0], rel=1e-9)


def test_no_marks_at_all_values_nothing_and_lists_everything() -> None:
    book = make_book(mixed_rows())
    empty = Market(1, datetime(2026, 12, 4, tzinfo=UTC), {}, {}, {})
    v = value_book(book, empty, T0)
    assert len(v) == 0 and total(v).value == 0.0
    assert [u.contract_id for u in v.unvalued] == book.contract_ids.tolist()
    unvalued, valued = missing_marks(book, empty, T0)
    assert not valued.any() and len(unvalued) == len(book)


def test_whatif_and_ladder_value_the_rest() -> None:
    """The move's full revaluation of the valued names is QuantLib's, position by position."""
    rows = mixed_rows()
    v = value_book(make_book(rows), _without(make_market(), spot="FXA"), T0)
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
