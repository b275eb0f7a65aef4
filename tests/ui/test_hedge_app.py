"""The Book pane's delta hedge: the line under the pane follows the cursor's row, and the hedge
key stages it as a trial trade that brings the row's delta within half a lot (the store is
untouched). The hedge's own numbers are checked in tests/desk/test_hedge.py."""

from __future__ import annotations

from pathlib import Path

import pytest
from textual.widgets import Static

from blotter import risk, store
from blotter.desk import hedge
from blotter.ui.app import make_app
from blotter.ui.widgets.book_table import BookTable

from .conftest import TEST_SETTINGS, frozen_clock, settle


def hedge_line(app: object) -> str:
    return str(app.query_one("#book-hedge", Static).render())  # type: ignore[attr-defined]


async def test_the_hedge_key_stages_the_cursor_rows_hedge_as_a_trial(demo_db: Path) -> None:
    with store.open_store(demo_db, read_only=True) as st:
        n_trades = len(st.trades())
    app = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(app, pilot)
        table = app.query_one(BookTable)
        assert table.cursor_row_key() == "total"
        assert hedge_line(app).startswith("hedge book β: sell ")
        table.move_cursor(row=table.get_row_index("u|DEMOA"))
        await settle(app, pilot)
        h = app.cursor_hedge()
        assert isinstance(h, hedge.Hedge) and h.target == "DEMOA" and h.quantity < 0
        assert hedge_line(app) == f"hedge: {h.short_words()} · d stages"
        assert f"sell {-h.quantity:,} DEMOA shares ({-h.lots} lots)" in hedge_line(app)

        await pilot.press("d")
        await settle(app, pilot)
        (trial,) = app.trials
        assert (trial.contract.symbol, trial.contract.option_type) == ("DEMOA", "U")
        assert (trial.quantity, trial.price, trial.book) == (h.quantity, h.spot, "equity-vol")
        state = app.state
        assert state is not None and int(state.valuation.book.is_trial.sum()) == 1
        # The Book pane shows the trial: a total with trials, and DEMOA's delta within half a lot.
        rows = {r.key: r for r in table.visible_rows()}
        assert rows["total"].label == "total + trials" and "total-live" in rows
        demoa = next(r for r in risk.aggregate(state.valuation) if r.underlying == "DEMOA")
        assert abs(demoa.delta_shares) <= 50.0
        assert demoa.delta_shares == pytest.approx(h.residual_units, abs=1e-9)
        assert "none, within half a lot" in hedge_line(app) and "d stages" not in hedge_line(app)
        await pilot.press("d")  # nothing left to stage: said, nothing added
        await settle(app, pilot)
        assert len(app.trials) == 1

        table.move_cursor(row=table.get_row_index("total"))
        await settle(app, pilot)
        await pilot.press("ctrl+d")  # the alias stages the book's hedge in its reference index
        await settle(app, pilot)
        assert [t.contract.symbol for t in app.trials] == ["DEMOA", "DEMOIX"]
        state = app.state
        assert state is not None
        beta_units = risk.beta_delta_index_units(state.valuation)
        assert beta_units is not None and abs(beta_units) <= 0.5
    with store.open_store(demo_db, read_only=True) as st:
        assert len(st.trades()) == n_trades  # trials only: nothing written


async def test_a_row_with_no_single_hedge_says_why(demo_db: Path) -> None:
    app = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(app, pilot)
        await pilot.press("g")  # by expiry bucket: a bucket spans several underlyings
        await settle(app, pilot)
        table = app.query_one(BookTable)
        table.move_cursor(row=1)
        await settle(app, pilot)
        assert "spans several underlyings" in hedge_line(app)
        await pilot.press("d")
        await settle(app, pilot)
        assert app.trials == []


async def test_a_failed_load_does_not_leave_staging_blocked(demo_db: Path) -> None:
    """A hedge is staged once per load; when the load after it fails, the next key stages."""
    from blotter.ui.messages import LoadFailed

    app = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(app, pilot)
        app._hedge_staging = True  # a staged hedge whose reload has not arrived
        await pilot.press("d")
        await settle(app, pilot)
        assert app.trials == []  # refused while one is being staged
        app.post_message(LoadFailed("the file went away"))
        await settle(app, pilot)
        await pilot.press("d")
        await settle(app, pilot)
        assert [t.contract.symbol for t in app.trials] == ["DEMOIX"]


async def test_the_underlyings_are_read_again_only_when_the_book_has_others(
    demo_db: Path,
) -> None:
    """A commit of marks reloads the book but keeps the underlyings read for the hedge; a new
    underlying held in the book has them read again."""
    app = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(app, pilot)
        first = app.hedge_refs
        assert first is not None and first.refs is not None
        with store.open_store(demo_db) as st:
            st.log_spot("DEMOA", 181.0)
        app.load_book()
        await settle(app, pilot)
        assert app.hedge_refs is first
        with store.open_store(demo_db) as st:
            st.add_underlying("NEWCO", "stock", "USD", 100.0)
            st.log_spot("NEWCO", 10.0)
            st.add_trade("equity-vol", "NEWCO", 100, 10.0)
        app.load_book()
        await settle(app, pilot)
        again = app.hedge_refs
        assert again is not first and again is not None and again.refs is not None
        assert "NEWCO" in again.refs.underlyings


async def test_a_hedge_staged_with_one_book_in_view_goes_to_that_book(demo_db: Path) -> None:
    """DEMOIX's newest trade is in index-vol; with equity-vol in view its hedge is equity-vol's."""
    app = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(app, pilot)
        while app.book_in_view != "equity-vol":
            await pilot.press("n")
            await settle(app, pilot)
        h = app.cursor_hedge()
        assert isinstance(h, hedge.Hedge) and h.instrument.symbol == "DEMOIX" and h.quantity
        await pilot.press("d")
        await settle(app, pilot)
        assert [(t.contract.symbol, t.book) for t in app.trials] == [("DEMOIX", "equity-vol")]
