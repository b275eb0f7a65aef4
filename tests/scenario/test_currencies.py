"""Money of different currencies is never added in a what-if, a ladder or an explain: totals are per
currency and a total spanning several is NaN (shown "—"), with each currency's total beside it.

Sources: QuantLib 1.44 AnalyticEuropeanEngine values each option on its own (through
``books.ql_price``: flat curves, Actual365Fixed, whole days); a hedge is worth units ×
spot (common practice). That amounts in two currencies do not add without an exchange rate is
common practice.
"""

from __future__ import annotations

import math
from inspect import signature
from pathlib import Path

import pytest
from books import T0, by_currency, make_book, ql_price, two_ccy_market, two_ccy_ql
from books import TWO_CCY as UND
from books import TWO_CCY_RATES as RATE
from books import TWO_CCY_ROWS as ROWS
from books import TWO_CCY_SPOTS as SPOT
from books import TWO_CCY_VOLS as VOL

from blotter.risk import value_book
from blotter.scenario import apply_move, explain, ladder, ladders, parse_move

from .test_missing_marks import EXPIRY, T_END, T_START, clocked_store


def test_whatif_totals_each_currency_apart() -> None:
    v = value_book(make_book(ROWS, UND, ref="USI"), two_ccy_market(), T0)
    res = apply_move(v, parse_move("spot -4% days 2"))
    moved = by_currency([two_ccy_ql(r, SPOT[r.sym] * 0.96, 2) - two_ccy_ql(r) for r in ROWS])
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
    v = value_book(make_book(ROWS, UND, ref="USI"), two_ccy_market(), T0)
    with pytest.raises(ValueError, match="USD, EUR"):
        ladder(v, (-4.0,), (0.0,))
    grids = ladders(v, (-4.0, 0.0), (0.0,), days=2)
    assert [g.currency for g in grids] == ["USD", "EUR"]
    moved = by_currency([two_ccy_ql(r, SPOT[r.sym] * 0.96, 2) - two_ccy_ql(r) for r in ROWS])
    for g in grids:
        assert g.full[0, 0] == pytest.approx(moved[str(g.currency)], rel=1e-7)
    one = value_book(make_book(ROWS[:1], UND), two_ccy_market(), T0)
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
