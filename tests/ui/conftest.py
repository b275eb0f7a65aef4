"""Fixtures of the UI tests: the app on a fresh demo copy with a frozen clock, and a settle helper.

Pilot tests never sleep: ``settle`` waits for the app's workers (all but the store watcher, which
the tests switch off) and lets their messages arrive with ``pilot.pause()``.
"""

from __future__ import annotations

import asyncio
import inspect
from datetime import UTC, datetime, time, timedelta
from pathlib import Path
from typing import Any

import pytest

from blotter.config import Settings
from blotter.demo import DEMO_AS_OF, DEMO_TZ
from blotter.ui.app import BlotterApp, make_app

FROZEN_NOW = datetime.combine(
    DEMO_AS_OF + timedelta(days=1), time(10, 0), tzinfo=DEMO_TZ
).astimezone(UTC)
"""The tests' "now": 10:00 New York on the day after the demo book's last close (a business day
for the demo's date, a Tuesday)."""

FROZEN_DAY = FROZEN_NOW.astimezone(DEMO_TZ).date()
"""The desk-local date of the frozen clock: the Reval pane names its curves by date."""

TEST_SETTINGS = Settings(watch_interval_s=0.0, debounce_ms=0.0)
"""No store watcher and no debounce, so every worker finishes and tests stay quick."""


@pytest.hookimpl(tryfirst=True)
def pytest_pyfunc_call(pyfuncitem: pytest.Function) -> bool | None:
    """Run ``async def`` tests on a fresh event loop (no async plugin needed)."""
    if inspect.iscoroutinefunction(pyfuncitem.obj):
        names = pyfuncitem._fixtureinfo.argnames
        asyncio.run(pyfuncitem.obj(**{n: pyfuncitem.funcargs[n] for n in names}))
        return True
    return None


def frozen_clock() -> datetime:
    return FROZEN_NOW


async def settle(app: BlotterApp, pilot: Any, rounds: int = 40) -> None:
    """Wait for the workers and deliver their messages, until nothing is running."""
    for _ in range(rounds):
        await app.settle()
        await pilot.pause()
        if all(w.is_finished or w.group == "watch" for w in app.workers):
            await pilot.pause()
            return
    raise AssertionError("the app's workers did not finish")


@pytest.fixture
def demo_app(demo_db: Path) -> BlotterApp:
    """The app on a fresh demo copy, clock frozen, no watcher."""
    return make_app(demo_db, TEST_SETTINGS, clock=frozen_clock)
