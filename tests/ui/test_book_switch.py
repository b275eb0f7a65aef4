"""One book at a time in the app: a key cycles all books, then each book by name; the header says
which; the Book pane holds only that book's positions (as ``store.load_book(name)``); the trade
form defaults to the book in view."""

from __future__ import annotations

from pathlib import Path

import numpy as np
from textual.widgets import Input

from blotter import store
from blotter.ui.app import make_app
from blotter.ui.screens.trades import TradeForm

from .conftest import TEST_SETTINGS, frozen_clock, settle


def _books(db: Path) -> tuple[list[str], dict[str, int]]:
    with store.open_store(db, read_only=True) as st:
        names = sorted(st.book_names())
        return names, {n: len(st.load_book(n)) for n in names} | {"": len(st.load_book())}


async def test_the_book_switch_cycles_and_the_form_follows(demo_db: Path) -> None:
    names, sizes = _books(demo_db)
    assert len(names) >= 2
    app = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(app, pilot)
        assert app.state is not None
        header = str(app.query_one("#header-line").render())
        assert header.startswith("Book: all books")
        assert len(app.state.valuation.book) == sizes[""]
        for name in [*names, None]:
            await pilot.press("n")
            await settle(app, pilot)
            header = str(app.query_one("#header-line").render())
            expected = "all books" if name is None else name
            assert header.startswith(f"Book: {expected}"), header
            assert app.book_in_view == name
            n = len(app.state.valuation.book)
            assert n == sizes[name or ""]
            if name is not None:
                held = app.state.valuation.book.contract_ids
                with store.open_store(demo_db, read_only=True) as st:
                    assert np.array_equal(np.sort(held), np.sort(st.load_book(name).contract_ids))
        await pilot.press("n", "n")  # the second book
        await settle(app, pilot)
        assert app.book_in_view == names[1]
        await pilot.press("t")
        await settle(app, pilot)
        await pilot.press("a")
        await pilot.pause()
        form = app.screen
        assert isinstance(form, TradeForm)
        assert form.query_one("#form-book", Input).value == names[1]


async def test_the_explain_screen_explains_the_book_in_view(demo_db: Path) -> None:
    from blotter import scenario
    from blotter.desk.books import OneBook

    names, _ = _books(demo_db)
    app = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(app, pilot)
        await pilot.press("n")
        await settle(app, pilot)
        await pilot.press("l")
        await settle(app, pilot)
        screen = app.screen
        assert f"book {names[0]}" in str(screen.query_one(".desk-title").render())
        result = screen.result  # type: ignore[attr-defined]
        with store.open_store(demo_db, read_only=True) as st:
            closes = scenario.closes_in_force(st.mark_sets())
            alone = scenario.explain(OneBook(st, names[0]), closes[-1].id, "now")
        assert {r.label for r in result.by_underlying} == {r.label for r in alone.by_underlying}
        assert result.total.new_trades == alone.total.new_trades
