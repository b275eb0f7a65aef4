"""Small books and markets built in memory, and a QuantLib pricer valuing one position at a time,
shared by the market, risk and scenario tests (``from books import ...``: pytest puts ``tests/``
on the import path for its top conftest).

Valuation instant: Friday 2026-12-04 20:00 UTC (15:00 in New York). Every option expires a whole
number of days after it, so T = days / 365 exactly and QuantLib (Actual365Fixed, integer days)
sees the same year fraction.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from datetime import UTC, datetime

import numpy as np
import pytest

from blotter.book import Book, Underlyings
from blotter.market import Market, RateCurve, VolSurface

T0 = np.datetime64("2026-12-04T20:00:00", "s")
"""Valuation instant of the test books: a Friday, 15:00 New York time."""

RATE = 0.03
"""Flat USD zero rate of the test markets, continuous."""


@dataclass
class Row:
    """One test position: an option (``strike`` set) or a hedge (``strike`` None)."""

    sym: str
    qty: float
    strike: float | None = None
    days: int = 0
    call: bool = True
    american: bool = False
    mult: float = 100.0
    cash: bool = False
    years: float | None = None  # exact time to expiry; overrides ``days``


UNDERLYINGS = Underlyings(
    symbols=("IDX", "STK", "FUT", "FXA"),
    kinds=("index", "stock", "future", "fx"),
    currencies=("USD", "USD", "USD", "USD"),
    betas=np.array([1.0, 1.5, 0.8, 0.2]),
    div_yields=np.array([0.015, 0.02, 0.0, 0.045]),
    calendars=("NYSE", "NYSE", "NYSE", "NYSE"),
)
"""Fictitious underlyings: an index, a stock, a future and an FX rate (foreign rate 4.5%)."""

SPOTS = {"IDX": 4500.0, "STK": 120.0, "FUT": 80.0, "FXA": 1.10}


def _seconds(r: Row) -> int:
    return int(round(r.years * 365 * 86400)) if r.years is not None else r.days * 86400


def make_book(
    rows: list[Row], underlyings: Underlyings = UNDERLYINGS, ref: str | None = "IDX"
) -> Book:
    """A ``Book`` of ``rows``, expiries ``days`` after ``T0``."""
    n = len(rows)
    is_opt = np.array([r.strike is not None for r in rows], dtype=bool)
    exp = np.array(
        [
            T0 + np.timedelta64(_seconds(r), "s")
            if r.strike is not None
            else np.datetime64("NaT", "s")
            for r in rows
        ],
        dtype="datetime64[s]",
    )
    return Book(
        name="test",
        underlyings=underlyings,
        reference_index=ref,
        contract_ids=np.arange(1, n + 1),
        labels=tuple(
            f"{r.sym} {r.days}d {r.strike} {'C' if r.call else 'P'}"
            if r.strike
            else f"{r.sym} hedge"
            for r in rows
        ),
        underlying_idx=np.array([underlyings.index_of(r.sym) for r in rows], dtype=np.int64),
        is_option=is_opt,
        is_call=np.array([r.call and r.strike is not None for r in rows]),
        american=np.array([r.american for r in rows]),
        strikes=np.array([r.strike if r.strike is not None else np.nan for r in rows], dtype=float),
        expiries=exp,
        multipliers=np.array([r.mult for r in rows], dtype=float),
        quantities=np.array([r.qty for r in rows], dtype=float),
        cash_settled=np.array([r.cash for r in rows], dtype=bool),
    )


def flat_surface(vol: float) -> VolSurface:
    """A surface with one ATM point: the same vol at every strike and expiry."""
    return VolSurface(
        np.array(["2027-06-17"], dtype="datetime64[D]"), np.array([np.nan]), np.array([vol])
    )


def make_market(
    spots: dict[str, float] | None = None,
    vols: dict[str, float] | None = None,
    rate: float = RATE,
    surfaces: dict[str, VolSurface] | None = None,
) -> Market:
    """A market: flat surfaces (``vols``) unless ``surfaces`` are given; a flat USD curve."""
    vols = vols or {"IDX": 0.20, "STK": 0.35, "FUT": 0.30, "FXA": 0.10}
    return Market(
        version=1,
        marks_as_of=datetime(2026, 12, 4, 20, 0, tzinfo=UTC),
        spots=dict(spots or SPOTS),
        surfaces=surfaces or {s: flat_surface(v) for s, v in vols.items()},
        curves={"USD": RateCurve(np.array([1.0, 3650.0]), np.array([rate, rate]))},
    )


def ql_price(
    call: bool,
    spot: float,
    strike: float,
    days: int,
    rate: float,
    div: float,
    vol: float,
    american: bool = False,
) -> float:
    """QuantLib's value of one option: flat curves (continuous, Actual365Fixed), ``days`` to expiry.

    ``div`` is the dividend yield (stock, index), the rate itself (futures: b = 0) or the foreign
    rate (FX). Expired options (days <= 0) are worth their intrinsic value.
    """
    import QuantLib as ql

    if days <= 0:
        return max((spot - strike) if call else (strike - spot), 0.0)
    today = ql.Date(4, 12, 2026)
    ql.Settings.instance().evaluationDate = today
    dc = ql.Actual365Fixed()
    payoff = ql.PlainVanillaPayoff(ql.Option.Call if call else ql.Option.Put, strike)
    maturity = today + int(days)
    exercise = ql.AmericanExercise(today, maturity) if american else ql.EuropeanExercise(maturity)
    option = ql.VanillaOption(payoff, exercise)
    process = ql.BlackScholesMertonProcess(
        ql.QuoteHandle(ql.SimpleQuote(spot)),
        ql.YieldTermStructureHandle(ql.FlatForward(today, div, dc)),
        ql.YieldTermStructureHandle(ql.FlatForward(today, rate, dc)),
        ql.BlackVolTermStructureHandle(ql.BlackConstantVol(today, ql.NullCalendar(), vol, dc)),
    )
    if american:
        option.setPricingEngine(ql.FdBlackScholesVanillaEngine(process, 800, 800))
    else:
        option.setPricingEngine(ql.AnalyticEuropeanEngine(process))
    return float(option.NPV())


def mixed_rows() -> list[Row]:
    """Options on all four kinds of underlying plus a stock and a futures hedge."""
    return [
        Row("IDX", 10, 4500, 30, True),
        Row("IDX", -15, 4300, 42, False),
        Row("IDX", 5, 4700, 120, True),
        Row("STK", -20, 125, 10, True),
        Row("STK", 30, 110, 60, False),
        Row("STK", 1500, mult=1),
        Row("FUT", 12, 80, 25, True),
        Row("FUT", -8, 75, 90, False),
        Row("FUT", 3, mult=1000),
        Row("FXA", 4, 1.12, 40, True, mult=100000),
        Row("FXA", -6, 1.05, 75, False, mult=100000),
    ]


def mixed_american_rows() -> list[Row]:
    """``mixed_rows`` and three American options on STK, one of them expiring in two days."""
    return mixed_rows() + [
        Row("STK", 7, 115, 50, False, american=True),
        Row("STK", -3, 118, 20, True, american=True),
        Row("STK", 4, 90, 2, False, american=True),
    ]


@pytest.fixture
def mixed_book() -> Book:
    """Options on all four kinds of underlying plus a stock and a futures hedge."""
    return make_book(mixed_rows())


HULL = Underlyings(
    symbols=("HUL",),
    kinds=("stock",),
    currencies=("USD",),
    betas=np.array([1.0]),
    div_yields=np.array([0.0]),
    calendars=("NYSE",),
)
"""The stock of J. C. Hull's running greeks example (Options, Futures, and Other Derivatives, 9th
ed. 2015, Ch. 19): S0 = 49, no dividend."""

HULL_YEARS = 20 / 52
"""The example's call expires in 20 weeks."""


def hull_market(spot: float = 49.0) -> Market:
    """The example's market: spot 49, σ = 20%, r = 5% flat."""
    m = make_market(spots={"HUL": spot}, vols={"HUL": 0.20})
    return replace(m, curves={"USD": RateCurve(np.array([1.0, 3650.0]), np.array([0.05, 0.05]))})


def hull_book(qty: float = 1.0, mult: float = 1.0) -> Book:
    """``qty`` of the example's 50-strike call, ``mult`` units each."""
    row = Row("HUL", qty, 50.0, call=True, mult=mult, years=HULL_YEARS)
    return make_book([row], HULL, ref=None)


def without(market: Market, spot: str | None = None, surface: str | None = None) -> Market:
    """``market`` lacking the spot ``spot`` and the vol surface ``surface``."""
    spots = {k: v for k, v in market.spots.items() if k != spot}
    surfaces = {k: v for k, v in market.surfaces.items() if k != surface}
    return replace(market, spots=spots, surfaces=surfaces)


# A book in two currencies: a USD stock and index, a EUR stock (with a EUR hedge).

TWO_CCY = Underlyings(
    symbols=("USX", "EUX", "USI"),
    kinds=("stock", "stock", "index"),
    currencies=("USD", "EUR", "USD"),
    betas=np.array([1.2, 0.9, 1.0]),
    div_yields=np.array([0.02, 0.01, 0.015]),
    calendars=("NYSE", "NYSE", "NYSE"),
)
TWO_CCY_SPOTS = {"USX": 100.0, "EUX": 50.0, "USI": 4000.0}
TWO_CCY_VOLS = {"USX": 0.30, "EUX": 0.25, "USI": 0.18}
TWO_CCY_RATES = {"USD": 0.03, "EUR": 0.02}
TWO_CCY_ROWS = [
    Row("USX", 10, 100.0, 30, True),
    Row("EUX", -20, 50.0, 30, False),
    Row("EUX", 400, mult=1),
    Row("USI", 2, 4100.0, 90, True),
]


def two_ccy_market() -> Market:
    """Flat surfaces and one flat curve per currency for ``TWO_CCY_ROWS``."""
    m = make_market(spots=TWO_CCY_SPOTS, vols=TWO_CCY_VOLS)
    curves = {
        c: RateCurve(np.array([1.0, 3650.0]), np.array([r, r])) for c, r in TWO_CCY_RATES.items()
    }
    return replace(m, curves=curves)


def two_ccy_currency(r: Row) -> str:
    """The currency of a position of ``TWO_CCY_ROWS``."""
    return TWO_CCY.currencies[TWO_CCY.index_of(r.sym)]


def two_ccy_ql(r: Row, spot: float | None = None, days_passed: int = 0) -> float:
    """QuantLib's value of one position of ``TWO_CCY_ROWS``, in its own currency."""
    s = TWO_CCY_SPOTS[r.sym] if spot is None else spot
    if r.strike is None:
        return r.qty * r.mult * s
    q = float(TWO_CCY.div_yields[TWO_CCY.index_of(r.sym)])
    rate = TWO_CCY_RATES[two_ccy_currency(r)]
    price = ql_price(r.call, s, r.strike, r.days - days_passed, rate, q, TWO_CCY_VOLS[r.sym])
    return r.qty * r.mult * price


def by_currency(values: list[float]) -> dict[str, float]:
    """Per-position ``values`` of ``TWO_CCY_ROWS`` summed per currency."""
    out: dict[str, float] = {}
    for r, x in zip(TWO_CCY_ROWS, values, strict=True):
        out[two_ccy_currency(r)] = out.get(two_ccy_currency(r), 0.0) + x
    return out
