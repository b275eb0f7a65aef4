"""The what-if bar's history survives a restart: two app runs on one data folder, and a damaged
history file noted and ignored, the app running as usual."""

from __future__ import annotations

from pathlib import Path

import pytest

from blotter.ui.app import make_app
from blotter.ui.widgets.whatif_bar import MoveInput

from .conftest import TEST_SETTINGS, frozen_clock, settle


async def test_the_history_survives_a_restart(
    demo_db: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path / "data"))
    first = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    async with first.run_test(size=(80, 24)) as pilot:
        await settle(first, pilot)
        await pilot.press("slash", *"spot -3%", "enter")
        await settle(first, pilot)
        await pilot.press("slash", "ctrl+u", *"spot -3% foo", "enter")  # does not parse: not kept
        await settle(first, pilot)
        await pilot.press("slash", "ctrl+u", *"vol +2", "enter")
        await settle(first, pilot)
        assert first.query_one(MoveInput).history == ["spot -3%", "vol +2"]
    assert (tmp_path / "data" / "blotter" / "whatif-history.json").is_file()

    second = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    async with second.run_test(size=(80, 24)) as pilot:
        await settle(second, pilot)
        bar = second.query_one(MoveInput)
        assert bar.history == ["spot -3%", "vol +2"]
        await pilot.press("slash", "up")
        assert bar.value == "vol +2"
        await pilot.press("up")
        assert bar.value == "spot -3%"


async def test_a_damaged_history_is_noted_and_ignored(
    demo_db: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path))
    path = tmp_path / "blotter" / "whatif-history.json"
    path.parent.mkdir()
    path.write_text('{"format": 1, "moves": ["spot', encoding="utf-8")
    app = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(app, pilot)
        notes = [n.message for n in app._notifications]
        assert any("damaged" in n and str(path) in n for n in notes)
        assert app.query_one(MoveInput).history == []
        assert app.state is not None  # the book loaded as usual
        await pilot.press("slash", *"spot -1%", "enter")
        await settle(app, pilot)
    assert '"spot -1%"' in path.read_text(encoding="utf-8")


async def test_a_folder_that_cannot_be_written_is_said_once(
    demo_db: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    (tmp_path / "blotter").write_text("a file where the folder should be", encoding="utf-8")
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path))
    app = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(app, pilot)
        await pilot.press("slash", *"spot -1%", "enter", "slash", "ctrl+u", *"spot -2%", "enter")
        await settle(app, pilot)
        notes = [n.message for n in app._notifications if "cannot be saved" in n.message]
        assert len(notes) == 1
        assert app.query_one(MoveInput).history == ["spot -1%", "spot -2%"]
