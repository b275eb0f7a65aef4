"""The Move pane: for the bar's move, per underlying and in total, full change, estimate, error.

Numbers are shown as ``blotter.scenario.apply_move`` returns them; the pane only formats them and
marks an error beyond the alert threshold with ``!`` beside the number (bold as well). The grid is
one block of text rather than a cell-per-widget table, so a keystroke repaints it in a few
milliseconds even with many underlyings; it scrolls sideways when the terms do not fit.
"""

from __future__ import annotations

import math
from typing import Any

from rich.text import Text
from textual import events
from textual.app import ComposeResult
from textual.containers import ScrollableContainer, Vertical
from textual.widgets import Static

from blotter.config import Alerts
from blotter.scenario import SECOND_ORDER, TERM_NAMES
from blotter.ui import fmt
from blotter.ui.fmt import NOT_ADDITIVE

TERM_HEADERS = {"delta": "Δ", "gamma": "Γ", "theta": "θ", "rho": "ρ"}
"""Column headers of the Taylor terms that are not their own names."""

TERMS: tuple[tuple[str, str], ...] = tuple((k, TERM_HEADERS.get(k, k)) for k in TERM_NAMES)
"""Taylor terms of the estimate, in column order, with their headers."""

SECOND_ORDER_TERMS = frozenset(SECOND_ORDER)
"""Terms that only the second-order estimate includes."""

FLAG = "!"
"""Marks an estimate whose error is beyond the alert threshold (shown bold as well)."""


LABEL_WIDTH = 10
MONEY_WIDTH = 11
PCT_WIDTH = 8
TERM_WIDTH = 10

COLUMNS = ("label", "full", "estimate", "error", "error_pct") + tuple(k for k, _ in TERMS)
"""Column keys of the grid, left to right."""


VALUE_WIDTHS = (MONEY_WIDTH, MONEY_WIDTH, MONEY_WIDTH + 1, PCT_WIDTH) + (TERM_WIDTH,) * len(TERMS)
"""Least widths of the columns after the label, left to right (the error cell holds the flag
too); a column grows to its widest cell plus one space, so numbers never run together."""


def fit_label_width(width: int, widths: tuple[int, ...] = VALUE_WIDTHS) -> int:
    """The label column's width that makes the last column shown in ``width`` whole."""
    return fmt.fill_first_column(LABEL_WIDTH, widths, width)


def content_widths(cells: list[dict[str, str]], headers: dict[str, str]) -> tuple[int, ...]:
    """Each value column's width: its least width, or its widest cell or header and a space."""
    return tuple(
        max(least, *(len(c[col]) + 1 for c in cells), len(headers[col]) + 1)
        for col, least in zip(COLUMNS[1:], VALUE_WIDTHS, strict=True)
    )


def error_flagged(full: float, error: float, alerts: Alerts) -> bool:
    """True when |error| is above both the absolute and the relative alert threshold."""
    if not (math.isfinite(full) and math.isfinite(error)):
        return True
    return abs(error) > alerts.error_abs and abs(error) > alerts.error_pct / 100.0 * abs(full)


class MovePane(Vertical):
    """The grid (total first, then each underlying) and a line listing expiring positions."""

    def __init__(self, alerts: Alerts, order: int) -> None:
        super().__init__(id="move-pane", classes="pane")
        self.alerts = alerts
        self.order = order
        self.result: Any = None
        self.text = ""
        self._summary = ""
        self.warning = ""  # about the move shown (a large absolute spot move), in words
        self.stale_line = False  # the bar holds a line that does not parse
        self.cells: dict[tuple[str, str], str] = {}  # (row key, column) -> text shown
        self.row_keys: list[str] = []
        self.label_width = LABEL_WIDTH
        self.widths = VALUE_WIDTHS
        self._pane_width = 0
        self.border_title = "Move: type a move in the bar, e.g. spot -3% vol +2 days 1"

    def compose(self) -> ComposeResult:
        with ScrollableContainer(id="move-scroll"):
            yield Static(self._header(), id="move-grid")
        yield Static("", id="move-expiring")

    def on_mount(self) -> None:
        self.query_one("#move-expiring", Static).display = False

    def on_resize(self, event: events.Resize) -> None:
        self._pane_width = event.size.width - 2  # less the vertical scrollbar's room
        width = fit_label_width(self._pane_width, self.widths)
        if width != self.label_width:
            self.label_width = width
            self.repaint()

    def _headers(self) -> dict[str, str]:
        n = self.order
        return {
            "label": "underlying",
            "full": "full",
            "estimate": f"est {n}",
            "error": f"error {n} ",
            "error_pct": "err %",
            **dict(TERMS),
        }

    def _header(self) -> Text:
        heads = self._headers()
        head = f"{heads['label']:<{self.label_width}}" + "".join(
            f"{heads[col]:>{w}}" for col, w in zip(COLUMNS[1:], self.widths, strict=True)
        )
        return Text(head, style="bold")

    def _several(self) -> bool:
        """Whether the result holds more than one currency (its total is then not a sum)."""
        return len(getattr(self.result, "by_currency", ()) or ()) > 1

    def _flagged(self, row: Any) -> bool:
        """``error_flagged`` for a row of one currency; a total across several has no error."""
        if self._several() and getattr(row, "currency", None) is None:
            return False
        return error_flagged(row.full, getattr(row, f"error_{self.order}"), self.alerts)

    def _values(self, key: str, row: Any) -> tuple[dict[str, str], bool]:
        """The row's cells, unpadded (the error's with its flag or a space), and whether its
        error is flagged."""
        n = self.order
        est = getattr(row, f"estimate_{n}")
        err = getattr(row, f"error_{n}")
        err_pct = getattr(row, f"error_{n}_pct")
        flagged = self._flagged(row)
        partial = bool(getattr(getattr(self.result, "valuation", None), "partial", False))
        label = ("Σ valued" if partial else "Σ total") if key == "total" else str(row.label)
        several = self._several()
        if several and key.startswith("c|"):
            label = f"Σ {row.currency}"
        elif several and key.startswith("u|"):
            label = f"{row.label} {row.currency}"
        no_sum = several and getattr(row, "currency", None) is None

        def money(x: float) -> str:
            return NOT_ADDITIVE if no_sum else fmt.whole(x)

        values = {
            "label": label,
            "full": money(row.full),
            "estimate": money(est),
            "error": money(err) + (FLAG if flagged else " "),
            "error_pct": NOT_ADDITIVE if no_sum else fmt.pct(err_pct),
        }
        for term, _ in TERMS:
            values[term] = money(row.terms.get(term, float("nan")))
        return values, flagged

    def _row(self, key: str, raw: dict[str, str], flagged: bool) -> Text:
        """One line of the grid from its cells ``raw``, padded to the columns' widths."""
        n = self.order
        values = {"label": raw["label"][: self.label_width].ljust(self.label_width)}
        for col, w in zip(COLUMNS[1:], self.widths, strict=True):
            values[col] = raw[col].rjust(w)
        line = Text(style="bold" if key == "total" else "")
        for column in COLUMNS:
            self.cells[(key, column)] = values[column]
            style = ""
            if column == "error" and flagged:
                style = "bold reverse"
            elif n == 1 and column in SECOND_ORDER_TERMS:
                style = "dim"
            line.append(values[column], style=style)
        return line

    def show(self, text: str, summary: str, result: Any, warning: str = "") -> None:
        """Show the result of ``text`` (said in words with units as ``summary``); ``warning``
        (words, empty for none) heads the title."""
        self.result, self.text = result, text
        self._summary = summary
        self.warning = warning
        self.stale_line = False
        self.repaint()

    def repaint(self) -> None:
        """Lay out the current result again (after the order toggle or a bad line)."""
        if self.result is None:
            return
        result = self.result
        per_ccy = list(getattr(result, "by_currency", ()) or ()) if self._several() else []
        rows = (
            [("total", result.total)]
            + [(f"c|{r.currency}", r) for r in per_ccy]
            + [(f"u|{r.label}", r) for r in result.by_underlying]
        )
        self.cells = {}
        raw = [self._values(k, r) for k, r in rows]
        widths = content_widths([v for v, _ in raw], self._headers())
        same_shape = self.row_keys == [k for k, _ in rows] and widths == self.widths
        if widths != self.widths:
            self.widths = widths
            if self._pane_width:
                self.label_width = fit_label_width(self._pane_width, widths)
        self.row_keys = [k for k, _ in rows]
        lines = [self._row(k, v, f) for (k, _), (v, f) in zip(rows, raw, strict=True)]
        grid = Text("\n").join([self._header(), *lines])
        grid.no_wrap = True
        # Same rows, fixed-width columns: the size is unchanged, so skip the layout pass.
        self.query_one("#move-grid", Static).update(grid, layout=not same_shape)
        flagged = sum(f for _, f in raw)
        order = "1st" if self.order == 1 else "2nd"
        title = (
            f"Move: {self._summary} ─ {order}-order estimate ─ {FLAG} |error| > "
            f"{self.alerts.error_pct:g}% & > {self.alerts.error_abs:,.0f}"
        )
        if flagged:
            title += f" ─ {flagged} {FLAG}"
        if self.warning:
            title = f"Move: {self._summary} ─ CHECK: {self.warning}"
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
        if self.result is None:
            self.query_one("#move-grid", Static).update(self._header())
        return self.order
