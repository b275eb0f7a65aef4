"""Pilot tests of the desk screens on a demo copy: typing marks (a number, an option price, a
refused value), the close (written, and refused by a busy file with nothing typed lost), adding,
cancelling and amending trades, trial trades, the Explain screen, the Flags screen, read-only,
and another process's commit showing in the running app."""

from __future__ import annotations

import math
import re
import sqlite3
import subprocess
import sys
import time
from collections.abc import Callable
from dataclasses import replace
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from textual.widgets import DataTable, Input

from blotter import engine, scenario, store
from blotter.config import Alerts
from blotter.desk import entry, limits
from blotter.desk.close_review import MarkPoint, close_review
from blotter.ui.app import BlotterApp, make_app
from blotter.ui.screens.base import READ_ONLY_WORDS
from blotter.ui.screens.explain import ExplainScreen
from blotter.ui.screens.marks import CloseReviewScreen, MarksScreen
from blotter.ui.screens.trades import TradeForm, TradesScreen
from blotter.ui.widgets.book_table import NOT_ADDITIVE, BookTable

from .conftest import TEST_SETTINGS, frozen_clock, settle


def message(app: BlotterApp) -> str:
    return str(app.screen.query_one(".desk-message").render())


def open_ro(db: Path) -> store.Store:
    return store.open_store(db, read_only=True)


def spot_mark(db: Path, symbol: str) -> float:
    st = open_ro(db)
    try:
        return next(m.value for m in st.marks() if m.kind == "spot" and m.symbol == symbol)
    finally:
        st.close()


def counts(db: Path) -> tuple[int, int, int]:
    """(trades, mark sets, marks) in the file."""
    con = sqlite3.connect(db)
    try:
        return tuple(  # type: ignore[return-value]
            con.execute(f"SELECT count(*) FROM {t}").fetchone()[0]
            for t in ("trade", "mark_set", "mark")
        )
    finally:
        con.close()


async def open_marks(app: BlotterApp, pilot: Any) -> MarksScreen:
    await settle(app, pilot)
    await pilot.press("m")
    await settle(app, pilot)
    assert isinstance(app.screen, MarksScreen)
    return app.screen


def cursor_on(screen: MarksScreen, wanted: Callable[[MarkPoint], bool]) -> MarkPoint:
    """Put the Marks table's cursor on the first point ``wanted``; return that point."""
    assert screen.view is not None
    row = next(i for i, p in enumerate(screen.view.points) if wanted(p))
    screen.query_one("#marks-table", DataTable).move_cursor(row=row)
    return screen.view.points[row]


async def test_typing_a_spot_mark_writes_it_and_reloads_the_book(demo_db: Path) -> None:
    app = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    async with app.run_test(size=(80, 24)) as pilot:
        screen = await open_marks(app, pilot)
        point = screen.cursor_point()
        assert point is not None and point.kind == "spot" and point.symbol == "DEMOA"
        assert point.close_value == pytest.approx(point.value)
        await pilot.press(*"182.5", "enter")
        await settle(app, pilot)
        assert "✓ DEMOA spot marked 182.50" in message(app)
        assert spot_mark(demo_db, "DEMOA") == pytest.approx(182.5)
        row = screen.view.points[0]  # type: ignore[union-attr]
        assert row.value == pytest.approx(182.5)
        assert row.change() == f"{182.5 - row.close_value:+,.2f}"  # type: ignore[operator]
        assert app.state is not None
        i = app.state.valuation.book.underlyings.index_of("DEMOA")
        assert app.state.valuation.underlying_spots[i] == pytest.approx(182.5)
        await pilot.press("q")
        await pilot.pause()
        assert not isinstance(app.screen, MarksScreen)


async def test_a_refused_value_keeps_what_was_typed(demo_db: Path) -> None:
    app = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    before = counts(demo_db)
    async with app.run_test(size=(80, 24)) as pilot:
        screen = await open_marks(app, pilot)
        await pilot.press("enter", *"-5", "enter")
        await settle(app, pilot)
        assert "refused" in message(app) and "spot must be from 1e-06" in message(app)
        box = screen.query_one("#marks-edit")
        assert box.value == "-5" and app.focused is box  # type: ignore[attr-defined]
        await pilot.press("backspace", "backspace", *"abc", "enter")
        await settle(app, pilot)
        assert "is not a number" in message(app)
        assert box.value == "abc"  # type: ignore[attr-defined]
    assert counts(demo_db) == before


async def test_a_vol_is_typed_as_on_the_command_line(demo_db: Path) -> None:
    """A vol cell reads ``0.245`` or ``24.5%`` (``desk.entry.parse_vol``); a bare 24.5 is refused
    in the same words as ``blotter mark vol``, with nothing written and the text kept."""
    app = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    async with app.run_test(size=(80, 24)) as pilot:
        screen = await open_marks(app, pilot)
        point = cursor_on(screen, lambda p: p.kind == "vol")
        before = counts(demo_db)
        await pilot.press(*"38.5", "enter")
        await settle(app, pilot)
        assert "'38.5' looks like a percentage: write 38.5% or 0.385" in message(app)
        assert counts(demo_db) == before
        assert screen.query_one("#marks-edit", Input).value == "38.5"
        await pilot.press("%", "enter")
        await settle(app, pilot)
        assert f"✓ {point.label} marked 38.50%" in message(app)
    with store.open_store(demo_db, read_only=True) as st:
        marked = [
            m.value
            for m in st.marks()
            if (m.kind, m.symbol, m.expiry, m.strike)
            == ("vol", point.symbol, point.expiry, point.strike)
        ]
    assert marked == [pytest.approx(0.385)]


async def test_a_vol_far_from_the_mark_or_very_low_asks_before_it_is_written(
    demo_db: Path,
) -> None:
    """More than 10 vol points from the mark in force, or under 3%: the first Enter asks (in
    percent, beside the vol in force) and writes nothing; a second Enter writes it; a refusal
    speaks in the cell's percent."""
    app = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    async with app.run_test(size=(80, 24)) as pilot:
        screen = await open_marks(app, pilot)
        point = cursor_on(screen, lambda p: p.kind == "vol")
        assert point.value is not None
        header = str(screen.query_one("#marks-table", DataTable).columns["value"].label)
        assert "0.25 or 25%" in header
        before = counts(demo_db)
        await pilot.press(*"1500%", "enter")
        await settle(app, pilot)
        assert "a vol must be above 0% and at most 1,000%, got 1,500%" in message(app)
        await pilot.press(*["backspace"] * 5, *"0.6", "enter")  # a decimal: 60.00%
        await settle(app, pilot)
        jump = (0.60 - point.value) * 100
        assert abs(jump) > 10
        assert f"60.00% is {jump:+.2f} vol points from the mark in force" in message(app)
        assert "Enter again writes it" in message(app) and counts(demo_db) == before
        await pilot.press("backspace", *"02", "enter")  # another text asks again
        await settle(app, pilot)
        assert "2.00% is" in message(app) and "under 3%" in message(app)
        assert counts(demo_db) == before
        await pilot.press("enter")
        await settle(app, pilot)
        assert f"✓ {point.label} marked 2.00%" in message(app)
        assert counts(demo_db)[2] == before[2] + 1


async def test_a_vol_of_an_expired_expiry_is_refused_in_words(demo_db: Path) -> None:
    """A fortnight on, a vol point whose expiry has passed takes no mark: refused in words,
    nothing written, the text kept (``desk.entry.refuse_mark_point``, as ``mark vol``)."""
    from datetime import timedelta

    from .conftest import FROZEN_NOW

    later = FROZEN_NOW + timedelta(days=14)
    app = make_app(demo_db, TEST_SETTINGS, clock=lambda: later)
    async with app.run_test(size=(80, 24)) as pilot:
        screen = await open_marks(app, pilot)
        point = cursor_on(
            screen, lambda p: p.kind == "vol" and p.expiry is not None and p.expiry < later.date()
        )
        before = counts(demo_db)
        typed = f"{point.value * 100:.1f}%"  # near the mark in force, so nothing is asked
        await pilot.press(*typed, "enter")
        await settle(app, pilot)
        assert f"✗ refused: {point.symbol} {point.expiry} has expired" in message(app)
        assert counts(demo_db) == before
        assert screen.query_one("#marks-edit", Input).value == typed


async def test_an_option_price_solves_its_vol_or_is_refused_below_intrinsic(demo_db: Path) -> None:
    app = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    async with app.run_test(size=(80, 24)) as pilot:
        screen = await open_marks(app, pilot)
        assert screen.view is not None and app.state is not None
        row = next(
            i for i, p in enumerate(screen.view.points) if p.kind == "vol" and p.strike is not None
        )
        point = screen.view.points[row]
        screen.query_one("#marks-table").move_cursor(row=row)  # type: ignore[attr-defined]
        v = app.state.valuation
        vol, words, is_call = entry.solve_vol(v, point.symbol, point.expiry, point.strike, 1.0)
        # A price from the engine at 30% vol solves back to 30% and is written as the mark.
        book = v.book
        i = next(
            j
            for j in range(len(book))
            if book.is_option[j]
            and book.underlyings.symbols[book.underlying_idx[j]] == point.symbol
            and str(np.datetime64(book.expiries[j], "D")) <= str(point.expiry)
            and v.live[j]
            and __import__("blotter.calendar", fromlist=["x"]).local_date(book.expiries[j], app.tz)
            == np.datetime64(point.expiry)
        )
        price = float(
            engine.price(
                is_call,
                v.spot[i],
                point.strike,
                v.years[i],
                v.rate[i],
                v.carry[i],
                0.30,
                bool(book.american[i]),
            )
        )
        before = counts(demo_db)
        await pilot.press(*f"${price:.6f}{'c' if is_call else 'p'}", "enter")
        await settle(app, pilot)
        assert "implied vol 30.00%" in message(app)  # beside the one in force, not yet written
        assert f"(in force {point.value * 100:.2f}%, {30 - point.value * 100:+.2f} pt)" in (
            message(app)
        )
        assert counts(demo_db) == before
        await pilot.press("enter")
        await settle(app, pilot)
        assert "marked 30.00%" in message(app)
        st = open_ro(demo_db)
        try:
            marked = next(
                m.value
                for m in st.marks()
                if m.kind == "vol"
                and m.symbol == point.symbol
                and m.expiry == point.expiry
                and m.strike == point.strike
            )
        finally:
            st.close()
        # The price was typed to 6 decimals: up to 5e-7 of price, that over vega in vol.
        vega = float(
            engine.price_greeks(
                is_call, v.spot[i], point.strike, v.years[i], v.rate[i], v.carry[i], 0.30,
                bool(book.american[i]),
            ).vega
        )
        assert marked == pytest.approx(0.30, abs=5e-7 / vega + 1e-9)
        # Below intrinsic: refused with the engine's status, nothing written, text kept.
        before = counts(demo_db)
        intrinsic = max(0.0, (v.spot[i] - point.strike) if is_call else (point.strike - v.spot[i]))
        await pilot.press("enter", *f"${max(intrinsic - 5.0, 0.0) if intrinsic > 5 else 0.0:g}")
        await pilot.press("enter")
        await settle(app, pilot)
        text = message(app)
        assert "refused" in text
        assert counts(demo_db) == before
        del vol, words


async def review_a_close_after_marking_demoa(app: BlotterApp, pilot: Any) -> CloseReviewScreen:
    """Open Marks, mark DEMOA's spot 190 and press c: the close review on screen."""
    await open_marks(app, pilot)
    await pilot.press(*"190", "enter")
    await settle(app, pilot)
    await pilot.press("c")
    await settle(app, pilot)
    assert isinstance(app.screen, CloseReviewScreen)
    return app.screen


async def test_commit_close_reviews_then_writes_one_close_set(demo_db: Path) -> None:
    app = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    async with app.run_test(size=(80, 24)) as pilot:
        review = (await review_a_close_after_marking_demoa(app, pilot)).review
        assert any(line.startswith("DEMOA spot 180.67 → 190.00") for line in review.changed)
        st = open_ro(demo_db)
        closes_before = len(st.mark_sets(kind="close"))
        st.close()
        await pilot.press("y")
        await settle(app, pilot)
        assert isinstance(app.screen, MarksScreen)
        assert "close set" in message(app) and "written" in message(app)
        st = open_ro(demo_db)
        try:
            closes = st.mark_sets(kind="close")
            assert len(closes) == closes_before + 1
            at_close = {(m.kind, m.symbol): m.value for m in st.marks(closes[-1].id)}
        finally:
            st.close()
        assert at_close[("spot", "DEMOA")] == pytest.approx(190.0)


async def test_a_close_when_the_date_is_closed_is_reviewed_and_written_as_its_correction(
    demo_db: Path,
) -> None:
    """Another terminal closed today already: the review says so and names that close, and y
    writes a correction of it (a date closes once), never a second close of the date."""
    with store.open_store(demo_db) as other:
        first = other.commit_close_info(note="another terminal")
    app = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    async with app.run_test(size=(80, 24)) as pilot:
        screen = await review_a_close_after_marking_demoa(app, pilot)
        assert (screen.review.corrects, screen.review.close_day) == (first.id, first.business_date)
        shown = str(screen.query_one("#review-text").render())
        assert f"{first.business_date} is closed already (set {first.id})" in shown
        assert "y or F5 writes the correction" in shown
        await pilot.press("y")
        await settle(app, pilot)
        assert isinstance(app.screen, MarksScreen)
        assert f"written, correcting set {first.id}" in message(app)
    st = open_ro(demo_db)
    try:
        closes = st.mark_sets(kind="close")
        day = [c for c in closes if c.business_date == first.business_date]
        assert [(c.id, c.corrects) for c in day] == [(first.id, None), (closes[-1].id, first.id)]
        assert {(m.kind, m.symbol): m.value for m in st.marks(closes[-1].id)}[
            ("spot", "DEMOA")
        ] == pytest.approx(190.0)
    finally:
        st.close()


async def test_a_busy_file_refuses_the_close_and_nothing_typed_is_lost(
    demo_db: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setattr(store.db, "BUSY_TIMEOUT_MS", 50)
    app = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    async with app.run_test(size=(80, 24)) as pilot:
        screen = await open_marks(app, pilot)
        await pilot.press(*"191", "enter")
        await settle(app, pilot)
        sets_before = counts(demo_db)[1]
        blocker = sqlite3.connect(demo_db, isolation_level=None)
        blocker.execute("BEGIN IMMEDIATE")  # another writer holds the file
        try:
            await pilot.press("c")
            await settle(app, pilot)
            await pilot.press("y")
            await settle(app, pilot)
            assert isinstance(app.screen, CloseReviewScreen), "the review stays up"
            words = str(app.screen.query_one("#review-message").render())
            assert "close not written" in words
        finally:
            blocker.execute("ROLLBACK")
            blocker.close()
        assert counts(demo_db)[1] == sets_before
        assert spot_mark(demo_db, "DEMOA") == pytest.approx(191.0)  # the typed mark is kept
        await pilot.press("y")  # the file is free again: the same review writes the close
        await settle(app, pilot)
        assert isinstance(app.screen, MarksScreen) and "written" in message(app)
        assert counts(demo_db)[1] == sets_before + 1
        assert screen.view is not None


async def open_trades(app: BlotterApp, pilot: Any) -> TradesScreen:
    await settle(app, pilot)
    await pilot.press("t")
    await settle(app, pilot)
    assert isinstance(app.screen, TradesScreen)
    return app.screen


async def fill(pilot: Any, *fields: str) -> None:
    for i, text in enumerate(fields):
        if i:
            await pilot.press("tab")
        await pilot.press(*text) if text else None


async def test_add_a_trade_on_a_new_contract_after_confirmation(demo_db: Path) -> None:
    app = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    async with app.run_test(size=(80, 24)) as pilot:
        screen = await open_trades(app, pilot)
        n = len(screen.records)
        await pilot.press("a")
        await pilot.pause()
        assert isinstance(app.screen, TradeForm)
        await fill(pilot, "DEMOA", "2027-01-15", "201", "c", "5", "1.75")
        await pilot.press("enter")
        await pilot.pause()
        assert "New contract DEMOA 2027-01-15 201 C will be created" in str(
            app.screen.query_one("#form-message").render()
        )
        assert counts(demo_db)[0] == n
        await pilot.press("f5")
        await settle(app, pilot)
        assert isinstance(app.screen, TradesScreen)
        assert "booked" in message(app)
        st = open_ro(demo_db)
        try:
            last = st.trades()[-1]
        finally:
            st.close()
        assert (last.contract, last.quantity, last.price, last.state) == (
            "DEMOA 2027-01-15 201 C",
            5,
            1.75,
            "live",
        )
        assert len(screen.records) == n + 1
        # Filter by typing: only rows holding every word.
        await pilot.press("slash", *"2027-01-15 201")
        await pilot.pause()
        assert screen.shown_ids == [str(last.trade_id)]


async def test_a_trade_price_far_from_the_model_value_asks_before_booking(demo_db: Path) -> None:
    """A DEMOFU hedge at 1.23 (the future marked at 4,826.96) asks in words beside the model
    value and writes nothing; F5 again books it."""
    app = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    async with app.run_test(size=(80, 24)) as pilot:
        await open_trades(app, pilot)
        await pilot.press("a")
        await pilot.pause()
        before = counts(demo_db)
        await fill(pilot, "DEMOFU", "", "", "", "1", "1.23")
        await pilot.press("f5")
        await _asks_then_books(
            app, pilot, demo_db, before,
            "price 1.23 for DEMOFU is -4,825.73 from its model value 4,826.96",
        )


async def _asks_then_books(
    app: BlotterApp, pilot: Any, db: Path, before: tuple[int, int, int], words: str
) -> None:
    """After an F5: the trade form asks in ``words`` and has written nothing; F5 again books
    the one trade."""
    await settle(app, pilot)
    assert isinstance(app.screen, TradeForm)
    said = str(app.screen.query_one("#form-message").render())
    assert words in said
    assert "F5 (or Enter) again to book it" in said and counts(db) == before
    await pilot.press("f5")
    await settle(app, pilot)
    assert isinstance(app.screen, TradesScreen) and "booked" in message(app)
    assert counts(db)[0] == before[0] + 1


async def test_a_new_contract_expiring_on_an_exchange_holiday_asks_before_booking(
    demo_db: Path,
) -> None:
    """A new DEMOA call expiring on Good Friday 2027 (2027-03-26, an NYSE holiday in the
    `holidays` package) is asked about in words after the new-contract question and writes
    nothing; F5 again books it."""
    app = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    async with app.run_test(size=(80, 24)) as pilot:
        await open_trades(app, pilot)
        await pilot.press("a")
        await pilot.pause()
        before = counts(demo_db)
        await fill(pilot, "DEMOA", "2027-03-26", "185", "c", "1", "11")
        await pilot.press("f5")  # the new contract's question
        await settle(app, pilot)
        await pilot.press("f5")
        await _asks_then_books(
            app, pilot, demo_db, before,
            "is Good Friday, an exchange holiday on DEMOA's NYSE calendar",
        )


async def test_a_trial_at_a_price_far_from_the_model_value_asks_before_staging(
    demo_db: Path,
) -> None:
    """A trial is promoted to a trade at the price it was staged at, so the trial form asks as
    the trade form does: a DEMOFU trial at 1.23 asks and stages nothing; F5 again stages it."""
    app = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    async with app.run_test(size=(80, 24)) as pilot:
        await open_trades(app, pilot)
        await pilot.press("i")
        await pilot.pause()
        await fill(pilot, "DEMOFU", "", "", "", "1", "1.23")
        await pilot.press("f5")
        await settle(app, pilot)
        assert isinstance(app.screen, TradeForm) and app.trials == []
        said = str(app.screen.query_one("#form-message").render())
        assert "price 1.23 for DEMOFU is -4,825.73 from its model value 4,826.96" in said
        await pilot.press("f5")
        await settle(app, pilot)
        assert isinstance(app.screen, TradesScreen)
        assert [t.price for t in app.trials] == [1.23]


async def test_a_bad_field_is_refused_in_the_form(demo_db: Path) -> None:
    app = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    before = counts(demo_db)
    async with app.run_test(size=(80, 24)) as pilot:
        await open_trades(app, pilot)
        await pilot.press("a")
        await pilot.pause()
        await fill(pilot, "DEMOA", "2027-13-40", "201", "c", "5", "3.25")
        await pilot.press("f5")
        await pilot.pause()
        assert isinstance(app.screen, TradeForm)
        assert "expiry" in str(app.screen.query_one("#form-message").render())
        assert app.screen.value("expiry") == "2027-13-40"
    assert counts(demo_db) == before


async def test_a_book_of_one_name_fills_the_forms_symbol(tmp_path: Path) -> None:
    """With one underlying the form's symbol is filled and the cursor starts on the expiry; a
    hint never reads as a value ("one of …", "e.g. …")."""
    path = tmp_path / "one.db"
    with store.create_store(path) as st:
        st.add_underlying("ONE", "stock", "USD", 100.0, description="invented for the tests")
    app = make_app(path, TEST_SETTINGS, clock=frozen_clock)
    async with app.run_test(size=(80, 24)) as pilot:
        await open_trades(app, pilot)
        await pilot.press("a")
        await pilot.pause()
        assert isinstance(app.screen, TradeForm)
        assert app.screen.value("symbol") == "ONE"
        assert app.screen.focused is app.screen.query_one("#form-expiry", Input)
        assert app.screen.query_one("#form-expiry", Input).placeholder.startswith("e.g. ")


async def test_cancel_with_a_reason_and_amend(demo_db: Path) -> None:
    app = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    async with app.run_test(size=(80, 24)) as pilot:
        screen = await open_trades(app, pilot)
        first = screen.cursor_trade()
        assert first is not None and first.state == "live"
        await pilot.press("x")
        await pilot.pause()
        await pilot.press("enter")  # no reason: refused
        await pilot.pause()
        assert "needs a reason" in str(app.screen.query_one("#form-message").render())
        await pilot.press(*"duplicate ticket", "enter")
        await settle(app, pilot)
        assert f"trade {first.trade_id} cancelled" in message(app)
        st = open_ro(demo_db)
        try:
            rec = {t.trade_id: t for t in st.trades()}
        finally:
            st.close()
        assert rec[first.trade_id].state == "cancelled"
        assert rec[first.trade_id].cancel_reason == "duplicate ticket"
        # Amend the next live trade's price.
        await pilot.press("down")
        second = screen.cursor_trade()
        assert second is not None and second.state == "live"
        await pilot.press("e")
        await pilot.pause()
        form = app.screen
        assert isinstance(form, TradeForm) and form.value("qty") == str(second.quantity)
        await pilot.press("tab", *["backspace"] * 12, *"27.5", "tab", *"wrong price", "enter")
        await settle(app, pilot)
        assert "amended" in message(app)
        st = open_ro(demo_db)
        try:
            rec = {t.trade_id: t for t in st.trades()}
        finally:
            st.close()
        assert rec[second.trade_id].state == "amended"
        new = rec[rec[second.trade_id].replaced_by]  # type: ignore[index]
        assert (new.price, new.quantity, new.state) == (27.5, second.quantity, "live")


async def test_a_trial_changes_the_totals_and_leaves_the_store_untouched(demo_db: Path) -> None:
    app = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    before = counts(demo_db)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(app, pilot)
        assert app.state is not None
        live_total = app.state.tree.total().values
        live_move = None
        await pilot.press("slash", *"spot -3%")
        await settle(app, pilot)
        live_move = app.result.total.full  # type: ignore[union-attr]
        await pilot.press("f3")  # back to the book (b would type in the bar)
        await open_trades(app, pilot)
        await pilot.press("i")
        await pilot.pause()
        await fill(pilot, "DEMOA", "2026-12-18", "177.5", "c", "100", "6.1")
        await pilot.press("enter")
        await settle(app, pilot)
        assert isinstance(app.screen, TradesScreen)
        assert app.screen.shown_ids[0] == "T1"
        await pilot.press("q")
        await settle(app, pilot)
        state = app.state
        assert state is not None and int(state.valuation.book.is_trial.sum()) == 1
        rows = app.query_one(BookTable).visible_rows()
        assert [r.key for r in rows[:2]] == ["total", "total-live"]
        with_trial, without = rows[0].values, rows[1].values
        delta_col = 1
        assert with_trial[delta_col] != pytest.approx(live_total[delta_col])
        assert without[delta_col] == pytest.approx(live_total[delta_col])
        # The trial is layered on the move too: the bar's move re-applied on the trial book.
        assert app.result.total.full != pytest.approx(live_move)  # type: ignore[union-attr]
        expected = scenario.apply_move(state.valuation, scenario.parse_move("spot -3%"))
        assert app.result.total.full == pytest.approx(expected.total.full)  # type: ignore[union-attr]
        assert "TRIALS 1" in str(app.query_one("#header-line").render())
        trial_rows = [r for k in ("u|DEMOA",) for r in [*app.query_one(BookTable).visible_rows()]]
        assert trial_rows
        assert counts(demo_db) == before  # nothing written
        await pilot.press("c")  # clear trials
        await settle(app, pilot)
        assert app.trials == [] and not app.state.valuation.book.is_trial.any()  # type: ignore[union-attr]
        assert app.state.tree.total().values[delta_col] == pytest.approx(live_total[delta_col])  # type: ignore[union-attr]
    assert counts(demo_db) == before


async def test_promoting_a_trial_books_it(demo_db: Path) -> None:
    app = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    before = counts(demo_db)
    async with app.run_test(size=(80, 24)) as pilot:
        await open_trades(app, pilot)
        await pilot.press("i")
        await pilot.pause()
        await fill(pilot, "DEMOA", "2026-12-18", "177.5", "c", "-3", "6.1")
        await pilot.press("enter")
        await settle(app, pilot)
        await pilot.press("p")
        await settle(app, pilot)
        assert "booked as trades" in message(app)
        assert app.trials == []
    assert counts(demo_db)[0] == before[0] + 1


def contract_count(db: Path) -> int:
    con = sqlite3.connect(db)
    try:
        return int(con.execute("SELECT count(*) FROM contract").fetchone()[0])
    finally:
        con.close()


async def test_a_trial_on_a_contract_the_store_lacks_is_layered_then_promoted(
    demo_db: Path,
) -> None:
    """A what-if trade on a strike nobody has traded: the contract takes the underlying's
    defaults in memory (American, 100 per contract, the 16:00 New York cut-off), nothing is
    written, two trials of it share one contract, and promoting them creates it in the store."""
    app = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    before, n_contracts = counts(demo_db), contract_count(demo_db)
    async with app.run_test(size=(80, 24)) as pilot:
        await open_trades(app, pilot)
        for qty in ("5", "-2"):
            await pilot.press("i")
            await pilot.pause()
            await fill(pilot, "DEMOA", "2027-09-17", "215", "c", qty, "4.2")
            await pilot.press("enter")
            await settle(app, pilot)
            assert isinstance(app.screen, TradesScreen), message(app)
        assert "a new contract, not in the store" in message(app)
        first, second = (t.contract for t in app.trials)
        assert first.contract_id == second.contract_id < 0
        assert first.label == "DEMOA 2027-09-17 215 C"
        assert (first.american, first.multiplier) == (True, 100.0)
        assert first.cutoff_utc is not None and first.cutoff_utc.hour == 20  # 16:00 New York, EDT
        await pilot.press("q")
        await settle(app, pilot)
        book = app.state.valuation.book  # type: ignore[union-attr]
        rows = np.flatnonzero(book.is_trial)
        assert len(rows) >= 1 and all(book.labels[i] == first.label for i in rows)
        assert float(book.quantities[rows].sum()) == 3.0
        assert np.isfinite(app.state.valuation.value[rows]).all()  # type: ignore[union-attr]
        assert counts(demo_db) == before and contract_count(demo_db) == n_contracts
        await open_trades(app, pilot)
        await pilot.press("p")
        await settle(app, pilot)
        assert "2 trial(s) booked as trades" in message(app)
    assert counts(demo_db)[0] == before[0] + 2
    assert contract_count(demo_db) == n_contracts + 1


async def test_book_total_leaves_share_columns_blank_and_vega_switches_unit(
    demo_app: BlotterApp,
) -> None:
    async with demo_app.run_test(size=(160, 48)) as pilot:
        await settle(demo_app, pilot)
        table = demo_app.query_one(BookTable)
        for col in ("delta_shares", "gamma_1pct", "vanna_pt"):
            assert str(table.get_cell("total", col)).strip() == NOT_ADDITIVE
            assert str(table.get_cell("u|DEMOA", col)).strip() != NOT_ADDITIVE
        assert str(table.get_cell("total", "delta_cash")).strip() != NOT_ADDITIVE
        per_pt = float(str(table.get_cell("total", "vega_pt")).replace(",", ""))
        await pilot.press("u")
        await pilot.pause()
        per_vol = float(str(table.get_cell("total", "vega_pt")).replace(",", ""))
        assert per_vol == pytest.approx(per_pt * 100, abs=100)
        assert "1.00" in str(table.columns["vega_pt"].label)  # type: ignore[index]
        await pilot.press("ctrl+k")
        await pilot.pause()
        assert float(str(table.get_cell("total", "vega_pt")).replace(",", "")) == per_pt


async def open_explain(app: BlotterApp, pilot: Any) -> ExplainScreen:
    """The Explain screen (l) with its first result in."""
    await settle(app, pilot)
    await pilot.press("l")
    await settle(app, pilot)
    screen = app.screen
    assert isinstance(screen, ExplainScreen) and screen.result is not None
    return screen


async def test_explain_screen_starts_at_the_last_close_not_a_later_correction_of_an_older_one(
    demo_db: Path,
) -> None:
    """The demo's first close (11-27) corrected today: "since the last close" still starts at the
    11-30 close, and ending there starts at the correction standing for 11-27."""
    with store.open_store(demo_db) as st:
        first, last = (c.id for c in st.mark_sets(kind="close"))
        fixed = st.commit_close_info(corrects=first)
    assert fixed.id > last
    app = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    async with app.run_test(size=(80, 24)) as pilot:
        screen = await open_explain(app, pilot)
        assert screen.result.from_set.id == last and screen.result.to_set == "now"
        await pilot.press("o")  # end at the last close
        await settle(app, pilot)
        assert (screen.result.from_set.id, screen.result.to_set.id) == (fixed.id, last)


async def test_explain_screen_shows_scenario_explain(demo_db: Path) -> None:
    app = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    async with app.run_test(size=(80, 24)) as pilot:
        screen = await open_explain(app, pilot)
        st = open_ro(demo_db)
        try:
            closes = [s for s in st.mark_sets(kind="close") if s.superseded_by is None]
        finally:
            st.close()
        assert screen.result.from_set.id == closes[-1].id and screen.result.to_set == "now"
        await pilot.press("o")  # end at the last close: the last two closes
        await settle(app, pilot)
        st = open_ro(demo_db)
        try:
            expected = scenario.explain(st)
        finally:
            st.close()
        got = screen.result
        assert (got.from_set.id, got.to_set.id) == (expected.from_set.id, expected.to_set.id)
        table = screen.query_one("#explain-table")
        labels = [str(table.get_row_at(i)[0]) for i in range(table.row_count)]  # type: ignore[attr-defined]
        total_col = [str(table.get_row_at(i)[1]) for i in range(table.row_count)]  # type: ignore[attr-defined]
        for name, value in (
            ("unexplained", expected.total.unexplained),
            ("new trades", expected.total.new_trades),
            ("= total P&L", expected.total.total),
            ("Δ · dS", expected.total.terms["delta"]),
        ):
            shown = float(total_col[labels.index(name)].replace(",", ""))
            assert shown == pytest.approx(value, abs=0.5)
        assert [str(c.label) for c in table.columns.values()][1] == "total"  # type: ignore[attr-defined]
        await pilot.press("q")
        await pilot.pause()
        assert not isinstance(app.screen, ExplainScreen)


async def test_watch_list_names_breaches_and_expiries(demo_db: Path) -> None:
    settings = replace(
        TEST_SETTINGS,
        alerts=Alerts(underlying_vega_pt=1.0, ladder_loss=1.0, underlying_ladder_loss=1.0),
    )
    app = make_app(demo_db, settings, clock=frozen_clock)
    async with app.run_test(size=(120, 30)) as pilot:
        await settle(app, pilot)
        header = str(app.query_one("#header-line").render())
        assert "limit breaches" in header or "worst grid cell" in header
        rows = app.query_one(BookTable).visible_rows()
        assert all("|vega| over 1" in r.alert for r in rows if r.level == 1)
        assert any("worst grid cell" in r.alert for r in rows if r.level == 1)
        assert not rows[0].alert or "grid" not in rows[0].alert
        await pilot.press("w")
        await settle(app, pilot)
        text = str(app.screen.query_one("#watch-text").render())
        title = str(app.screen.query_one(".desk-title").render())
        assert title.startswith("Flags: expiring this week")
        assert "book worst grid cell" in text and "DEMOA |vega| over 1" in text
        days = limits.days_to_week_end(frozen_clock(), app.tz)
        assert 5.5 < days < 6  # Tuesday 10:00 to the end of Sunday
        state = app.state
        assert state is not None
        expected = scenario.apply_move(
            state.valuation, scenario.Move(text="week", days=days)
        ).expiring
        assert f"Options expiring by the end of Sunday (in {days:.1f} days): " in text
        assert f"days): {len(expected)}; pin risk" in text


async def test_read_only_app_cannot_write(demo_db: Path) -> None:
    settings = replace(TEST_SETTINGS, read_only=True)
    app = make_app(demo_db, settings, clock=frozen_clock)
    before = counts(demo_db)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(app, pilot)
        assert "READ-ONLY" in str(app.query_one("#header-line").render())
        screen = await open_marks(app, pilot)
        assert screen.check_action("edit", ()) is False
        assert screen.check_action("commit_close", ()) is False
        for key in ("enter", "1", "e", "f2", "c", "f5"):
            screen.say("")
            await pilot.press(key)
            await settle(app, pilot)
            assert isinstance(app.screen, MarksScreen)
            assert READ_ONLY_WORDS in message(app), key
        assert screen.query_one("#marks-edit").disabled and screen.editing is None
        await pilot.press("q")
        trades = await open_trades(app, pilot)
        for action in ("add", "amend", "cancel_trade", "promote"):
            assert trades.check_action(action, ()) is False
        for key in ("a", "x", "e", "p", "f3", "f8", "f6", "f7"):
            trades.say("")
            await pilot.press(key)
            await pilot.pause()
            assert isinstance(app.screen, TradesScreen)
            assert READ_ONLY_WORDS in message(app), key
        # A trial is not a write: it is offered on a read-only book.
        await pilot.press("i")
        await pilot.pause()
        assert isinstance(app.screen, TradeForm)
    assert counts(demo_db) == before


async def test_another_process_commits_a_mark_and_the_app_shows_it(demo_db: Path) -> None:
    settings = replace(TEST_SETTINGS, watch_interval_s=0.1)
    app = make_app(demo_db, settings, clock=frozen_clock)
    async with app.run_test(size=(80, 24)) as pilot:
        await open_marks(app, pilot)
        subprocess.run(
            [
                sys.executable,
                "-m",
                "blotter",
                "mark",
                "spot",
                "DEMOA",
                "177.25",
                "--db",
                str(demo_db),
            ],
            check=True,
            capture_output=True,
        )
        deadline = time.monotonic() + 10
        screen = app.screen
        assert isinstance(screen, MarksScreen)
        while time.monotonic() < deadline:
            await pilot.pause(0.05)
            view = screen.view
            state = app.state
            if (
                view is not None
                and view.points[0].value == pytest.approx(177.25)
                and state is not None
                and math.isclose(
                    state.valuation.underlying_spots[
                        state.valuation.book.underlyings.index_of("DEMOA")
                    ],
                    177.25,
                )
            ):
                break
        else:
            raise AssertionError("the other process's mark did not show")
        assert isinstance(app.screen, MarksScreen), "the open screen stays"


async def test_a_slow_load_shows_a_progress_bar(demo_db: Path) -> None:
    """A loader that takes longer than half a second: the bar shows, then goes with the book."""
    import threading

    from blotter.ui.app import BlotterApp

    st = open_ro(demo_db)
    try:
        book, market = st.load_book(), st.load_market()
    finally:
        st.close()
    release = threading.Event()

    def slow() -> tuple[Any, Any, int]:
        release.wait(10)
        return book, market, 0

    app = BlotterApp(str(demo_db), TEST_SETTINGS, clock=frozen_clock, loader=slow)
    async with app.run_test(size=(80, 24)) as pilot:
        bar = app.query_one("#load-progress")
        for _ in range(200):
            await pilot.pause(0.01)
            if bar.has_class("-shown"):
                break
        assert bar.has_class("-shown") and bar.display
        release.set()
        await settle(app, pilot)
        assert not bar.has_class("-shown") and app.state is not None


async def test_commits_during_a_slow_load_do_not_cancel_it(demo_db: Path) -> None:
    """Under a feed, commits arrive faster than a large book loads: each load runs to its end
    and is shown, and every request made while it ran is served by one more load (before, each
    commit cancelled the running load, and the pane froze until the commits stopped)."""
    import threading

    from blotter.ui.app import BlotterApp

    st = open_ro(demo_db)
    try:
        book, market = st.load_book(), st.load_market()
    finally:
        st.close()
    gate = threading.Semaphore(0)
    calls: list[int] = []

    def slow() -> tuple[Any, Any, int]:
        calls.append(len(calls))
        gate.acquire(timeout=10)
        return book, market, len(calls)

    app = BlotterApp(str(demo_db), TEST_SETTINGS, clock=frozen_clock, loader=slow)
    async with app.run_test(size=(80, 24)) as pilot:
        for _ in range(200):
            await pilot.pause(0.01)
            if calls:
                break
        for _ in range(5):  # five commits seen while the first load waits
            app.load_book()
            await pilot.pause(0.01)
        assert len(calls) == 1, "a request while a load runs must not start another"
        gate.release()  # the first load ends and is shown ...
        for _ in range(300):
            await pilot.pause(0.01)
            if len(calls) == 2:
                break
        assert app.state is not None and app.state.data_version == 1
        gate.release()  # ... then exactly one more load serves the five requests
        await settle(app, pilot)
        assert len(calls) == 2 and app.state.data_version == 2


RAW_CONTROLS = re.compile("[\x00-\x1f\x7f-\x9f\u202a-\u202e\u2066-\u2069]")
"""Characters that drive a terminal (C0, DEL, C1) or reorder text (bidirectional controls)."""


async def test_text_from_the_book_cannot_drive_the_terminal(demo_db: Path, tmp_path: Path) -> None:
    """A book name, a note and an imported file's name holding escape sequences (window title,
    clear screen) and Rich markup are shown escaped and literal on the Trades screen."""
    book = "desk\x1b]2;TITLE\x07[bold]x[/]"
    csv_path = tmp_path / "t\x1b[2J.csv"
    csv_path.write_text(
        f"book,symbol,type,quantity,price,trade_time\n{book},DEMOA,U,1,1,2026-11-30T15:00:00Z\n",
        encoding="utf-8",
    )
    with store.open_store(demo_db) as st:
        st.add_trade(book, "DEMOA", 2, 1.0, create_book=True, note="\x1b[2J\u202e")
        st.import_trades_csv(csv_path)
    app = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    async with app.run_test(size=(160, 48)) as pilot:
        screen = await open_trades(app, pilot)
        table = screen.query_one("#trades-table", DataTable)
        rows = [[str(c) for c in table.get_row_at(i)] for i in range(table.row_count)]
        assert not any(RAW_CONTROLS.search(c) for r in rows for c in r)
        ours = [r for r in rows if "desk" in " ".join(r)]
        assert len(ours) == 2
        assert all("desk\\x1b]2;TITLE\\x07[bold]x[/]" in r for r in ours)
        assert any("file:t\\x1b[2J.csv" in r for r in ours)


async def test_a_failed_load_shows_the_path_as_text(tmp_path: Path) -> None:
    """The reason a load failed names the file; markup or escapes in its name are shown as
    written, in the header and in the notification."""
    path = tmp_path / "x[/]y\x1b]2;T\x07.db"
    app = make_app(path, TEST_SETTINGS, clock=frozen_clock)
    async with app.run_test(size=(160, 48)) as pilot:
        await settle(app, pilot)
        header = str(app.query_one("#header-line").render())
        assert "no book at" in header and "x[/]y\\x1b]2;T\\x07.db" in header
        assert not RAW_CONTROLS.search(header)
        shown = [n.message for n in app._notifications]
        assert shown and not any(RAW_CONTROLS.search(m) for m in shown)
        assert app.is_running


async def test_a_currency_without_a_rate_curve_is_listed_and_can_be_typed(demo_db: Path) -> None:
    """A GBP name with a spot and a vol but no GBP rates: the Marks screen lists a GBP rate point
    as missing (its count apart from the points in force), the close review names it, and typing
    it writes the GBP curve."""
    st = store.open_store(demo_db)
    try:
        st.add_underlying("ZZG", "stock", "GBP", 100, description="test stock (invented)")
        st.log_spot("ZZG", 50.0)
        st.log_vol("ZZG", "2027-06-17", 0.25)
        st.add_trade("equity-vol", "ZZG", 3, 2.0, "2027-06-17", 50.0, True)
        in_force = len(st.marks())
    finally:
        st.close()
    app = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    async with app.run_test(size=(80, 24)) as pilot:
        screen = await open_marks(app, pilot)
        assert screen.view is not None
        missing = [p for p in screen.view.points if p.needed and p.value is None]
        assert [(p.kind, p.currency) for p in missing] == [("rate", "GBP")]
        title = str(screen.query_one(".desk-title").render())
        assert f"{in_force} points in force, 1 missing" in title
        review = close_review(screen.view, frozen_clock())
        assert review.missing == ("GBP rate 365d",)
        keys = [p.key for p in screen.view.points]
        screen.query_one(DataTable).move_cursor(row=keys.index(missing[0].key))
        await pilot.press(*"4.5%", "enter")  # a rate is 0.045 or 4.5%, as on the command line
        await settle(app, pilot)
    st = open_ro(demo_db)
    try:
        rate = [m for m in st.marks() if m.kind == "rate" and m.currency == "GBP"]
    finally:
        st.close()
    assert [(m.tenor_days, m.value) for m in rate] == [(365, pytest.approx(0.045))]
