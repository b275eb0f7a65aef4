"""The Book pane: one DataTable with a total row, underlyings (or expiry buckets) that expand.

Rows have stable keys (``BookRow.key``). A new valuation with the same visible rows updates the
cells in place; expanding, collapsing, regrouping and sorting lay the rows out again and keep the
cursor on the same key.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import ClassVar

from rich.text import Text
from textual import events
from textual.binding import BindingType
from textual.coordinate import Coordinate
from textual.widgets import DataTable

from blotter import risk
from blotter.ui import fmt
from blotter.ui.data import BOOK_COLUMNS, MONEY_COLUMNS, SHARE_FIELDS, BookRow, BookTree
from blotter.ui.fmt import NOT_ADDITIVE
from blotter.ui.keys import app_bindings

COLUMN_WIDTHS = {
    "spot": 8,
    "delta_cash": 11,
    "gamma_1pct": 8,
    "vega_pt": 9,
    "theta_day": 8,
    "delta_shares": 10,
    "value": 12,
    "rho_pct": 8,
    "vanna_pt": 8,
    "volga_pt": 8,
    "beta_delta_cash": 11,
}
"""Fixed widths in cells so in-place updates never reflow the table."""

LABEL_WIDTH = 16
"""Width of the row-label column (tree glyphs + name)."""


VEGA_HEADERS = {"pt": "vega pt", "vol": "vega 1.00"}
"""Vega column header per ``risk.VEGA_UNITS`` key."""


def _cell(
    column: str,
    value: float,
    mixed: bool = False,
    vega_scale: float = 1.0,
    mixed_currency: bool = False,
) -> str:
    width = COLUMN_WIDTHS[column]
    if (mixed and column in SHARE_FIELDS) or (mixed_currency and column in MONEY_COLUMNS):
        return NOT_ADDITIVE.rjust(width)
    if column == "vega_pt":
        value = value * vega_scale
    if column == "spot":
        return fmt.number(value, 2, width) if value == value else "".rjust(width)

    if column == "delta_shares":
        return fmt.number(value, 0, width, signed=True)
    return fmt.money(value, width)


class BookTable(DataTable[str | Text]):
    """The book grid; ``group`` is ``"underlying"`` or ``"expiry"``."""

    BINDINGS: ClassVar[list[BindingType]] = list(app_bindings("book"))

    def __init__(self) -> None:
        super().__init__(
            id="book-table", cursor_type="cell", zebra_stripes=False, fixed_columns=1, fixed_rows=0
        )
        self.source: BookTree | None = None
        self.group = "underlying"
        self.expanded: set[str] = set()
        self.sort_column: str | None = None  # None = the natural order (symbol or expiry)
        self.sort_reverse = False
        self._visible: list[BookRow] = []
        self.expandable_keys: set[str] = set()
        self.vega_unit = "pt"  # a key of risk.VEGA_UNITS

    def _cells(self, row: BookRow) -> list[str]:
        scale = risk.VEGA_UNITS[self.vega_unit]
        return [
            _cell(col, row.values[i], row.mixed, scale, row.mixed_currency)
            for i, (col, _) in enumerate(BOOK_COLUMNS)
        ]

    def set_vega_unit(self, unit: str) -> None:
        """Show vega per vol point (``"pt"``) or per 1.00 of vol (``"vol"``)."""
        self.vega_unit = unit
        self.columns["vega_pt"].label = Text(VEGA_HEADERS[unit], justify="right")  # type: ignore[index]
        self._visible = []
        self.show()

    def on_mount(self) -> None:
        self.add_column(Text("underlying"), key="label", width=LABEL_WIDTH)
        for key, header in BOOK_COLUMNS:
            self.add_column(Text(header, justify="right"), key=key, width=COLUMN_WIDTHS[key])

    def on_resize(self, event: events.Resize) -> None:
        # Leave room for the vertical scrollbar whether or not it is showing yet: it appears
        # when rows arrive, without a resize.
        self.fit_label_column(event.size.width - self.styles.scrollbar_size_vertical)

    def fit_label_column(self, width: int) -> None:
        """Widen the label column so the last column on screen is whole, not cut part-way.

        A number cut at the pane's edge (``-5,`` of ``-5,489``) reads as another number; the
        columns past the edge stay one scroll away.
        """
        pad = 2 * self.cell_padding
        widths = [COLUMN_WIDTHS[key] + pad for key, _ in BOOK_COLUMNS]
        target = fmt.fill_first_column(LABEL_WIDTH + pad, widths, width) - pad
        label = self.columns.get("label")  # type: ignore[call-overload]
        if label is not None and label.width != target:
            label.width = target
            self._require_update_dimensions = True
            self._clear_caches()
            self.refresh()

    # -- layout ---------------------------------------------------------------------------------
    def _sorted(self, rows: Sequence[BookRow]) -> list[BookRow]:
        if self.sort_column is None:
            return list(rows)
        if self.sort_column == "label":
            return sorted(rows, key=lambda r: r.label, reverse=self.sort_reverse)
        i = [k for k, _ in BOOK_COLUMNS].index(self.sort_column)

        def value(r: BookRow) -> float:
            v = r.values[i]
            return v if v == v else float("-inf")

        return sorted(rows, key=value, reverse=self.sort_reverse)

    def _layout(self) -> list[BookRow]:
        assert self.source is not None
        out = [self.source.total()]
        live = self.source.total_without_trials()
        if live is not None:
            out.append(live)
        out += self.source.currency_totals()
        base = self.source.base_total()
        if base is not None:
            out.append(base)

        def walk(rows: Sequence[BookRow]) -> None:
            for row in self._sorted(rows):
                out.append(row)
                if row.expandable and row.key in self.expanded:
                    walk(self.source.children(row.key))  # type: ignore[union-attr]

        walk(self.source.top(self.group))
        return out

    def _label(self, row: BookRow) -> Text:
        if row.level == 0:
            glyph = "Σ "
        elif row.expandable:
            glyph = "▾ " if row.key in self.expanded else "▸ "
        else:
            glyph = "· "
        text = Text(
            "  " * max(row.level - 1, 0) + glyph + row.label, no_wrap=True, overflow="ellipsis"
        )
        several = self.source is not None and len(self.source.currencies) > 1
        if several and row.level > 0 and row.currency and row.position is None:
            text.append(f" {row.currency}", style="dim")
        if row.trial:
            text.append(" T", style="bold reverse")
        if row.alert:
            text.append(" !", style="bold")
        if row.level == 0:
            text.stylize("bold")
        return text

    def show(self, source: BookTree | None = None) -> None:
        """Show ``source`` (or re-lay the current one): in place when the rows are the same."""
        if source is not None:
            self.source = source
        if self.source is None:
            return
        rows = self._layout()
        if [r.key for r in rows] == [r.key for r in self._visible] and self.row_count == len(rows):
            for old, new in zip(self._visible, rows, strict=True):
                if (
                    old.values != new.values
                    or old.label != new.label
                    or old.alert != new.alert
                    or old.mixed != new.mixed
                    or old.mixed_currency != new.mixed_currency
                ):
                    cells = self._cells(new)
                    for i, (col, _) in enumerate(BOOK_COLUMNS):
                        if old.values[i] != new.values[i] or old.mixed != new.mixed:
                            self.update_cell(new.key, col, cells[i], update_width=False)
                    self.update_cell(new.key, "label", self._label(new), update_width=False)
            self._visible = rows
            return
        cursor_key = self.cursor_row_key()
        column = self.cursor_coordinate.column
        self.clear()
        for row in rows:
            self.add_row(
                self._label(row),
                *self._cells(row),
                key=row.key,
            )
        self._visible = rows
        # The total rows (book, live-only under trials, each currency's) stay in view.
        self.fixed_rows = next((k for k, r in enumerate(rows) if r.level > 0), len(rows))
        self.expandable_keys = {r.key for r in rows if r.expandable}
        if cursor_key is not None and cursor_key in {r.key for r in rows}:
            self.move_cursor(row=self.get_row_index(cursor_key), column=column, animate=False)
        elif rows:
            self.move_cursor(row=0, column=column, animate=False)

    def relabel(self) -> None:
        """Redraw the label column only (after a toggle changed a glyph)."""
        for row in self._visible:
            self.update_cell(row.key, "label", self._label(row), update_width=False)

    # -- queries --------------------------------------------------------------------------------
    def cursor_row_key(self) -> str | None:
        """Key of the row under the cursor, or None for an empty table."""
        if not self.row_count:
            return None
        try:
            row_key, _ = self.coordinate_to_cell_key(Coordinate(self.cursor_coordinate.row, 0))
        except Exception:  # noqa: BLE001 - cursor outside a table being rebuilt
            return None
        return str(row_key.value)

    def visible_rows(self) -> list[BookRow]:
        """The rows as laid out, top to bottom."""
        return list(self._visible)

    def row(self, key: str) -> BookRow | None:
        """The visible row with ``key``."""
        for r in self._visible:
            if r.key == key:
                return r
        return None

    # -- actions --------------------------------------------------------------------------------
    def toggle(self, key: str | None = None) -> bool:
        """Expand or collapse the row ``key`` (the cursor's row by default); False if a leaf."""
        key = key or self.cursor_row_key()
        if key is None or key not in self.expandable_keys:
            return False
        if key in self.expanded:
            self.expanded = {k for k in self.expanded if not k.startswith(key)}
        else:
            self.expanded.add(key)
        self.show()
        return True

    def set_group(self, group: str) -> None:
        """Regroup by ``"underlying"`` or ``"expiry"``; expansions are per grouping."""
        self.group = group
        self.columns["label"].label = Text("expiry bucket" if group == "expiry" else "underlying")  # type: ignore[index]
        self.expanded = set()
        self.show()

    def sort_by_cursor(self) -> tuple[str | None, bool]:
        """Sort by the cursor's column; the same column again reverses, a third time restores."""
        col_index = self.cursor_coordinate.column
        column = "label" if col_index == 0 else BOOK_COLUMNS[col_index - 1][0]
        if self.sort_column != column:
            self.sort_column, self.sort_reverse = column, column != "label"
        elif self.sort_reverse == (column != "label"):
            self.sort_reverse = not self.sort_reverse
        else:
            self.sort_column, self.sort_reverse = None, False
        self.show()
        return self.sort_column, self.sort_reverse

    def on_data_table_cell_selected(self, event: DataTable.CellSelected) -> None:
        """Enter on a row expands or collapses it."""
        event.stop()
        self.toggle(str(event.cell_key.row_key.value))

    def action_toggle_row(self) -> None:
        self.toggle()
