"""The app on a book holding a USD and a EUR name: every total is per currency and the total across
both shows "—"; the numbers on screen are ``blotter.risk``'s and ``blotter.scenario``'s."""

from __future__ import annotations

from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from textual.widgets import DataTable

from blotter import risk, scenario, store
from blotter.ui.app import make_app
from blotter.ui.fmt import NOT_ADDITIVE
from blotter.ui.screens.explain import ExplainScreen
from blotter.ui.widgets.book_table import BookTable
from blotter.ui.widgets.grid_pane import GridPane
from blotter.ui.widgets.move_pane import MovePane

from .conftest import FROZEN_DAY, FROZEN_NOW, TEST_SETTINGS, frozen_clock, settle


def shown(cell: Any) -> float:
    return float(str(cell).strip().rstrip("!").replace(",", ""))


@pytest.fixture
def two_currencies(tmp_path: Path) -> Path:
    """AAA in USD and BBB in EUR, fully marked, an option on each and a BBB hedge, all entered
    before the 2026-11-30 close, which is committed."""
    clock = {"now": datetime(2026, 11, 30, 20, 30, tzinfo=UTC)}
    path = tmp_path / "fx.db"
    st = store.create_store(path, clock=lambda: clock["now"])
    try:
        for sym, ccy, spot, vol, rate in (
            ("AAA", "USD", 100.0, 0.25, 0.04),
            ("BBB", "EUR", 50.0, 0.30, 0.025),
        ):
            st.add_underlying(sym, "stock", ccy, 100.0, american=False)
            st.log_spot(sym, spot)
            st.log_vol(sym, "2027-06-17", vol)
            st.log_rate(ccy, 90, rate)
        when = datetime(2026, 11, 30, 20, 0, tzinfo=UTC)
        st.add_trade("desk", "AAA", 10, 9.0, "2027-06-17", 100.0, True, trade_time=when,
                     create_book=True)
        st.add_trade("desk", "BBB", -20, 4.0, "2027-06-17", 50.0, False, trade_time=when)
        st.add_trade("desk", "BBB", 500, 50.0, None, None, None, trade_time=when)
        clock["now"] = datetime(2026, 11, 30, 21, 0, tzinfo=UTC)  # the 16:00 New York close
        st.commit_close()
    finally:
        st.close()
    return path


def _valuation(path: Path) -> risk.BookValuation:
    st = store.open_store(path, read_only=True)
    try:
        book, market = st.load_book(), st.load_market()
    finally:
        st.close()
    return risk.value_book(book, market, np.datetime64(FROZEN_NOW.replace(tzinfo=None), "s"))


async def test_book_move_ladder_and_profile_total_each_currency(two_currencies: Path) -> None:
    v = _valuation(two_currencies)
    per_ccy = {r.currency: r for r in risk.currency_totals(v)}
    app = make_app(two_currencies, TEST_SETTINGS, clock=frozen_clock)
    async with app.run_test(size=(160, 48)) as pilot:
        await settle(app, pilot)
        assert "totals per currency: USD, EUR" in str(app.query_one("#header-line").render())
        table = app.query_one(BookTable)
        keys = [r.key for r in table.visible_rows()]
        assert keys[:4] == ["total", "c|USD", "c|EUR", "base"] and table.fixed_rows == 4
        assert str(table.get_cell("total", "delta_cash")).strip() == NOT_ADDITIVE
        assert str(table.get_cell("total", "value")).strip() == NOT_ADDITIVE
        # No EURUSD spot: the book in its base currency is "—", and the FX line says why.
        assert str(table.get_cell("base", "value")).strip() == NOT_ADDITIVE
        fx_line = str(app.query_one("#fx-delta").render())
        assert f"EUR {NOT_ADDITIVE}" in fx_line and "no spot mark for EURUSD" in fx_line
        for ccy in ("USD", "EUR"):
            assert shown(table.get_cell(f"c|{ccy}", "delta_cash")) == pytest.approx(
                per_ccy[ccy].delta_cash, abs=0.5
            )
        assert str(table.get_cell("u|BBB", "label")).endswith("BBB EUR")

        await pilot.press("f2", *"spot -3%")
        await settle(app, pilot)
        expected = scenario.apply_move(v, scenario.parse_move("spot -3%"))
        pane = app.query_one(MovePane)
        assert pane.row_keys[:3] == ["total", "c|USD", "c|EUR"]
        assert pane.cells[("total", "full")].strip() == NOT_ADDITIVE
        assert not pane.cells[("total", "error")].endswith("!")
        for row in expected.by_currency:
            assert shown(pane.cells[(f"c|{row.currency}", "full")]) == pytest.approx(
                row.full, abs=0.5
            )

        ladder = app.query_one(GridPane)
        grids = scenario.ladders(
            v, TEST_SETTINGS.ladder_spot_pcts, TEST_SETTINGS.ladder_vol_pts
        )
        assert [g.currency for g in ladder.ladders] == ["USD", "EUR"]
        for got, want in zip(ladder.ladders, grids, strict=True):
            np.testing.assert_allclose(got.full, want.full)
        assert "per currency" in str(ladder.border_title)

        profile = app.query_one("#reval-pane").profile  # type: ignore[attr-defined]
        assert set(profile.series) == {
            f"{FROZEN_DAY} {kind} {ccy}" for kind in ("full", "estimate") for ccy in ("USD", "EUR")
        }
        usd = v.take(np.flatnonzero(v.position_currencies == "USD"))
        np.testing.assert_allclose(
            profile.series[f"{FROZEN_DAY} full USD"],
            scenario.ladder(usd, list(profile.xs), (0.0,)).full[:, 0],
        )


async def _explain(app: Any, pilot: Any) -> tuple[ExplainScreen, Any, list[str], list[str]]:
    """The Explain screen opened with its result in: the screen, its table, headers, row labels."""
    await settle(app, pilot)
    await pilot.press("l")
    await settle(app, pilot)
    screen = app.screen
    assert isinstance(screen, ExplainScreen) and screen.result is not None
    table = screen.query_one("#explain-table", DataTable)
    heads = [str(c.label) for c in table.columns.values()]
    labels = [str(table.get_row_at(i)[0]) for i in range(table.row_count)]
    return screen, table, heads, labels


async def test_explain_screen_totals_each_currency(two_currencies: Path) -> None:
    app = make_app(two_currencies, TEST_SETTINGS, clock=frozen_clock)
    async with app.run_test(size=(120, 30)) as pilot:
        screen, table, heads, labels = await _explain(app, pilot)
        assert heads[1:5] == ["total", "Σ in USD", "Σ USD", "Σ EUR"]
        assert {str(c).strip() for c in table.get_row_at(0)[1:2]} == {NOT_ADDITIVE}
        totals = {r.currency: r for r in screen.result.by_currency}
        row = table.get_row_at(labels.index("= held P&L"))
        assert shown(row[3]) == pytest.approx(totals["USD"].actual, abs=0.5)
        assert shown(row[4]) == pytest.approx(totals["EUR"].actual, abs=0.5)
        # No EURUSD spot: the book in USD is "—", and the message names the missing mark.
        assert str(table.get_row_at(labels.index("FX translation"))[2]).strip() == NOT_ADDITIVE
        assert "EURUSD" in str(screen.query_one(".desk-message").render())


async def test_explain_screen_splits_out_the_fx_translation(two_currencies: Path) -> None:
    """With EURUSD marked after the close and moved since, the Explain screen's "Σ in USD"
    column is ``scenario.explain_in_base``: each currency at the start's FX spot, the FX
    translation, and their sum."""
    st = store.open_store(two_currencies, clock=lambda: datetime(2026, 11, 30, 22, 0, tzinfo=UTC))
    try:
        st.add_underlying("EURUSD", "fx", "USD", 100_000.0)
        st.log_spot("EURUSD", 1.2)
        closes = [m for m in st.mark_sets() if m.kind == "close"]
        st.commit_close(corrects=closes[-1].id)  # the day's close, corrected to hold the FX spot
    finally:
        st.close()
    st = store.open_store(two_currencies, clock=lambda: datetime(2026, 11, 30, 23, 0, tzinfo=UTC))
    try:
        st.log_spot("EURUSD", 1.25)
        st.log_spot("BBB", 52.0)
        at = np.datetime64(FROZEN_NOW.astimezone(UTC).replace(tzinfo=None), "s")
        want = scenario.explain_in_base(scenario.explain(st, None, "now", at=at), "USD")
    finally:
        st.close()
    assert want.translation != 0.0 and not want.missing
    app = make_app(two_currencies, TEST_SETTINGS, clock=frozen_clock)
    async with app.run_test(size=(160, 40)) as pilot:
        screen, table, heads, labels = await _explain(app, pilot)
        assert screen.in_base is not None and heads[2] == "Σ in USD"

        def cell(label: str) -> float:
            return shown(table.get_row_at(labels.index(label))[2])

        assert cell("FX translation") == pytest.approx(want.translation, abs=0.5)
        assert cell("= P&L in USD") == pytest.approx(want.pnl, abs=0.5)
        assert cell("= held P&L") == pytest.approx(want.at_start_rates.actual, abs=0.5)


async def test_the_book_pane_shows_the_base_total_and_fx_delta(two_currencies: Path) -> None:
    """With EURUSD marked, the "all in USD" row is ``risk.base_total`` and the line under the
    Book pane ``risk.fx_delta``, both at the marked spot."""
    st = store.open_store(two_currencies)
    try:
        st.add_underlying("EURUSD", "fx", "USD", 100_000.0)
        st.log_spot("EURUSD", 1.2)
    finally:
        st.close()
    v = _valuation(two_currencies)
    fx = risk.valuation_fx_rates(v, "USD")
    base = risk.base_total(v, fx)
    delta = risk.fx_delta(v, fx)
    assert fx.rates == {"USD": 1.0, "EUR": 1.2}
    per_ccy = {r.currency: r for r in risk.currency_totals(v)}
    assert base.value == pytest.approx(per_ccy["USD"].value + 1.2 * per_ccy["EUR"].value)
    app = make_app(two_currencies, TEST_SETTINGS, clock=frozen_clock)
    async with app.run_test(size=(160, 48)) as pilot:
        await settle(app, pilot)
        table = app.query_one(BookTable)
        assert str(table.get_cell("base", "label")).strip() == "Σ all in USD"
        for col in ("value", "delta_cash", "vega_pt", "theta_day"):
            assert shown(table.get_cell("base", col)) == pytest.approx(getattr(base, col), abs=0.5)
        assert str(table.get_cell("base", "delta_shares")).strip() == NOT_ADDITIVE
        fx_line = str(app.query_one("#fx-delta").render())
        assert fx_line == f"FX delta, USD per +1% against USD: EUR {delta.by_currency['EUR']:+,.0f}"
