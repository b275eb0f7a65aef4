"""The app while the American kernels compile (the first start after an install): it opens on
their NumPy mirror with numbers in the Book pane, says so in the header, and drops the note once
the kernels are ready."""

from __future__ import annotations

import threading
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest

from blotter import engine
from blotter.engine import _alo_np, _kernels
from blotter.ui import app as app_module
from blotter.ui.app import COMPILING_ALERT, make_app
from blotter.ui.widgets.book_table import BookTable

from .conftest import TEST_SETTINGS, frozen_clock, settle


class Compiling:
    """A warm-up that runs until ``finish``: a live warm-up thread, kernels not ready."""

    def __init__(self) -> None:
        self.done = threading.Event()
        self.ready = False
        self.thread = threading.Thread(target=self.done.wait, daemon=True)

    def kernels_ready(self) -> bool:
        return self.ready

    def warm_up(self, background: bool = True) -> threading.Thread:
        if not self.thread.is_alive():
            self.thread.start()
        _kernels._THREAD = self.thread
        return self.thread

    def finish(self) -> None:
        self.ready = True
        self.done.set()


@pytest.fixture
def compiling(monkeypatch: pytest.MonkeyPatch) -> Iterator[Compiling]:
    state = Compiling()
    monkeypatch.setattr(_kernels, "_THREAD", None)
    monkeypatch.setattr(_kernels, "kernels_ready", state.kernels_ready)
    monkeypatch.setattr(engine, "kernels_ready", state.kernels_ready)
    monkeypatch.setattr(engine, "warm_up", state.warm_up)
    monkeypatch.setattr(app_module, "COMPILE_NOTE_AFTER_S", 0.05)
    monkeypatch.setattr(app_module, "COMPILE_POLL_S", 0.05)
    yield state
    state.finish()


async def test_app_opens_on_the_numpy_mirror_while_kernels_compile(
    demo_db: Path, compiling: Compiling, monkeypatch: pytest.MonkeyPatch
) -> None:
    """The book is valued (by the mirror) and shown while the warm-up runs; the header carries
    the compiling alert until the kernels are ready, then loses it."""
    calls: list[int] = []
    real = _alo_np.value_groups

    def counted(*args: Any) -> None:
        calls.append(1)
        real(*args)

    monkeypatch.setattr(_alo_np, "value_groups", counted)
    app = make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
    async with app.run_test(size=(160, 48)) as pilot:
        await settle(app, pilot)
        await pilot.pause(0.2)
        assert app.state is not None
        assert calls, "the American rows were not valued by the NumPy mirror"
        assert app.query_one(BookTable).row_count > 0
        header = str(app.query_one("#header-line").render())
        assert COMPILING_ALERT in header
        compiling.finish()
        await pilot.pause(0.3)
        header = str(app.query_one("#header-line").render())
        assert COMPILING_ALERT not in header
        assert "Book:" in header
