"""Profiles: the book's total exposure at each spot move (or day) from one broadcast pass, and
the P&L and exposure curves the app draws (``profile_curves``).

Each point must equal a full valuation of the book on the moved market (``value_book``, itself
checked against QuantLib in test_risk.py), and a one-option book's gamma point is checked against
QuantLib's own gamma at the moved spot; a one-option book's P&L curves against QuantLib's value
at each moved spot and each later day (QuantLib 1.44 AnalyticEuropeanEngine, flat curves,
Actual365Fixed, whole days).
"""

from __future__ import annotations

import numpy as np
import pytest
from books import (
    RATE,
    SPOTS,
    T0,
    TWO_CCY,
    TWO_CCY_ROWS,
    TWO_CCY_SPOTS,
    Row,
    make_book,
    make_market,
    mixed_rows,
    ql_price,
    two_ccy_currency,
    two_ccy_market,
    two_ccy_ql,
)

from blotter import calendar as cal
from blotter.risk import total, value_book
from blotter.scenario import PROFILE_EXPOSURES, greek_profile
from blotter.scenario.profile import profile_curves

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


def _stk_call(spot: float, days: int) -> float:
    """QuantLib's value of the one-position book below: 10 STK 125 calls (multiplier 100)."""
    return 10 * 100 * ql_price(True, spot, 125.0, days, RATE, 0.02, 0.35)


def test_pnl_against_spot_today_and_after_the_roll_is_quantlibs() -> None:
    v = value_book(make_book([Row("STK", 10, 125, 60, True)]), make_market(), T0)
    p = profile_curves(v, "pnl", "spot", 3.0, spot_pct=10.0, points=5, horizon_days=30)
    assert p.xs == (-10.0, -5.0, 0.0, 5.0, 10.0) and p.underlyings == ("STK",)
    today, today_est, rolled, rolled_est = p.curves
    assert (today.days, rolled.days, today.currency) == (0.0, 3.0, None)
    assert [c.kind for c in p.curves] == ["full", "estimate", "full", "estimate"]
    assert (today_est.days, rolled_est.days) == (0.0, 3.0)
    base = _stk_call(120.0, 60)
    for x, y0, y3 in zip(p.xs, today.ys, rolled.ys, strict=True):
        s = 120.0 * (1 + x / 100)
        assert y0 == pytest.approx(_stk_call(s, 60) - base, rel=1e-8, abs=1e-6)
        assert y3 == pytest.approx(_stk_call(s, 57) - base, rel=1e-8, abs=1e-6)


def _stk_call_greeks() -> tuple[float, float, float]:
    """QuantLib's delta, gamma and theta (per year) of one STK 125 call, 60 days, spot 120
    (AnalyticEuropeanEngine, flat curves, Actual365Fixed)."""
    import QuantLib as ql

    today = ql.Date(4, 12, 2026)
    ql.Settings.instance().evaluationDate = today
    dc = ql.Actual365Fixed()
    option = ql.VanillaOption(
        ql.PlainVanillaPayoff(ql.Option.Call, 125.0), ql.EuropeanExercise(today + 60)
    )
    process = ql.BlackScholesMertonProcess(
        ql.QuoteHandle(ql.SimpleQuote(120.0)),
        ql.YieldTermStructureHandle(ql.FlatForward(today, 0.02, dc)),
        ql.YieldTermStructureHandle(ql.FlatForward(today, RATE, dc)),
        ql.BlackVolTermStructureHandle(ql.BlackConstantVol(today, ql.NullCalendar(), 0.35, dc)),
    )
    option.setPricingEngine(ql.AnalyticEuropeanEngine(process))
    return float(option.delta()), float(option.gamma()), float(option.theta())


def test_the_estimate_curves_are_the_taylor_sum_of_quantlibs_greeks() -> None:
    """Each estimate point is units × (Δ·dS + ½Γ·dS² + θ·dt) with QuantLib's greeks at the base
    (Taylor's theorem to second order in spot, first in time), so the gap to the full curve is
    the error the pane shades."""
    v = value_book(make_book([Row("STK", 10, 125, 60, True)]), make_market(), T0)
    p = profile_curves(v, "pnl", "spot", 3.0, spot_pct=10.0, points=5, horizon_days=30)
    delta, gamma, theta = _stk_call_greeks()
    units = 10 * 100
    for curve in (c for c in p.curves if c.kind == "estimate"):
        dt = (curve.days or 0.0) / 365.0
        for x, y in zip(p.xs, curve.ys, strict=True):
            ds = 120.0 * x / 100
            want = units * (delta * ds + 0.5 * gamma * ds * ds + theta * dt)
            assert y == pytest.approx(want, rel=1e-8, abs=1e-6), (curve.days, x)
    full = next(c for c in p.curves if c.kind == "full")
    assert full.ys[0] != pytest.approx(p.curves[1].ys[0], rel=1e-3)  # a 10% move: a real gap
    days = profile_curves(v, "pnl", "days", 0.0, spot_pct=10.0, points=5, horizon_days=10)
    (est,) = (c for c in days.curves if c.kind == "estimate")
    assert est.ys == pytest.approx([units * theta * d / 365.0 for d in days.xs], rel=1e-8)


def test_pnl_against_days_is_quantlibs() -> None:
    v = value_book(make_book([Row("STK", 10, 125, 60, True)]), make_market(), T0)
    p = profile_curves(v, "pnl", "days", 0.0, spot_pct=10.0, points=5, horizon_days=45)
    assert p.xs[:3] == (0.0, 1.0, 2.0) and p.xs[-1] == 45.0 and len(p.xs) == 46
    curve, estimate = p.curves
    assert curve.days is None and (curve.kind, estimate.kind) == ("full", "estimate")
    for d, y in zip(p.xs, curve.ys, strict=True):
        assert y == pytest.approx(_stk_call(120.0, 60 - int(d)) - _stk_call(120.0, 60), rel=1e-8)
    longer = profile_curves(v, "pnl", "days", 0.0, spot_pct=10.0, points=5, horizon_days=90)
    assert longer.xs[1] == 3.0  # about 30 steps: every third day over 90 days


def test_an_exposure_curve_is_greek_profile_and_the_rows_their_own_book() -> None:
    book, market = make_book(mixed_rows()), make_market()
    v = value_book(book, market, T0)
    rows = np.array([0, 3, 5])
    p = profile_curves(
        v, "delta_cash", "spot", 2.0, spot_pct=15.0, points=7, horizon_days=30, rows=rows
    )
    alone = value_book(book.take(rows), market, T0)
    for curve in p.curves:
        assert curve.ys == tuple(greek_profile(alone, "delta_cash", p.xs, days=curve.days or 0.0))
    assert p.underlyings == ("IDX", "STK")


def test_each_currency_gets_its_own_curves() -> None:
    """Money of different currencies is never added: one curve per currency and roll."""
    v = value_book(make_book(TWO_CCY_ROWS, TWO_CCY, ref="USI"), two_ccy_market(), T0)
    p = profile_curves(v, "pnl", "spot", 2.0, spot_pct=5.0, points=3, horizon_days=10)
    assert [(c.currency, c.days) for c in p.curves if c.kind == "full"] == [
        ("USD", 0.0), ("USD", 2.0), ("EUR", 0.0), ("EUR", 2.0)
    ]
    for curve in (c for c in p.curves if c.kind == "full"):
        rows = [r for r in TWO_CCY_ROWS if two_ccy_currency(r) == curve.currency]
        days = int(curve.days or 0)
        for x, y in zip(p.xs, curve.ys, strict=True):
            moved = [two_ccy_ql(r, TWO_CCY_SPOTS[r.sym] * (1 + x / 100), days) for r in rows]
            want = sum(moved) - sum(two_ccy_ql(r) for r in rows)
            assert y == pytest.approx(want, rel=1e-8, abs=1e-6), (curve.currency, days, x)


def test_unknown_measure_or_axis_is_refused_by_name() -> None:
    v = value_book(make_book(mixed_rows()), make_market(), T0)
    with pytest.raises(ValueError, match="measure must be one of pnl, delta_cash"):
        profile_curves(v, "vanna", "spot", 0.0, spot_pct=5.0, points=3, horizon_days=10)
    with pytest.raises(ValueError, match="axis must be one of spot, days"):
        profile_curves(v, "pnl", "vol", 0.0, spot_pct=5.0, points=3, horizon_days=10)
