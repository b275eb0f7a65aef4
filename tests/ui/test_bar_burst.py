"""Keys that reach the what-if bar in one burst (fast typing, a paste of keys over SSH, tmux) are
applied in the order they were sent: editing keys and history keys as well as typed text."""

from __future__ import annotations

from pathlib import Path

from textual import events

from blotter.ui.app import BlotterApp, make_app
from blotter.ui.widgets.whatif_bar import MoveInput

from .conftest import TEST_SETTINGS, frozen_clock, settle

SPOT_PCTS = ("1.0", "2.1", "3.2", "4.3", "5.4", "6.5", "7.6", "8.7", "9.8", "10.9", "12.0", "13.1")
"""Twelve moves typed back to back, each after Ctrl+U clears the bar."""


def key(name: str) -> events.Key:
    """The key event a terminal's bytes become: a character, or a named key such as ctrl+u."""
    if len(name) == 1:
        names = {" ": "space", "-": "minus", "%": "percent_sign", ".": "full_stop"}
        return events.Key(names.get(name, name), name)
    return events.Key(name, "\x15" if name == "ctrl+u" else None)


def burst(app: BlotterApp, *names: str) -> None:
    """Post every key to the app at once, as the driver does when bytes arrive together."""
    for name in names:
        app.post_message(key(name))


async def focused_bar(app: BlotterApp, pilot: object) -> MoveInput:
    await settle(app, pilot)
    await pilot.press("f2")  # type: ignore[attr-defined]
    bar = app.query_one(MoveInput)
    assert app.focused is bar
    return bar


async def test_twelve_moves_sent_back_to_back_leave_the_last(demo_db: Path) -> None:
    app = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    async with app.run_test(size=(80, 24)) as pilot:
        bar = await focused_bar(app, pilot)
        keys: list[str] = []
        for pct in SPOT_PCTS:
            keys += ["ctrl+u", *f"spot -{pct}%"]
        burst(app, *keys)
        await settle(app, pilot)
        assert bar.value == "spot -13.1%"
        assert app.move_text == "spot -13.1%"


async def test_editing_keys_in_a_burst_apply_where_they_were_typed(demo_db: Path) -> None:
    """Backspace, Left and Home between typed characters, all in one burst."""
    app = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    async with app.run_test(size=(80, 24)) as pilot:
        bar = await focused_bar(app, pilot)
        burst(
            app,
            *"spot -3%",
            "backspace",
            "backspace",
            *"5%",
            "home",
            *"vol +2 ",
            "end",
            "left",
            *".5",
        )
        await settle(app, pilot)
        assert bar.value == "vol +2 spot -5.5%"


async def test_history_recall_in_a_burst_keeps_its_place(demo_db: Path) -> None:
    """Up recalls the last move entered; the text typed after it lands after the recalled move."""
    app = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    async with app.run_test(size=(80, 24)) as pilot:
        bar = await focused_bar(app, pilot)
        await pilot.press(*"spot -2%", "enter")
        await settle(app, pilot)
        burst(app, "f2", "ctrl+u", *"vol +1", "ctrl+u", "up", *" days 1")  # Enter left the bar
        await settle(app, pilot)
        assert bar.value == "spot -2% days 1"
        assert bar.history == ["spot -2%"]
