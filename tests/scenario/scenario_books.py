"""Small books and markets built in memory, and a QuantLib pricer valuing one position at a time.

Valuation instant: Friday 2026-12-04 20:00 UTC (15:00 in New York). Every option expires a whole
number of days after it, so T = days / 365 exactly and QuantLib (Actual365Fixed, integer days)
sees the same year fraction.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import UTC, datetime

import numpy as np

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
        np.array(["2027-06-18"], dtype="datetime64[D]"), np.array([np.nan]), np.array([vol])
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
        Row("IDX", -15, 4300, 45, False),
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
