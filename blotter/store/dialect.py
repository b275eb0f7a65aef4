"""How the store's SQL, written for SQLite, runs on a PostgreSQL book: ``Connection`` wraps a
psycopg connection in the part of ``sqlite3.Connection`` the store's modules call, so each query's
text stays in one place and reads the same on either backend.

``?`` placeholders become psycopg's ``%s`` once per statement text (cached); an INSERT hands back
its new id as ``lastrowid`` through RETURNING; rows are read by column name or position as
``sqlite3.Row``'s are. psycopg itself is imported on first use.
"""

from __future__ import annotations

import functools
import re
from collections.abc import Iterable, Iterator, Sequence
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    import psycopg

KEYS: dict[str, str] = {
    "underlying": "underlying_id",
    "book": "book_id",
    "contract": "contract_id",
    "underlying_correction": "correction_id",
    "desk_note": "note_id",
    "import_file": "import_id",
    "base_currency": "base_id",
    "book_zone": "only_row",
    "trade": "trade_id",
    "trade_cancel": "cancel_id",
    "mark_set": "mark_set_id",
    "mark": "mark_id",
    "history": "seq",
}
"""Every table of a book and its key (the id an INSERT hands back, as SQLite's ``lastrowid``)."""

_INSERT = re.compile(r"^\s*INSERT\s+INTO\s+(\w+)", re.IGNORECASE)


@functools.lru_cache(maxsize=512)
def translated(sql: str) -> tuple[str, bool]:
    """SQLite's statement ``sql`` in psycopg's form, and whether it hands back a new id: ``?``
    placeholders become ``%s`` (a literal ``%`` is doubled), and an INSERT into a book table
    returns the key it wrote, which stands in for SQLite's ``lastrowid``."""
    text = sql.replace("%", "%%").replace("?", "%s")
    m = _INSERT.match(sql)
    returning = bool(m) and m is not None and m.group(1) in KEYS and "RETURNING" not in sql.upper()
    if returning and m is not None:
        text = f"{text.rstrip().rstrip(';')} RETURNING {KEYS[m.group(1)]}"
    return text, returning


class Row:
    """One result row read by column name or by position, as ``sqlite3.Row`` is."""

    __slots__ = ("_index", "_values")

    def __init__(self, values: Sequence[Any], index: dict[str, int]) -> None:
        self._values = tuple(values)
        self._index = index

    def __getitem__(self, key: int | str) -> Any:
        if isinstance(key, str):
            return self._values[self._index[key]]
        return self._values[key]

    def __iter__(self) -> Iterator[Any]:
        return iter(self._values)

    def __len__(self) -> int:
        return len(self._values)

    def __eq__(self, other: object) -> bool:
        if isinstance(other, Row):
            return self._values == other._values and self._index == other._index
        return NotImplemented

    def __hash__(self) -> int:
        return hash(self._values)

    def keys(self) -> list[str]:
        """The column names, in order."""
        return list(self._index)


class Cursor:
    """A statement's result, with the parts of ``sqlite3.Cursor`` the store reads."""

    def __init__(self, cur: psycopg.ClientCursor[Any], lastrowid: int | None) -> None:
        self._cur = cur
        self.lastrowid = lastrowid

    @property
    def description(self) -> Any:
        """The result's columns (``[0]`` of each is its name)."""
        return self._cur.description

    def fetchone(self) -> Any:
        """The next row as a tuple, or None."""
        return self._cur.fetchone()

    def fetchall(self) -> list[Any]:
        """The remaining rows as tuples."""
        return self._cur.fetchall()

    def __iter__(self) -> Iterator[Any]:
        return iter(self._cur)


class Connection:
    """A psycopg connection presenting what the store's modules call on an
    ``sqlite3.Connection``: ``execute`` with ``?`` placeholders, ``lastrowid``, ``in_transaction``
    and explicit ``BEGIN``/``COMMIT`` (the connection is in autocommit mode, as SQLite's are with
    ``isolation_level=None``)."""

    def __init__(self, raw: psycopg.Connection[Any]) -> None:
        self.raw = raw

    def _cursor(self) -> psycopg.ClientCursor[Any]:
        """A cursor that merges parameters into the statement as literals, so the server types
        them as SQLite does from the values (``? IS NULL`` with a None)."""
        import psycopg

        return psycopg.ClientCursor(self.raw)

    def execute(self, sql: str, params: Sequence[Any] = ()) -> Cursor:
        """Run one statement of SQLite's text (see ``translated``)."""
        text, returning = translated(sql)
        cur = self._cursor()
        cur.execute(text.encode("utf-8"), tuple(params))
        lastrowid = None
        if returning:
            found = cur.fetchall()
            lastrowid = int(found[-1][0]) if found else None
        return Cursor(cur, lastrowid)

    def rows(self, sql: str, params: Sequence[Any] = ()) -> list[Row]:
        """A query's rows, each read by column name or position."""
        cur = self._cursor()
        cur.execute(translated(sql)[0].encode("utf-8"), tuple(params))
        if cur.description is None:
            return []
        index = {d.name: i for i, d in enumerate(cur.description)}
        return [Row(values, index) for values in cur.fetchall()]

    @property
    def in_transaction(self) -> bool:
        """Whether a transaction is open (failed ones too, until rolled back)."""
        import psycopg

        return self.raw.info.transaction_status != psycopg.pq.TransactionStatus.IDLE

    def copy_rows(self, table: str, names: Sequence[str], values: Iterable[Sequence[Any]]) -> None:
        """Append ``values`` to ``table`` by COPY, in the order given, inside the open
        transaction (the table's row triggers fire for each row, as for an INSERT)."""
        cur = self.raw.cursor()
        with cur.copy(f"COPY {table} ({', '.join(names)}) FROM STDIN".encode()) as cp:
            for row in values:
                cp.write_row(row)

    def close(self) -> None:
        """Close the connection."""
        self.raw.close()
