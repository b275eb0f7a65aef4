"""Snapshots of each pane at 80×24 on the demo book, clock frozen (pytest-textual-snapshot).

Accept new pictures with ``--snapshot-update`` only after looking at the report.
"""

from __future__ import annotations

import re
from importlib.metadata import version
from pathlib import Path
from typing import Any

import pytest

from blotter.ui.app import make_app

from .conftest import TEST_SETTINGS, frozen_clock, settle

SIZE = (80, 24)

_CONSTRAINTS = Path(__file__).resolve().parents[2] / ".ci" / "constraints.txt"


def _drawn_with() -> str | None:
    """The Textual version the snapshots were drawn with (``.ci/constraints.txt``)."""
    if not _CONSTRAINTS.exists():
        return None
    found = re.search(r"^textual==(\S+)$", _CONSTRAINTS.read_text(), re.MULTILINE)
    return found.group(1) if found else None


_DRAWN_WITH = _drawn_with()
pytestmark = pytest.mark.skipif(
    _DRAWN_WITH is None or version("textual") != _DRAWN_WITH,
    reason=f"snapshots were drawn with Textual {_DRAWN_WITH}; this is {version('textual')}, "
    "whose rendering may differ (install with PIP_CONSTRAINT=.ci/constraints.txt to compare)",
)


def _app(db: Path) -> Any:
    return make_app(db, TEST_SETTINGS, clock=frozen_clock)


def _steps(*keys: str, move: str | None = None) -> Any:
    async def run_before(pilot: Any) -> None:
        app = pilot.app
        await settle(app, pilot)
        if move is not None:
            await pilot.press("f2", *move)
            await settle(app, pilot)
        for key in keys:
            await pilot.press(key)
            await settle(app, pilot)
        # The Book pane fits its label column after a refresh (``BookTable._refit``); the
        # picture is taken once that has run, not before it on a busy machine.
        await pilot.wait_for_scheduled_animations()
        for _ in range(3):
            await pilot.pause(0.05)

    return run_before


def test_book_pane(snap_compare: Any, demo_db: Path) -> None:
    assert snap_compare(
        _app(demo_db), terminal_size=SIZE, run_before=_steps("down", "e", "down", "e")
    )


def test_move_pane(snap_compare: Any, demo_db: Path) -> None:
    assert snap_compare(
        _app(demo_db), terminal_size=SIZE, run_before=_steps(move="spot -3% vol +2 days 1")
    )


def test_move_pane_bad_line(snap_compare: Any, demo_db: Path) -> None:
    assert snap_compare(
        _app(demo_db), terminal_size=SIZE, run_before=_steps(move="spot -3% vol +x")
    )


def test_grid_pane(snap_compare: Any, demo_db: Path) -> None:
    assert snap_compare(_app(demo_db), terminal_size=SIZE, run_before=_steps("f7", move="days 1"))


def test_reval_pane(snap_compare: Any, demo_db: Path) -> None:
    assert snap_compare(
        _app(demo_db), terminal_size=SIZE, run_before=_steps("f7", "f7", move="days 1")
    )


def test_reval_pane_wide(snap_compare: Any, demo_db: Path) -> None:
    """At 200×50 every pane shows: the Reval chart with today's and the rolled date's curves."""
    assert snap_compare(_app(demo_db), terminal_size=(200, 50), run_before=_steps(move="days 7"))


def test_help_screen(snap_compare: Any, demo_db: Path) -> None:
    assert snap_compare(_app(demo_db), terminal_size=SIZE, run_before=_steps("f1"))


def test_grouped_by_expiry(snap_compare: Any, demo_db: Path) -> None:
    assert snap_compare(_app(demo_db), terminal_size=SIZE, run_before=_steps("g"))


def test_marks_screen(snap_compare: Any, demo_db: Path) -> None:
    assert snap_compare(_app(demo_db), terminal_size=SIZE, run_before=_steps("m", "down"))


def test_trades_screen(snap_compare: Any, demo_db: Path) -> None:
    assert snap_compare(_app(demo_db), terminal_size=SIZE, run_before=_steps("t"))


def test_trade_form(snap_compare: Any, demo_db: Path) -> None:
    assert snap_compare(_app(demo_db), terminal_size=SIZE, run_before=_steps("t", "a"))


def test_explain_screen(snap_compare: Any, demo_db: Path) -> None:
    assert snap_compare(_app(demo_db), terminal_size=SIZE, run_before=_steps("l", "o"))
