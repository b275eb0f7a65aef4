"""A name without a mark it needs is left out of the valuation and listed; everything else is
valued as before.

Sources: QuantLib 1.44 AnalyticEuropeanEngine values each remaining option on its own (through
``books.ql_price``); a hedge is worth units × spot and an
expired option its intrinsic value (common practice). Which marks a position needs follows the
model: every position its spot, an option before expiry also a vol and its currency's rate.
"""

from __future__ import annotations

from dataclasses import replace
from datetime import UTC, datetime

import numpy as np
import pytest
from books import RATE, SPOTS, T0, Row, make_book, make_market, mixed_rows, ql_price, without

from blotter.book import Underlyings
from blotter.market import Market
from blotter.risk import missing_marks, total, value_book

DIVS = {"IDX": 0.015, "STK": 0.02, "FUT": RATE, "FXA": 0.045}
"""The q QuantLib takes per name: dividend yield, the rate itself for a future (b = 0), the
foreign rate for FX."""
VOLS = {"IDX": 0.20, "STK": 0.35, "FUT": 0.30, "FXA": 0.10}


def _ql_value(r: Row) -> float:
    units = r.qty * r.mult
    if r.strike is None:
        return 0.0 if r.sym == "FUT" else units * SPOTS[r.sym]
    return units * ql_price(r.call, SPOTS[r.sym], r.strike, r.days, RATE, DIVS[r.sym], VOLS[r.sym])


def test_a_name_without_a_spot_is_left_out_listed_and_the_rest_valued() -> None:
    rows = mixed_rows()
    v = value_book(make_book(rows), without(make_market(), spot="FUT"), T0)
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
    v = value_book(make_book(rows), without(make_market(), surface="STK"), T0)
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
