"""``--xlsx FILE``: a report's tables written to an Excel workbook, one sheet per table, each
header with its unit. Needs openpyxl, the optional ``xlsx`` extra (``pip install "blotter[xlsx]"``),
imported only when a workbook is written.

The option puts its path on the command's context, so a report's CSV branch writes a sheet
instead of printing (``table_out``); cells hold the numbers the CSV holds, unrounded.
"""

from __future__ import annotations

import math
import os
import re
from collections.abc import Callable, Iterable, Sequence
from pathlib import Path
from typing import Any, TypeVar

import click

from blotter.commands.common import XLSX_META, neutralise, print_csv

F = TypeVar("F", bound=Callable[..., Any])

INSTALL = 'pip install "blotter[xlsx]"'
"""The command that installs the optional xlsx support, named when it is missing."""

CURRENCY = "{ccy}"
"""Stands for the table's currency in ``UNITS`` (the row's own when a table holds several)."""

UNITS: dict[str, str] = {
    "spot": "price",
    "strike": "price",
    "value": CURRENCY,
    "delta_shares": "shares",
    "delta_cash": CURRENCY,
    "gamma_1pct": "shares per 1% spot",
    "gamma_cash_1pct": f"{CURRENCY} of delta per 1% spot",
    "mark_price": "price",
    "days_to_expiry": "days",
    "pnl_today": CURRENCY,
    "fx_delta_1pct": "base currency per 1% FX",
    "vega_pt": f"{CURRENCY} per vol pt",
    "theta_day": f"{CURRENCY} per day",
    "rho_pct": f"{CURRENCY} per 1% rate",
    "vanna_pt": "shares per vol pt",
    "volga_pt": f"{CURRENCY} per vol pt²",
    "beta_delta_cash": CURRENCY,
    "weighted_vega_pt": f"{CURRENCY} per vol pt",
    "years": "years",
    "rate": "decimal",
    "carry": "decimal",
    "vol": "decimal",
    "quantity": "contracts",
    "multiplier": "units per contract",
    "full": CURRENCY,
    "estimate": CURRENCY,
    "estimate_1": CURRENCY,
    "estimate_2": CURRENCY,
    "error": CURRENCY,
    "error_1": CURRENCY,
    "error_2": CURRENCY,
    "error_1_pct": "% of full",
    "error_2_pct": "% of full",
    "through_expiry": "positions",
    "positions": "positions",
    "spot_pct": "% of spot",
    "vol_pts": "vol pts",
    "actual": CURRENCY,
    "explained": CURRENCY,
    "unexplained": CURRENCY,
    "new_trades": CURRENCY,
    "total": CURRENCY,
    "corrections": CURRENCY,
    # The Taylor terms of what-if and explain: P&L in currency.
    **{t: CURRENCY for t in ("delta", "gamma", "vega", "volga", "vanna", "theta", "rho", "carry")},
}
"""The unit of each report column that holds a number; a column not here holds words."""

SHEET_NAME_MAX = 31
"""Excel's longest sheet name."""


def xlsx_option(func: F) -> F:
    """Add ``--xlsx FILE`` to a report (its path goes on the context, for ``table_out``); a
    missing openpyxl is refused as the option is read, before any work."""

    def keep(ctx: click.Context, _param: click.Parameter, value: str | None) -> None:
        if value is not None:
            require_openpyxl()
            ctx.meta[XLSX_META] = value

    return click.option(
        "--xlsx", type=click.Path(dir_okay=False), expose_value=False, callback=keep,
        metavar="FILE",
        help=f"Write the tables to this Excel workbook, one sheet per table, units in the "
        f"headers (needs openpyxl: {INSTALL}).",
    )(func)


def wants_xlsx() -> bool:
    """True when this command was given ``--xlsx``."""
    ctx = click.get_current_context(silent=True)
    return ctx is not None and XLSX_META in ctx.meta


def require_openpyxl() -> None:
    """Refuse ``--xlsx`` in words naming the install command when openpyxl is missing."""
    try:
        import openpyxl  # noqa: F401
    except ImportError:
        raise click.ClickException(
            f"--xlsx needs openpyxl, which is not installed: {INSTALL}"
        ) from None


def header(column: str, currencies: set[str]) -> str:
    """``column`` with its unit, the currency named when the table has one (``UNITS``)."""
    unit = UNITS.get(column)
    if unit is None:
        return column
    ccy = next(iter(currencies)) if len(currencies) == 1 else "the row's currency"
    return f"{column} ({unit.replace(CURRENCY, ccy)})"


def _cell(value: Any) -> Any:
    """A value as a cell: a number stays a number (NaN and infinities left empty), words are
    neutralised so a spreadsheet never runs them as a formula."""
    if hasattr(value, "item") and callable(value.item):  # NumPy scalar
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, str):
        return neutralise(value)
    return value


def _sheet_name(name: str, taken: Sequence[str]) -> str:
    """``name`` as Excel allows (no []:*?/\\, at most 31 characters), unique in the book."""
    base = re.sub(r"[\[\]:*?/\\]", " ", name).strip()[:SHEET_NAME_MAX] or "table"
    out, k = base, 2
    while out in taken:
        out = f"{base[: SHEET_NAME_MAX - len(str(k)) - 1]} {k}"
        k += 1
    return out


def table_out(columns: Sequence[str], rows: Iterable[Sequence[Any]], sheet: str) -> None:
    """Print the table as CSV, or under ``--xlsx`` add it to the workbook as sheet ``sheet``
    and save the file (written beside it and renamed, so a failed write leaves no half file)."""
    ctx = click.get_current_context()
    path = ctx.meta.get(XLSX_META)
    if path is None:
        print_csv(columns, rows)
        return
    require_openpyxl()
    from openpyxl import Workbook

    key = f"{XLSX_META}.book"
    book = ctx.meta.get(key)
    if book is None:
        book = ctx.meta[key] = Workbook()
        book.remove(book.active)
    data = [[_cell(c) for c in row] for row in rows]
    ccy_at = list(columns).index("currency") if "currency" in columns else None
    currencies = {r[ccy_at] for r in data if ccy_at is not None and r[ccy_at]}
    ws = book.create_sheet(_sheet_name(sheet, book.sheetnames))
    ws.append([header(c, currencies) for c in columns])
    for row in data:
        ws.append(row)
    ws.freeze_panes = "A2"
    target = Path(path)
    partial = target.with_name(f".{target.name}.{os.getpid()}.partial")
    try:
        book.save(partial)
        os.replace(partial, target)
    except OSError as exc:
        partial.unlink(missing_ok=True)
        raise click.ClickException(f"cannot write {target}: {exc.strerror}") from None
    click.echo(f"wrote {target}: sheet {ws.title!r}, {len(data)} rows", err=True)
