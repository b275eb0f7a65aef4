"""Vol surface interpolation, rate curves and shocked copies of a market.

The interpolation rules are ours (DESIGN.md: linear in total variance across expiries at equal
strike, linear in strike within an expiry, flat beyond the ends); the expected values below are
worked by hand from those rules.
"""

from __future__ import annotations

import numpy as np
import pytest
from books import T0, make_market

from blotter.market import VOL_FLOOR, RateCurve, VolSurface

SURF = VolSurface(
    expiries=np.array(["2026-12-18"] * 3 + ["2027-03-19"] * 3, dtype="datetime64[D]"),
    strikes=np.array([90.0, 100.0, 110.0, 90.0, 100.0, 110.0]),
    vols=np.array([0.30, 0.25, 0.22, 0.28, 0.24, 0.23]),
)


def _vols(expiry: str, strikes: list[float]) -> np.ndarray:
    m = make_market(surfaces={"STK": SURF})
    exp = np.array([f"{expiry}T21:00:00"] * len(strikes), dtype="datetime64[s]")
    return m.vols_for("STK", exp, np.array(strikes), T0, expiry_dates=exp.astype("datetime64[D]"))


def test_on_a_slice_date_the_slice_is_used_exactly_linear_in_strike() -> None:
    assert _vols("2026-12-18", [90, 95, 100, 107.5]) == pytest.approx([0.30, 0.275, 0.25, 0.2275])


def test_flat_beyond_the_end_strikes() -> None:
    assert _vols("2026-12-18", [50, 200]) == pytest.approx([0.30, 0.22])


def test_between_expiries_total_variance_is_linear_at_equal_strike() -> None:
    # Option 2027-01-29 21:00 UTC; T0 = 2026-12-04 20:00 UTC. Slices at the same time of day.
    t = (np.datetime64("2027-01-29T21:00:00") - T0).astype(float) / (365 * 86400)
    t1 = t - 42 / 365  # 2026-12-18 is 42 days earlier
    t2 = t + 49 / 365  # 2027-03-19 is 49 days later
    w1, w2 = 0.25**2 * t1, 0.24**2 * t2
    w = w1 + (w2 - w1) * (t - t1) / (t2 - t1)
    assert _vols("2027-01-29", [100])[0] == pytest.approx(np.sqrt(w / t), rel=1e-12)


def test_flat_in_vol_before_the_first_and_after_the_last_expiry() -> None:
    assert _vols("2026-12-11", [100])[0] == pytest.approx(0.25)
    assert _vols("2028-01-21", [90])[0] == pytest.approx(0.28)


def test_expired_slices_are_ignored() -> None:
    m = make_market(surfaces={"STK": SURF})
    later = np.datetime64("2027-01-04T20:00:00", "s")  # after the December slice
    exp = np.array(["2027-02-19T21:00:00"], dtype="datetime64[s]")
    dates = exp.astype("datetime64[D]")
    assert m.vols_for("STK", exp, np.array([110.0]), later, expiry_dates=dates)[0] == pytest.approx(
        0.23
    )


def test_atm_only_slice_is_flat_across_strikes() -> None:
    s = VolSurface(
        np.array(["2027-01-15"], dtype="datetime64[D]"), np.array([np.nan]), np.array([0.19])
    )
    m = make_market(surfaces={"STK": s})
    exp = np.array(["2027-01-15T21:00:00"] * 2, dtype="datetime64[s]")
    dates = exp.astype("datetime64[D]")
    assert m.vols_for(
        "STK", exp, np.array([50.0, 500.0]), T0, expiry_dates=dates
    ) == pytest.approx([0.19, 0.19])


def test_missing_surface_is_named() -> None:
    with pytest.raises(KeyError, match="NOPE"):
        day = np.array([T0], "datetime64[D]")
        make_market().vols_for("NOPE", np.array([T0]), np.array([1.0]), T0, expiry_dates=day)


def test_rate_curve_linear_in_tenor_and_flat_beyond() -> None:
    c = RateCurve(np.array([30.0, 365.0]), np.array([0.02, 0.04]))
    assert c.rate_at(np.array([0.0, 30 / 365, 197.5 / 365, 1.0, 5.0])) == pytest.approx(
        [0.02, 0.02, 0.03, 0.04, 0.04]
    )
    assert c.shifted(25).rate_at(1.0) == pytest.approx(0.0425)
    assert c.rate_at(1.0) == pytest.approx(0.04)


def test_shocked_market_is_a_new_object_and_the_old_one_is_unchanged() -> None:
    m = make_market(surfaces={"STK": SURF})
    s = m.shocked(spot_pct={"STK": -10.0}, vol_pts=2.0, rate_bp=25.0)
    assert s.version == m.version + 1
    assert s.spots["STK"] == pytest.approx(108.0) and m.spots["STK"] == 120.0
    assert s.surfaces["STK"].vols == pytest.approx(SURF.vols + 0.02)
    assert m.surfaces["STK"].vols == pytest.approx(SURF.vols)
    assert s.curves["USD"].rate_at(1.0) == pytest.approx(0.0325)
    assert not m.surfaces["STK"].vols.flags.writeable
    rel = m.shocked(vol_rel_pct=-10.0)
    assert rel.surfaces["STK"].vols == pytest.approx(SURF.vols * 0.9)
    assert m.shocked(vol_pts=-50).surfaces["STK"].vols.min() == VOL_FLOOR
    with pytest.raises(ValueError, match="STK"):
        m.shocked(spot_abs={"STK": -200.0})


def test_an_atm_point_beside_strike_points_sits_at_the_atm_strike() -> None:
    """The ATM vol (NaN strike) of a slice with strike points is the point at ``atm_strike``;
    the rule is ours (README, "mark vol"), the values worked by hand from it."""
    s = VolSurface(
        np.array(["2027-01-15"] * 3, dtype="datetime64[D]"),
        np.array([90.0, np.nan, 110.0]),
        np.array([0.30, 0.20, 0.24]),
        atm_strike=105.0,
    )
    day = np.datetime64("2027-01-15", "D")
    assert s.slice_vols(day, np.array([90.0, 97.5, 105.0, 107.5, 200.0])) == pytest.approx(
        [0.30, 0.25, 0.20, 0.22, 0.24]
    )
    m = make_market(surfaces={"STK": s})
    assert m.shocked(spot_pct={"STK": -10.0}, vol_pts=1.0).surfaces["STK"].atm_strike == 105.0
    with pytest.raises(ValueError, match="ATM vol of 2027-01-15 has no spot"):
        VolSurface(s.expiries, s.strikes, s.vols).slice_vols(day, np.array([100.0]))
