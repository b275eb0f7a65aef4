"""The spot × vol ladder: each cell is the same full revaluation as the what-if of that move.

The what-if path is itself checked against QuantLib (test_whatif.py); here the broadcast, chunked
ladder must agree with it cell by cell, and the worst cell must be the lowest P&L.
"""

from __future__ import annotations

import numpy as np
import pytest
from books import T0, Row, make_book, make_market, mixed_rows

from blotter.risk import value_book
from blotter.scenario import (
    DEFAULT_SPOT_PCTS,
    DEFAULT_VOL_PTS,
    STICKY_RULE,
    apply_move,
    ladder,
    parse_move,
)


def _book_with_american():
    rows = mixed_rows() + [
        Row("STK", 7, 115, 50, False, american=True),
        Row("STK", -3, 118, 20, True, american=True),
    ]
    return make_book(rows)


def _american_tol(v) -> float:
    """American cells come from premium tables (engine.american_cells), the what-if's from one
    quadrature per position: they agree within the method's 1e-6 of the strike per unit."""
    am = v.book.american & v.book.is_option
    return 1e-6 * float(np.nansum(np.abs(v.units[am] * v.book.strikes[am])))


@pytest.mark.parametrize("days", [0.0, 3.0, 12.0])
def test_each_cell_matches_the_what_if_of_that_move(days: float) -> None:
    book = _book_with_american()
    v = value_book(book, make_market(), T0)
    lad = ladder(v, days=days)
    am_tol = _american_tol(v)
    assert lad.full.shape == (len(DEFAULT_SPOT_PCTS), len(DEFAULT_VOL_PTS))
    for i, s in enumerate(DEFAULT_SPOT_PCTS):
        for j, dv in enumerate(DEFAULT_VOL_PTS):
            text = f"spot {s:+g}% vol {dv:+g}" + (f" days {days:g}" if days else "")
            res = apply_move(v, parse_move(text)).total
            assert lad.full[i, j] == pytest.approx(res.full, rel=1e-12, abs=am_tol), text
            assert lad.estimate[i, j] == pytest.approx(res.estimate_2, rel=1e-9, abs=1e-6), text
            assert lad.estimate_1[i, j] == pytest.approx(res.estimate_1, rel=1e-9, abs=1e-6), text
    assert lad.error == pytest.approx(lad.full - lad.estimate)
    assert lad.n_through_expiry == (1 if days == 12.0 else 0)


def test_chunking_does_not_change_the_grid() -> None:
    v = value_book(_book_with_american(), make_market(), T0)
    whole = ladder(v, days=1)
    for chunk in (1, 3, 5):
        part = ladder(v, days=1, chunk=chunk)
        assert part.full == pytest.approx(whole.full, rel=1e-12, abs=1e-9)


def test_worst_cell_and_rule() -> None:
    v = value_book(_book_with_american(), make_market(), T0)
    lad = ladder(v, spot_pcts=[-20, 0, 20], vol_pts=[-10, 10])
    i, j = lad.worst
    assert lad.full[i, j] == lad.full.min()
    assert lad.rule == STICKY_RULE == "sticky strike"
    assert lad.full.shape == (3, 2)


def test_centre_cell_is_zero_without_a_roll() -> None:
    v = value_book(_book_with_american(), make_market(), T0)
    lad = ladder(v)
    assert lad.full[4, 2] == pytest.approx(0.0, abs=1e-9) and lad.estimate[4, 2] == 0.0


def test_bad_ladders_are_refused() -> None:
    v = value_book(make_book(mixed_rows()), make_market(), T0)
    with pytest.raises(ValueError, match="-100%"):
        ladder(v, spot_pcts=[-100])
    with pytest.raises(ValueError, match="at least one"):
        ladder(v, spot_pcts=[])
    with pytest.raises(ValueError, match="forward"):
        ladder(v, days=-1)


def test_empty_book() -> None:
    v = value_book(make_book([]), make_market(), T0)
    lad = ladder(v)
    assert np.all(lad.full == 0.0)


def test_moneyness_ladder_matches_the_what_if() -> None:
    from blotter.market import VolSurface
    from blotter.scenario import MONEYNESS_RULE

    skew = VolSurface(
        np.array(["2026-12-18"] * 3, dtype="datetime64[D]"),
        np.array([100.0, 120.0, 140.0]),
        np.array([0.45, 0.35, 0.30]),
    )
    market = make_market(surfaces={**make_market().surfaces, "STK": skew})
    v = value_book(_book_with_american(), market, T0)
    lad = ladder(v, spot_pcts=[-8, 0, 6], vol_pts=[-2, 3], days=2, rule=MONEYNESS_RULE)
    assert lad.rule == "sticky moneyness"
    for i, s in enumerate((-8, 0, 6)):
        for j, dv in enumerate((-2, 3)):
            res = apply_move(v, parse_move(f"spot {s:+g}% vol {dv:+g} days 2 moneyness")).total
            assert lad.full[i, j] == pytest.approx(res.full, rel=1e-12, abs=_american_tol(v))
            assert lad.estimate[i, j] == pytest.approx(res.estimate_2, rel=1e-9, abs=1e-6)
            assert lad.estimate_1[i, j] == pytest.approx(res.estimate_1, rel=1e-9, abs=1e-6)
    with pytest.raises(ValueError, match="rule"):
        ladder(v, rule="sticky delta")


@pytest.mark.parametrize("rule", ["sticky strike", "sticky moneyness"])
def test_cells_across_the_vol_floor_match_the_what_if(rule: str) -> None:
    """Vols of 1–4% with moves down to −5 points: the floor bites in some cells and for some
    positions only; full, first- and second-order estimates equal the what-if of each cell.
    FXA is marked below the floor (0.005 vol points) and keeps its vol when vols fall."""
    from blotter.market import VolSurface

    smile = VolSurface(
        np.array(["2026-12-18", "2026-12-18", "2027-03-19"], dtype="datetime64[D]"),
        np.array([100.0, 130.0, np.nan]),
        np.array([0.04, 0.01, 0.03]),
    )
    market = make_market(vols={"IDX": 0.02, "STK": 0.03, "FUT": 0.045, "FXA": 0.00005})
    market = make_market(surfaces={**market.surfaces, "STK": smile})
    v = value_book(_book_with_american(), market, T0)
    spots, vols = (-8.0, -5.0, 0.0, 3.0), (-5.0, -3.0, -1.5, 0.0, 2.0)
    lad = ladder(v, spot_pcts=spots, vol_pts=vols, days=1, rule=rule)
    suffix = " moneyness" if rule == "sticky moneyness" else ""
    floored = 0
    for i, s in enumerate(spots):
        for j, dv in enumerate(vols):
            res = apply_move(v, parse_move(f"spot {s:+g}% vol {dv:+g} days 1{suffix}"))
            floored += any("floored" in note for note in res.notes)
            t = res.total
            assert lad.full[i, j] == pytest.approx(t.full, rel=1e-9, abs=1e-9)
            assert lad.estimate[i, j] == pytest.approx(t.estimate_2, rel=1e-9, abs=1e-9)
            assert lad.estimate_1[i, j] == pytest.approx(t.estimate_1, rel=1e-9, abs=1e-9)
    assert 0 < floored < len(spots) * len(vols)
