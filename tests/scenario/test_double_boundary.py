"""American options with negative rates on both sides, where a call with r < q < 0 (a put with
q < r < 0) has two exercise boundaries (Battauz, De Donno & Sbuelz, "Real options and American
derivatives: the double continuation region", Management Science 61(5), 2015; from memory): the
engine does not solve them, values them at the lower bound max(European, intrinsic), gives them
a status code, and the valuation says so in words naming the positions, which ``blotter risk``
prints."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
from books import T0, UNDERLYINGS, Row, make_book, make_market

from blotter import engine
from blotter.engine import american as am
from blotter.risk import value_book


def test_a_call_with_r_below_q_below_zero_is_a_lower_bound_with_its_status() -> None:
    """Call, r = −2%, q = −1% (b = r − q = −1%): status DOUBLE_BOUNDARY in words, value
    max(European, intrinsic); the put of the same inputs is never exercised early (its put form
    has r < 0 ≤ q − r), so it is the European put."""
    args = (110.0, 100.0, 1.0, -0.02, -0.01, 0.25)
    status = engine.american_status([True, False], 1.0, -0.02, -0.01)
    assert list(status) == [am.DOUBLE_BOUNDARY, am.NEVER_EARLY]
    assert "two exercise boundaries" in engine.AMERICAN_STATUS[am.DOUBLE_BOUNDARY]
    assert "lower bound" in engine.AMERICAN_STATUS[am.DOUBLE_BOUNDARY]
    call = float(engine.price(True, *args, american=True))
    assert call == max(float(engine.price(True, *args)), 10.0)
    put = float(engine.price(False, *args, american=True))
    assert put == float(engine.price(False, *args))


def test_the_valuation_names_double_boundary_positions_in_its_notes() -> None:
    """A book with one such American call and one ordinary American put: the valuation's notes
    say one position is at a lower bound, why, and which."""
    under = replace(UNDERLYINGS, div_yields=np.array([0.015, -0.01, 0.0, 0.045]))
    rows = [Row("STK", 5.0, strike=110.0, days=180, call=True, american=True),
            Row("IDX", 2.0, strike=4400.0, days=90, call=False, american=True)]
    book = make_book(rows, under)
    v = value_book(book, make_market(rate=-0.02), T0)
    notes = [n for n in v.notes if "lower bound" in n]
    assert len(notes) == 1
    assert notes[0].startswith("1 American position(s) at a lower bound")
    assert "two exercise boundaries (negative rates)" in notes[0]
    assert book.labels[0] in notes[0] and book.labels[1] not in notes[0]
