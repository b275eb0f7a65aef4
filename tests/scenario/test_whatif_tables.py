"""The what-if's American rows from the premium tables a grid keeps, against per-row quadrature.

When every table a move needs is kept in the valuation's cache (a grid ran), the what-if takes
its American prices from them (``engine.american_cells``, one cell per row); otherwise, and
for rate moves, it prices each row with ``engine.price(american=True)``. Either way the full
P&L must equal the per-row quadrature's within the method's 1e-6 of the strike per unit
(ACCURACY.md), summed over the American rows.
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pytest
from books import T0, Row, make_book, make_market, mixed_rows

from blotter import engine
from blotter.engine import american_grid
from blotter.risk import BookValuation, value_book
from blotter.scenario import apply_move, ladder, parse_move
from blotter.scenario import whatif as whatif_module
from blotter.scenario.base import prepare


def _american_rows() -> list[Row]:
    """Stock and index options held American, calls and puts, in and out of the money, a week
    to a year, and one FX put at a vol the tables do not serve, beside the European rows of
    ``mixed_rows``."""
    out = []
    for days in (7, 40, 180, 365):
        for strike, call in ((100, False), (120, True), (130, False), (140, True)):
            out.append(Row("STK", 5 if call else -4, strike, days, call, american=True))
        out.append(Row("IDX", 2, 4400, days, False, american=True))
    # below the tables' lowest vol (a 2.5% market): valued by quadrature beside the others
    out.append(Row("FXA", 3, 1.12, 90, False, american=True, mult=100000))
    return mixed_rows() + out


@pytest.fixture
def valuation() -> BookValuation:
    market = make_market(vols={"IDX": 0.20, "STK": 0.35, "FUT": 0.30, "FXA": 0.025})
    return value_book(make_book(_american_rows()), market, T0)


@dataclass
class _Calls:
    """Calls of ``american_cells`` (the grid's too) and rows each valued cell by cell."""

    cells: int = 0
    by_quadrature: list[int] = field(default_factory=list)

    def clear(self) -> None:
        self.cells = 0
        self.by_quadrature.clear()


@pytest.fixture
def calls(monkeypatch: pytest.MonkeyPatch) -> Iterator[_Calls]:
    seen = _Calls()
    real_cells, real_by_cell = american_grid.american_cells, american_grid._cell_by_cell

    def cells(*args: Any, **kwargs: Any) -> tuple[np.ndarray, np.ndarray]:
        seen.cells += 1
        return real_cells(*args, **kwargs)

    def by_cell(rest: np.ndarray, *args: Any) -> None:
        seen.by_quadrature.append(int(rest.size))
        real_by_cell(rest, *args)

    monkeypatch.setattr(american_grid, "american_cells", cells)
    monkeypatch.setattr(american_grid, "_cell_by_cell", by_cell)
    # a test book has a few rows per boundary: the tables serve it whatever their number
    monkeypatch.setattr(whatif_module, "TABLE_ROWS_PER_BOUNDARY", 0)
    yield seen


def _quadrature_pnl(v: BookValuation, text: str) -> tuple[np.ndarray, np.ndarray, float]:
    """The what-if's full P&L of the live American rows, the same from ``engine.price``
    (american=True) row by row on the moved inputs the result reports, and the tolerance
    1e-6 × Σ|units × strike| of those rows (currency)."""
    res = apply_move(v, parse_move(text))
    p = prepare(v)
    rows = p.live_idx[p.american]
    am = np.flatnonzero(p.american)
    ref = np.array(
        [
            float(
                engine.price(
                    bool(p.is_call[j]),
                    float(res.spot_after[i]),
                    float(p.strike[j]),
                    float(res.years_after[i]),
                    float(res.rate_after[i]),
                    float(p.carry_l[j] + res.rate_move * p.carry_moves[j]),
                    float(res.vol_after[i]),
                    american=True,
                )
            )
            for i, j in zip(rows, am, strict=True)
        ]
    )
    ref_pnl = (ref - p.base_price[am]) * p.units_l[am]
    tol = 1e-6 * float(np.sum(np.abs(p.units_l[am] * p.strike[am])))
    return res.full[rows], ref_pnl, tol


def _n_american(v: BookValuation) -> int:
    p = prepare(v)
    return int(np.count_nonzero(p.american))


MOVES_ON_TABLES = [
    "spot -4%",
    "spot +3% vol +2",
    "STK spot +5 vol -3",
    "spot -2% beta vol +10%",
    "spot -6% vol +4 days 1",
]
"""Spot %, absolute spot, vol points and %, and a day roll a grid of one day has tabulated."""


@pytest.mark.parametrize("text", MOVES_ON_TABLES)
def test_kept_tables_serve_the_what_if_within_the_method(
    valuation: BookValuation, calls: _Calls, text: str
) -> None:
    ladder(valuation)
    ladder(valuation, days=1)
    calls.clear()  # the grids' own calls
    full, ref, tol = _quadrature_pnl(valuation, text)
    # one call, where only the FX put (below the tables' vols) is valued by quadrature
    assert calls.cells == 1
    assert sum(calls.by_quadrature) <= 1
    assert np.sum(np.abs(full - ref)) <= tol
    assert float(np.sum(full)) == pytest.approx(float(np.sum(ref)), abs=tol)


@pytest.mark.parametrize("text", ["spot -4% vol +2", "spot +3% days 1"])
def test_without_kept_tables_each_row_is_priced_by_quadrature(
    valuation: BookValuation, calls: _Calls, text: str
) -> None:
    # no grid has run: no table is built for the what-if, and the tables' row setup is
    # skipped (every American row takes the engine's quadrature directly)
    full, ref, tol = _quadrature_pnl(valuation, text)
    assert calls.cells == 0
    assert len(valuation.boundaries._tables) == 0
    assert np.sum(np.abs(full - ref)) <= tol


def test_a_rate_move_is_priced_by_quadrature(valuation: BookValuation, calls: _Calls) -> None:
    ladder(valuation)
    calls.clear()
    full, ref, tol = _quadrature_pnl(valuation, "spot -1% rate +50bp")
    assert calls.cells == 0
    assert np.sum(np.abs(full - ref)) <= tol


@pytest.mark.parametrize("text", ["spot -4% vol +40", "spot -4% days 5"])
def test_a_move_past_the_kept_tables_is_priced_by_quadrature(
    valuation: BookValuation, calls: _Calls, text: str
) -> None:
    # the default grid's vols and no roll: 40 vol points and 5 days lie beyond its tables
    ladder(valuation)
    calls.clear()
    n_tables = len(valuation.boundaries._tables)
    full, ref, tol = _quadrature_pnl(valuation, text)
    assert calls.cells == 1
    assert sum(calls.by_quadrature) == _n_american(valuation)
    assert len(valuation.boundaries._tables) == n_tables
    assert np.sum(np.abs(full - ref)) <= tol


def test_few_rows_per_boundary_take_the_quadrature(
    valuation: BookValuation, calls: _Calls, monkeypatch: pytest.MonkeyPatch
) -> None:
    # below TABLE_ROWS_PER_BOUNDARY rows per boundary the tables' lookups cost more than
    # they save: the quadrature, as without kept tables
    monkeypatch.setattr(whatif_module, "TABLE_ROWS_PER_BOUNDARY", 40)
    ladder(valuation)
    calls.clear()
    full, ref, tol = _quadrature_pnl(valuation, "spot -4% vol +2")
    assert calls.cells == 0
    assert np.sum(np.abs(full - ref)) <= tol
