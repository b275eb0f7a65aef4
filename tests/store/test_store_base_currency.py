"""The book's base currency (schema 9): written with the book, USD for a book upgraded to it,
changed only by a new row (the latest in force), never edited, and checked by SQLite itself."""

from __future__ import annotations

import sqlite3
from collections.abc import Callable
from pathlib import Path
from zoneinfo import ZoneInfo

import pytest

import blotter.store as st
from blotter.store import create_store, open_store


def _book_of_schema_6(path: Path) -> None:
    """A book as blotter wrote it before base currencies: schema sections 1 to 6 only."""
    conn = st.db.connect(path, read_only=False)
    conn.execute("PRAGMA journal_mode = WAL")
    st.db.schema_functions(conn, ZoneInfo("America/New_York"))
    with st.db.immediate(conn):
        conn.execute(f"PRAGMA application_id = {st.APPLICATION_ID:d}")
        for version, statements in sorted(st.schema_sections().items()):
            if version <= 6:
                for statement in statements:
                    conn.execute(statement)
        conn.execute("PRAGMA user_version = 6")
    conn.close()


def test_an_upgraded_book_gets_usd_written_in_the_file(tmp_path: Path) -> None:
    path = tmp_path / "old.db"
    path.touch(mode=0o600)
    _book_of_schema_6(path)
    with pytest.raises(st.StoreError, match="older schema"):
        open_store(path, read_only=True)
    with open_store(path) as s:
        assert s.schema_version() == st.SCHEMA_VERSION
        assert s.base_currency() == "USD"
        assert s.base_currency_history() == [{"currency": "USD", "set_at": None, "who": None}]
    raw = sqlite3.connect(path)
    assert raw.execute("SELECT base_id, currency FROM base_currency").fetchall() == [(1, "USD")]
    raw.close()


def test_a_new_book_takes_its_base_and_a_change_is_a_new_row(new_book: Callable[[], str]) -> None:
    with create_store(new_book(), base_currency="EUR") as s:
        assert s.base_currency() == "EUR"
        s.set_base_currency("GBP")
        s.set_base_currency("JPY")
        assert s.base_currency() == "JPY"
        history = s.base_currency_history()
        assert [h["currency"] for h in history] == ["EUR", "GBP", "JPY"]
        assert history[0]["set_at"] is None and all(h["set_at"] for h in history[1:])
        assert all(h["who"] == s.who for h in history[1:])
    with create_store(new_book()) as s:
        assert s.base_currency() == "USD"


@pytest.mark.parametrize("bad", ["usd", "US", "EURO", "", "U$D"])
def test_a_bad_currency_is_refused_and_nothing_is_written(
    new_book: Callable[[], str], bad: str
) -> None:
    place = new_book()
    with pytest.raises(st.StoreError, match="ISO 4217"):
        create_store(place, base_currency=bad)
    # create_store makes a book only where nothing is (no file, an empty database)
    with create_store(place, base_currency="CHF") as s:
        with pytest.raises(st.StoreError, match="ISO 4217"):
            s.set_base_currency(bad)
        assert s.base_currency_history() == [{"currency": "CHF", "set_at": None, "who": None}]


@pytest.mark.parametrize(
    ("what", "sql"),
    [
        ("lower case", "INSERT INTO base_currency (currency, set_at, who) "
         "VALUES ('eur', '2026-01-05T15:00:00.000000Z', 'me')"),
        ("a later row without a time", "INSERT INTO base_currency (currency) VALUES ('EUR')"),
        ("a time without who", "INSERT INTO base_currency (currency, set_at) "
         "VALUES ('EUR', '2026-01-05T15:00:00.000000Z')"),
        ("a time not in the store's format", "INSERT INTO base_currency (currency, set_at, who) "
         "VALUES ('EUR', '2026-01-05 15:00', 'me')"),
        ("an edit", "UPDATE base_currency SET currency = 'EUR'"),
        ("a delete", "DELETE FROM base_currency"),
        ("a replace", "REPLACE INTO base_currency (base_id, currency) VALUES (1, 'EUR')"),
    ],
)
def test_sqlite_refuses_a_bad_or_rewritten_row(tmp_path: Path, what: str, sql: str) -> None:
    with create_store(tmp_path / "z.db") as s:
        s.set_base_currency("EUR")
    raw = sqlite3.connect(tmp_path / "z.db", isolation_level=None)
    before = raw.execute("SELECT * FROM base_currency ORDER BY base_id").fetchall()
    with pytest.raises(sqlite3.IntegrityError):
        raw.execute(sql)
    assert raw.execute("SELECT * FROM base_currency ORDER BY base_id").fetchall() == before
    raw.close()
