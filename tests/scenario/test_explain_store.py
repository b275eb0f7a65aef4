"""P&L explain on a real store, with a cancel, an amend and a new trade inside the period.

The held positions are the trades dealt by the start close as the store knows them at the end:
a trade cancelled in the period is not held, an amended one is held as amended (its replacement
keeps the original deal time, so it is not a new trade), and a trade dealt in the period is a new
trade. Sources: QuantLib 1.44 values every option at both closes (actual, new-trade and
correction P&L); held + new = the end book is bookkeeping (common practice).
"""

from __future__ import annotations

from datetime import UTC, datetime
from inspect import signature
from pathlib import Path

import numpy as np
import pytest
from books import ql_price

from blotter.scenario import explain
from blotter.store import create_store

T0 = datetime(2026, 11, 23, 21, 0, tzinfo=UTC)  # Monday close, 16:00 New York
T1 = datetime(2026, 11, 24, 21, 0, tzinfo=UTC)  # Tuesday close
EXPIRY = "2027-01-15"  # cut-off 16:00 New York = 21:00 UTC: 53 days after T0, 52 after T1
RATE, DIV = 0.04, 0.02
S0, S1, V0, V1 = 100.0, 103.0, 0.30, 0.32


def _price(call: bool, strike: float, spot: float, days: int, vol: float) -> float:
    return ql_price(call, spot, strike, days, RATE, DIV, vol)


@pytest.fixture
def period_store(tmp_path: Path) -> tuple[object, dict[str, int]]:
    clock = {"now": T0.replace(hour=15)}
    st = create_store(tmp_path / "book.sqlite", clock=lambda: clock["now"])
    st.add_underlying("STKX", "stock", "USD", 100.0, american=False, div_yield=DIV)
    for tenor in (1, 3650):
        st.log_rate("USD", tenor, RATE)
    st.log_spot("STKX", S0)
    st.log_vol("STKX", EXPIRY, V0)
    # The first trade starts the book (explicitly where the store asks for it).
    first = {"create_book": True} if "create_book" in signature(st.add_trade).parameters else {}
    ids = {
        "long": st.add_trade("main", "STKX", 10, 5.0, EXPIRY, 100.0, True, **first),
        "cancelled": st.add_trade("main", "STKX", 5, 3.0, EXPIRY, 95.0, False),
        "amended": st.add_trade("main", "STKX", -3, 1.0, EXPIRY, 110.0, True),
    }
    clock["now"] = T0
    st.commit_close(marked_at=T0)
    clock["now"] = datetime(2026, 11, 24, 15, 0, tzinfo=UTC)
    st.cancel_trade(ids["cancelled"], "booked in error")
    ids["replacement"] = st.amend_trade(ids["amended"], reason="four, not three", quantity=-4)
    ids["new"] = st.add_trade(
        "main",
        "STKX",
        2,
        4.0,
        EXPIRY,
        105.0,
        True,
        trade_time=datetime(2026, 11, 24, 14, 0, tzinfo=UTC),
    )
    gone = st.add_trade("main", "STKX", 7, 2.0, EXPIRY, 90.0, False)
    st.cancel_trade(gone, "dealt and cancelled inside the period")
    st.log_spot("STKX", S1)
    st.log_vol("STKX", EXPIRY, V1)
    clock["now"] = T1
    st.commit_close(marked_at=T1)
    return st, ids


def test_held_and_new_add_to_the_end_book(period_store: tuple[object, dict[str, int]]) -> None:
    st, ids = period_store
    ex = explain(st)
    held = {
        int(c): float(q)
        for c, q in zip(ex.start.book.contract_ids, ex.start.book.quantities, strict=True)
    }
    end = st.load_book(as_of=T1)
    new = {}
    for t in st.trades(live_only=True):
        if t.trade_time > T0:
            new[t.contract_id] = new.get(t.contract_id, 0.0) + t.quantity
    combined = dict(held)
    for c, q in new.items():
        combined[c] = combined.get(c, 0.0) + q
    combined = {c: q for c, q in combined.items() if q}
    assert combined == {
        int(c): float(q) for c, q in zip(end.contract_ids, end.quantities, strict=True)
    }
    by_trade = {t.trade_id: t for t in st.trades()}
    c_long, c_amend = by_trade[ids["long"]].contract_id, by_trade[ids["amended"]].contract_id
    assert held == {c_long: 10.0, c_amend: -4.0}  # the cancelled put is not held
    assert set(ex.late_trades) == {ids["replacement"]}
    assert set(ex.corrected_trades) == {ids["cancelled"], ids["amended"]}


def test_actual_new_and_corrections_match_quantlib(
    period_store: tuple[object, dict[str, int]],
) -> None:
    st, _ = period_store
    ex = explain(st)
    c100 = _price(True, 100, S1, 52, V1) - _price(True, 100, S0, 53, V0)
    c110 = _price(True, 110, S1, 52, V1) - _price(True, 110, S0, 53, V0)
    p95 = _price(False, 95, S1, 52, V1) - _price(False, 95, S0, 53, V0)
    actual = 100 * (10 * c100 - 4 * c110)
    assert ex.total.actual == pytest.approx(actual, rel=1e-9)
    # The new 105 call: its end mark against its trade price of 4.00. The amend (three 110
    # calls sold at 1.00 cancelled, four booked late at 1.00) and the cancelled 95 puts (five
    # at 3.00): their P&L from the trade price to the start marks, the cancelled ones' taken back.
    v110, v95 = _price(True, 110, S0, 53, V0), _price(False, 95, S0, 53, V0)
    activity = -4 * (v110 - 1.0) - (-3) * (v110 - 1.0) - 5 * (v95 - 3.0)
    assert ex.total.new_trades == pytest.approx(
        2 * 100 * (_price(True, 105, S1, 52, V1) - 4.0) + 100 * activity, rel=1e-9
    )
    # Against the book shown at the start: one more 110 call short, the 95 put gone.
    assert ex.total.corrections == pytest.approx(100 * (-1 * c110 - 5 * p95), rel=1e-9)
    assert ex.total.total == pytest.approx(ex.total.actual + ex.total.new_trades)
    assert any("cancelled or amended" in n for n in ex.notes)
    (row,) = ex.by_underlying
    assert row.underlying == "STKX" and row.corrections == pytest.approx(ex.total.corrections)
    assert np.isfinite(ex.total.unexplained)


def test_cli_shows_corrections_on_their_own_line(
    period_store: tuple[object, dict[str, int]],
) -> None:
    """``blotter explain`` prints the late bookings and corrections line, with the trade ids, and
    its JSON carries ``corrections`` per row; the numbers are the library's."""
    import json

    from click.testing import CliRunner

    from blotter.cli import main

    st, ids = period_store
    ex = explain(st)
    db = str(st.path)  # type: ignore[attr-defined]
    text = CliRunner().invoke(main, ["explain", "--db", db], catch_exceptions=False).stdout
    assert "late bookings and corrections (in actual)" in text
    assert f"late-booked trade ids: {ids['replacement']}" in text
    out = json.loads(
        CliRunner().invoke(main, ["explain", "--db", db, "--json"], catch_exceptions=False).stdout
    )
    assert out["total"]["corrections"] == pytest.approx(ex.total.corrections, rel=1e-12)
    assert sorted(out["corrected_trades"]) == sorted([ids["cancelled"], ids["amended"]])


def test_explain_values_a_zoned_expiry_at_the_vol_marked_for_its_date(tmp_path: Path) -> None:
    """A Sydney 10:00 cut-off is the evening before in UTC and in New York: the positions held
    over the period keep their expiry date, so both closes value the option at the vol marked
    for that date (30%, then 32%), and the vega term uses that 2-point change."""
    clock = {"now": T0.replace(hour=15)}
    st = create_store(tmp_path / "syd.sqlite", clock=lambda: clock["now"])
    st.add_underlying("SYDX", "stock", "USD", 100.0, american=False, time_zone="Australia/Sydney",
                      cutoff_time="10:00")
    st.log_rate("USD", 365, RATE)
    st.log_spot("SYDX", S0)
    for day, vol in (("2027-01-14", 0.25), ("2027-03-18", V0)):
        st.log_vol("SYDX", day, vol)
    first = {"create_book": True} if "create_book" in signature(st.add_trade).parameters else {}
    st.add_trade("main", "SYDX", 10, 5.0, "2027-03-18", 100.0, True, **first)
    clock["now"] = T0
    st.commit_close(marked_at=T0)
    clock["now"] = T1.replace(hour=15)
    st.log_vol("SYDX", "2027-03-18", V1)
    clock["now"] = T1
    st.commit_close(marked_at=T1)
    ex = explain(st)
    assert list(ex.start.vol) == [V0] and list(ex.end.vol) == [V1]
    vega = ex.start.greeks.vega[0] * ex.start.units[0]
    assert ex.total.terms["vega"] == pytest.approx(vega * (V1 - V0), rel=1e-12)
