"""The app on a book kept in PostgreSQL: it loads the same positions as the file it was copied
from, and another process's commit reloads it through the server's NOTIFY (the watcher's
interval here is far longer than the test waits, so no poll can be what brought it)."""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

from blotter import store
from blotter.store.copy import copy_book
from blotter.ui.app import make_app

from .conftest import TEST_SETTINGS, frozen_clock, settle
from .test_app import second_load

WATCH_S = 600.0
"""The watcher's interval: only a commit's notification can wake it within the test."""


async def test_a_postgresql_book_loads_and_reloads_on_another_process_commit(
    demo_db: Path, pg_url: str
) -> None:
    copy_book(str(demo_db), pg_url)
    with store.open_store(demo_db, read_only=True) as file:
        positions = len(file.load_book())
    app = make_app(pg_url, replace(TEST_SETTINGS, watch_interval_s=WATCH_S), clock=frozen_clock)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(app, pilot)
        assert app.state is not None and app.book_seq == 1
        assert len(app.state.valuation) == positions
        with store.open_store(pg_url) as writer:
            writer.log_spot("DEMOA", 190.75)
        await second_load(app, pilot)
        assert app.book_seq == 2
        assert app.state.valuation.market.spots["DEMOA"] == 190.75
