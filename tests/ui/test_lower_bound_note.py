"""The app tells the user which American positions it values at a lower bound (negative rates
on both sides: two exercise boundaries, which the engine does not solve)."""

from __future__ import annotations

from dataclasses import replace
from datetime import UTC, datetime

import numpy as np
from books import UNDERLYINGS, Row, make_book, make_market

from blotter.ui.app import BlotterApp

from .conftest import TEST_SETTINGS, settle


async def test_a_double_boundary_position_is_named_in_a_notification() -> None:
    """A call with r < q < 0 (r −2%, q −1%) beside an ordinary American put: one warning names
    the call and says why its value is a lower bound."""
    under = replace(UNDERLYINGS, div_yields=np.array([0.015, -0.01, 0.0, 0.045]))
    rows = [Row("STK", 5.0, strike=110.0, days=180, call=True, american=True),
            Row("IDX", 2.0, strike=4400.0, days=90, call=False, american=True)]
    book = make_book(rows, under)
    market = make_market(rate=-0.02)
    app = BlotterApp(":memory:", TEST_SETTINGS, clock=lambda: datetime(2026, 12, 4, 20, 0,
                                                                       tzinfo=UTC),
                     loader=lambda: (book, market, 0))
    async with app.run_test(size=(120, 40)) as pilot:
        await settle(app, pilot)
        notes = [n for n in app._notifications if n.title == "Lower bounds"]
        assert len(notes) == 1
        assert "two exercise boundaries (negative rates)" in notes[0].message
        assert book.labels[0] in notes[0].message and book.labels[1] not in notes[0].message
