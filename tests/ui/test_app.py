"""Pilot tests of the app on the demo book: the bar's numbers against ``blotter.scenario`` for the
same move, a bad line keeping the last result, expanding, regrouping and sorting the Book pane,
the panes and the minimum-size message."""

from __future__ import annotations

import io
from datetime import timedelta
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from rich.console import Console

from blotter import risk, scenario, store
from blotter.demo import DEMO_TZ
from blotter.desk import session
from blotter.ui.app import BlotterApp, make_app
from blotter.ui.widgets.book_table import BookTable
from blotter.ui.widgets.header_line import HeaderLine
from blotter.ui.widgets.move_pane import COLUMNS, TERMS, MovePane
from blotter.ui.widgets.whatif_bar import MoveInput

from .conftest import FROZEN_DAY, FROZEN_NOW, TEST_SETTINGS, frozen_clock, settle

MOVE = "spot -3% vol +2 days 1"


def shown_number(cell: object) -> float:
    """A number as the screen shows it ("+1,234", "-56!", "+0.5%") read back as a float."""
    text = str(cell).strip().rstrip("!%").replace(",", "").strip()
    return float(text)


def expected_result(db: Path, text: str) -> scenario.MoveResult:
    """The move applied by ``blotter.scenario`` directly, outside the app, at the frozen time."""
    st = store.open_store(db, read_only=True)
    try:
        book, market = st.load_book(), st.load_market()
    finally:
        st.close()
    valuation = risk.value_book(book, market, np.datetime64(FROZEN_NOW.replace(tzinfo=None), "s"))
    return scenario.apply_move(valuation, scenario.parse_move(text, book.underlyings.symbols))


async def type_move(app: BlotterApp, pilot: object, text: str) -> None:
    await pilot.press("f2")  # type: ignore[attr-defined]  # F2 focuses the bar from anywhere
    await pilot.press(*text)  # type: ignore[attr-defined]
    await settle(app, pilot)


@pytest.mark.parametrize("size", [(80, 24), (160, 48)])
async def test_bar_shows_scenario_numbers(demo_db: Path, size: tuple[int, int]) -> None:
    app = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    expected = expected_result(demo_db, MOVE)
    async with app.run_test(size=size) as pilot:
        await settle(app, pilot)
        await type_move(app, pilot, MOVE)
        pane = app.query_one(MovePane)
        rows = {"total": expected.total} | {f"u|{r.label}": r for r in expected.by_underlying}
        assert pane.row_keys == list(rows)
        grid = str(app.query_one("#move-grid").render())
        for key, row in rows.items():
            cells = {c: pane.cells[(key, c)] for c in COLUMNS}
            assert "".join(cells.values()) in grid  # what is drawn is these cells
            assert shown_number(cells["full"]) == pytest.approx(row.full, abs=0.5)
            assert shown_number(cells["estimate"]) == pytest.approx(row.estimate_2, abs=0.5)
            assert shown_number(cells["error"]) == pytest.approx(row.error_2, abs=0.5)
            if np.isfinite(row.error_2_pct):
                assert shown_number(cells["error_pct"]) == pytest.approx(row.error_2_pct, abs=0.05)
            for term, _ in TERMS:
                assert shown_number(cells[term]) == pytest.approx(row.terms[term], abs=0.5)
        # The first-order view shows scenario's first-order estimate and error.
        await pilot.press("f6")
        await pilot.pause()
        assert shown_number(pane.cells[("total", "estimate")]) == pytest.approx(
            expected.total.estimate_1, abs=0.5
        )
        assert shown_number(pane.cells[("total", "error")]) == pytest.approx(
            expected.total.error_1, abs=0.5
        )
        assert "1st-order" in str(app.query_one("#move-pane").border_title)


async def test_bad_line_keeps_last_result(demo_app: BlotterApp) -> None:
    async with demo_app.run_test(size=(80, 24)) as pilot:
        await settle(demo_app, pilot)
        await type_move(demo_app, pilot, "spot -2%")
        pane = demo_app.query_one(MovePane)
        good = pane.cells[("total", "full")]
        result = demo_app.result
        await pilot.press(*" vol +x")
        await settle(demo_app, pilot)
        message = str(demo_app.query_one("#whatif-message").render())
        assert message.startswith("✗") and "'+x'" in message
        assert "last good line" in str(demo_app.query_one("#move-pane").border_title)
        assert demo_app.result is result
        assert pane.cells[("total", "full")] == good
        assert demo_app.query_one("WhatIfBar").has_class("-bad")


async def test_history_recalls_moves(demo_app: BlotterApp) -> None:
    async with demo_app.run_test(size=(80, 24)) as pilot:
        await settle(demo_app, pilot)
        bar = demo_app.query_one(MoveInput)
        for text in ("spot -1%", "vol +2"):
            await type_move(demo_app, pilot, text)
            await pilot.press("enter")
            bar.value = ""
            await settle(demo_app, pilot)
        await pilot.press("f2", "up")  # Enter went back to the book: F2 returns to the bar
        assert bar.value == "vol +2"
        await pilot.press("up")
        assert bar.value == "spot -1%"
        await pilot.press("down", "down")
        assert bar.value == ""


async def test_expand_group_and_sort(demo_app: BlotterApp) -> None:
    async with demo_app.run_test(size=(80, 24)) as pilot:
        await settle(demo_app, pilot)
        table = demo_app.query_one(BookTable)
        state = demo_app.state
        assert state is not None
        symbols = [r.label for r in risk.aggregate(state.valuation, by="underlying")]
        keys = [r.key for r in table.visible_rows()]
        assert keys == ["total"] + [f"u|{s}" for s in symbols]

        # Expand the first underlying, then its first expiry: rows appear under it, in place.
        await pilot.press("down", "e")
        first = f"u|{symbols[0]}"
        children = [r for r in table.visible_rows() if r.key.startswith(first + "|")]
        assert children and all(r.level == 2 for r in children)
        book = state.valuation.book
        rows = np.flatnonzero(book.underlying_idx == book.underlyings.index_of(symbols[0]))
        assert sum(r.values[1] for r in children) == pytest.approx(
            float(state.valuation.delta_cash[rows].sum()), rel=1e-9
        )
        await pilot.press("down", "enter")
        positions = [r for r in table.visible_rows() if r.level == 3]
        assert positions and all(r.position is not None for r in positions)
        assert table.cursor_row_key() == children[0].key
        # Collapsing the underlying hides everything under it.
        await pilot.press("up", "e")
        assert [r.key for r in table.visible_rows()] == keys

        # Sort by Δ $ (column 4, after spot, its age and P&L day): largest first, then
        # reversed, then back to the book's order.
        await pilot.press("right", "right", "right", "right", "s")
        top = [r for r in table.visible_rows() if r.level == 1]
        assert [r.values[1] for r in top] == sorted((r.values[1] for r in top), reverse=True)
        await pilot.press("s")
        top = [r for r in table.visible_rows() if r.level == 1]
        assert [r.values[1] for r in top] == sorted(r.values[1] for r in top)
        await pilot.press("s")
        assert [r.key for r in table.visible_rows()] == keys
        assert table.visible_rows()[0].key == "total"

        # Regroup by expiry bucket: the buckets of risk.aggregate(by="expiry"), in its order.
        await pilot.press("g")
        buckets = [r.label for r in risk.aggregate(state.valuation, by="expiry")]
        assert [r.label for r in table.visible_rows() if r.level == 1] == buckets
        await pilot.press("g")
        assert [r.key for r in table.visible_rows()] == keys


async def test_reload_updates_cells_in_place(demo_app: BlotterApp) -> None:
    async with demo_app.run_test(size=(80, 24)) as pilot:
        await settle(demo_app, pilot)
        table = demo_app.query_one(BookTable)
        rows_before = list(table.rows)
        await pilot.press("r")
        await settle(demo_app, pilot)
        assert demo_app.book_seq == 2
        assert list(table.rows) == rows_before


async def test_panes_switch_on_narrow_and_sit_beside_on_wide(demo_app: BlotterApp) -> None:
    async with demo_app.run_test(size=(80, 24)) as pilot:
        await settle(demo_app, pilot)

        def shown() -> list[str]:
            return [
                p
                for p in ("move", "grid", "reval")
                if demo_app.query_one(f"#{p}-pane").display
                and demo_app.query_one(f"#{p}-pane").region.height > 0
            ]

        assert shown() == ["move"]
        await pilot.press("v")
        await pilot.pause()
        assert shown() == ["grid"]
        await pilot.press("f7")
        await pilot.pause()
        assert shown() == ["reval"]
        await settle(demo_app, pilot)
        reval = demo_app.query_one("#reval-pane")
        # at 80 columns the title keeps every word; the note on vols ends the chart's legend
        assert "sticky-strike vols" in str(demo_app.query_one("#reval-chart").render())
        assert "sticky" not in str(reval.border_title)
        assert len(str(reval.border_title)) <= reval.region.width - 4
        await pilot.resize_terminal(160, 48)
        await pilot.pause()
        assert demo_app.screen.has_class("-wide")
        assert sorted(shown()) == ["grid", "move", "reval"]


async def test_ladder_and_profile_come_from_scenario(demo_db: Path) -> None:
    app = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    async with app.run_test(size=(160, 48)) as pilot:
        await settle(app, pilot)
        await type_move(app, pilot, "days 2")
        ladder_pane = app.query_one("#grid-pane")
        state = app.state
        assert state is not None
        expected = scenario.ladder(
            state.valuation, TEST_SETTINGS.ladder_spot_pcts, TEST_SETTINGS.ladder_vol_pts, days=2.0
        )
        assert ladder_pane.days == 2.0  # type: ignore[attr-defined]
        np.testing.assert_allclose(ladder_pane.ladder.full, expected.full)  # type: ignore[attr-defined]
        assert "after 2 days" in str(ladder_pane.border_title)
        i, j = expected.worst
        console = Console(width=120, record=True, file=io.StringIO())
        console.print(ladder_pane.table)  # type: ignore[attr-defined]
        lines = console.export_text().splitlines()
        worst_line = next(
            line for line in lines if line.strip().startswith(f"{expected.spot_pcts[i]:+g}%")
        )
        assert worst_line.split()[1 + j].startswith("▼")
        assert sum(line.count("▼") for line in lines) == 1
        profile = app.query_one("#reval-pane").profile  # type: ignore[attr-defined]
        spot_pcts = np.array(profile.xs)
        today = scenario.ladder(state.valuation, spot_pcts, (0.0,))
        np.testing.assert_allclose(profile.series[f"{FROZEN_DAY} full"], today.full[:, 0])
        np.testing.assert_allclose(profile.series[f"{FROZEN_DAY} estimate"], today.estimate[:, 0])
        np.testing.assert_allclose(
            profile.series[f"{FROZEN_DAY + timedelta(days=2)} (+2d) full"],
            scenario.ladder(state.valuation, spot_pcts, (0.0,), days=2.0).full[:, 0],
        )
        assert "full vs greeks' estimate" in profile.title
        # The greek view: Δ $ of the book at the base spot is risk's total.
        await pilot.press("f9")
        await settle(app, pilot)
        profile = app.query_one("#reval-pane").profile  # type: ignore[attr-defined]
        mid = len(profile.xs) // 2
        assert profile.xs[mid] == 0.0
        delta_cash = risk.total(state.valuation).delta_cash
        assert profile.series[f"{FROZEN_DAY} Δ $"][mid] == pytest.approx(delta_cash)


async def test_too_small_says_what_size_is_needed(demo_app: BlotterApp) -> None:
    async with demo_app.run_test(size=(50, 15)) as pilot:
        await settle(demo_app, pilot)
        notice = str(demo_app.query_one("#too-small").render())
        assert "at least 60×18" in notice and "50×15" in notice
        assert demo_app.screen.has_class("-too-small")
        await pilot.resize_terminal(80, 24)
        await pilot.pause()
        assert not demo_app.screen.has_class("-too-small")


async def test_header_says_book_marks_age_and_read_only(demo_db: Path) -> None:
    app = BlotterApp(str(demo_db), TEST_SETTINGS, clock=frozen_clock, read_only=True)
    async with app.run_test(size=(160, 48)) as pilot:
        await settle(app, pilot)
        header = str(app.query_one("#header-line").render())
        assert "READ-ONLY" in header and "demo.db" in header
        local = FROZEN_NOW.astimezone(app.tz)
        assert f"valued {local:%Y-%m-%d %H:%M %Z}" in header
        assert " old)" in header and "STALE" not in header


async def test_stale_marks_flagged_in_words(demo_db: Path) -> None:
    from datetime import timedelta

    later = FROZEN_NOW + timedelta(days=6)  # a week later, several closes have passed
    app = make_app(demo_db, TEST_SETTINGS, clock=lambda: later)
    async with app.run_test(size=(160, 48)) as pilot:
        await settle(app, pilot)
        # Monday 10:00: the last close was Friday 2026-12-04 at 16:00 New York.
        header = str(app.query_one("#header-line").render())
        assert "STALE: 421 of 421 marked before 12-04 16:00 close" in header


async def test_missing_file_is_reported_not_raised(tmp_path: Path) -> None:
    app = make_app(tmp_path / "nothing.db", TEST_SETTINGS, clock=frozen_clock)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(app, pilot)
        assert "no book at" in str(app.query_one("#header-line").render())


async def test_keys_arriving_in_one_burst_all_reach_the_bar(demo_app: BlotterApp) -> None:
    """ "/spot -2%" arriving in one read (fast typing over SSH) lands whole in the bar."""
    from textual import events

    async with demo_app.run_test(size=(80, 24)) as pilot:
        await settle(demo_app, pilot)
        for ch in "/spot -2%":
            name = {"/": "slash", " ": "space", "-": "minus", "%": "percent_sign"}.get(ch, ch)
            demo_app.post_message(events.Key(name, ch))  # queued together, none handled yet
        await settle(demo_app, pilot)
        assert demo_app.query_one(MoveInput).value == "spot -2%"
        assert demo_app.query_one(BookTable).sort_column is None  # no "s" reached the book


async def test_paste_into_the_book_goes_to_the_bar(demo_app: BlotterApp) -> None:
    from textual import events

    async with demo_app.run_test(size=(80, 24)) as pilot:
        await settle(demo_app, pilot)
        demo_app.post_message(events.Paste("/vol +2\n"))  # as the driver delivers it
        await settle(demo_app, pilot)
        assert demo_app.query_one(MoveInput).value == "vol +2"
        assert demo_app.move is not None and demo_app.move.describe() == "vol +2"


async def second_load(app: BlotterApp, pilot: Any) -> None:
    """Wait (a bounded number of pauses) for the app's second load of the book to land."""
    for _ in range(5000):
        if app.book_seq == 2:
            break
        await pilot.pause()
    await settle(app, pilot)
    assert app.book_seq == 2


async def test_a_commit_by_another_connection_reloads_the_book(demo_db: Path) -> None:
    """The store's change check (the app's only timer-like work) sees another writer's commit."""
    from dataclasses import replace

    app = make_app(demo_db, replace(TEST_SETTINGS, watch_interval_s=0.05), clock=frozen_clock)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(app, pilot)
        assert app.book_seq == 1
        await pilot.press("f2", *"spot -1%")
        await settle(app, pilot)
        writer = store.open_store(demo_db)
        try:
            writer.add_note("a note from another terminal")
        finally:
            writer.close()
        await second_load(app, pilot)
        # The bar's move is applied again to the reloaded book; the cursor and bar are kept.
        assert app.query_one(MoveInput).value == "spot -1%"
        assert app.result is not None and app.result.valuation is app.state.valuation  # type: ignore[union-attr]


async def test_the_valuation_time_moves_on_its_own_once_a_minute(demo_db: Path) -> None:
    """With nothing typed and nothing committed, the clock passing into the next minute values
    the book again, once, and the header's "valued" time follows it."""
    from dataclasses import replace
    from datetime import timedelta

    now = [FROZEN_NOW]
    app = make_app(
        demo_db, replace(TEST_SETTINGS, watch_interval_s=0.02), clock=lambda: now[0]
    )
    async with app.run_test(size=(200, 24)) as pilot:
        await settle(app, pilot)
        header = app.query_one(HeaderLine)
        assert f"valued {FROZEN_NOW.astimezone(DEMO_TZ):%Y-%m-%d %H:%M}" in str(header.render())
        for _ in range(50):  # the same minute: no revaluation
            await pilot.pause(0.01)
        assert app.book_seq == 1
        now[0] = FROZEN_NOW + timedelta(seconds=61)
        await second_load(app, pilot)
        later = f"valued {now[0].astimezone(DEMO_TZ):%Y-%m-%d %H:%M}"
        assert later in str(header.render())
        for _ in range(50):  # asked once for that minute
            await pilot.pause(0.01)
        assert app.book_seq == 2


async def test_an_absolute_spot_move_reads_apart_from_a_relative_one(demo_app: BlotterApp) -> None:
    """``spot -3`` is said as currency in the Move pane's title and, being more than 10% of a
    demo spot, warned about in the title and the bar (not a plain "applied"); ``spot -3%`` is
    said as percent with no warning."""
    async with demo_app.run_test(size=(80, 24)) as pilot:
        await settle(demo_app, pilot)
        pane = demo_app.query_one(MovePane)
        await type_move(demo_app, pilot, "spot -3")
        title = str(pane.border_title)
        assert title.startswith("Move: every spot -3.00 USD ─ CHECK: -3.00 USD is -13.0% of DEMOC")
        bar = str(demo_app.query_one("#whatif-message").render())
        assert bar == "⚠ check: -3.00 USD is -13.0% of DEMOC 23.14"
        await pilot.press("percent_sign")
        await settle(demo_app, pilot)
        assert str(pane.border_title).startswith("Move: every spot -3.00% ─ 2nd-order estimate")
        assert str(demo_app.query_one("#whatif-message").render()) == "✓ applied"


async def test_expiring_positions_and_pin_risk_listed(demo_app: BlotterApp) -> None:
    async with demo_app.run_test(size=(160, 48)) as pilot:
        await settle(demo_app, pilot)
        await type_move(demo_app, pilot, "days 30")
        result = demo_app.result
        assert result is not None and result.expiring, "the demo book has options within 30 days"
        line = str(demo_app.query_one("#move-expiring").render())
        assert f"Expiring inside the move ({len(result.expiring)})" in line
        pins = [e for e in result.expiring[:6] if e.pin_risk]
        assert line.count("PIN RISK") == len(pins)


async def test_limit_breach_shown_in_words_and_by_symbol(demo_db: Path) -> None:
    from dataclasses import replace

    from blotter.config import Alerts

    settings = replace(TEST_SETTINGS, alerts=Alerts(delta_cash=1.0, underlying_delta_cash=1.0))
    app = make_app(demo_db, settings, clock=frozen_clock)
    async with app.run_test(size=(160, 48)) as pilot:
        await settle(app, pilot)
        header = str(app.query_one("#header-line").render())
        assert "! book |Δ $| over 1" in header
        rows = app.query_one(BookTable).visible_rows()
        assert all(r.alert for r in rows if r.level <= 1)
        assert "! DEMOIX |Δ $| over 1" in header or "more limit breaches" in header
        assert str(app.query_one(BookTable).get_cell("total", "label")).endswith(" !")


async def test_profile_of_the_selected_row(demo_app: BlotterApp) -> None:

    async with demo_app.run_test(size=(160, 48)) as pilot:
        await settle(demo_app, pilot)
        await pilot.press("down")  # the first underlying
        await pilot.press("p")  # profile scope: the selected row
        await settle(demo_app, pilot)
        state = demo_app.state
        assert state is not None
        table = demo_app.query_one(BookTable)
        key = table.cursor_row_key()
        assert key is not None and key.startswith("u|")
        profile = demo_app.query_one("#reval-pane").profile  # type: ignore[attr-defined]
        assert profile.title.startswith(f"Reval: P&L of {key[2:]} ")
        rows = state.tree.rows_of(key)
        alone = risk.value_book(
            state.valuation.book.take(rows),
            state.valuation.market,
            state.valuation.valuation_time,
        )
        np.testing.assert_allclose(
            profile.series[f"{FROZEN_DAY} full"],
            scenario.ladder(alone, list(profile.xs), (0.0,)).full[:, 0],
        )
        # Days-forward axis: P&L is scenario's full change for each roll.
        await pilot.press("a")
        await settle(demo_app, pilot)
        profile = demo_app.query_one("#reval-pane").profile  # type: ignore[attr-defined]
        d = profile.xs[3]
        expected = scenario.apply_move(alone, scenario.parse_move(f"days {d:g}")).total.full
        assert profile.series["full"][3] == pytest.approx(expected)


async def test_the_desk_zone_setting_is_the_zone_of_the_day_roll(demo_db: Path) -> None:
    """``desk_tz`` of the settings reaches the valuation: ``bdays 3`` from Tuesday 10:00 New York
    (Wednesday 00:00 Tokyo) lands on Monday 00:00 Tokyo, not Friday 10:00 New York."""
    from dataclasses import replace
    from zoneinfo import ZoneInfo

    tokyo = ZoneInfo("Asia/Tokyo")
    app = make_app(demo_db, replace(TEST_SETTINGS, desk_tz="Asia/Tokyo"), clock=frozen_clock)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(app, pilot)
        assert app.state is not None
        v = app.state.valuation
        assert v.tz == tokyo
        rolled = scenario.roll_time(v, scenario.parse_move("bdays 3"))
        assert str(rolled) == "2026-12-06T15:00:00"
        assert session.roll_days(v, scenario.parse_move("bdays 3")) == pytest.approx(5.0)
