"""Totals in the book's base currency and the FX delta, on an invented book in USD, EUR and JPY
with FX options on EURUSD, USDJPY and the cross EURJPY.

Sources: QuantLib 1.44 AnalyticEuropeanEngine values each option on its own (through
``books.ql_price``; an FX option's foreign rate is its dividend yield, Garman–Kohlhagen); the
conversion is written here in plain Python over the positions: an amount in C times the spot of
CB, or divided by the spot of BC (common practice: a pair's spot is units of its second currency
per one unit of its first). The FX delta is checked against a full revaluation of the whole book
in the base currency with each currency bumped against the base, every pair's spot and the
conversion rate moved with it.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest
from books import T0, Row, make_book, make_market, ql_price

from blotter.book import Underlyings
from blotter.market import Market, RateCurve
from blotter.risk import (
    MONEY_FIELDS,
    SHARE_FIELDS,
    BookValuation,
    MissingMark,
    base_total,
    currency_totals,
    fx_delta,
    fx_rates,
    valuation_fx_rates,
    value_book,
)

UND = Underlyings(
    symbols=("USX", "EUX", "JPX", "GBX", "EURUSD", "USDJPY", "EURJPY"),
    kinds=("stock", "stock", "stock", "stock", "fx", "fx", "fx"),
    currencies=("USD", "EUR", "JPY", "GBP", "USD", "JPY", "JPY"),
    betas=np.ones(7),
    div_yields=np.array([0.01, 0.015, 0.0, 0.02, 0.02, 0.03, 0.02]),  # fx: the foreign rate
    calendars=("NYSE",) * 7,
)
SPOTS = {
    "USX": 100.0, "EUX": 50.0, "JPX": 3000.0, "GBX": 20.0,
    "EURUSD": 1.08, "USDJPY": 150.0, "EURJPY": 160.0,  # not triangular: the direct pair is used
}
VOLS = {"USX": 0.30, "EUX": 0.25, "JPX": 0.22, "GBX": 0.3, "EURUSD": 0.08, "USDJPY": 0.10,
        "EURJPY": 0.09}
RATES = {"USD": 0.03, "EUR": 0.02, "JPY": 0.005, "GBP": 0.04}
ROWS = [
    Row("USX", 10, 100.0, 60, True),
    Row("EUX", -20, 50.0, 60, False),
    Row("EUX", 400, mult=1),
    Row("JPX", 5, 3100.0, 90, True),
    Row("EURUSD", 3, 1.10, 60, True, mult=100_000),
    Row("USDJPY", -2, 148.0, 30, False, mult=100_000),
    Row("EURJPY", 1, 165.0, 90, True, mult=100_000),
]
GBP_ROW = Row("GBX", 100, mult=1)


def _market(spots: dict[str, float] = SPOTS) -> Market:
    m = make_market(spots=spots, vols=VOLS)
    curves = {c: RateCurve(np.array([1.0, 3650.0]), np.array([r, r])) for c, r in RATES.items()}
    return replace(m, curves=curves)


def _value(rows: list[Row] = ROWS, spots: dict[str, float] = SPOTS) -> BookValuation:
    return value_book(make_book(rows, UND, ref=None), _market(spots), T0)


def _ccy(r: Row) -> str:
    return UND.currencies[UND.index_of(r.sym)]


def _ql_value(r: Row) -> float:
    """QuantLib's value of one position in its own currency; a hedge is units × spot."""
    s = SPOTS[r.sym]
    if r.strike is None:
        return r.qty * r.mult * s
    q = float(UND.div_yields[UND.index_of(r.sym)])
    return r.qty * r.mult * ql_price(r.call, s, r.strike, r.days, RATES[_ccy(r)], q, VOLS[r.sym])


RATE_TO = {
    "USD": {"USD": 1.0, "EUR": SPOTS["EURUSD"], "JPY": 1.0 / SPOTS["USDJPY"]},
    "EUR": {"EUR": 1.0, "USD": 1.0 / SPOTS["EURUSD"], "JPY": 1.0 / SPOTS["EURJPY"]},
}
"""Base per one unit of each currency, by base, from the pair spots by hand."""


@pytest.mark.parametrize("base", ["USD", "EUR"])
def test_the_base_total_is_each_position_converted_by_hand(base: str) -> None:
    v = _value()
    fx = valuation_fx_rates(v, base)
    assert fx.rates == pytest.approx(RATE_TO[base], rel=1e-15) and not fx.missing
    row = base_total(v, fx)
    x = RATE_TO[base]
    expected = math.fsum(_ql_value(r) * x[_ccy(r)] for r in ROWS)
    assert row.value == pytest.approx(expected, rel=1e-9)
    assert row.currency == base and row.n_positions == len(ROWS)
    ccys = [_ccy(r) for r in ROWS]
    for name in MONEY_FIELDS:
        by_hand = math.fsum(float(a) * x[c] for a, c in zip(getattr(v, name), ccys, strict=True))
        assert getattr(row, name) == pytest.approx(by_hand, rel=1e-12, abs=1e-9), name
    assert all(math.isnan(getattr(row, name)) for name in SHARE_FIELDS)
    # The per-currency totals stay in their own currency, unconverted.
    assert {r.currency: r.value for r in currency_totals(v)} == pytest.approx(
        {c: math.fsum(_ql_value(r) for r in ROWS if _ccy(r) == c) for c in ("USD", "EUR", "JPY")},
        rel=1e-9,
    )


def test_a_currency_without_its_pair_spot_leaves_the_base_total_unknown() -> None:
    v = _value([*ROWS, GBP_ROW])
    fx = valuation_fx_rates(v, "USD")
    assert fx.missing == {"GBP": MissingMark("fx", "GBPUSD")}
    (m,) = fx.missing_marks()
    assert m.words() == "no spot mark for GBPUSD (no such fx underlying yet)"
    assert m.command == (
        "blotter underlying add GBPUSD --kind fx --currency USD, "
        "then blotter mark spot GBPUSD PRICE"
    )
    row = base_total(v, fx)
    assert all(math.isnan(getattr(row, name)) for name in MONEY_FIELDS)
    delta = fx_delta(v, fx)
    assert math.isnan(delta.by_currency["GBP"]) and delta.missing == (m,)
    assert math.isfinite(delta.by_currency["EUR"]) and math.isfinite(delta.by_currency["JPY"])
    # A pair the book holds but has no spot for is named as a spot mark of that pair.
    no_spot = {k: s for k, s in SPOTS.items() if k != "USDJPY"}
    rates = fx_rates(UND, _market(no_spot), "USD", ["USD", "JPY"])
    assert rates.missing == {"JPY": MissingMark("spot", "USDJPY")}
    assert rates.missing["JPY"].command == "blotter mark spot USDJPY PRICE"
    assert math.isnan(rates.rate("JPY"))


def _base_value(base: str, bumped: str, h: float) -> float:
    """The whole book revalued in ``base`` with currency ``bumped`` moved by a factor e^h
    against the base: every pair with it as first leg × e^h, as second leg × e^−h, and its
    conversion rate × e^h; every other rate and price as marked."""
    spots = dict(SPOTS)
    for pair in ("EURUSD", "USDJPY", "EURJPY"):
        if pair[:3] == bumped:
            spots[pair] *= math.exp(h)
        if pair[3:] == bumped:
            spots[pair] *= math.exp(-h)
    rates = dict(RATE_TO[base])
    rates[bumped] *= math.exp(h)
    v = _value(ROWS, spots)
    return math.fsum(rates[str(r.currency)] * r.value for r in currency_totals(v))


@pytest.mark.parametrize("base", ["USD", "EUR"])
def test_fx_delta_is_the_first_order_term_of_a_full_revaluation(base: str) -> None:
    """The FX delta is the first-order part of the whole book's base value under a rise of each
    currency against the base: the full revaluation's derivative (central difference of 0.01%
    bumps, scaled to 1%) equals it, and what a full 1% revaluation adds to it shrinks as the
    square of the move (the options' gamma: on this book 10-18% of the delta at 1%, so equality
    at 1% would be no check at all)."""
    v = _value()
    delta = fx_delta(v, valuation_fx_rates(v, base))
    foreign = sorted({"USD", "EUR", "JPY"} - {base})
    assert sorted(delta.by_currency) == foreign and not delta.missing
    at_rest = {c: _base_value(base, c, 0.0) for c in foreign}
    for c in foreign:
        h = 1e-4
        slope = (_base_value(base, c, h) - _base_value(base, c, -h)) / 2 * (0.01 / h)
        assert delta.by_currency[c] == pytest.approx(slope, rel=1e-5), c
        moves = [math.log(1.01), math.log(1.005), math.log(1.0025)]
        rest = [
            _base_value(base, c, m) - at_rest[c] - delta.by_currency[c] * m / 0.01
            for m in moves
        ]
        assert abs(rest[0]) < 0.25 * abs(delta.by_currency[c])  # a 1% move: delta plus gamma
        assert rest[0] / rest[1] == pytest.approx(4.0, rel=0.05), c  # second order: halving the
        assert rest[1] / rest[2] == pytest.approx(4.0, rel=0.05), c  # move quarters the rest


def test_a_pair_whose_legs_cannot_be_read_leaves_the_fx_delta_unknown() -> None:
    odd = replace(UND, symbols=(*UND.symbols[:4], "EUR/USD", *UND.symbols[5:]))
    rows = [replace(r, sym="EUR/USD") if r.sym == "EURUSD" else r for r in ROWS]
    spots = {("EUR/USD" if k == "EURUSD" else k): s for k, s in SPOTS.items()}
    vols = {("EUR/USD" if k == "EURUSD" else k): s for k, s in VOLS.items()}
    market = replace(_market(), spots=spots, surfaces=make_market(spots, vols).surfaces)
    v = value_book(make_book(rows, odd, ref=None), market, T0)
    delta = fx_delta(v, valuation_fx_rates(v, "USD"))
    assert delta.unread == ("EUR/USD",)
    assert delta.by_currency and all(math.isnan(x) for x in delta.by_currency.values())


def test_a_cross_pair_needs_no_rate_for_its_first_leg() -> None:
    """A book holding only EURJPY options (priced in JPY) converts with the JPY rate alone: no
    EUR rate is asked for, and EUR's FX delta is the pair's Δ $ at the JPY rate."""
    rows = [r for r in ROWS if r.sym == "EURJPY"]
    no_eurusd = {k: s for k, s in SPOTS.items() if k != "EURUSD"}
    v = _value(rows, no_eurusd)
    fx = valuation_fx_rates(v, "USD")
    assert not fx.missing and set(fx.rates) == {"USD", "JPY"}
    delta = fx_delta(v, fx)
    cash = float(v.delta_cash.sum())
    assert delta.by_currency["EUR"] == pytest.approx(0.01 * cash / SPOTS["USDJPY"], rel=1e-12)
    assert not delta.missing
