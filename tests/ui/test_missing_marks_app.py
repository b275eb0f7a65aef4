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
    """Poll (the store watcher keeps reloading, so workers are not awaited) until ``ready()``."""
    deadline = time.monotonic() + 10
    while time.monotonic() < deadline:
        await pilot.pause(0.05)
        try:
            if app.state is not None and ready():
                return
        except Exception:  # noqa: BLE001 - a screen still being laid out: poll again
            continue
    raise AssertionError(f"the app did not show {what}")


def _header(app: BlotterApp) -> str:
    return str(app.query_one("#header-line").render())


def _watch_text(app: BlotterApp) -> str:
    return str(app.screen.query_one("#watch-text").render())


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
                 "2027-06-17", "--strike", "20", "--call", "--qty", "5", "--price", "2")
        await _wait_for(app, pilot, lambda: "NOT VALUED" in _header(app), "the unmarked name")
        assert "cannot open" not in _header(app)
        assert "NOT VALUED 1 (ZZQ: spot, vol)" in _header(app)
        v = app.state.valuation
        assert [u.underlying for u in v.unvalued] == ["ZZQ"]
        # The reload reuses the solved American boundaries for wider vol ranges; their
        # interpolation moves a value by far less than a cent.
        assert len(v) == len(before) and float(v.value.sum()) == pytest.approx(
            float(before.value.sum()), rel=1e-10
        )
        await _wait_for(
            app,
            pilot,
            lambda: app.query_one(BookTable).visible_rows()[0].label == "total of valued",
            "the total of the valued positions",
        )
        _blotter(demo_db, "mark", "spot", "DEMOA", "177.25")
        i = v.book.underlyings.index_of("DEMOA")
        await _wait_for(
            app,
            pilot,
            lambda: app.state.valuation.underlying_spots[i] == 177.25,
            "the new DEMOA spot",
        )
        await pilot.press("w")
        await _wait_for(
            app,
            pilot,
            lambda: "blotter mark spot ZZQ PRICE" in _watch_text(app),
            "the Flags screen's missing marks",
        )
        text = _watch_text(app)
        assert "1 position not valued (ZZQ: spot, vol)" in text
        assert "blotter mark vol ZZQ YYYY-MM-DD VOL" in text
