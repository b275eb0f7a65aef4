"""The Book pane: one DataTable with a total row, underlyings (or expiry buckets) that expand.

Rows have stable keys (``BookRow.key``). A new valuation with the same visible rows updates the
cells in place; expanding, collapsing, regrouping and sorting lay the rows out again and keep the
cursor on the same key.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import ClassVar

from rich.text import Text
from textual import events
from textual.binding import BindingType
from textual.coordinate import Coordinate
from textual.widgets import DataTable

from blotter import risk
from blotter.desk.session import SpotAge
from blotter.ticks import price_text
from blotter.ui import fmt
from blotter.ui.data import (
    MONEY_COLUMNS,
    POSITION_COLUMNS,
    SHARE_FIELDS,
    TABLE_COLUMNS,
    BookRow,
    BookTree,
)
from blotter.ui.fmt import NOT_ADDITIVE
from blotter.ui.keys import app_bindings

LABEL_WIDTH = 16
"""Width of the row-label column (tree glyphs + name)."""


VEGA_HEADERS = {"pt": "vega pt", "vol": "vega 1.00"}
"""Vega column header per ``risk.VEGA_UNITS`` key."""

HEADERS = dict(TABLE_COLUMNS)
"""Each column's header at unit 1."""


@dataclass(frozen=True)
class ColumnSpec:
    """How one column is written: its header, the unit (``fmt.SCALES``) and width in cells."""

    header: str
    unit: str
    factor: float
    width: int


def _text(
    column: str,
    value: float,
    row: BookRow,
    vega_scale: float = 1.0,
    factor: float = 1.0,
) -> str:
    """A cell's text, unpadded and never cut: "—" where a sum does not add, a blank spot where
    the row has none, a spot to its tick, anything else in whole units of ``factor``."""
    if (row.mixed and column in SHARE_FIELDS) or (
        row.mixed_currency and column in MONEY_COLUMNS
    ):
        return NOT_ADDITIVE
    if column == "spot":
        return price_text(value, row.decimals) if value == value else ""
    if column == "spot_age":
        return SpotAge(value, row.spot_stale).words() if value == value else ""
    if value != value and column in ("pnl_today", *POSITION_COLUMNS):
        return ""  # worked out per underlying and in total, or on a position row, only
    if column == "mark":
        return f"{value:,.{row.decimals}f}"  # a model value: two decimals past the tick
    if column == "vol":
        return f"{100 * value:.2f}"
    if column == "days":
        return f"{value:,.1f}"
    if column == "vega_pt":
        value = value * vega_scale
    return fmt.whole(value, factor)


def column_specs(rows: Sequence[BookRow], vega_unit: str = "pt") -> dict[str, ColumnSpec]:
    """Each column's unit and width for ``rows``: whole numbers switch to k, m, bn when a value
    would pass ``fmt.CELL_CAP`` characters, and every column is as wide as its widest cell."""
    scale = risk.VEGA_UNITS[vega_unit]
    out: dict[str, ColumnSpec] = {}
    for col, header in TABLE_COLUMNS:
        if col == "vega_pt":
            header = VEGA_HEADERS[vega_unit]
        values = [r.value(col) * (scale if col == "vega_pt" else 1.0) for r in rows]
        fixed = col in ("spot", "spot_age", "mark", "vol", "days")
        unit, factor = ("", 1.0) if fixed else fmt.column_scale(values)
        texts = [_text(col, r.value(col), r, scale, factor) for r in rows]
        head = fmt.scaled_header(header, unit)
        out[col] = ColumnSpec(head, unit, factor, fmt.column_width(head, texts, 5))
    return out


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
        self.specs = column_specs([], self.vega_unit)
        self._pane_width = 0
        self.label_need = LABEL_WIDTH  # the longest label shown: no quantity in one is cut

    def _cells(self, row: BookRow) -> list[str]:
        scale = risk.VEGA_UNITS[self.vega_unit]
        out = []
        for col, _ in TABLE_COLUMNS:
            spec = self.specs[col]
            out.append(_text(col, row.value(col), row, scale, spec.factor).rjust(spec.width))
        return out

    def set_vega_unit(self, unit: str) -> None:
        """Show vega per vol point (``"pt"``) or per 1.00 of vol (``"vol"``)."""
        self.vega_unit = unit
        self._visible = []
        self.show()

    def on_mount(self) -> None:
        self.add_column(Text("underlying"), key="label", width=LABEL_WIDTH)
        for key, _ in TABLE_COLUMNS:
            spec = self.specs[key]
            self.add_column(Text(spec.header, justify="right"), key=key, width=spec.width)

    def _apply_specs(self, specs: dict[str, ColumnSpec]) -> None:
        """Give each column its header and width from ``specs`` (the rows are re-added after)."""
        self.specs = specs
        for key, _ in TABLE_COLUMNS:
            column = self.columns.get(key)  # type: ignore[call-overload]
            if column is not None:
                column.label = Text(specs[key].header, justify="right")
                column.width = specs[key].width
        self._require_update_dimensions = True
        if self._pane_width:
            self.fit_label_column(self._pane_width)

    def on_resize(self, event: events.Resize) -> None:
        # Leave room for the vertical scrollbar whether or not it is showing yet: it appears
        # when rows arrive, without a resize; ``_refit`` gives the room back once laid out.
        self._pane_width = event.size.width - self.styles.scrollbar_size_vertical
        self.fit_label_column(self._pane_width)
        self.call_after_refresh(self._refit)

    def _refit(self) -> None:
        """Fit the label column to the width the rows have now: the whole pane when no
        vertical scrollbar shows, so no column's first characters show in its room."""
        # whether the rows overflow the pane now, not whether the bar was drawn at the last
        # layout (which lags a refresh behind a change of rows or of the pane's height)
        tall = self.virtual_size.height > self.scrollable_content_region.height
        bar = self.styles.scrollbar_size_vertical if tall else 0
        if self.size.width:
            self.fit_label_column(self.size.width - bar)

    def fit_label_column(self, width: int) -> None:
        """Widen the label column so the last column on screen is whole, not cut part-way.

        A number cut at the pane's edge (``-5,`` of ``-5,489``) reads as another number; the
        columns past the edge stay one scroll away.
        """
        pad = 2 * self.cell_padding
        widths = [self.specs[key].width + pad for key, _ in TABLE_COLUMNS]
        target = fmt.fill_first_column(self.label_need + pad, widths, width) - pad
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
        column = self.sort_column

        def value(r: BookRow) -> float:
            v = r.value(column)
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
        specs = column_specs(rows, self.vega_unit)
        need = max([LABEL_WIDTH, *(len(self._label(r).plain) for r in rows)])
        if need != self.label_need:
            self.label_need = need
            self.specs = {}  # re-laid out below, the label column refitted
        if specs != self.specs:
            self._apply_specs(specs)
            self._visible = []
        if [r.key for r in rows] == [r.key for r in self._visible] and self.row_count == len(rows):
            for old, new in zip(self._visible, rows, strict=True):
                if (
                    old.values != new.values
                    or old.pnl_today != new.pnl_today
                    or old.label != new.label
                    or old.alert != new.alert
                    or old.mixed != new.mixed
                    or old.mixed_currency != new.mixed_currency
                ):
                    cells = self._cells(new)
                    for i, (col, _) in enumerate(TABLE_COLUMNS):
                        if old.value(col) != new.value(col) or old.mixed != new.mixed:
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
        self.call_after_refresh(self._refit)
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
        column = "label" if col_index == 0 else TABLE_COLUMNS[col_index - 1][0]
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
