"""The Scenario sets screen: a key opens it, a set is chosen from the list and run as one table
(each move's full change, estimate and error, the worst marked in words and a symbol); a bad set
is refused in words and nothing runs; no sets says how to add one."""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

from textual.widgets import DataTable, OptionList

from blotter.config import Settings, load_settings
from blotter.desk.scenario_sets import WORST_MARK
from blotter.scenario import apply_move, parse_move
from blotter.ui import fmt
from blotter.ui.app import BlotterApp, make_app
from blotter.ui.screens.scenario_sets import NO_SETS_WORDS, ScenarioSetsScreen

from .conftest import TEST_SETTINGS, frozen_clock, settle

SETS = """
[scenarios."quiet"]
"a week" = "days 7"

[scenarios.crash]
"down 10, vol +8" = "spot -10% vol +8"
"down 20, vol +15" = "spot -20% vol +15"
"rally, vol in" = "spot +5% vol -3"
"""


def settings_from(tmp_path: Path, text: str) -> Settings:
    path = tmp_path / "config.toml"
    path.write_text(text, encoding="utf-8")
    loaded = load_settings(env={"BLOTTER_CONFIG": str(path)})
    return replace(TEST_SETTINGS, scenarios=loaded.scenarios)


def message(app: BlotterApp) -> str:
    return str(app.screen.query_one(".desk-message").render())


async def test_a_set_runs_as_one_table_with_the_worst_marked(demo_db: Path, tmp_path: Path) -> None:
    app = make_app(demo_db, settings_from(tmp_path, SETS), clock=frozen_clock)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(app, pilot)
        await pilot.press("z")
        await settle(app, pilot)
        screen = app.screen
        assert isinstance(screen, ScenarioSetsScreen)
        assert screen.query_one("#sets-list", OptionList).option_count == 2
        await pilot.press("down", "enter")
        await settle(app, pilot)
        table = screen.query_one("#sets-table", DataTable)
        rows = [[str(c).strip() for c in table.get_row_at(i)] for i in range(table.row_count)]
        assert [r[1] for r in rows] == ["down 10, vol +8", "down 20, vol +15", "rally, vol in"]
        assert app.state is not None
        v = app.state.valuation
        fulls = []
        for r in rows:
            alone = apply_move(v, parse_move(r[-1], v.book.underlyings.symbols)).total
            fulls.append(alone.full)
            assert r[2:6] == [
                fmt.money(alone.full),
                fmt.money(alone.estimate_2),
                fmt.money(alone.error_2),
                fmt.pct(alone.error_2_pct),
            ]
        lowest = fulls.index(min(fulls))
        assert [r[0] for r in rows] == [WORST_MARK if i == lowest else "" for i in range(3)]
        assert f"{WORST_MARK} in USD: {rows[lowest][1]!r}" in message(app)
        await pilot.press("up", "r")  # r runs the set under the cursor
        await settle(app, pilot)
        assert table.row_count == 1 and str(table.get_row_at(0)[1]) == "a week"
        await pilot.press("q")
        await pilot.pause()
        assert app.screen is app.screen_stack[0]


async def test_a_bad_set_is_refused_in_words(demo_db: Path, tmp_path: Path) -> None:
    bad = '[scenarios.crash]\n"fine" = "spot -1%"\n"elsewhere" = "NOPE spot -3%"\n'
    app = make_app(demo_db, settings_from(tmp_path, bad), clock=frozen_clock)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(app, pilot)
        await pilot.press("z")
        await settle(app, pilot)
        await pilot.press("enter")
        await settle(app, pilot)
        words = message(app)
        assert "scenario set 'crash', move 'elsewhere'" in words and "NOPE" in words
        assert app.screen.query_one("#sets-table", DataTable).row_count == 0


async def test_no_sets_says_how_to_add_one(demo_app: BlotterApp) -> None:
    async with demo_app.run_test(size=(80, 24)) as pilot:
        await settle(demo_app, pilot)
        await pilot.press("ctrl+underscore")
        await settle(demo_app, pilot)
        assert isinstance(demo_app.screen, ScenarioSetsScreen)
        assert message(demo_app) == NO_SETS_WORDS
