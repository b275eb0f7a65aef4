"""Money of different currencies is never added: rows keep their currency, totals are per currency
and a total spanning several is NaN (shown "—"), with each currency's total beside it.

Sources: QuantLib 1.44 AnalyticEuropeanEngine values each option on its own (through
``scenario_books.ql_price``: flat curves, Actual365Fixed, whole days); a hedge is worth units ×
spot (common practice). That amounts in two currencies do not add without an exchange rate is
common practice.
"""

from __future__ import annotations

import math
from dataclasses import replace
from inspect import signature
from pathlib import Path

import numpy as np
import pytest

from blotter.book import Underlyings
from blotter.market import Market, RateCurve
from blotter.risk import (
    MONEY_FIELDS,
    SHARE_FIELDS,
    aggregate,
    beta_delta_index_units,
    currency_totals,
    total,
    value_book,
)
from blotter.scenario import apply_move, explain, ladder, ladders, parse_move

from .scenario_books import T0, Row, make_book, make_market, ql_price
from .test_missing_marks import EXPIRY, T_END, T_START, clocked_store

UND = Underlyings(
    symbols=("USX", "EUX", "USI"),
    kinds=("stock", "stock", "index"),
    currencies=("USD", "EUR", "USD"),
    betas=np.array([1.2, 0.9, 1.0]),
    div_yields=np.array([0.02, 0.01, 0.015]),
    calendars=("NYSE", "NYSE", "NYSE"),
)
SPOT = {"USX": 100.0, "EUX": 50.0, "USI": 4000.0}
VOL = {"USX": 0.30, "EUX": 0.25, "USI": 0.18}
RATE = {"USD": 0.03, "EUR": 0.02}
ROWS = [
    Row("USX", 10, 100.0, 30, True),
    Row("EUX", -20, 50.0, 30, False),
    Row("EUX", 400, mult=1),
    Row("USI", 2, 4100.0, 90, True),
]


def _market() -> Market:
    m = make_market(spots=SPOT, vols=VOL)
    curves = {c: RateCurve(np.array([1.0, 3650.0]), np.array([r, r])) for c, r in RATE.items()}
    return replace(m, curves=curves)


def _ql(r: Row, spot: float | None = None, days_passed: int = 0) -> float:
    """QuantLib's value of one test position, in its own currency."""
    s = SPOT[r.sym] if spot is None else spot
    if r.strike is None:
        return r.qty * r.mult * s
    ccy = UND.currencies[UND.index_of(r.sym)]
    q = float(UND.div_yields[UND.index_of(r.sym)])
    price = ql_price(r.call, s, r.strike, r.days - days_passed, RATE[ccy], q, VOL[r.sym])
    return r.qty * r.mult * price


def _by_ccy(values: list[float]) -> dict[str, float]:
    out: dict[str, float] = {}
    for r, x in zip(ROWS, values, strict=True):
        c = UND.currencies[UND.index_of(r.sym)]
        out[c] = out.get(c, 0.0) + x
    return out


def test_rows_keep_their_currency_and_totals_are_per_currency() -> None:
    v = value_book(make_book(ROWS, UND, ref="USI"), _market(), T0)
    assert v.currencies == ("USD", "EUR")
    expected = _by_ccy([_ql(r) for r in ROWS])
    rows = {r.underlying: r for r in aggregate(v, "underlying")}
    assert {k: r.currency for k, r in rows.items()} == {"USX": "USD", "EUX": "EUR", "USI": "USD"}
    assert rows["EUX"].value == pytest.approx(expected["EUR"], rel=1e-9)
    per = currency_totals(v)
    assert [(r.currency, r.label) for r in per] == [("USD", "total"), ("EUR", "total")]
    assert {r.currency: r.value for r in per} == pytest.approx(expected, rel=1e-9)
    tot = total(v)
    assert tot.currency is None
    assert all(math.isnan(getattr(tot, f)) for f in MONEY_FIELDS)
    assert all(math.isfinite(getattr(tot, f)) for f in SHARE_FIELDS)
    assert [r.currency for r in aggregate(v, "position")] == ["USD", "EUR", "EUR", "USD"]
    assert beta_delta_index_units(v) is None  # EUR delta is not in index (USD) units


def test_an_expiry_bucket_of_two_currencies_has_no_money_total() -> None:
    v = value_book(make_book(ROWS, UND, ref="USI"), _market(), T0)
    buckets = {r.label: r for r in aggregate(v, "expiry")}
    both = next(r for r in buckets.values() if r.n_positions == 2)  # the 30-day USX and EUX
    assert both.currency is None and math.isnan(both.value)
    assert buckets["hedges"].currency == "EUR"
    rows = np.flatnonzero(v.bucket_codes == both.index)
    split = {r.currency: r.value for r in currency_totals(v, rows)}
    assert split == pytest.approx({"USD": _ql(ROWS[0]), "EUR": _ql(ROWS[1])}, rel=1e-9)


def test_a_single_currency_book_totals_as_before() -> None:
    book = make_book([r for r in ROWS if r.sym != "EUX"], UND, ref="USI")
    v = value_book(book, _market(), T0)
    tot = total(v)
    assert tot.currency == "USD"
    assert tot.value == pytest.approx(_ql(ROWS[0]) + _ql(ROWS[3]), rel=1e-9)
    (usd,) = currency_totals(v)
    assert usd.value == tot.value and usd.currency == "USD"
    assert beta_delta_index_units(v) is not None


def test_whatif_totals_each_currency_apart() -> None:
    v = value_book(make_book(ROWS, UND, ref="USI"), _market(), T0)
    res = apply_move(v, parse_move("spot -4% days 2"))
    moved = _by_ccy([_ql(r, SPOT[r.sym] * 0.96, 2) - _ql(r) for r in ROWS])
    assert {r.currency: r.full for r in res.by_currency} == pytest.approx(moved, rel=1e-7)
    assert [r.label for r in res.by_currency] == ["USD", "EUR"]
    assert res.total.currency is None and math.isnan(res.total.full)
    assert all(math.isnan(x) for x in res.total.terms.values())
    assert res.total.as_dict()["currency"] is None
    assert {r.underlying: r.currency for r in res.by_underlying} == {
        "USX": "USD", "EUX": "EUR", "USI": "USD"
    }
    for c in res.by_currency:
        rows = [r for r in res.by_underlying if r.currency == c.currency]
        assert c.estimate_2 == pytest.approx(sum(r.estimate_2 for r in rows), rel=1e-12)


def test_ladders_are_per_currency_and_one_ladder_refuses_two_currencies() -> None:
    v = value_book(make_book(ROWS, UND, ref="USI"), _market(), T0)
    with pytest.raises(ValueError, match="USD, EUR"):
        ladder(v, (-4.0,), (0.0,))
    grids = ladders(v, (-4.0, 0.0), (0.0,), days=2)
    assert [g.currency for g in grids] == ["USD", "EUR"]
    moved = _by_ccy([_ql(r, SPOT[r.sym] * 0.96, 2) - _ql(r) for r in ROWS])
    for g in grids:
        assert g.full[0, 0] == pytest.approx(moved[str(g.currency)], rel=1e-7)
    one = value_book(make_book(ROWS[:1], UND), _market(), T0)
    assert [g.currency for g in ladders(one, (-4.0,), (0.0,))] == ["USD"]


def test_explain_totals_each_currency_apart(tmp_path: Path) -> None:
    st, clock = clocked_store(tmp_path)
    st.add_underlying("USX", "stock", "USD", 100.0, american=False, div_yield=0.02)
    st.add_underlying("EUX", "stock", "EUR", 100.0, american=False, div_yield=0.01)
    for ccy, r in RATE.items():
        for tenor in (1, 3650):
            st.log_rate(ccy, tenor, r)
    for sym, s0 in (("USX", 100.0), ("EUX", 50.0)):
        st.log_spot(sym, s0)
        st.log_vol(sym, EXPIRY, VOL[sym])
    first = {"create_book": True} if "create_book" in signature(st.add_trade).parameters else {}
    st.add_trade("main", "USX", 10, 5.0, EXPIRY, 100.0, True, **first)
    st.add_trade("main", "EUX", -20, 2.0, EXPIRY, 50.0, False)
    clock["now"] = T_START
    st.commit_close(marked_at=T_START)
    clock["now"] = T_END.replace(hour=15)
    st.log_spot("USX", 103.0)
    st.log_spot("EUX", 49.0)
    clock["now"] = T_END
    st.commit_close(marked_at=T_END)
    ex = explain(st)
    usd = 1000 * (
        ql_price(True, 103.0, 100.0, 52, 0.03, 0.02, 0.30)
        - ql_price(True, 100.0, 100.0, 53, 0.03, 0.02, 0.30)
    )
    eur = -2000 * (
        ql_price(False, 49.0, 50.0, 52, 0.02, 0.01, 0.25)
        - ql_price(False, 50.0, 50.0, 53, 0.02, 0.01, 0.25)
    )
    assert {r.currency: r.actual for r in ex.by_currency} == pytest.approx(
        {"USD": usd, "EUR": eur}, rel=1e-9
    )
    assert {r.underlying: r.currency for r in ex.by_underlying} == {"USX": "USD", "EUX": "EUR"}
    assert ex.total.currency is None and math.isnan(ex.total.actual)
    assert ex.total.as_dict()["currency"] is None

