"""The action list (Textual's command palette): opened by ``:`` or Ctrl+E, never Ctrl+P (the
bar's history, and a key some terminal setups take), it lists every action of the screen by its
words and runs the one chosen."""

from __future__ import annotations

from textual.command import CommandList

from blotter.ui.app import BlotterApp
from blotter.ui.keys import KEYS
from blotter.ui.screens.marks import MarksScreen
from blotter.ui.screens.palette import ActionList

from .conftest import settle


def _listed(app: BlotterApp) -> list[str]:
    options = app.screen.query_one(CommandList)
    return [str(options.get_option_at_index(i).prompt) for i in range(options.option_count)]


async def test_colon_lists_every_action_by_its_words_and_runs_the_chosen(
    demo_app: BlotterApp,
) -> None:
    async with demo_app.run_test(size=(100, 40)) as pilot:
        await settle(demo_app, pilot)
        await pilot.press("colon")
        await settle(demo_app, pilot)
        assert isinstance(demo_app.screen, ActionList)
        listed = "\n".join(_listed(demo_app))
        for spec in KEYS:
            if spec.where in {"app", "book"} and spec.id != "actions":
                assert spec.description in listed, spec.id
        assert "List every action" not in listed  # the list does not list itself
        assert "m or Ctrl+F" in listed  # each entry says its keys
        await pilot.press(*"spot and vols in force")
        await settle(demo_app, pilot)
        assert _listed(demo_app)[0].startswith("Marks: spot and vols in force")
        await pilot.press("enter")
        await settle(demo_app, pilot)
        assert isinstance(demo_app.screen, MarksScreen)


async def test_ctrl_e_opens_it_f10_closes_it_and_ctrl_p_does_not(demo_app: BlotterApp) -> None:
    async with demo_app.run_test(size=(80, 24)) as pilot:
        await settle(demo_app, pilot)
        await pilot.press("ctrl+p")
        await settle(demo_app, pilot)
        assert not isinstance(demo_app.screen, ActionList)
        await pilot.press("ctrl+e")
        await settle(demo_app, pilot)
        assert isinstance(demo_app.screen, ActionList)
        await pilot.press("f10")
        await settle(demo_app, pilot)
        assert not isinstance(demo_app.screen, ActionList)
        assert demo_app.is_running  # F10 closed the list, not the app
