"""The Move pane: for the bar's move, per underlying and in total, full change, estimate, error.

Numbers are shown as ``blotter.scenario.apply_move`` returns them; the pane only formats them and
marks an error beyond the alert threshold with ``!`` beside the number (colour is extra).
"""

from __future__ import annotations

import math
from typing import Any

from rich.text import Text
from textual.app import ComposeResult
from textual.containers import Vertical
from textual.widgets import DataTable, Static

from blotter.config import Alerts
from blotter.ui import fmt

TERMS: tuple[tuple[str, str], ...] = (
    ("delta", "Δ"), ("gamma", "Γ"), ("vega", "vega"), ("volga", "volga"), ("vanna", "vanna"),
    ("theta", "θ"), ("rho", "ρ"),
)
"""Taylor terms of the estimate, in column order, with their headers."""

SECOND_ORDER_TERMS = frozenset({"gamma", "volga", "vanna"})
"""Terms that only the second-order estimate includes."""

FLAG = "!"
"""Marks an estimate whose error is beyond the alert threshold (shown with colour as well)."""

MONEY_WIDTH = 10
TERM_WIDTH = 9


def error_flagged(full: float, error: float, alerts: Alerts) -> bool:
    """True when |error| is above both the absolute and the relative alert threshold."""
    if not (math.isfinite(full) and math.isfinite(error)):
        return True
    return abs(error) > alerts.error_abs and abs(error) > alerts.error_pct / 100.0 * abs(full)


class MovePane(Vertical):
    """Title line, the table of rows, and a line listing expiring positions and pin risk."""

    def __init__(self, alerts: Alerts, order: int) -> None:
        super().__init__(id="move-pane", classes="pane")
        self.alerts = alerts
        self.order = order
        self.result: Any = None
        self.text = ""
        self.stale_line = False   # the bar holds a line that does not parse
        self.border_title = "Move: type a move in the bar, e.g. spot -3% vol +2 days 1"

    def compose(self) -> ComposeResult:
        yield DataTable(id="move-table", cursor_type="row", fixed_columns=1, show_cursor=False)
        yield Static("", id="move-expiring")

    def on_mount(self) -> None:
        self.query_one("#move-expiring", Static).display = False
        self._setup()

    def _setup(self) -> None:
        table = self.query_one("#move-table", DataTable)
        table.add_column("underlying", key="label", width=10)
        table.add_column(Text("full", justify="right"), key="full", width=MONEY_WIDTH)
        table.add_column(Text("est", justify="right"), key="estimate", width=MONEY_WIDTH)
        table.add_column(Text("error", justify="right"), key="error", width=MONEY_WIDTH + 1)
        table.add_column(Text("err %", justify="right"), key="error_pct", width=7)
        for key, header in TERMS:
            table.add_column(Text(header, justify="right"), key=key, width=TERM_WIDTH)
        self._set_headers()

    def _set_headers(self) -> None:
        table = self.query_one("#move-table", DataTable)
        n = self.order
        for key, label in (("estimate", f"est {n}"), ("error", f"error {n}"), ("error_pct", "err %")):
            table.columns[key].label = Text(label, justify="right")  # type: ignore[index]
        table.refresh()

    def _cells(self, row: Any) -> list[str | Text]:
        n = self.order
        est = getattr(row, f"estimate_{n}")
        err = getattr(row, f"error_{n}")
        err_pct = getattr(row, f"error_{n}_pct")
        flagged = error_flagged(row.full, err, self.alerts)
        err_text: str | Text = fmt.money(err, MONEY_WIDTH) + (FLAG if flagged else " ")
        if flagged:
            err_text = Text(err_text, style="bold")
        cells: list[str | Text] = [
            fmt.money(row.full, MONEY_WIDTH), fmt.money(est, MONEY_WIDTH), err_text,
            fmt.pct(err_pct, 7),
        ]
        for key, _ in TERMS:
            value = row.terms.get(key, float("nan"))
            text = fmt.money(value, TERM_WIDTH)
            cells.append(Text(text, style="dim") if n == 1 and key in SECOND_ORDER_TERMS else text)
        return cells

    def show(self, text: str, summary: str, result: Any) -> None:
        """Show the result of ``text`` (parsed as ``summary``)."""
        self.result, self.text = result, text
        self._summary = summary
        self.stale_line = False
        self.repaint()

    def repaint(self) -> None:
        """Lay out the current result again (after the order toggle)."""
        if self.result is None:
            return
        result = self.result
        table = self.query_one("#move-table", DataTable)
        self._set_headers()
        keys = ["total"] + [f"u|{r.label}" for r in result.by_underlying]
        rows = [result.total] + list(result.by_underlying)
        current = [str(k.value) for k in table.rows]
        if current == keys:
            for key, row in zip(keys, rows, strict=True):
                for col, value in zip(["full", "estimate", "error", "error_pct"] + [k for k, _ in TERMS],
                                      self._cells(row), strict=True):
                    table.update_cell(key, col, value, update_width=False)
        else:
            table.clear()
            for key, row in zip(keys, rows, strict=True):
                label = Text("Σ total", style="bold") if key == "total" else Text(row.label)
                table.add_row(label, *self._cells(row), key=key)
        flagged = sum(error_flagged(r.full, getattr(r, f"error_{self.order}"), self.alerts)
                      for r in rows)
        order = "1st" if self.order == 1 else "2nd"
        title = (f"Move: {self._summary} ─ {order}-order estimate ─ {FLAG} |error| > "
                 f"{self.alerts.error_pct:g}% & > {self.alerts.error_abs:,.0f}")
        if flagged:
            title += f" ─ {flagged} {FLAG}"
        if self.stale_line:
            title = f"Move (last good line): {self._summary} ─ the bar's line has an error"
        self.border_title = title
        expiring = self.query_one("#move-expiring", Static)
        expiring.update(self._expiring_text(result))
        expiring.display = bool(getattr(result, "expiring", None))

    def _expiring_text(self, result: Any) -> Text:
        expiring = list(getattr(result, "expiring", []) or [])
        if not expiring:
            return Text("No position expires inside this move.", style="dim")
        out = Text(f"Expiring inside the move ({len(expiring)}): ")
        for i, item in enumerate(expiring[:6]):
            if i:
                out.append(", ")
            out.append(str(getattr(item, "label", item)))
            if getattr(item, "pin_risk", False):
                out.append(" PIN RISK", style="bold")
        if len(expiring) > 6:
            out.append(f", … {len(expiring) - 6} more")
        return out

    def mark_stale(self, stale: bool) -> None:
        """Say in the title whether the result shown is the last good line's, not the bar's."""
        if stale != self.stale_line:
            self.stale_line = stale
            self.repaint()

    def toggle_order(self) -> int:
        """Switch between first- and second-order estimates; returns the new order."""
        self.order = 1 if self.order == 2 else 2
        self.repaint()
        return self.order
