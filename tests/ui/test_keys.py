"""Every binding on the help screen exists in the running app, with the keys the help shows;
a user's keymap (by binding id) changes the keys; no binding uses a key that SSH/tmux eat."""

from __future__ import annotations

import io
from pathlib import Path

import pytest
from rich.console import Console

from blotter.config import Settings
from blotter.keymap import BINDING_IDS
from blotter.ui.app import BlotterApp, make_app
from blotter.ui.keys import FORBIDDEN_KEYS, KEYS, key_label
from blotter.ui.screens.confirm import ConfirmScreen
from blotter.ui.screens.help import HelpScreen
from blotter.ui.widgets.book_table import BookTable
from blotter.ui.widgets.whatif_bar import MoveInput

from .conftest import TEST_SETTINGS, frozen_clock, settle


def screen_text(renderable: object) -> str:
    console = Console(width=200, record=True, file=io.StringIO())
    console.print(renderable)
    return console.export_text()


CLOSES_WITH_ESC = {"help", "review", "form", "confirm", "marks", "trades", "explain", "list"}
"""Help, the modals and the screens over the book: Esc closes them (an extra key, never the
only one), and on the Marks screen first leaves the edit line."""


def test_each_action_has_a_plain_key_and_an_alias() -> None:
    ids = [k.id for k in KEYS]
    assert len(ids) == len(set(ids))
    actions = [(k.where, k.action) for k in KEYS]
    assert len(actions) == len(set(actions)), "each action is declared once"
    for spec in KEYS:
        keys = spec.keys.split(",")
        assert len(keys) >= 2, spec.id
        if "escape" in keys:  # only as a last extra key of closing Help or a modal
            assert keys[-1] == "escape" and spec.where in CLOSES_WITH_ESC, spec.id
            keys = keys[:-1]
        assert not set(keys) & FORBIDDEN_KEYS, spec.id
        assert any(k.startswith(("f", "ctrl+")) and k not in {"f"} for k in keys[1:]), spec.id


def test_the_keymap_knows_exactly_the_declared_ids() -> None:
    """The ids the settings accept (``blotter.keymap``) are the ids the app declares, in order."""
    assert [k.id for k in KEYS] == list(BINDING_IDS)


async def test_every_binding_on_the_help_screen_exists(demo_db: Path) -> None:
    app = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    async with app.run_test(size=(120, 40)) as pilot:
        await settle(app, pilot)
        # Book focused: app and book bindings are live, each key mapped to its binding id.
        book_keys = app.screen.active_bindings
        app.query_one(MoveInput).focus()
        await pilot.pause()
        bar_keys = app.screen.active_bindings
        app.query_one(BookTable).focus()
        await pilot.press("question_mark")
        await pilot.pause()
        assert isinstance(app.screen, HelpScreen)
        help_keys = app.screen.active_bindings
        text = screen_text(app.screen.query_one("#help-keys").visual._renderable)  # type: ignore[attr-defined]
        await pilot.press("q")
        await pilot.pause()
        live_by_where = {"app": book_keys, "book": book_keys, "bar": bar_keys, "help": help_keys}
        # Each desk screen's own keys, live on that screen (opened by its key, left by q/F10).
        for where, keys in (
            ("marks", ("m",)),
            ("review", ("m", "c")),
            ("trades", ("t",)),
            ("form", ("t", "a")),
            ("explain", ("l",)),
            ("list", ("w",)),
            ("sets", ("z",)),
        ):
            for key in keys:
                await pilot.press(key)
                await settle(app, pilot)
            live_by_where[where] = app.screen.active_bindings
            while app.screen is not app.screen_stack[0]:
                await pilot.press("f10")
                await pilot.pause()
        app.push_screen(ConfirmScreen("a question"))  # asked by quit with trials, and others
        await pilot.pause()
        live_by_where["confirm"] = app.screen.active_bindings
        await pilot.press("f10")
        await pilot.pause()
        await pilot.press("question_mark")
        await pilot.pause()
        for spec in KEYS:
            live = live_by_where[spec.where]
            shown = " ".join(key_label(k) for k in spec.keys.split(","))
            line = next(
                (
                    ln
                    for ln in text.splitlines()
                    if ln.startswith(shown + " ") and f" {spec.id} " in ln
                ),
                None,
            )
            assert line is not None, f"{spec.id} ({shown}) missing from help"
            assert spec.description in line
            for key in spec.keys.split(","):
                assert key in live, f"{key} ({spec.id}) is not bound"
                assert live[key].binding.id == spec.id
                assert live[key].binding.action == spec.action
        await pilot.press("q")
        await pilot.pause()
        assert not isinstance(app.screen, HelpScreen)


async def test_help_shows_units_grammar_and_cautions(demo_app: object) -> None:
    from blotter import scenario

    app = demo_app
    async with app.run_test(size=(100, 40)) as pilot:  # type: ignore[attr-defined]
        await settle(app, pilot)  # type: ignore[arg-type]
        await pilot.press("f1")
        await pilot.pause()
        screen = app.screen  # type: ignore[attr-defined]
        units = screen_text(screen.query_one("#help-units").visual._renderable)
        for header in ("Δ $", "Γ 1%", "vega", "θ day", "ρ 1%", "vanna", "volga", "Δ sh"):
            assert header in units
        assert "[alerts] error_pct" in units
        grammar = screen_text(screen.query_one("#help-grammar").visual._renderable)
        for example, _meaning in scenario.EXAMPLES:
            assert example in grammar
        cautions = str(screen.query_one("#help-cautions").render())
        assert "not advice" in cautions and "official risk and P&L" in cautions
        assert "local rules and licensed practice" in cautions
        await pilot.press("f1")
        await pilot.pause()
        assert not isinstance(app.screen, HelpScreen)  # type: ignore[attr-defined]


async def test_user_keymap_rebinds_by_id(demo_db: Path) -> None:
    settings = Settings(
        watch_interval_s=0.0, debounce_ms=0.0, keymap={"group": "y,f4", "help": "h,f1"}
    )
    app = make_app(demo_db, settings, clock=frozen_clock)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(app, pilot)
        table = app.query_one(BookTable)
        await pilot.press("g")
        assert table.group == "underlying"
        await pilot.press("y")
        assert table.group == "expiry"
        await pilot.press("question_mark")
        await pilot.pause()
        assert not isinstance(app.screen, HelpScreen)
        await pilot.press("h")
        await pilot.pause()
        assert isinstance(app.screen, HelpScreen)
        text = screen_text(app.screen.query_one("#help-keys").visual._renderable)  # type: ignore[attr-defined]
        assert any(
            " group " in f" {ln} " and ln.lstrip().startswith("y F4") for ln in text.splitlines()
        )


@pytest.mark.parametrize(
    "key,check",
    [
        ("f4", lambda app: app.query_one(BookTable).group == "expiry"),
        ("f6", lambda app: app.query_one("#move-pane").order == 1),
        ("f7", lambda app: app.pane == "grid"),
        ("f8", lambda app: app.query_one("#grid-pane").grid == "estimate"),
        ("f9", lambda app: app.greek == "delta"),
        ("ctrl+t", lambda app: app.axis == "days"),
        ("ctrl+g", lambda app: app.scope == "row"),
    ],
)
async def test_aliases_work_while_typing_in_the_bar(demo_db: Path, key: str, check: object) -> None:
    app = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(app, pilot)
        await pilot.press("f2", *"spot -1%")
        await settle(app, pilot)
        await pilot.press(key)
        await settle(app, pilot)
        assert check(app)  # type: ignore[operator]
        assert app.query_one(MoveInput).value == "spot -1%"


async def test_enter_in_the_bar_returns_to_the_book(demo_app: BlotterApp) -> None:
    """After Enter the next command key is a command: "v" shows the next pane and is not typed
    into the bar after the move."""
    async with demo_app.run_test(size=(80, 24)) as pilot:
        await settle(demo_app, pilot)
        await pilot.press("f2", *"spot +2.5", "enter")
        await settle(demo_app, pilot)
        assert isinstance(demo_app.focused, BookTable)
        pane = demo_app.pane
        await pilot.press("v")
        await settle(demo_app, pilot)
        assert demo_app.query_one(MoveInput).value == "spot +2.5"
        assert demo_app.pane != pane
        await pilot.press("f2", *" bogus", "enter")  # a line that does not parse keeps the focus
        await settle(demo_app, pilot)
        assert isinstance(demo_app.focused, MoveInput)


async def test_esc_closes_help_and_every_modal(demo_app: BlotterApp) -> None:
    from blotter.ui.screens.marks import CloseReviewScreen
    from blotter.ui.screens.trades import TradeForm

    async with demo_app.run_test(size=(80, 24)) as pilot:
        await settle(demo_app, pilot)
        await pilot.press("question_mark")
        assert isinstance(demo_app.screen, HelpScreen)
        await pilot.press("escape")
        assert demo_app.screen is demo_app.screen_stack[0]
        await pilot.press("t")
        await settle(demo_app, pilot)
        await pilot.press("a")
        await settle(demo_app, pilot)
        assert isinstance(demo_app.screen, TradeForm)
        await pilot.press(*"DEMO", "escape")  # the focus is in a field of the form
        await settle(demo_app, pilot)
        assert not isinstance(demo_app.screen, TradeForm)
        await pilot.press("q", "m")
        await settle(demo_app, pilot)
        await pilot.press("c")
        await settle(demo_app, pilot)
        assert isinstance(demo_app.screen, CloseReviewScreen)
        await pilot.press("escape")
        await settle(demo_app, pilot)
        assert not isinstance(demo_app.screen, CloseReviewScreen)


async def test_esc_leaves_the_marks_edit_line_then_the_screen(demo_app: BlotterApp) -> None:
    """Esc drops what was typed in a mark's edit line (nothing is written), and again goes back
    to the book, as q and F10 do."""
    from textual.widgets import Input

    from blotter.ui.screens.marks import MarksScreen

    async with demo_app.run_test(size=(80, 24)) as pilot:
        await settle(demo_app, pilot)
        await pilot.press("m")
        await settle(demo_app, pilot)
        screen = demo_app.screen
        assert isinstance(screen, MarksScreen)
        before = screen.view
        await pilot.press("down", *"0.6", "escape")
        await settle(demo_app, pilot)
        assert demo_app.screen is screen and not isinstance(screen.focused, Input)
        assert screen.view == before  # nothing written
        await pilot.press("escape")
        await settle(demo_app, pilot)
        assert demo_app.screen is demo_app.screen_stack[0]


async def test_quitting_with_trial_trades_asks_first(demo_db: Path) -> None:
    """One q too many with a trial held does not quit: it asks, q (or n, Esc) is no, y quits."""
    from blotter import store

    with store.open_store(demo_db, read_only=True) as st:
        contract = next(c for c in st.contracts() if c.option_type == "C")
    app = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(app, pilot)
        app.add_trial(contract, 5, 1.0, "main")
        await settle(app, pilot)
        await pilot.press("q")
        await settle(app, pilot)
        assert isinstance(app.screen, ConfirmScreen) and app.return_code is None
        assert "1 trial trade is not booked" in str(app.screen.query_one("#confirm-text").render())
        for no in ("q", "escape"):
            await pilot.press(no)
            await settle(app, pilot)
            assert app.screen is app.screen_stack[0] and app.return_code is None
            await pilot.press("q")
            await settle(app, pilot)
        await pilot.press("y")
        await pilot.pause()
        assert app.return_code == 0 or not app.is_running
    empty = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    async with empty.run_test(size=(80, 24)) as pilot:
        await settle(empty, pilot)
        await pilot.press("q")  # no trials: q quits at once
        await pilot.pause()
        assert empty.return_code == 0 or not empty.is_running
