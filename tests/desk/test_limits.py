"""Limits: a limit is breached exactly past the exposure or the ladder loss QuantLib gives for the
same book, the words say which, and the watch list names what expires by Sunday."""

from __future__ import annotations

from datetime import UTC, datetime
from pathlib import Path
from zoneinfo import ZoneInfo

import pytest

from blotter import risk, scenario, store
from blotter.config import Alerts
from blotter.desk import limits, session

from .conftest import NOW, SPOT, VOL, quantlib_delta, quantlib_european

NEW_YORK = ZoneInfo("America/New_York")

BOOK = ((10, True, 105.0), (-5, False, 95.0))
"""(contracts, call, strike) of the XYZ book; 100 units per contract."""


def valued(db: Path) -> risk.BookValuation:
    with store.open_store(db, read_only=True) as st:
        return session.value(session.read(st), NOW, NEW_YORK).valuation


def quantlib_delta_cash() -> float:
    return sum(q * 100 * quantlib_delta(c, k) * SPOT for q, c, k in BOOK)


def quantlib_pnl(spot_pct: float, vol_pts: float) -> float:
    """The book's change in value when spot moves ``spot_pct`` % and vol ``vol_pts`` points."""
    spot, vol = SPOT * (1 + spot_pct / 100), VOL + vol_pts / 100
    return sum(
        q * 100 * (quantlib_european(c, k, vol, spot) - quantlib_european(c, k)) for q, c, k in BOOK
    )


def test_a_delta_limit_is_breached_just_past_quantlibs_delta_cash(xyz_db: Path) -> None:
    v = valued(xyz_db)
    delta_cash = quantlib_delta_cash()
    below, above = abs(delta_cash) * (1 - 1e-6), abs(delta_cash) * (1 + 1e-6)
    total, xyz = risk.total(v), risk.aggregate(v, by="underlying")[0]
    assert limits.exposure_breach(Alerts(delta_cash=below), total) == f"|Δ $| over {below:,.0f}"
    assert limits.exposure_breach(Alerts(delta_cash=above), total) == ""
    assert limits.exposure_breach(Alerts(delta_cash=below), xyz) == ""  # a book limit
    both = Alerts(underlying_delta_cash=below, underlying_vega_pt=1.0)
    assert limits.exposure_breach(both, xyz) == f"|Δ $| over {below:,.0f}; |vega| over 1"
    assert limits.exposure_breach(both, xyz, {"XYZ": "worst grid cell -5"}).endswith(
        "; worst grid cell -5"
    )
    assert limits.breaches(v, Alerts(delta_cash=below, underlying_vega_pt=1.0)) == [
        f"book |Δ $| over {below:,.0f}",
        "XYZ |vega| over 1",
    ]
    assert limits.breaches(v, Alerts()) == []


def test_ladder_limits_hold_the_worst_cell_quantlib_gives(xyz_db: Path) -> None:
    """Spot ±10% and vol ±5 points: the worst of the nine cells, revalued in QuantLib, is the
    loss the ladder limits compare against, for the book and for XYZ alone."""
    v = valued(xyz_db)
    spots, vols = (-10.0, 0.0, 10.0), (-5.0, 0.0, 5.0)
    worst = min(quantlib_pnl(s, x) for s in spots for x in vols)
    assert worst < 0
    grids = scenario.ladders(v, spots, vols)
    loose = Alerts(ladder_loss=-worst * 1.001, underlying_ladder_loss=-worst * 1.001)
    assert limits.ladder_breaches(v, grids, loose, spots, vols) == limits.LadderBreaches()
    tight = Alerts(ladder_loss=-worst * 0.999, underlying_ladder_loss=-worst * 0.999)
    found = limits.ladder_breaches(v, grids, tight, spots, vols)
    assert found is not None
    shown = f"{worst:+,.0f}"
    assert found.book == f"book worst grid cell {shown} beyond −{-worst * 0.999:,.0f}"
    assert found.by_underlying == {
        "XYZ": f"worst grid cell {shown} beyond −{-worst * 0.999:,.0f}"
    }
    assert limits.breaches(v, tight, found) == [found.book, f"XYZ {found.by_underlying['XYZ']}"]
    stop = limits.ladder_breaches(v, grids, tight, spots, vols, cancelled=lambda: True)
    assert stop is None


def test_the_watch_list_names_what_expires_by_sunday(xyz_db: Path) -> None:
    """An option expiring Friday 2026-12-04 at the money is pin risk; the January ones are not."""
    with store.open_store(xyz_db) as st:
        st.add_trade("desk", "XYZ", 2, 1.0, "2026-12-04", 100.0, True)
    v = valued(xyz_db)
    week = limits.week_expiries(v, NOW, NEW_YORK)
    # Tuesday 16:00 New York to Monday 00:00: five days and eight hours.
    assert week.days == pytest.approx(5 + 8 / 24)
    assert [(e.label, e.pin_risk) for e in week.expiring] == [("XYZ 2026-12-04 100 C", True)]
    assert week.pin_risk == week.expiring
    sunday = datetime(2026, 12, 6, 12, 0, tzinfo=UTC)  # 07:00 Sunday in New York
    assert limits.days_to_week_end(sunday, NEW_YORK) == pytest.approx(17 / 24)
