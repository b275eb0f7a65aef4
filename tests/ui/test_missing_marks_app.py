"""The running app when a name lacks its marks: it values the rest, says what it left out and
keeps following the file (another process's commits still show)."""

from __future__ import annotations

import subprocess
import sys
import time
from dataclasses import replace
from pathlib import Path
from typing import Any

import pytest

from blotter.ui.app import BlotterApp, make_app
from blotter.ui.widgets.book_table import BookTable

from .conftest import TEST_SETTINGS, frozen_clock, settle


def _blotter(db: Path, *args: str) -> None:
    """Run ``blotter ARGS`` as another process would."""
    subprocess.run(
        [sys.executable, "-m", "blotter", *args, "--db", str(db)], check=True, capture_output=True
    )


async def _wait_for(app: BlotterApp, pilot: Any, ready: Any, what: str) -> None:
    deadline = time.monotonic() + 10
    while time.monotonic() < deadline:
        await pilot.pause(0.05)
        if app.state is not None and ready(app.state):
            return
    raise AssertionError(f"the app did not show {what}")


async def test_a_name_added_without_marks_is_listed_and_the_rest_stays_live(
    demo_db: Path,
) -> None:
    settings = replace(TEST_SETTINGS, watch_interval_s=0.1)
    app = make_app(demo_db, settings, clock=frozen_clock)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(app, pilot)
        assert app.state is not None
        before = app.state.valuation
        _blotter(demo_db, "underlying", "add", "ZZQ", "--kind", "stock", "--currency", "USD",
                 "--multiplier", "100")
        _blotter(demo_db, "trade", "add", "ZZQ", "--book", "equity-vol", "--expiry",
                 "2027-06-18", "--strike", "20", "--call", "--qty", "5", "--price", "2")
        await _wait_for(app, pilot, lambda s: s.valuation.partial, "the unmarked name")
        await settle(app, pilot)
        header = str(app.query_one("#header-line").render())
        assert "cannot open" not in header
        assert "NOT VALUED 1 (ZZQ: spot, vol)" in header
        v = app.state.valuation
        assert [u.underlying for u in v.unvalued] == ["ZZQ"]
        assert len(v) == len(before) and float(v.value.sum()) == pytest.approx(
            float(before.value.sum()), rel=1e-12
        )
        total = app.query_one(BookTable).visible_rows()[0]
        assert total.label == "total of valued"
        _blotter(demo_db, "mark", "spot", "DEMOA", "177.25")
        i = v.book.underlyings.index_of("DEMOA")
        await _wait_for(
            app, pilot, lambda s: s.valuation.underlying_spots[i] == 177.25, "the new DEMOA spot"
        )
        await settle(app, pilot)
        await pilot.press("w")
        await settle(app, pilot)
        text = str(app.screen.query_one("#watch-text").render())
        assert "1 position not valued (ZZQ: spot, vol)" in text
        assert "blotter mark spot ZZQ PRICE" in text
        assert "blotter mark vol ZZQ YYYY-MM-DD VOL" in text
