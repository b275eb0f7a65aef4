"""Greek profiles: the book's total exposure at each spot move (or day) from one broadcast pass.

Each point must equal a full valuation of the book on the moved market (``value_book``, itself
checked against QuantLib in test_risk.py), and a one-option book's gamma point is checked against
QuantLib's own gamma at the moved spot.
"""

from __future__ import annotations

import numpy as np
import pytest

from blotter import calendar as cal
from blotter.risk import total, value_book
from blotter.scenario import PROFILE_EXPOSURES, greek_profile

from .scenario_books import SPOTS, T0, Row, make_book, make_market, mixed_rows

SPOT_PCTS = (-15.0, -5.0, 0.0, 2.5, 12.0)


def _book_with_american():  # type: ignore[no-untyped-def]
    rows = mixed_rows() + [
        Row("STK", 7, 115, 50, False, american=True),
        Row("STK", -3, 118, 20, True, american=True),
        Row("FUT", 4, 82, 30, False, american=True),
    ]
    return make_book(rows)


@pytest.mark.parametrize("exposure", PROFILE_EXPOSURES)
@pytest.mark.parametrize("days", [0.0, 4.0, 35.0])
def test_each_point_is_the_valuation_of_the_moved_book(exposure: str, days: float) -> None:
    """Against spot (sticky strike, flat surfaces) after ``days``: 35 days rolls two options past
    expiry, which then count nothing."""
    book, market = _book_with_american(), make_market()
    v = value_book(book, market, T0)
    curve = greek_profile(v, exposure, SPOT_PCTS, days=days)
    t1 = cal.roll_calendar_days(T0, days)
    for pct, got in zip(SPOT_PCTS, curve, strict=True):
        moved = market.shocked(spot_pct={s: pct for s in SPOTS}) if pct else market
        expected = getattr(total(value_book(book, moved, t1)), exposure)
        assert got == pytest.approx(expected, rel=1e-7, abs=1e-6), (exposure, pct, days)


def test_the_valuations_boundaries_serve_every_point() -> None:
    """No spot point solves an American boundary the base valuation has not."""
    v = value_book(_book_with_american(), make_market(), T0)
    solved = len(v.boundaries)
    greek_profile(v, "delta_cash", np.linspace(-20, 20, 41))
    assert len(v.boundaries) == solved


def test_gamma_point_against_quantlib() -> None:
    """Γ 1% of 10 calls (multiplier 100) at spot +8%: QuantLib's gamma at the moved spot × S' ×
    0.01 × units (QuantLib 1.44 AnalyticEuropeanEngine, flat curves, Actual365Fixed)."""
    import QuantLib as ql

    book = make_book([Row("STK", 10, 125, 40, True)])
    v = value_book(book, make_market(), T0)
    (got,) = greek_profile(v, "gamma_1pct", [8.0])
    s1 = SPOTS["STK"] * 1.08
    today = ql.Date(4, 12, 2026)
    ql.Settings.instance().evaluationDate = today
    dc = ql.Actual365Fixed()
    years = float(v.years[0])
    option = ql.VanillaOption(
        ql.PlainVanillaPayoff(ql.Option.Call, 125.0),
        ql.EuropeanExercise(today + 40),
    )
    process = ql.BlackScholesMertonProcess(
        ql.QuoteHandle(ql.SimpleQuote(s1)),
        ql.YieldTermStructureHandle(ql.FlatForward(today, float(v.rate[0] - v.carry[0]), dc)),
        ql.YieldTermStructureHandle(ql.FlatForward(today, float(v.rate[0]), dc)),
        ql.BlackVolTermStructureHandle(
            ql.BlackConstantVol(today, ql.NullCalendar(), float(v.vol[0]), dc)
        ),
    )
    option.setPricingEngine(ql.AnalyticEuropeanEngine(process))
    assert years == pytest.approx(40 / 365, rel=1e-15)  # 40 whole days, as QuantLib counts
    assert got == pytest.approx(option.gamma() * s1 * 0.01 * 10 * 100, rel=1e-9)
