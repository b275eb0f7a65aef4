"""Reference data: the underlyings (each with the defaults its contracts take), the books (desk
accounts) and the desk's free notes."""

from __future__ import annotations

from collections.abc import Mapping
from datetime import datetime
from typing import Any
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

import numpy as np

from blotter import limits
from blotter.book import UNDERLYING_KINDS, Underlyings
from blotter.store import db
from blotter.store.checks import (
    check_book_name,
    check_currency,
    check_symbol_length,
    check_symbol_words,
    within,
)
from blotter.store.core import StoreCore, guard_damage
from blotter.store.errors import StoreError
from blotter.store.times import timestamp_text
from blotter.ticks import default_tick

DEFAULT_BOOK = "main"
"""Book a trade goes to when none is named."""

UNDERLYING_COLUMNS = (
    "underlying_id",
    "symbol",
    "kind",
    "currency",
    "beta",
    "div_yield",
    "calendar",
    "description",
    "is_reference",
    "multiplier",
    "american",
    "cash_settled",
    "time_zone",
    "cutoff_time",
)
"""Columns of an underlying's row, in the order ``Store.underlying_records`` lists them."""

_FLAGS = ("is_reference", "american", "cash_settled")

CORRECTABLE = ("description", "multiplier", "beta", "calendar", "tick")
"""Reference fields an underlying correction may set (schema 8, ``underlying_correction``)."""


def _latest(field: str) -> str:
    """SQL for the value of ``field`` in the latest correction of ``u`` that sets it."""
    return (
        f"(SELECT c.{field} FROM underlying_correction c WHERE c.underlying_id = u.underlying_id "
        f"AND c.{field} IS NOT NULL ORDER BY c.correction_id DESC LIMIT 1)"
    )


def _corrected_columns() -> str:
    """The select list of ``UNDERLYING_COLUMNS`` and ``tick`` with corrections in force."""
    cols = [
        f"coalesce({_latest(c)}, u.{c}) AS {c}" if c in CORRECTABLE else f"u.{c} AS {c}"
        for c in UNDERLYING_COLUMNS
    ]
    return ", ".join([*cols, f"{_latest('tick')} AS tick"])


def underlying_rows(conn: db.Conn) -> list[db.Row]:
    """Every underlying's row (``UNDERLYING_COLUMNS`` then ``tick``, NULL when none was set),
    in id order, with the latest correction of each field in force."""
    return db.rows(
        conn, f"SELECT {_corrected_columns()} FROM underlying u ORDER BY u.underlying_id"
    )


def underlyings_of(rows: list[db.Row]) -> Underlyings:
    """The ``Underlyings`` of a book from its underlying rows (``underlying_rows``)."""
    return Underlyings(
        symbols=tuple(r["symbol"] for r in rows),
        kinds=tuple(r["kind"] for r in rows),
        currencies=tuple(r["currency"] for r in rows),
        betas=np.array([r["beta"] for r in rows], dtype=np.float64),
        div_yields=np.array([r["div_yield"] for r in rows], dtype=np.float64),
        calendars=tuple(r["calendar"] for r in rows),
        descriptions=tuple(r["description"] for r in rows),
        ticks=tuple(
            float(r["tick"]) if r["tick"] is not None else default_tick(r["kind"]) for r in rows
        ),
    )


def underlying_terms(conn: db.Conn, symbol: str) -> db.Row:
    """The underlying ``symbol``'s id and contract defaults (underlying_id, multiplier, american,
    cash_settled, cutoff_time, kind); ``StoreError`` when the book has no such underlying."""
    row = db.one(
        conn,
        f"SELECT u.underlying_id, coalesce({_latest('multiplier')}, u.multiplier) AS multiplier, "
        "u.american, u.cash_settled, u.cutoff_time, u.kind FROM underlying u WHERE u.symbol = ?",
        (symbol,),
    )
    if row is None:
        raise StoreError(
            f"unknown underlying {symbol!r} (`blotter underlying list` shows them; "
            "`blotter underlying add` adds one)"
        )
    return row


def underlying_ids(conn: db.Conn) -> dict[str, int]:
    """Each underlying's id by symbol."""
    return {r["symbol"]: r["underlying_id"] for r in underlying_rows(conn)}


def book_names_in(conn: db.Conn) -> list[str]:
    """Names of the books, read on ``conn``."""
    return [name for (name,) in conn.execute("SELECT name FROM book ORDER BY name")]


def book_id(conn: db.Conn, name: str, create: bool) -> int | None:
    """The id of book ``name``; a new book when it is missing and ``create``, else None."""
    row = db.one(conn, "SELECT book_id FROM book WHERE name = ?", (name,))
    if row:
        return int(row["book_id"])
    if not create:
        return None
    check_book_name(name)
    return int(conn.execute("INSERT INTO book (name) VALUES (?)", (name,)).lastrowid or 0)


def known_book_id(conn: db.Conn, name: str, create: bool, hint: str) -> int:
    """The id of book ``name``; a new book only when ``create``, else ``StoreError`` naming the
    books there are and ``hint`` (how to start a new one on purpose)."""
    found = book_id(conn, name, create=create)
    if found is None:
        books = book_names_in(conn)
        raise StoreError(
            f"no book named {name!r} (books: {', '.join(books) if books else 'none yet'}); {hint}"
        )
    return found


class ReferenceData(StoreCore):
    """The underlyings, books and notes of a book."""

    @guard_damage
    def load_underlyings(self) -> Underlyings:
        """Every underlying of the book, in id order (the index the ``Book`` rows point into)."""
        with self._read() as conn:
            return underlyings_of(underlying_rows(conn))

    @guard_damage
    def underlying_records(self) -> list[dict[str, Any]]:
        """Every underlying's row, in id order: symbol, kind, currency, multiplier, american,
        cash_settled, div_yield, beta, is_reference (the last three and american as bools),
        calendar, time_zone, cutoff_time, description and underlying_id."""
        with self._read() as conn:
            rows = [dict(r) for r in underlying_rows(conn)]
        for r in rows:
            for flag in _FLAGS:
                r[flag] = bool(r[flag])
            if r["tick"] is None:
                r["tick"] = default_tick(r["kind"])
        return rows

    def correct_underlying(
        self,
        symbol: str,
        reason: str,
        changes: Mapping[str, float | str],
        who: str | None = None,
    ) -> int:
        """Record a correction of ``symbol``'s reference data: ``changes`` by field of
        ``CORRECTABLE`` (the rest keep the value in force); returns its id. Nothing is changed in
        place: the latest correction of a field wins when the underlyings are read."""
        unknown = sorted(set(changes) - set(CORRECTABLE))
        if unknown:
            raise StoreError(f"cannot correct {', '.join(unknown)}: only {', '.join(CORRECTABLE)}")
        fields: dict[str, Any] = dict.fromkeys(CORRECTABLE) | dict(changes)
        multiplier, beta, tick = fields["multiplier"], fields["beta"], fields["tick"]
        calendar, description = fields["calendar"], fields["description"]
        if all(v is None for v in fields.values()):
            raise StoreError(
                f"nothing to correct for {symbol!r}: give at least one of "
                + ", ".join(CORRECTABLE)
            )
        if not reason.strip():
            raise StoreError("a correction needs a reason (--reason)")
        if multiplier is not None:
            fields["multiplier"] = within(limits.MULTIPLIER, multiplier)
        if beta is not None:
            fields["beta"] = within(limits.BETA, beta)
        if tick is not None:
            fields["tick"] = within(limits.TICK, tick)
        if calendar is not None and not 1 <= len(calendar) <= 32:
            raise StoreError("a calendar name is 1 to 32 characters")
        if description is not None and len(description) > 200:
            raise StoreError("a description is at most 200 characters")
        with self._write() as conn:
            uid = int(underlying_terms(conn, symbol)["underlying_id"])
            cur = conn.execute(
                "INSERT INTO underlying_correction (underlying_id, corrected_at, who, reason, "
                "description, multiplier, beta, calendar, tick) "
                "VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)",
                (
                    uid,
                    timestamp_text(self.now()),
                    who or self.who,
                    reason.strip(),
                    *fields.values(),
                ),
            )
            return int(cur.lastrowid or 0)

    @guard_damage
    def underlying_corrections(self, symbol: str | None = None) -> list[dict[str, Any]]:
        """Every correction recorded (of ``symbol`` only when given), oldest first."""
        sql = (
            "SELECT c.correction_id, u.symbol, c.corrected_at, c.who, c.reason, "
            + ", ".join(f"c.{f}" for f in CORRECTABLE)
            + " FROM underlying_correction c JOIN underlying u USING (underlying_id)"
        )
        args: tuple[Any, ...] = ()
        if symbol is not None:
            sql += " WHERE u.symbol = ?"
            args = (symbol,)
        with self._read() as conn:
            return [dict(r) for r in db.rows(conn, sql + " ORDER BY c.correction_id", args)]

    def add_underlying(
        self,
        symbol: str,
        kind: str,
        currency: str,
        multiplier: float,
        *,
        description: str = "",
        american: bool = True,
        cash_settled: bool = False,
        div_yield: float = 0.0,
        beta: float = 1.0,
        is_reference: bool = False,
        calendar: str = "NYSE",
        time_zone: str = "America/New_York",
        cutoff_time: str = "16:00",
    ) -> int:
        """Add an underlying (its defaults for contracts) and return its id; symbols are unique."""
        if kind not in UNDERLYING_KINDS:
            raise StoreError(f"kind {kind!r} is not one of {', '.join(UNDERLYING_KINDS)}")
        try:
            ZoneInfo(time_zone)
        except (ZoneInfoNotFoundError, ValueError):
            raise StoreError(f"unknown time zone {time_zone!r}") from None
        check_symbol_length(symbol)
        multiplier = within(limits.MULTIPLIER, multiplier)
        div_yield = within(limits.RATE, div_yield, "dividend yield")
        beta = within(limits.BETA, beta)
        check_symbol_words(symbol)
        with self._write() as conn:
            if db.one(conn, "SELECT 1 FROM underlying WHERE symbol = ?", (symbol,)):
                raise StoreError(f"underlying {symbol!r} already exists")
            if is_reference and db.one(conn, "SELECT 1 FROM underlying WHERE is_reference = 1"):
                raise StoreError("the book already has a reference index; nothing added")
            cur = conn.execute(
                "INSERT INTO underlying (symbol, description, kind, currency, multiplier, "
                "american, cash_settled, div_yield, beta, is_reference, calendar, time_zone, "
                "cutoff_time) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                (
                    symbol,
                    description,
                    kind,
                    currency,
                    float(multiplier),
                    int(american),
                    int(cash_settled),
                    float(div_yield),
                    float(beta),
                    int(is_reference),
                    calendar,
                    time_zone,
                    cutoff_time,
                ),
            )
            return int(cur.lastrowid or 0)

    def add_note(
        self, text: str, written_at: datetime | None = None, who: str | None = None
    ) -> int:
        """Append a free note about the desk or the file; returns its id."""
        with self._write() as conn:
            cur = conn.execute(
                "INSERT INTO desk_note (written_at, who, text) VALUES (?, ?, ?)",
                (timestamp_text(written_at or self.now()), who or self.who, text),
            )
            return int(cur.lastrowid or 0)

    @guard_damage
    def notes(self) -> list[str]:
        """The desk notes, oldest first."""
        with self._read() as conn:
            return [text for (text,) in conn.execute("SELECT text FROM desk_note ORDER BY note_id")]

    @guard_damage
    def base_currency(self) -> str:
        """The book's base currency (ISO 4217): the latest row of ``base_currency``."""
        with self._read() as conn:
            row = db.one(conn, "SELECT currency FROM base_currency ORDER BY base_id DESC LIMIT 1")
        if row is None:
            raise StoreError(f"{self.path} names no base currency (its first row is missing)")
        return str(row["currency"])

    @guard_damage
    def base_currency_history(self) -> list[dict[str, Any]]:
        """Every base currency the book has had, oldest first: currency, set_at and who (None
        for the first, written with the book or by its upgrade to schema 9)."""
        with self._read() as conn:
            return [
                dict(r)
                for r in db.rows(
                    conn, "SELECT currency, set_at, who FROM base_currency ORDER BY base_id"
                )
            ]

    def set_base_currency(self, currency: str) -> int:
        """Record ``currency`` as the book's base currency from now on (a new row; earlier rows
        stay as they were) and return the row's id."""
        check_currency(currency)
        with self._write() as conn:
            cur = conn.execute(
                "INSERT INTO base_currency (currency, set_at, who) VALUES (?, ?, ?)",
                (currency, timestamp_text(self.now()), self.who),
            )
            return int(cur.lastrowid or 0)

    @guard_damage
    def book_names(self) -> list[str]:
        """Names of the books (desk accounts), alphabetically."""
        with self._read() as conn:
            return book_names_in(conn)

    def add_book(self, name: str, description: str = "") -> int:
        """Start a new book (desk account) and return its id; refused if it exists."""
        with self._write() as conn:
            if book_id(conn, name, create=False) is not None:
                raise StoreError(f"book {name!r} already exists")
            check_book_name(name)
            cur = conn.execute(
                "INSERT INTO book (name, description) VALUES (?, ?)", (name, description)
            )
            return int(cur.lastrowid or 0)
