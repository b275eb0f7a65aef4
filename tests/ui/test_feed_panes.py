"""The app under a stream of others' commits (a feed): each load within a minute is valued at the
minute's instant, so it solves no American boundary again, and the Grid and Reval panes are
worked out again at most every ``pane_refresh_s``, catching up once the stream stops; their
titles lead with the time of the store read their numbers come from. The file's integrity check
runs in the load at the first load and when the file is replaced, and else beside the loads at
most every ``VERIFY_EVERY_S`` and within ``VERIFY_CPU_SHARE`` of a core."""

from __future__ import annotations

import os
import shutil
from collections.abc import AsyncIterator, Callable
from contextlib import asynccontextmanager
from dataclasses import replace
from datetime import datetime, timedelta
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from blotter import scenario, store
from blotter.store import db as store_db
from blotter.ui.app import BlotterApp, make_app
from blotter.ui.widgets.book_table import BookTable
from blotter.ui.widgets.grid_pane import GridPane
from blotter.ui.widgets.reval_pane import RevalPane

from .conftest import FROZEN_NOW, TEST_SETTINGS, settle


async def wait_for(app: BlotterApp, pilot: Any, done: Callable[[], bool], what: str) -> None:
    """Pause (a bounded number of times) until ``done()``."""
    for _ in range(3_000):
        if done():
            return
        await pilot.pause()
    raise AssertionError(f"{what} did not happen")


def commit_spot(db: Path, symbol: str, factor: float, at: datetime | None = None) -> int:
    """Another terminal moves ``symbol``'s spot by ``factor`` (its clock ``at``, else the
    system's); the new mark's id. (It opens the file without the integrity check, so only the
    app's checks are counted where that matters.)"""
    writer = store.open_store(db, verify=False, clock=None if at is None else (lambda: at))
    try:
        return writer.log_spot(symbol, writer.load_market().spots[symbol] * factor)
    finally:
        writer.close()


@asynccontextmanager
async def streaming(
    db: Path, pane_refresh_s: float
) -> AsyncIterator[tuple[BlotterApp, Any, list[datetime]]]:
    """The app on ``db`` at 80×24, looking for commits every 20 ms, its book shown; its clock
    reads ``now[0]`` (``FROZEN_NOW`` to start with)."""
    now = [FROZEN_NOW]
    settings = replace(TEST_SETTINGS, watch_interval_s=0.02, pane_refresh_s=pane_refresh_s)
    app = make_app(db, settings, clock=lambda: now[0])
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(app, pilot)
        yield app, pilot, now


async def shown(app: BlotterApp, pilot: Any, mark_id: int) -> None:
    """Wait until the Book pane holds the mark ``mark_id``."""
    await wait_for(
        app,
        pilot,
        lambda: app.state is not None and app.state.valuation.market.version == mark_id,
        f"mark {mark_id} shown",
    )


def grid_of(app: BlotterApp) -> np.ndarray:
    """The full P&L grid of the book the app shows now, as ``blotter.scenario`` works it out."""
    assert app.state is not None
    s = app.settings
    return np.asarray(
        scenario.ladders(app.state.valuation, s.ladder_spot_pcts, s.ladder_vol_pts)[0].full
    )


async def test_a_load_within_the_minute_keeps_its_instant_and_solves_no_boundary(
    demo_db: Path,
) -> None:
    async with streaming(demo_db, pane_refresh_s=3600.0) as (app, pilot, now):
        first = app.state
        assert first is not None and first.valuation.book.american.any()
        cache = first.valuation.boundaries
        misses = cache.misses
        now[0] = FROZEN_NOW + timedelta(seconds=20)
        await shown(app, pilot, commit_spot(demo_db, "DEMOA", 1.01))
        await settle(app, pilot)
        later = app.state
        assert later is not None and later.book_seq == 2
        assert later.session.valuation_time == first.session.valuation_time
        assert later.valuation.boundaries is cache
        assert cache.misses == misses, "every American boundary found, none solved again"
        now[0] = FROZEN_NOW + timedelta(seconds=61)  # the next minute: valued at the clock
        await shown(app, pilot, commit_spot(demo_db, "DEMOA", 1.01))
        assert app.state is not None
        assert app.state.session.valuation_time == now[0]


async def test_under_a_stream_the_grid_waits_and_the_trader_s_reload_does_not(
    demo_db: Path,
) -> None:
    async with streaming(demo_db, pane_refresh_s=3600.0) as (app, pilot, now):
        pane = app.query_one(GridPane)
        first = pane.ladder
        assert str(pane.border_title).startswith("Grid 10:00:00: full revaluation P&L")
        for k in (1, 2):
            now[0] = FROZEN_NOW + timedelta(seconds=k)
            await shown(app, pilot, commit_spot(demo_db, "DEMOB", 1.002))
            await settle(app, pilot)
            assert pane.ladder is first, "the stream's loads leave the grid as it was"
            assert str(pane.border_title).startswith("Grid 10:00:00:")
        await pilot.press("r")  # the trader's reload: the grid at once
        await wait_for(app, pilot, lambda: pane.ladder is not first, "the grid redone")
        await settle(app, pilot)
        assert str(pane.border_title).startswith("Grid 10:00:02: full revaluation P&L")
        np.testing.assert_allclose(np.asarray(pane.ladder.full), grid_of(app), rtol=1e-12)


async def test_after_the_stream_stops_the_panes_catch_up_and_say_their_time(
    demo_db: Path,
) -> None:
    async with streaming(demo_db, pane_refresh_s=0.2) as (app, pilot, now):
        grid, reval = app.query_one(GridPane), app.query_one(RevalPane)
        assert str(reval.border_title).startswith("Reval 10:00:00: P&L of book")
        for k in (1, 2, 3):
            now[0] = FROZEN_NOW + timedelta(seconds=k)
            await shown(app, pilot, commit_spot(demo_db, "DEMOC", 0.997))
        last = app.state
        await wait_for(
            app, pilot, lambda: grid.as_of == "10:00:03", "the grid caught up with the last read"
        )
        await settle(app, pilot)
        assert app.state is last, "no load since the stream stopped"
        assert str(grid.border_title).startswith("Grid 10:00:03: full revaluation P&L")
        np.testing.assert_allclose(np.asarray(grid.ladder.full), grid_of(app), rtol=1e-12)
        # The Reval pane was hidden (80 columns show one pane): it waits until shown.
        assert str(reval.border_title).startswith("Reval 10:00:00:")
        await pilot.press("v", "v")  # Move -> Grid -> Reval
        await wait_for(
            app, pilot, lambda: str(reval.border_title).startswith("Reval 10:00:03: P&L of book"),
            "the Reval pane redone once shown",
        )
        await settle(app, pilot)
        assert reval.profile is not None
        spot_pcts = list(reval.profile.xs)
        assert app.state is not None
        expected = scenario.ladder(app.state.valuation, spot_pcts, (0.0,)).full[:, 0]
        day = f"{now[0].astimezone(app.tz).date()} full"
        np.testing.assert_allclose(reval.profile.series[day], expected, rtol=1e-9)


async def test_the_file_is_checked_at_the_first_load_and_when_replaced_not_on_every_commit(
    demo_db: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    checks: list[Path] = []
    check = store_db.integrity_problems

    def counted(conn: Any) -> list[str]:
        checks.append(demo_db)
        return check(conn)

    monkeypatch.setattr(store_db, "integrity_problems", counted)
    async with streaming(demo_db, pane_refresh_s=3600.0) as (app, pilot, _now):
        assert len(checks) == 1, "the first load checks the file"
        for _ in range(3):
            await shown(app, pilot, commit_spot(demo_db, "DEMOA", 1.001))
        assert len(checks) == 1, "a commit by another terminal is not a reason to check it all"
        copy = demo_db.with_name("copy.db")
        shutil.copyfile(demo_db, copy)
        os.replace(copy, demo_db)  # another file now: checked at the next load
        seq = app.book_seq
        await pilot.press("r")
        await wait_for(app, pilot, lambda: app.book_seq > seq, "the reload")
        assert len(checks) == 2


async def test_the_periodic_check_runs_beside_the_loads_within_its_share_of_a_core(
    demo_db: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    """Once due, the file's check runs in a worker of its own, not in a load (a load waiting on
    it repainted a second late on a file holding hours of a feed); it then waits its own time
    over ``VERIFY_CPU_SHARE``, however often ``VERIFY_EVERY_S`` would allow."""
    from textual.worker import get_current_worker

    from blotter.ui import app as app_module

    groups: list[str] = []
    check = store_db.integrity_problems

    def recorded(conn: Any) -> list[str]:
        groups.append(get_current_worker().group)
        return check(conn)

    monkeypatch.setattr(store_db, "integrity_problems", recorded)
    monkeypatch.setattr(app_module, "VERIFY_EVERY_S", 0.0)
    monkeypatch.setattr(app_module, "VERIFY_CPU_SHARE", 1.0)  # due again at once
    async with streaming(demo_db, pane_refresh_s=3600.0) as (app, pilot, _now):
        await shown(app, pilot, commit_spot(demo_db, "DEMOA", 1.001))
        await settle(app, pilot)
        # the first check is the first open's: the load's, or the change watcher's if sooner
        assert groups[0] in ("load", "watch") and set(groups[1:]) == {"verify"}, groups
        assert len(groups) >= 2
        monkeypatch.setattr(app_module, "VERIFY_CPU_SHARE", 1e-9)  # its time over this: years
        seen = len(groups)
        for _ in range(3):
            await shown(app, pilot, commit_spot(demo_db, "DEMOA", 1.001))
        await settle(app, pilot)
        assert len(groups) == seen, "not due again within its share of a core"


async def test_with_a_move_in_the_bar_a_reload_redoes_the_grid(demo_db: Path) -> None:
    """The grid follows the reloaded book with a move in the bar too (the move's day roll)."""
    async with streaming(demo_db, pane_refresh_s=3600.0) as (app, pilot, _now):
        await pilot.press("f2", *"spot -1% days 1")
        await settle(app, pilot)
        pane = app.query_one(GridPane)
        before = pane.ladder
        await shown(app, pilot, commit_spot(demo_db, "DEMOB", 1.01))
        await pilot.press("enter", "r")  # the move kept, back to the book; the trader's reload
        await wait_for(app, pilot, lambda: pane.ladder is not before, "the grid redone")
        await settle(app, pilot)
        assert app.state is not None and pane.days == 1.0
        s = app.settings
        full = scenario.ladders(app.state.valuation, s.ladder_spot_pcts, s.ladder_vol_pts, days=1)
        np.testing.assert_allclose(np.asarray(pane.ladder.full), full[0].full, rtol=1e-12)


async def test_the_minute_s_explain_of_pnl_today_runs_beside_the_load(
    demo_db: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    """Under a stream, P&L today is moved on in each load and explained from the close again
    once a minute in a worker of its own (a load waiting on it repainted past a second), after
    which the Book pane shows the explain, equal to ``desk.pnl_today`` from scratch."""
    from textual.worker import get_current_worker

    from blotter.desk import pnl_today as pnl

    groups: list[str] = []
    explain = pnl.pnl_today

    def recorded(st: Any, at: Any, book: str | None = None) -> pnl.PnlToday:
        groups.append(get_current_worker().group)
        return explain(st, at, book)

    monkeypatch.setattr(pnl, "pnl_today", recorded)
    async with streaming(demo_db, pane_refresh_s=3600.0) as (app, pilot, now):
        assert groups == ["load"] and app.pnl_base is not None
        first = app.pnl_base
        now[0] = FROZEN_NOW + timedelta(seconds=65)
        await shown(app, pilot, commit_spot(demo_db, "DEMOA", 1.02, at=now[0]))
        await wait_for(app, pilot, lambda: app.pnl_base is not first, "the explain")
        await settle(app, pilot)
        assert groups[0] == "load" and set(groups[1:]) == {"pnl"}, "no load explained it"
        assert app.pnl_base is not None and app.pnl_base.explained_at == now[0]
        assert app.state is not None
        with store.open_store(demo_db, read_only=True) as st:
            fresh = explain(st, app.state.valuation.valuation_time)
        rows = [r for r in app.query_one(BookTable).visible_rows() if r.level == 1]
        assert rows
        for row in rows:
            assert row.pnl_today == pytest.approx(fresh.of(row.label), rel=1e-9, abs=1e-6)
