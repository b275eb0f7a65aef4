"""QuantLib's value of one European option on a flat market, for the command tests' checks."""

from __future__ import annotations

from typing import Any

import pytest

VALUATION_DAY = (1, 12, 2026)
"""Day of the command tests' valuation time, 2026-12-01 (20:00 UTC)."""


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
