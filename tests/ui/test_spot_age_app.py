"""The Book pane shows how old each spot is, and an intraday spot older than ``spot_stale_s``
turns STALE in words in its row and in the header (a feed that stopped)."""

from __future__ import annotations

from dataclasses import replace
from datetime import timedelta
from pathlib import Path

from blotter import store
from blotter.store import MarkPoint
from blotter.ui.app import make_app
from blotter.ui.widgets.book_table import BookTable

from .conftest import FROZEN_NOW, TEST_SETTINGS, frozen_clock, settle


def _row(table: BookTable, label: str) -> list[str]:
    for i in range(table.row_count):
        cells = [str(c) for c in table.get_row_at(i)]
        if label in cells[0]:
            return cells
    raise AssertionError(f"no row {label}")


async def test_a_spot_older_than_the_setting_is_stale_in_words(demo_db: Path) -> None:
    with store.open_store(demo_db) as st:  # a feed's last DEMOA quote, 10 minutes ago
        st.add_mark_set(
            "intraday",
            [MarkPoint("spot", 181.25, symbol="DEMOA")],
            marked_at=FROZEN_NOW - timedelta(minutes=10),
        )
    settings = replace(TEST_SETTINGS, spot_stale_s=300.0)
    app = make_app(demo_db, settings, clock=frozen_clock)
    async with app.run_test(size=(200, 50)) as pilot:
        await settle(app, pilot)
        table = app.query_one(BookTable)
        headers = [str(c.label).strip() for c in table.columns.values()]
        age = headers.index("age")
        assert _row(table, "DEMOA")[age].strip() == "stale 10m"
        # the other spots come from the close before: as old as it, not stale on their own
        assert _row(table, "DEMOB")[age].strip() == "17h"  # marked 16:30 the day before
        header = str(app.query_one("#header-line").render())
        assert "SPOT STALE: DEMOA 10m" in header


async def test_no_spot_is_stale_with_the_setting_off(demo_db: Path) -> None:
    with store.open_store(demo_db) as st:
        st.add_mark_set(
            "intraday",
            [MarkPoint("spot", 181.25, symbol="DEMOA")],
            marked_at=FROZEN_NOW - timedelta(minutes=10),
        )
    app = make_app(demo_db, replace(TEST_SETTINGS, spot_stale_s=0.0), clock=frozen_clock)
    async with app.run_test(size=(200, 50)) as pilot:
        await settle(app, pilot)
        table = app.query_one(BookTable)
        headers = [str(c.label).strip() for c in table.columns.values()]
        assert _row(table, "DEMOA")[headers.index("age")].strip() == "10m"
        assert "SPOT STALE" not in str(app.query_one("#header-line").render())
