"""A small invented book for the desk tests, and QuantLib's value of its options.

One stock ``XYZ`` (USD, European options, no dividend) at 100 with a flat 30% vol and a flat 4%
zero rate; a 105 call and a 95 put expiring 2027-01-15 at 16:00 New York. Valued at 16:00 New
York on 2026-12-01, 45 days before, so the year fraction is 45/365 on both sides (ACT/365F here,
Actual365Fixed in QuantLib).
"""

from __future__ import annotations

from datetime import UTC, date, datetime
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from blotter import store

NOW = datetime(2026, 12, 1, 21, 0, tzinfo=UTC)
"""16:00 New York on Tuesday 2026-12-01: the tests' valuation time."""

T0 = np.datetime64("2026-12-01T21:00:00", "s")
"""``NOW`` as the valuation layer's instant."""

EXPIRY = date(2027, 1, 15)
"""The options' expiry, 45 days after ``NOW`` at the same clock time."""

SPOT, VOL, RATE = 100.0, 0.30, 0.04


@pytest.fixture
def xyz_db(tmp_path: Path) -> Path:
    """A new book holding the XYZ options above (+10 calls, -5 puts) and their marks."""
    path = tmp_path / "xyz.db"
    st = store.create_store(path)
    try:
        st.add_underlying(
            "XYZ", "stock", "USD", 100.0, american=False, description="invented for the tests"
        )
        st.log_spot("XYZ", SPOT)
        st.log_vol("XYZ", EXPIRY, VOL)
        st.log_rate("USD", 365, RATE)
        st.add_trade("desk", "XYZ", 10, 3.0, EXPIRY, 105.0, True, create_book=True)
        st.add_trade("desk", "XYZ", -5, 2.0, EXPIRY, 95.0, False)
    finally:
        st.close()
    return path


def _quantlib_option(call: bool, strike: float, vol: float, spot: float) -> Any:
    """QuantLib's AnalyticEuropeanEngine on one XYZ option: flat rate and vol, no dividend,
    Actual365Fixed, expiry 45 days after the valuation date."""
    ql: Any = pytest.importorskip("QuantLib")
    today = ql.Date(1, 12, 2026)
    ql.Settings.instance().evaluationDate = today
    dc = ql.Actual365Fixed()

    def flat(r: float) -> Any:
        return ql.YieldTermStructureHandle(ql.FlatForward(today, r, dc))

    process = ql.BlackScholesMertonProcess(
        ql.QuoteHandle(ql.SimpleQuote(spot)),
        flat(0.0),
        flat(RATE),
        ql.BlackVolTermStructureHandle(ql.BlackConstantVol(today, ql.NullCalendar(), vol, dc)),
    )
    option = ql.VanillaOption(
        ql.PlainVanillaPayoff(ql.Option.Call if call else ql.Option.Put, strike),
        ql.EuropeanExercise(today + 45),
    )
    option.setPricingEngine(ql.AnalyticEuropeanEngine(process))
    return option


def quantlib_european(call: bool, strike: float, vol: float = VOL, spot: float = SPOT) -> float:
    """QuantLib's value of one XYZ option per unit of underlying."""
    return float(_quantlib_option(call, strike, vol, spot).NPV())


def quantlib_delta(call: bool, strike: float) -> float:
    """QuantLib's delta of one XYZ option per unit of underlying, at the marks."""
    return float(_quantlib_option(call, strike, VOL, SPOT).delta())
