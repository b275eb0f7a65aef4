"""Worker results that arrive while the app or a screen is closing are dropped, not shown.

Each test mounts a probe widget that posts a result exactly when the widgets around it are being
unmounted (the app exiting, a screen popped), the moment a thread worker's late message lands in
practice; the app must finish without an exception and write nothing.
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path
from typing import Any

import pytest
from textual.message import Message
from textual.message_pump import MessagePump
from textual.widget import Widget

from blotter.ui.app import BlotterApp, make_app
from blotter.ui.messages import (
    BookLoaded,
    LadderReady,
    LoadFailed,
    LoadProgress,
    MarksRead,
    MoveApplied,
    MoveFailed,
    ProfileReady,
    StoreChanged,
)
from blotter.ui.screens.marks import MarksScreen
from blotter.ui.widgets.grid_pane import GridPane

from .conftest import TEST_SETTINGS, frozen_clock, settle
from .test_screens import open_marks


class Probe(Widget):
    """Posts ``message()`` to ``target`` when it is unmounted."""

    def __init__(self, target: MessagePump, message: Callable[[], Message]) -> None:
        super().__init__()
        self.target = target
        self.message = message
        self.posted = False

    def on_unmount(self) -> None:
        self.posted = self.target.post_message(self.message())


def app_results(app: BlotterApp) -> dict[str, Callable[[], Message]]:
    """One message of each kind the app's workers post, built from what the app shows now."""
    state, result = app.state, app.result
    assert state is not None and result is not None
    ladder = app.query_one(GridPane).ladder
    profile = app.query_one("#reval-pane").profile  # type: ignore[attr-defined]
    return {
        "BookLoaded": lambda: BookLoaded(state),
        "LoadProgress": lambda: LoadProgress(1),
        "LoadFailed": lambda: LoadFailed("late failure"),
        "MoveApplied": lambda: MoveApplied(
            app.move_seq, app.book_seq, app.move_text, app.move, result
        ),
        "MoveFailed": lambda: MoveFailed(app.move_seq, "late failure"),
        "LadderReady": lambda: LadderReady(app.book_seq, 0.0, ladder),
        "ProfileReady": lambda: ProfileReady(app.book_seq, profile),
        "StoreChanged": lambda: StoreChanged(10**6),
    }


KINDS = (
    "BookLoaded",
    "LoadProgress",
    "LoadFailed",
    "MoveApplied",
    "MoveFailed",
    "LadderReady",
    "ProfileReady",
    "StoreChanged",
)


async def ready_app(app: BlotterApp, pilot: Any) -> None:
    """The book loaded and a move applied, so every kind of result can be built."""
    await settle(app, pilot)
    await pilot.press("f2", *"spot -3%")
    await settle(app, pilot)


@pytest.mark.parametrize("kind", KINDS)
async def test_a_result_arriving_as_the_app_exits_is_dropped(demo_db: Path, kind: str) -> None:
    """Late from a worker while the panes go: the run ends cleanly (an exception would re-raise)."""
    app = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    before = demo_db.read_bytes()
    async with app.run_test(size=(80, 24)) as pilot:
        await ready_app(app, pilot)
        probe = Probe(app, app_results(app)[kind])
        await app.query_one(GridPane).mount(probe)
    assert probe.posted, "the probe's message reached the app's queue"
    assert demo_db.read_bytes() == before


@pytest.mark.parametrize("kind", KINDS)
async def test_a_result_arriving_as_the_app_exits_from_a_desk_screen_is_dropped(
    demo_db: Path, kind: str
) -> None:
    """The same with the Marks screen open (the app's panes are below it)."""
    app = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    async with app.run_test(size=(80, 24)) as pilot:
        await ready_app(app, pilot)
        results = app_results(app)
        app.action_focus_book()
        await open_marks(app, pilot)
        probe = Probe(app, results[kind])
        await app.query_one(GridPane).mount(probe)
    assert probe.posted


@pytest.mark.parametrize("exit_by", ["back", "quit"])
async def test_a_screen_result_arriving_as_the_screen_closes_changes_nothing(
    demo_db: Path, exit_by: str
) -> None:
    """A Marks screen's late read lands as the screen is popped, or as the app exits from it."""
    app = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    before = demo_db.read_bytes()
    async with app.run_test(size=(80, 24)) as pilot:
        screen = await open_marks(app, pilot)
        assert screen.view is not None
        view = screen.view
        await screen.mount(Probe(screen, lambda: MarksRead(view)))
        if exit_by == "back":
            await pilot.press("q")
            await settle(app, pilot)
            assert not isinstance(app.screen, MarksScreen)
            await open_marks(app, pilot)  # the app still answers keys
    assert demo_db.read_bytes() == before
