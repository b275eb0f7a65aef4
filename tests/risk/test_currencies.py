"""Money of different currencies is never added in the book's exposures: rows keep their
currency, totals are per currency and a total spanning several is NaN (shown "—"), with each
currency's total beside it.

Sources: QuantLib 1.44 AnalyticEuropeanEngine values each option on its own (through
``books.ql_price``: flat curves, Actual365Fixed, whole days); a hedge is worth units ×
spot (common practice). That amounts in two currencies do not add without an exchange rate is
common practice.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from books import T0, by_currency, make_book, two_ccy_market, two_ccy_ql
from books import TWO_CCY as UND
from books import TWO_CCY_ROWS as ROWS

from blotter.risk import (
    MONEY_FIELDS,
    SHARE_FIELDS,
    aggregate,
    beta_delta_index_units,
    currency_totals,
    total,
    value_book,
)


def test_rows_keep_their_currency_and_totals_are_per_currency() -> None:
    v = value_book(make_book(ROWS, UND, ref="USI"), two_ccy_market(), T0)
    assert v.currencies == ("USD", "EUR")
    expected = by_currency([two_ccy_ql(r) for r in ROWS])
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
    v = value_book(make_book(ROWS, UND, ref="USI"), two_ccy_market(), T0)
    buckets = {r.label: r for r in aggregate(v, "expiry")}
    both = next(r for r in buckets.values() if r.n_positions == 2)  # the 30-day USX and EUX
    assert both.currency is None and math.isnan(both.value)
    assert buckets["hedges"].currency == "EUR"
    rows = np.flatnonzero(v.bucket_codes == both.index)
    split = {r.currency: r.value for r in currency_totals(v, rows)}
    expected = {"USD": two_ccy_ql(ROWS[0]), "EUR": two_ccy_ql(ROWS[1])}
    assert split == pytest.approx(expected, rel=1e-9)


def test_a_single_currency_book_totals_as_before() -> None:
    book = make_book([r for r in ROWS if r.sym != "EUX"], UND, ref="USI")
    v = value_book(book, two_ccy_market(), T0)
    tot = total(v)
    assert tot.currency == "USD"
    assert tot.value == pytest.approx(two_ccy_ql(ROWS[0]) + two_ccy_ql(ROWS[3]), rel=1e-9)
    (usd,) = currency_totals(v)
    assert usd.value == tot.value and usd.currency == "USD"
    assert beta_delta_index_units(v) is not None
