"""The trade and mark CSV formats: reading a file (UTF-8, BOM, CRLF or LF), checking each row
into typed values with problems named by line and column, and the cells of an export.

An export is the import format followed by information columns the importer ignores; text a
spreadsheet would run as a formula gets a leading quote, which the importer takes off again.
"""

from __future__ import annotations

import csv
import hashlib
import io
import os
import re
from collections.abc import Sequence
from datetime import datetime
from pathlib import Path
from typing import Any, NamedTuple

from blotter import limits
from blotter.store.checks import (
    MARK_KINDS,
    after_cutoff,
    check_currency,
    check_decimal,
    check_price,
    check_quantity,
    check_strike,
    check_tenor,
    check_vol,
    within,
)
from blotter.store.errors import Problem, StoreError, raise_if
from blotter.store.records import MarkRecord, NewContract, StoredPoint, TradeRecord
from blotter.store.times import parse_date, parse_time, timestamp_text

TRADE_COLUMNS = (
    "book",
    "symbol",
    "type",
    "expiry",
    "strike",
    "quantity",
    "price",
    "trade_time",
    "style",
    "multiplier",
    "settlement",
    "note",
)
"""Columns of the trade CSV format, in the order ``trade list --csv`` prints them."""

TRADE_INFO_COLUMNS = ("trade_id", "state", "who", "source", "booked_at", "contract")
"""Columns ``trade list --csv`` adds after the import columns; an import ignores them, except that
``state`` must be ``live`` and a ``trade_id`` must not be a trade already in the book (that row
is an export of it: importing it again would double the position)."""

TRADE_REQUIRED = ("book", "symbol", "type", "quantity", "price", "trade_time")
"""Trade CSV columns that must be present (the others may be left out)."""

MARK_COLUMNS = ("kind", "symbol", "currency", "expiry", "strike", "tenor_days", "value")
"""Columns of the mark CSV format, in the order ``mark list --csv`` prints them."""

MARK_INFO_COLUMNS = ("mark_id", "mark_set_id", "set_kind", "marked_at", "who")
"""Columns ``mark list --csv`` adds after the import columns; an import ignores them."""

MARK_REQUIRED = ("kind", "value")
"""Mark CSV columns that must be present."""

_TRADE_ID = re.compile(r"[0-9]{1,18}")

_STYLES = {"": None, "american": True, "european": False}
"""A trade row's ``style`` cell and the exercise it names (empty: the underlying's default)."""

_SETTLEMENTS = {"": None, "cash": True, "physical": False}
"""A trade row's ``settlement`` cell and whether it names cash (empty: the default)."""


class CsvRows(NamedTuple):
    """A CSV file read for import: its path, the sha256 of its bytes and its data rows, each as
    (line number, {column: text})."""

    path: Path
    digest: str
    rows: list[tuple[int, dict[str, str]]]


class TradeLine(NamedTuple):
    """One checked row of a trade CSV: the book, the contract's terms and the trade's."""

    line: int
    book: str
    contract: NewContract
    quantity: int
    price: float
    trade_time: datetime
    note: str


def read_csv(
    path: str | os.PathLike[str], known: Sequence[str], required: Sequence[str]
) -> CsvRows:
    """The data rows of a UTF-8 CSV (BOM, CRLF or LF) whose header names only ``known`` columns
    and every ``required`` one; ``CsvImportError`` naming each problem otherwise."""
    p = Path(path)
    try:
        data = p.read_bytes()
    except FileNotFoundError:
        raise StoreError(f"no file {p}") from None
    except OSError as exc:
        raise StoreError(f"cannot read {p}: {exc.strerror}") from None
    digest = hashlib.sha256(data).hexdigest()
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = data[: exc.start].count(b"\n") + 1
        raise StoreError(
            f"{p.name}: nothing imported; line {line} is not UTF-8 (byte {exc.start + 1})"
        ) from None
    if "\x00" in text:
        line = text[: text.index("\x00")].count("\n") + 1
        raise StoreError(f"{p.name}: nothing imported; line {line} holds a NUL character")
    reader = csv.reader(io.StringIO(text, newline=""), strict=True)
    try:
        header = next(reader)
    except StopIteration:
        raise StoreError(f"{p.name}: nothing imported; the file is empty") from None
    except csv.Error as exc:
        raise StoreError(f"{p.name}: nothing imported; line 1: {exc}") from None
    header = [h.strip() for h in header]
    problems: list[Problem] = []
    for i, h in enumerate(header):
        if h not in known:
            problems.append(Problem(1, h, f"unknown column (known: {', '.join(known)})"))
        elif header.index(h) != i:
            problems.append(Problem(1, h, "column given twice"))
    for col in required:
        if col not in header:
            problems.append(Problem(1, col, "required column is missing"))
    raise_if(p, problems)
    rows: list[tuple[int, dict[str, str]]] = []
    start = reader.line_num + 1
    while True:
        try:
            rec = next(reader)
        except StopIteration:
            break
        except csv.Error as exc:
            problems.append(Problem(start, "", f"cannot read the CSV: {exc}"))
            raise_if(p, problems)
        if rec and any(c.strip() for c in rec):
            if len(rec) != len(header):
                problems.append(
                    Problem(start, "", f"{len(rec)} cells where the header has {len(header)}")
                )
            else:
                rows.append((start, dict(zip(header, rec, strict=False))))
        start = reader.line_num + 1
    raise_if(p, problems)
    return CsvRows(p, digest, rows)


def unneutralise(text: str) -> str:
    """Undo the leading quote export puts before formula-like text or text starting with a quote."""
    if len(text) >= 2 and text[0] == "'" and text[1] in "'=+-@\t\r":
        return text[1:]
    return text


def escape_quote(text: str) -> str:
    """Text for export: a leading quote is doubled, so the importer's ``unneutralise`` is exact."""
    return "'" + text if text.startswith("'") else text


def cell(rec: dict[str, str], col: str) -> str:
    """The text of column ``col`` of a row as imported (stripped, export quoting undone)."""
    return unneutralise(rec.get(col, "").strip())


def trade_id_problems(
    rows: list[tuple[int, dict[str, str]]],
) -> tuple[list[Problem], dict[int, int]]:
    """Problems of the ``trade_id`` cells (an export's) read from the file alone (not a whole
    number, given twice), and the first line of each id given, for the book to be asked which
    it holds. Empty cells (and no column) are new trades."""
    problems: list[Problem] = []
    first_line: dict[int, int] = {}
    for line, rec in rows:
        text = cell(rec, "trade_id")
        if not text:
            continue
        if not _TRADE_ID.fullmatch(text):
            problems.append(Problem(line, "trade_id", f"{text!r} is not a trade id"))
        elif int(text) in first_line:
            problems.append(
                Problem(line, "trade_id", f"the same trade as line {first_line[int(text)]}")
            )
        else:
            first_line[int(text)] = line
    return problems, first_line


def parse_trade_row(
    line: int,
    rec: dict[str, str],
    unders: dict[str, Any],
    now: datetime,
    problems: list[Problem],
) -> TradeLine | None:
    """One checked trade row, or None after appending its problems; ``unders`` maps a symbol to
    its underlying's row (``cutoff_time`` and ``time_zone`` are read from it)."""
    before = len(problems)

    def bad(col: str, msg: str) -> None:
        problems.append(Problem(line, col, msg))

    book = cell(rec, "book")
    if not 1 <= len(book) <= 64:
        bad("book", "must be 1 to 64 characters")
    symbol = cell(rec, "symbol")
    if symbol not in unders:
        bad("symbol", f"unknown underlying {symbol!r}")
    typ = cell(rec, "type").upper()
    expiry_text, strike_text = cell(rec, "expiry"), cell(rec, "strike")
    expiry: str | None = None
    strike: float | None = None
    is_call: bool | None = None
    if typ in ("C", "P"):
        is_call = typ == "C"
        try:
            expiry = parse_date(expiry_text, "expiry").isoformat()
        except StoreError as exc:
            bad("expiry", str(exc))
        try:
            strike = check_strike(strike_text)
        except StoreError as exc:
            bad("strike", str(exc) if strike_text else "an option needs a strike")
    elif typ == "U":
        if expiry_text or strike_text:
            bad(
                "expiry" if expiry_text else "strike",
                "the underlying itself (type U) has no expiry or strike",
            )
    else:
        bad("type", f"{typ!r} is not C (call), P (put) or U (the underlying itself)")
    qty = price = None
    try:
        qty = check_quantity(cell(rec, "quantity"))
    except StoreError as exc:
        bad("quantity", str(exc))
    try:
        price = check_price(cell(rec, "price"))
    except StoreError as exc:
        bad("price", str(exc))
    t = None
    try:
        t = parse_time(cell(rec, "trade_time"))
        if t > now:
            bad("trade_time", f"{t.isoformat()} is in the future")
        elif expiry is not None and symbol in unders:
            u = unders[symbol]
            late = after_cutoff(t, expiry, u["cutoff_time"], u["time_zone"])
            if late:
                bad("trade_time", late)
    except StoreError as exc:
        bad("trade_time", str(exc))
    style = cell(rec, "style").lower()
    if style not in _STYLES:
        bad("style", f"{style!r} is not american or european")
    mult_text = cell(rec, "multiplier")
    mult = None
    if mult_text:
        try:
            mult = within(limits.MULTIPLIER, mult_text)
        except StoreError as exc:
            bad("multiplier", str(exc))
    settlement = cell(rec, "settlement").lower()
    if settlement not in _SETTLEMENTS:
        bad("settlement", f"{settlement!r} is not cash or physical")
    state = cell(rec, "state")
    if state and state != "live":
        bad("state", f"only live trades can be imported, this one is {state!r}")
    if len(problems) > before:
        return None
    assert qty is not None and price is not None and t is not None
    terms = NewContract(
        symbol, expiry, strike, is_call, _STYLES[style], mult, _SETTLEMENTS[settlement]
    )
    return TradeLine(line, book, terms, qty, price, t, cell(rec, "note"))


def parse_mark_row(
    line: int, rec: dict[str, str], unders: dict[str, int], problems: list[Problem]
) -> StoredPoint | None:
    """One checked mark point (kind, underlying_id, currency, expiry, strike, tenor, value), or
    None after appending its problems; ``unders`` maps a symbol to its underlying's id."""
    before = len(problems)

    def bad(col: str, msg: str) -> None:
        problems.append(Problem(line, col, msg))

    kind = cell(rec, "kind").lower()
    symbol, ccy = cell(rec, "symbol"), cell(rec, "currency")
    expiry_text, strike_text, tenor_text = (
        cell(rec, "expiry"),
        cell(rec, "strike"),
        cell(rec, "tenor_days"),
    )
    value_text = cell(rec, "value")
    if kind not in MARK_KINDS:
        bad("kind", f"{kind!r} is not one of {', '.join(MARK_KINDS)}")
        return None
    uid = None
    if kind == "rate":
        for col, text in (("symbol", symbol), ("expiry", expiry_text), ("strike", strike_text)):
            if text:
                bad(col, "a rate mark has no " + col)
    else:
        if symbol not in unders:
            bad("symbol", f"unknown underlying {symbol!r}")
        else:
            uid = unders[symbol]
        for col, text in (("currency", ccy), ("tenor_days", tenor_text)):
            if text:
                bad(col, f"a {kind} mark has no {col}")
    expiry = strike = tenor = None
    currency = None
    if kind == "vol":
        try:
            expiry = parse_date(expiry_text, "expiry").isoformat()
        except StoreError as exc:
            bad("expiry", str(exc))
        if strike_text:
            try:
                strike = check_strike(strike_text)
            except StoreError as exc:
                bad("strike", str(exc))
    elif kind in ("spot", "div_yield"):
        for col, text in (("expiry", expiry_text), ("strike", strike_text)):
            if text:
                bad(col, f"a {kind} mark has no {col}")
    if kind == "rate":
        try:
            currency = check_currency(ccy)
        except StoreError as exc:
            bad("currency", str(exc))
        try:
            tenor = check_tenor(tenor_text)
        except StoreError as exc:
            bad("tenor_days", str(exc))
    value = None
    try:
        if kind == "spot":
            value = within(limits.LEVEL, value_text, "spot")
        elif kind == "vol":
            value = check_vol(value_text)
        else:
            value = check_decimal(value_text, "rate" if kind == "rate" else "dividend yield")
    except StoreError as exc:
        bad("value", str(exc))
    if len(problems) > before or value is None:
        return None
    return (kind, uid, currency, expiry, strike, tenor, value)


def trade_csv_row(t: TradeRecord) -> list[Any]:
    """The CSV cells of a trade: ``TRADE_COLUMNS`` then ``TRADE_INFO_COLUMNS`` (import format)."""
    return [
        escape_quote(t.book),
        escape_quote(t.symbol),
        t.option_type,
        t.expiry.isoformat() if t.expiry else "",
        "" if t.strike is None else repr(float(t.strike)).removesuffix(".0"),
        t.quantity,
        repr(float(t.price)),
        timestamp_text(t.trade_time),
        "american" if t.american else "european",
        repr(float(t.multiplier)).removesuffix(".0"),
        "cash" if t.cash_settled else "physical",
        escape_quote(t.note),
        t.trade_id,
        t.state,
        t.who,
        t.source,
        timestamp_text(t.booked_at),
        t.contract,
    ]


def mark_csv_row(m: MarkRecord) -> list[Any]:
    """The CSV cells of a mark point, ``MARK_COLUMNS`` then ``MARK_INFO_COLUMNS``."""
    return [
        m.kind,
        escape_quote(m.symbol or ""),
        m.currency or "",
        m.expiry.isoformat() if m.expiry else "",
        "" if m.strike is None else repr(float(m.strike)).removesuffix(".0"),
        "" if m.tenor_days is None else m.tenor_days,
        repr(float(m.value)),
        m.mark_id,
        m.mark_set_id,
        m.set_kind,
        timestamp_text(m.marked_at),
        m.who,
    ]
