"""Values the model cannot carry, typed into the app: refused in words naming the field, with
nothing written, nothing lost (trial trades stay) and the app still running."""

from __future__ import annotations

from pathlib import Path

import pytest
from textual.widgets import Input

from blotter.ui.app import make_app
from blotter.ui.screens.trades import TradeForm, TradesScreen
from blotter.ui.widgets.whatif_bar import MoveInput

from .conftest import TEST_SETTINGS, frozen_clock, settle
from .test_screens import counts, fill, message, open_trades

HUGE = "1" + "0" * 309
"""310 digits: past float64."""


def form_message(form: TradeForm) -> str:
    return str(form.query_one("#form-message").render())


GOOD = {"symbol": "DEMOA", "expiry": "2027-03-19", "strike": "190", "cp": "c", "qty": "5",
        "price": "3.25"}
"""Form fields that book (a trade) or layer (a trial) without complaint."""

OUT_OF_RANGE = [
    ("qty", HUGE, "quantity must be from -1e+12 to 1e+12"),
    ("qty", "-" + HUGE, "quantity must be from -1e+12 to 1e+12"),
    ("price", "1e999", "price must be from 0 to below 1e+12"),
    ("strike", "4e-9", "strike must be from 1e-06"),
    ("expiry", "0999-03-19", "expiry must be from 1900-01-01"),
]
"""(field, typed value, words the form must say)."""


@pytest.mark.parametrize("kind", ["a", "i"])  # a trade, a trial
async def test_a_value_out_of_range_in_the_trade_form_is_named(demo_db: Path, kind: str) -> None:
    app = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    before = counts(demo_db)
    async with app.run_test(size=(80, 24)) as pilot:
        await open_trades(app, pilot)
        await pilot.press(kind)
        await pilot.pause()
        form = app.screen
        assert isinstance(form, TradeForm)
        for field, value, words in OUT_OF_RANGE:
            for key, good in (GOOD | {field: value}).items():
                form.query_one(f"#form-{key}", Input).value = good
            await pilot.press("f5")
            await settle(app, pilot)
            stays = app.screen is form
            assert stays, "the form stays, with what was typed"
            assert words in form_message(form), (field, value)
            assert form.value(field) == value
            assert app.trials == []
    assert counts(demo_db) == before


async def test_bdays_with_309_digits_in_the_bar_is_refused_and_trials_are_kept(
    demo_db: Path,
) -> None:
    app = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    async with app.run_test(size=(80, 24)) as pilot:
        await open_trades(app, pilot)
        await pilot.press("i")
        await pilot.pause()
        # a price near the model value, so the form does not ask about it
        await fill(pilot, "DEMOA", "2027-03-19", "190", "c", "5", "8.75")
        await pilot.press("f5")
        await settle(app, pilot)
        assert isinstance(app.screen, TradesScreen), message(app)
        await pilot.press("q")
        await settle(app, pilot)
        assert len(app.trials) == 1
        await pilot.press("f2", *"spot -2%")
        await settle(app, pilot)
        shown = app.result.total.full
        bar = app.query_one(MoveInput)
        for text in (f"bdays {HUGE}", "bdays 99999999", f"spot +{HUGE}%", f"rate +{HUGE}bp"):
            bar.value = text
            await settle(app, pilot)
            words = str(app.query_one("#whatif-message").render())
            assert "✗" in words and "must be" in words, (text, words)
            assert app.result.total.full == shown
        assert len(app.trials) == 1 and app.is_running
