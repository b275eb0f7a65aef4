"""No number is ever cut: a book of large positions (invented) at 80×24 and 200×50.

Columns size to their content; a whole-number column whose values pass ``fmt.CELL_CAP``
characters switches to a larger unit named in its header (k, m, bn), never dropping digits.
"""

from __future__ import annotations

from datetime import timedelta
from pathlib import Path
from typing import Any

import pytest

from blotter.store import create_store, open_store, use_clock
from blotter.ui import fmt
from blotter.ui.app import make_app

from .conftest import FROZEN_NOW, TEST_SETTINGS, frozen_clock, settle
from .test_snapshots import pytestmark as snapshot_mark


@pytest.fixture
def large_db(tmp_path: Path) -> Path:
    """Invented underlyings (a big index, a stock, an FX rate) with large positions."""
    path = tmp_path / "large.db"
    with use_clock(lambda: FROZEN_NOW - timedelta(hours=1)), create_store(path) as s:
        s.add_book("macro")
        s.add_book("single")
        s.add_underlying("BIGX", "index", "USD", 50, is_reference=True, american=False,
                         description="invented index")
        s.add_underlying("STKZ", "stock", "USD", 100, description="invented stock")
        s.add_underlying("EURQ", "fx", "USD", 125_000, description="invented FX rate")
        for sym, spot, vol in (("BIGX", 5123.25, 0.18), ("STKZ", 100.05, 0.35),
                               ("EURQ", 1.08537, 0.08)):
            s.log_spot(sym, spot)
            s.log_vol(sym, "2027-06-17", vol)
        s.log_rate("USD", 365, 0.04)
        s.add_trade("macro", "BIGX", -25_000, 310.5, "2027-06-17", 5100.0, True)
        s.add_trade("macro", "BIGX", 1_000, 5123.25)
        s.add_trade("single", "STKZ", 400_000, 8.15, "2027-06-17", 100.0, False)
        s.add_trade("single", "STKZ", -1_000, 100.05)
        s.add_trade("macro", "EURQ", -3_000, 0.0213, "2027-06-17", 1.1, True)
    return path


def _app(db: Path) -> Any:
    return make_app(db, TEST_SETTINGS, clock=frozen_clock)


async def _book_cells_whole(db: Path, size: tuple[int, int]) -> None:
    app = _app(db)
    async with app.run_test(size=size) as pilot:
        await settle(app, pilot)
        table = app.query_one("#book-table")
        for key in ("u|BIGX", "u|STKZ"):
            table.toggle(key)
        await settle(app, pilot)
        checked = 0
        for row in table.visible_rows():
            for col, cell in zip(table.columns.values(), table.get_row(row.key), strict=True):
                text = cell.plain if hasattr(cell, "plain") else str(cell)
                if col.key.value != "label":
                    assert len(text) <= col.width, (row.key, col.key.value, text, col.width)
                    checked += 1
        assert checked > 20
        headers = {c.key.value: c.label.plain for c in table.columns.values()}
        assert headers["value"].endswith(" k") or headers["value"].endswith(" m")


@pytest.mark.parametrize("size", [(80, 24), (200, 50)])
async def test_large_positions_are_never_cut(large_db: Path, size: tuple[int, int]) -> None:
    await _book_cells_whole(large_db, size)


def _steps(move: str | None = None) -> Any:
    async def run_before(pilot: Any) -> None:
        app = pilot.app
        await settle(app, pilot)
        await pilot.press("e")
        await settle(app, pilot)
        if move is not None:
            await pilot.press("f2", *move, "enter")
            await settle(app, pilot)

    return run_before


@snapshot_mark
def test_large_book_80x24(snap_compare: Any, large_db: Path) -> None:
    assert snap_compare(_app(large_db), terminal_size=(80, 24), run_before=_steps("spot -3%"))


@snapshot_mark
def test_large_book_200x50(snap_compare: Any, large_db: Path) -> None:
    assert snap_compare(_app(large_db), terminal_size=(200, 50), run_before=_steps("spot -3%"))


def test_whole_number_columns_scale_never_cut() -> None:
    """The rule: whole units until a value would pass the cap, then k, m, bn, each value rounded
    to whole units of the column's scale, never a digit dropped from the text."""
    assert fmt.column_scale([1_234.0, -12_345_678.0]) == ("", 1.0)  # 11 characters fit
    assert fmt.column_scale([-129_714_687.0]) == ("k", 1e3)
    assert fmt.whole(-129_714_687.0, 1e3) == "-129,715"
    assert fmt.column_scale([3e12]) == ("m", 1e6)  # +3,000,000 m
    assert fmt.column_scale([float("nan"), 5.0]) == ("", 1.0)
    assert fmt.whole(-0.4) == "0" and fmt.whole(float("nan")) == fmt.MISSING
    assert fmt.scaled_header("Δ $", "k") == "Δ $ k" and fmt.scaled_header("Δ $", "") == "Δ $"
    assert fmt.column_width("qty", ["-1,000", "+25,000"], 5) == 7


async def test_position_rows_and_pnl_day_are_the_desks(demo_db: Path) -> None:
    """Position rows show quantity, mark price (model value per unit), implied vol and days to
    expiry as the valuation holds them; P&L day is ``desk.pnl_today``'s per underlying."""
    import numpy as np

    from blotter.desk.pnl_today import pnl_today

    app = _app(demo_db)
    async with app.run_test(size=(200, 50)) as pilot:
        await settle(app, pilot)
        assert app.state is not None
        v = app.state.valuation
        table = app.query_one("#book-table")
        with open_store(demo_db, read_only=True) as s:
            today = pnl_today(s, np.datetime64(FROZEN_NOW.replace(tzinfo=None), "s"))
        for row in table.visible_rows():
            if row.level == 1:
                assert row.pnl_today == pytest.approx(today.of(row.label), rel=1e-9, abs=1e-9)
        assert table.visible_rows()[0].pnl_today == pytest.approx(today.total("USD"), rel=1e-9)
        first = next(r for r in table.visible_rows() if r.level == 1)
        table.toggle(first.key)
        day = next(r for r in table.source.children(first.key) if r.label != "hedges")
        table.toggle(day.key)
        await settle(app, pilot)
        positions = [r for r in table.visible_rows() if r.position is not None]
        assert positions
        for r in positions:
            i = r.position
            assert r.value("qty") == v.book.quantities[i]
            assert r.value("mark") == pytest.approx(float(v.greeks.price[i]), rel=1e-12)
            assert r.value("vol") == pytest.approx(float(v.vol[i]), rel=1e-12)
            assert r.value("days") == pytest.approx(float(v.years[i]) * 365, rel=1e-12)
            cells = [str(c) for c in table.get_row(r.key)]
            assert f"{100 * float(v.vol[i]):.2f}" in cells


@pytest.mark.parametrize("size", [(80, 24), (200, 50)])
async def test_move_grid_and_trades_keep_every_digit(large_db: Path, size: tuple[int, int]) -> None:
    """The Move pane's numbers are apart (a space before each), each whole in the grid's text;
    the Trades screen's quantities and prices are whole in their columns."""
    from textual.widgets import DataTable

    from blotter.ui.widgets.move_pane import MovePane

    app = _app(large_db)
    async with app.run_test(size=size) as pilot:
        await settle(app, pilot)
        await pilot.press("f2", *"spot -3%", "enter")
        await settle(app, pilot)
        pane = app.query_one(MovePane)
        grid = str(app.query_one("#move-grid").render())
        for (_key, column), cell in pane.cells.items():
            if column != "label":
                assert cell.startswith(" "), (column, cell)  # never run into the one before
                assert cell.strip() in grid
        assert "+167," in grid  # the full change of a 3% fall, whole
        await pilot.press("f3", "t")  # to the book (the bar has focus), then Trades
        await settle(app, pilot)
        table = app.screen.query_one("#trades-table", DataTable)
        quantities = {str(table.get_cell_at((r, 3))) for r in range(table.row_count)}
        prices = {str(table.get_cell_at((r, 4))) for r in range(table.row_count)}
        assert {"-25,000", "+400,000", "-1,000", "+1,000", "-3,000"} == quantities
        assert {"310.50", "5,123.25", "8.15", "100.05", "0.02130"} == prices
        widths = [c.width for c in table.columns.values()]
        assert widths[3] >= len("+400,000") and widths[4] >= len("5,123.25")


async def test_pnl_day_moves_on_with_new_marks_as_a_new_explain_says(demo_db: Path) -> None:
    """A commit of marks only (a feed's) moves P&L day on from the last explain without
    explaining again; it still equals ``desk.pnl_today`` worked out from the close."""
    from datetime import timedelta

    import numpy as np

    from blotter.desk.pnl_today import pnl_today
    from blotter.store import MarkPoint

    app = _app(demo_db)
    async with app.run_test(size=(200, 50)) as pilot:
        await settle(app, pilot)
        base = app.pnl_base
        assert base is not None
        with open_store(demo_db) as s:
            s.add_mark_set(
                "intraday",
                [MarkPoint("spot", 185.0, symbol="DEMOA"), MarkPoint("spot", 60.0, symbol="DEMOB")],
                marked_at=FROZEN_NOW - timedelta(minutes=5),
            )
        app.load_book()
        await settle(app, pilot)
        assert app.pnl_base is base  # moved on, not explained again
        with open_store(demo_db, read_only=True) as s:
            today = pnl_today(s, np.datetime64(FROZEN_NOW.replace(tzinfo=None), "s"))
        rows = {r.label: r for r in app.query_one("#book-table").visible_rows() if r.level == 1}
        assert rows["DEMOA"].pnl_today != pytest.approx(base.pnl.of("DEMOA"), rel=1e-6)
        for label, row in rows.items():
            assert row.pnl_today == pytest.approx(today.of(label), rel=1e-9, abs=1e-6), label
