"""Delta hedges: the quantity, traded, leaves the book's delta at zero on a full revaluation.

The delta after the hedge is measured by a central spot bump through the what-if layer
(``scenario.apply_move``, every option repriced), never by the analytic delta the hedge was
worked out from; with a lot of 1 unit it must be within half a unit of zero. For the invented
XYZ book the delta hedged is also QuantLib's (AnalyticEuropeanEngine) delta of the positions.
"""

from __future__ import annotations

from datetime import UTC, datetime
from pathlib import Path
from typing import Any
from zoneinfo import ZoneInfo

import numpy as np
import pytest

from blotter import scenario, store
from blotter.desk import hedge, session
from blotter.desk.trials import Trials

from .conftest import NOW, SPOT, quantlib_delta

NEW_YORK = ZoneInfo("America/New_York")
DEMO_MARKS = datetime(2026, 11, 30, 21, 30, tzinfo=UTC)
"""When the demo book's marks were taken: the demo is valued there."""

BUMP_PCT = 0.01
"""The central spot bump, % of spot: small enough that gamma's share of a one-sided bump
cancels and the third-order rest is far below a share."""

TOL_UNITS = 0.05
"""What the bumped delta may differ from the analytic one by (units), besides the rounding."""


def bumped_delta(valuation: object, symbol: str | None = None, beta: bool = False) -> float:
    """Delta by full revaluation: (P(S up) − P(S down)) / (2 × bump), in units of ``symbol``;
    with ``beta`` every spot moves β × the bump and the result is in reference-index units."""
    where = f"{symbol} " if symbol else ""
    tail = " beta" if beta else ""
    up = scenario.apply_move(valuation, scenario.parse_move(f"{where}spot +{BUMP_PCT}%{tail}"))  # type: ignore[arg-type]
    down = scenario.apply_move(valuation, scenario.parse_move(f"{where}spot -{BUMP_PCT}%{tail}"))  # type: ignore[arg-type]
    v = valuation
    if beta:
        s = v.index_spot()  # type: ignore[attr-defined]
    else:
        s = float(v.market.spots[symbol])  # type: ignore[attr-defined]
    return (up.total.full - down.total.full) / (2 * BUMP_PCT / 100 * s)


def read(path: Path) -> tuple[session.Loaded, hedge.Refs]:
    with store.open_store(path, read_only=True) as st:
        return session.read(st), hedge.read_refs(st)


def valued(path: Path, at: datetime = NOW) -> tuple[session.Loaded, hedge.Refs, Any]:
    """The book of ``path`` read and valued at ``at``, and its hedge references."""
    loaded, refs = read(path)
    return loaded, refs, session.value(loaded, at, NEW_YORK).valuation


def staged(loaded: session.Loaded, refs: hedge.Refs, h: hedge.Hedge, at: datetime) -> object:
    """The valuation with ``h`` layered on as a trial."""
    trials = Trials()
    contract, qty, price = hedge.stage(h, refs, trials.all())
    trials.add(contract, qty, price, "desk")
    return session.value(loaded, at, NEW_YORK, trials=trials.all()).valuation


def test_the_xyz_hedge_is_quantlibs_delta_rounded_to_whole_lots(xyz_db: Path) -> None:
    """+10 calls at 105 and -5 puts at 95, 100 shares each: the delta to hedge is QuantLib's,
    and the trade is its negative rounded to 100-share lots (a US round lot, common practice)."""
    loaded, refs, v = valued(xyz_db)
    ql = 100 * (10 * quantlib_delta(True, 105.0) - 5 * quantlib_delta(False, 95.0))
    h = hedge.underlying_hedge(v, "XYZ", refs.underlyings)
    assert h.delta_units == pytest.approx(ql, rel=1e-7)
    assert h.instrument.lot_units == 100.0 and h.instrument.units_per_contract == 1.0
    assert h.quantity == -100 * round(ql / 100) and h.lots == -round(ql / 100)
    assert h.residual_units == pytest.approx(ql + h.quantity)
    assert abs(h.residual_units) <= 50.0
    assert h.residual_cash == pytest.approx(h.residual_units * SPOT)
    one = hedge.underlying_hedge(v, "XYZ", refs.underlyings, lot_units=1.0)
    assert one.quantity == -round(ql) and abs(one.residual_units) <= 0.5


def test_the_xyz_hedge_as_a_trial_zeroes_the_full_revaluation_delta(xyz_db: Path) -> None:
    loaded, refs, v = valued(xyz_db)
    before = bumped_delta(v, "XYZ")
    assert before == pytest.approx(float(np.sum(v.delta_shares)), abs=TOL_UNITS)
    assert abs(before) > 100  # the book has a delta to hedge
    h = hedge.underlying_hedge(v, "XYZ", refs.underlyings, lot_units=1.0)
    after = bumped_delta(staged(loaded, refs, h, NOW), "XYZ")
    assert abs(after) <= 0.5 + TOL_UNITS
    assert after == pytest.approx(h.residual_units, abs=TOL_UNITS)


def test_the_xyz_hedge_booked_as_a_trade_zeroes_the_full_revaluation_delta(
    xyz_db: Path,
) -> None:
    loaded, refs, v = valued(xyz_db)
    h = hedge.underlying_hedge(v, "XYZ", refs.underlyings, lot_units=1.0)
    with store.open_store(xyz_db) as st:
        st.add_trade("desk", "XYZ", h.quantity, h.spot)
    _, _, booked = valued(xyz_db)
    after = bumped_delta(booked, "XYZ")
    assert abs(after) <= 0.5 + TOL_UNITS
    # Hedged, the hedge of what is left is nothing.
    again = hedge.underlying_hedge(booked, "XYZ", refs.underlyings, lot_units=1.0)
    assert again.quantity == 0 and again.side == "none"
    with pytest.raises(hedge.HedgeRefused, match="nothing to stage"):
        hedge.stage(again, refs, [])


@pytest.mark.parametrize("symbol", ["DEMOA", "DEMOB", "DEMOC", "DEMOIX"])
def test_a_demo_hedge_with_a_lot_of_one_unit_zeroes_the_full_revaluation_delta(
    demo_db: Path, symbol: str
) -> None:
    """The demo's American stock options (and its European index) hedged in units."""
    loaded, refs, v = valued(demo_db, DEMO_MARKS)
    h = hedge.underlying_hedge(v, symbol, refs.underlyings, lot_units=1.0)
    assert abs(h.quantity) > 10
    after = bumped_delta(staged(loaded, refs, h, DEMO_MARKS), symbol)
    assert abs(after) <= 0.5 + TOL_UNITS
    assert after == pytest.approx(h.residual_units, abs=TOL_UNITS)


def test_a_futures_hedge_trades_whole_contracts(demo_db: Path) -> None:
    """A future's lot is one contract (its multiplier in units, common practice); the delta
    after is within half a contract, and a lot of 1 unit is refused as no whole contract."""
    loaded, refs, v = valued(demo_db, DEMO_MARKS)
    h = hedge.underlying_hedge(v, "DEMOFU", refs.underlyings)
    mult = float(refs.underlyings["DEMOFU"]["multiplier"])
    assert h.instrument.lot_units == mult and h.instrument.contracts_per_lot == 1
    assert h.units == h.quantity * mult
    after = bumped_delta(staged(loaded, refs, h, DEMO_MARKS), "DEMOFU")
    assert abs(after) <= mult / 2 + TOL_UNITS
    assert after == pytest.approx(h.residual_units, abs=TOL_UNITS)
    with pytest.raises(hedge.HedgeRefused, match="not a whole number of DEMOFU contracts"):
        hedge.underlying_hedge(v, "DEMOFU", refs.underlyings, lot_units=1.0)


def test_the_book_hedge_zeroes_the_beta_weighted_delta(demo_db: Path) -> None:
    """Every spot moved β × the bump: the book's change per index unit is its beta-weighted
    delta; after a trade in the reference index it is within half a unit of zero."""
    loaded, refs, v = valued(demo_db, DEMO_MARKS)
    before = bumped_delta(v, beta=True)
    h = hedge.book_hedge(v, refs.underlyings, lot_units=1.0)
    assert h.instrument.symbol == "DEMOIX" and h.beta_weighted
    assert before == pytest.approx(h.delta_units, abs=TOL_UNITS)
    assert abs(before) > 10
    after = bumped_delta(staged(loaded, refs, h, DEMO_MARKS), beta=True)
    assert abs(after) <= 0.5 * h.instrument_beta + TOL_UNITS
    assert after == pytest.approx(h.residual_units, abs=TOL_UNITS)


def test_every_hedge_lists_each_underlying_then_the_book(demo_db: Path) -> None:
    loaded, refs, v = valued(demo_db, DEMO_MARKS)
    rows = hedge.every_hedge(v, refs.underlyings, lot_units=1.0)
    assert [r.target for r in rows] == ["DEMOIX", "DEMOA", "DEMOB", "DEMOC", "DEMOFU", "book"]
    assert isinstance(rows[4], hedge.Refusal) and "whole number" in rows[4].words
    assert all(isinstance(r, hedge.Hedge) for i, r in enumerate(rows) if i != 4)


# -- refusals in words --------------------------------------------------------------------------
def test_a_book_without_a_reference_index_has_no_book_hedge(xyz_db: Path) -> None:
    loaded, refs, v = valued(xyz_db)
    with pytest.raises(hedge.HedgeRefused, match="no reference index"):
        hedge.book_hedge(v, refs.underlyings)


def test_an_unmarked_reference_index_is_refused(xyz_db: Path) -> None:
    with store.open_store(xyz_db) as st:
        st.add_underlying("XIX", "index", "USD", 100.0, is_reference=True)
    loaded, refs, v = valued(xyz_db)
    with pytest.raises(hedge.HedgeRefused, match="XIX has no spot mark.*mark spot XIX"):
        hedge.book_hedge(v, refs.underlyings)


def test_positions_in_another_currency_than_the_index_are_refused(xyz_db: Path) -> None:
    with store.open_store(xyz_db) as st:
        st.add_underlying("XIX", "index", "USD", 100.0, is_reference=True)
        st.log_spot("XIX", 5000.0)
        st.add_underlying("EUS", "stock", "EUR", 100.0)
        st.log_spot("EUS", 50.0)
        st.add_trade("desk", "EUS", 100, 50.0)
    loaded, refs, v = valued(xyz_db)
    with pytest.raises(hedge.HedgeRefused, match="positions in EUR are not in .* currency USD"):
        hedge.book_hedge(v, refs.underlyings)
    # Each underlying is still hedged in its own currency.
    eus = hedge.underlying_hedge(v, "EUS", refs.underlyings, lot_units=1.0)
    assert (eus.quantity, eus.currency) == (-100, "EUR")


def test_unvalued_positions_are_refused_and_a_bad_lot_too(xyz_db: Path) -> None:
    with store.open_store(xyz_db) as st:
        st.add_underlying("NOV", "stock", "USD", 100.0)
        st.add_trade("desk", "NOV", 100, 10.0)
    loaded, refs, v = valued(xyz_db)
    with pytest.raises(hedge.HedgeRefused, match="1 position.* of NOV not valued"):
        hedge.underlying_hedge(v, "NOV", refs.underlyings)
    rows = hedge.every_hedge(v, refs.underlyings)
    assert [r.target for r in rows] == ["XYZ", "NOV", "book"]
    assert isinstance(rows[0], hedge.Hedge) and isinstance(rows[1], hedge.Refusal)
    for lot in (0.0, -5.0, float("nan")):
        with pytest.raises(hedge.HedgeRefused, match="positive number of units"):
            hedge.underlying_hedge(v, "XYZ", refs.underlyings, lot_units=lot)
    with pytest.raises(hedge.HedgeRefused, match="ABC is not an underlying"):
        hedge.underlying_hedge(v, "ABC", refs.underlyings)


def test_a_staged_hedge_goes_to_the_only_book_else_the_newest_trade_in_the_instrument(
    xyz_db: Path, demo_db: Path
) -> None:
    with store.open_store(xyz_db) as st:
        assert hedge.stage_book(st, "XYZ") == "desk"
    with store.open_store(demo_db) as st:
        assert hedge.stage_book(st, "DEMOA") == "equity-vol"
        assert hedge.stage_book(st, "DEMOIX") == "index-vol"
        st.add_trade("equity-vol", "DEMOIX", 1, 4700.0)
        assert hedge.stage_book(st, "DEMOIX") == "equity-vol"
