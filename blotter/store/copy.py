"""``copy_book``: a whole book moved between an SQLite file and a PostgreSQL database, row for row
(ids, times, who, cancels, corrections and closes as they are), in one transaction on each side.

The destination is new (a file that does not exist, or an empty database). Its schema is made
with the source's desk zone and first base currency; every other row is inserted with its own
id, the rows of the store's order (trades, cancels, mark sets) in that order, so the
destination's triggers number its history as the source's. The copy is checked before it
commits: the same number of rows in every table and the same history.
"""

from __future__ import annotations

import sqlite3
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from dataclasses import dataclass
from itertools import groupby
from pathlib import Path
from typing import Any
from zoneinfo import ZoneInfo

from blotter.store import db, dialect, pg
from blotter.store.api import create_store, open_store
from blotter.store.db import SCHEMA_VERSION
from blotter.store.errors import StoreError
from blotter.store.files import remove_book_files

TABLES: dict[str, str] = dialect.KEYS
"""Every table of a book and its key, in the order plain rows are inserted (the tables named in
``IN_ORDER`` and ``MADE_WITH_SCHEMA`` are written their own way)."""

IN_ORDER = {"trade": "trade", "cancel": "trade_cancel", "mark_set": "mark_set"}
"""The table of each kind of row in the store's order of history."""

MADE_WITH_SCHEMA = {"book_zone", "history"}
"""Tables the destination fills itself: the zone with its schema, history by its triggers."""


@dataclass(frozen=True)
class Table:
    """A table's rows as read: column names, and each row's values in that order."""

    columns: tuple[str, ...]
    rows: list[tuple[Any, ...]]


@dataclass(frozen=True)
class CopyReport:
    """What a copy wrote: rows per table."""

    source: str
    dest: str
    rows: dict[str, int]


def _read_tables(conn: Any, names: set[str]) -> dict[str, Table]:
    """Every table of ``TABLES`` by key order; refuses a book with a table this copy does not
    know (a newer schema), so no table is left behind."""
    unknown = names - set(TABLES) - pg.PG_ONLY_TABLES
    if unknown:
        raise StoreError(
            f"the book has tables this blotter cannot copy: {', '.join(sorted(unknown))}"
        )
    out: dict[str, Table] = {}
    for name, key in TABLES.items():
        cur = conn.cursor()
        cur.execute(f"SELECT * FROM {name} ORDER BY {key}")
        columns = tuple(str(d[0]) for d in cur.description)
        out[name] = Table(columns, [tuple(r) for r in cur.fetchall()])
    return out


def read_book(source: str) -> dict[str, Table]:
    """Every row of the book ``source`` (a file or a ``postgresql://`` URL), read in one
    snapshot."""
    if pg.is_url(source):
        conn = pg.connect(source)  # says how to install psycopg when it is missing
        import psycopg

        try:
            conn.isolation_level = psycopg.IsolationLevel.REPEATABLE_READ
            conn.read_only = True
            version = pg.schema_version(conn)
            if version is None:
                raise StoreError("the PostgreSQL database holds no blotter book")
            if version != SCHEMA_VERSION:
                raise StoreError(
                    f"the PostgreSQL book has schema {version}; this blotter copies "
                    f"{SCHEMA_VERSION}"
                )
            return _read_tables(conn, pg.book_tables(conn))
        except psycopg.Error as exc:
            raise StoreError(f"reading the PostgreSQL book failed ({exc})") from None
        finally:
            conn.close()
    with open_store(source, read_only=True) as store, store._read() as lite:
        assert isinstance(lite, sqlite3.Connection)
        return _read_tables(lite, set(db.utils_db(lite).table_names()))


def _insert(conn: Any, mark: str, name: str, table: Table, rows: Sequence[tuple[Any, ...]]) -> None:
    """Insert ``rows`` of ``table`` into ``name`` with their own ids (``mark``: the driver's
    placeholder)."""
    if not rows:
        return
    sql = (
        f"INSERT INTO {name} ({', '.join(table.columns)}) "
        f"VALUES ({', '.join([mark] * len(table.columns))})"
    )
    conn.cursor().executemany(sql, rows)


def _write_rows(conn: Any, mark: str, book: dict[str, Table]) -> None:
    """Insert every row of ``book`` but those the schema made, history's rows in its order."""
    for name, table in book.items():
        if name in MADE_WITH_SCHEMA or name in IN_ORDER.values() or name == "mark":
            continue
        rows = table.rows[1:] if name == "base_currency" else table.rows
        _insert(conn, mark, name, table, rows)
    by_id = {
        name: {row[0]: row for row in book[name].rows} for name in IN_ORDER.values()
    }
    set_col = book["mark"].columns.index("mark_set_id")
    marks: dict[Any, list[tuple[Any, ...]]] = {}
    for point in book["mark"].rows:
        marks.setdefault(point[set_col], []).append(point)
    history = book["history"]
    kind_col, id_col = history.columns.index("kind"), history.columns.index("row_id")
    for kind, run in groupby(history.rows, key=lambda r: r[kind_col]):
        name = IN_ORDER[str(kind)]
        ids = [r[id_col] for r in run]
        _insert(conn, mark, name, book[name], [by_id[name][i] for i in ids])
        if name == "mark_set":
            points = [p for i in ids for p in marks.get(i, [])]
            _insert(conn, mark, "mark", book["mark"], points)


def _check_copy(conn: Any, book: dict[str, Table]) -> None:
    """Refuse (so the caller rolls back) a copy whose tables' counts or history differ."""
    for name, table in book.items():
        cur = conn.cursor()
        cur.execute(f"SELECT count(*) FROM {name}")
        if int(cur.fetchone()[0]) != len(table.rows):
            raise StoreError(f"the copy's {name} table does not match the source: nothing kept")
    cur = conn.cursor()
    cur.execute("SELECT seq, kind, row_id FROM history ORDER BY seq")
    if [tuple(r) for r in cur.fetchall()] != [tuple(r) for r in book["history"].rows]:
        raise StoreError("the copy's order of history differs from the source's: nothing kept")


def _first_base(book: dict[str, Table]) -> str:
    """The currency of the source's first base-currency row, which its schema wrote."""
    table = book["base_currency"]
    return str(table.rows[0][table.columns.index("currency")])


def _zone(book: dict[str, Table]) -> ZoneInfo:
    """The source's desk zone."""
    table = book["book_zone"]
    return ZoneInfo(str(table.rows[0][table.columns.index("zone")]))


@contextmanager
def _pg_words() -> Iterator[None]:
    """psycopg's errors said as ``StoreError`` (nothing was kept: the transaction rolled back)."""
    import psycopg

    try:
        yield
    except psycopg.Error as exc:
        raise StoreError(
            f"the PostgreSQL server refused the copy ({str(exc).strip()}); nothing was kept"
        ) from None


def copy_book(source: str, dest: str) -> CopyReport:
    """Copy the book ``source`` to the new book ``dest`` (each a file or a ``postgresql://``
    URL), whole or not at all."""
    book = read_book(source)
    zone, base = _zone(book), _first_base(book)
    if pg.is_url(dest):
        conn = pg.connect(dest)
        try:
            with _pg_words(), conn.transaction():
                pg.create_schema(conn, zone, base)
                _write_rows(conn, "%s", book)
                _check_copy(conn, book)
        finally:
            conn.close()
    else:
        path = Path(dest)
        store = create_store(path, desk_tz=zone, base_currency=base)
        try:
            with store.atomic():
                _write_rows(store.connection, "?", book)
                _check_copy(store.connection, book)
            if not store.integrity_ok():
                raise StoreError(f"the copy {path} failed its integrity check: nothing kept")
        except BaseException:
            store.close()
            remove_book_files(path)
            raise
        store.close()
    return CopyReport(source, dest, {name: len(t.rows) for name, t in book.items()})
