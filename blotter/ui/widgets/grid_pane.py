"""The Grid pane (the scenario grid): spot × vol table of the book's full P&L, estimate or error.

The grid is ``blotter.scenario.ladder``'s; the worst cell of the full P&L is marked ``▼`` (and in
reverse video), the vol rule is stated under the grid, and the bar's day roll is applied.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np
from rich.console import Group
from rich.table import Table
from rich.text import Text
from textual import events
from textual.app import ComposeResult
from textual.containers import VerticalScroll
from textual.widgets import Static

from blotter.ui import fmt

GRIDS = ("full", "estimate", "error")
"""What the grid can show, in the order the grid key cycles through them."""

GRID_TITLES = {
    "full": "full revaluation P&L",
    "estimate": "greeks' estimate (2nd order)",
    "error": "error = full − estimate",
}

WORST = "▼"
"""Marks the worst cell (largest loss of the full revaluation)."""


def worst_cell(ladder: Any) -> tuple[int, int] | None:
    """(spot row, vol column) of the ladder's worst cell as ``scenario.ladder`` reports it."""
    worst = getattr(ladder, "worst", None)
    if worst is None:
        return None
    if (
        isinstance(worst, tuple)
        and len(worst) == 2
        and all(isinstance(v, (int, np.integer)) for v in worst)
    ):
        return int(worst[0]), int(worst[1])
    for a, b in (("spot_index", "vol_index"), ("i", "j"), ("row", "col")):
        if hasattr(worst, a) and hasattr(worst, b):
            return int(getattr(worst, a)), int(getattr(worst, b))
    return None


class GridPane(VerticalScroll):
    """Title, grid and the rule line."""

    def __init__(self) -> None:
        super().__init__(id="grid-pane", classes="pane")
        self.border_title = "Grid"
        self.grid = "full"
        self.ladder: Any = None  # the first (or only) currency's ladder
        self.ladders: list[Any] = []  # one per currency, in the book's order
        self.days = 0.0
        self.partial = False  # some positions were left out for want of a mark
        self.table: Table | None = None  # the first ladder's grid
        self.unit = ""  # the cells' unit of fmt.SCALES, so no number is cut to fit the pane
        self.as_of = ""  # when the store was read for these numbers: "10:04:05"

    def on_resize(self, event: events.Resize) -> None:
        self.repaint()

    def _cell_cap(self, n_columns: int) -> int:
        """Characters a cell may take so that every vol column fits the pane's width."""
        width = self.size.width - 2  # less the vertical scrollbar's room
        if width <= 0 or n_columns <= 0:
            return fmt.CELL_CAP
        first = len("spot \\ vol bn") + 1
        return max(5, (width - first) // n_columns - 2)  # a space apart and the worst mark

    def compose(self) -> ComposeResult:
        yield Static("waiting for the book…", id="grid-cells")
        yield Static("", id="grid-rule")

    def show(
        self, ladders: Sequence[Any], days: float, partial: bool = False, as_of: str = ""
    ) -> None:
        """Show one ladder per currency (``scenario.ladders``) computed with a ``days`` roll;
        ``partial`` when they leave out positions that lack a mark; ``as_of`` says when the
        store was read for them (the title leads with it)."""
        self.ladders = list(ladders)
        self.ladder = self.ladders[0] if self.ladders else None
        self.days, self.partial, self.as_of = days, partial, as_of
        self.repaint()

    def next_grid(self) -> str:
        """Cycle full → estimate → error; returns the grid now shown."""
        self.grid = GRIDS[(GRIDS.index(self.grid) + 1) % len(GRIDS)]
        self.repaint()
        return self.grid

    def repaint(self) -> None:
        ladder = self.ladder
        if ladder is None:
            return
        several = len(self.ladders) > 1
        roll = f", after {self.days:g} day{'s' if self.days != 1 else ''}" if self.days else ""
        rule = str(getattr(ladder, "rule", "") or "")
        of_valued = " of valued positions" if self.partial else ""
        per = " per currency" if several else ""
        name = f"Grid {self.as_of}" if self.as_of else "Grid"
        self.border_title = f"{name}: {GRID_TITLES[self.grid]}{of_valued}{per}{roll} ─ {rule}" + (
            f" ─ {WORST} worst" if worst_cell(ladder) else ""
        )
        cells = [float(x) for one in self.ladders for x in np.ravel(getattr(one, self.grid))]
        self.unit, factor = fmt.column_scale(cells, self._cell_cap(len(list(ladder.vol_pts))))
        parts: list[Text | Table] = []
        for k, one in enumerate(self.ladders):
            if several:
                parts.append(Text(("\n" if k else "") + str(one.currency), style="bold"))
            parts.append(self._table(one, factor))
        self.table = next(p for p in parts if isinstance(p, Table))
        self.query_one("#grid-cells", Static).update(Group(*parts))
        legend = f"{WORST} worst cell of the full P&L. " if worst_cell(ladder) else ""
        scale = {"k": " thousands", "m": " millions", "bn": " billions"}.get(self.unit, "")
        money = (
            f"P&L in{scale} of each currency, never added across them"
            if several
            else f"P&L in{scale} {ladder.currency or 'of the book currency'}"
        )
        self.query_one("#grid-rule", Static).update(
            Text(
                f"{legend}Vol rule: {rule}. Rows: spot move in % of every spot; columns: vol move "
                f"in points; cells: {money}."
            )
        )

    def _table(self, ladder: Any, factor: float = 1.0) -> Table:
        """One ladder's grid in whole units of ``factor``, its worst cell marked."""
        cells = np.asarray(getattr(ladder, self.grid))
        vol_pts = list(ladder.vol_pts)
        worst = worst_cell(ladder)
        table = Table(box=None, pad_edge=False, padding=(0, 1))
        head = "spot \\ vol" + (f" {self.unit}" if self.unit else "")
        table.add_column(head, justify="right", no_wrap=True)
        for v in vol_pts:
            table.add_column(f"{v:+g} pt", justify="right", no_wrap=True)
        for i, s in enumerate(list(ladder.spot_pcts)):
            row: list[Text | str] = [f"{s:+g}%"]
            for j in range(len(vol_pts)):
                text = Text(fmt.whole(float(cells[i, j]), factor))
                if worst == (i, j):
                    text = Text(WORST) + text
                    text.stylize("reverse")
                row.append(text)
            table.add_row(*row)
        return table
