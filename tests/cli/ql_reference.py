"""QuantLib's value of one European option on a flat market, for the command tests' checks."""

from __future__ import annotations

from datetime import date
from typing import Any

import pytest

VALUATION_DAY = (1, 12, 2026)
"""Day of the command tests' valuation time, 2026-12-01 (20:00 UTC)."""

EXPIRY = "2027-06-17"
"""Expiry of the command tests' invented options: the Thursday before 2027-06-18, the NYSE's
observed Juneteenth, as exchanges move a holiday-Friday expiry to the trading day before
(common practice)."""


def days_to(expiry: str) -> int:
    """Whole days from ``VALUATION_DAY`` to ``expiry``: the valuation time, 20:00 UTC, is the
    16:00 New York cut-off of a summer expiry (UTC-4), so the year fraction is whole days."""
    day, month, year = VALUATION_DAY
    return (date.fromisoformat(expiry) - date(year, month, day)).days


def european(call: bool, spot: float, strike: float, rate: float, vol: float, days: int) -> float:
    """QuantLib 1.44 AnalyticEuropeanEngine: flat rate and vol, no dividend, Actual365Fixed,
    ``days`` whole days after ``VALUATION_DAY``; skips the test when QuantLib is missing."""
    ql = pytest.importorskip("QuantLib")
    today = ql.Date(*VALUATION_DAY)
    ql.Settings.instance().evaluationDate = today
    dc = ql.Actual365Fixed()

    def flat(r: float) -> Any:
        return ql.YieldTermStructureHandle(ql.FlatForward(today, r, dc))

    process = ql.BlackScholesMertonProcess(
        ql.QuoteHandle(ql.SimpleQuote(spot)),
        flat(0.0),
        flat(rate),
        ql.BlackVolTermStructureHandle(ql.BlackConstantVol(today, ql.NullCalendar(), vol, dc)),
    )
    option = ql.VanillaOption(
        ql.PlainVanillaPayoff(ql.Option.Call if call else ql.Option.Put, strike),
        ql.EuropeanExercise(today + days),
    )
    option.setPricingEngine(ql.AnalyticEuropeanEngine(process))
    return float(option.NPV())
