"""The PostgreSQL book's tables against a real server: the same tables and columns as
``schema.sql``, append-only by triggers and by privileges, read-only viewers refused by the server,
history numbered in commit order, and a notification for each commit (RELIABILITY 5's promises,
held by the server).

Every test makes its own database on the session's private server (``pg_url``).
"""

from __future__ import annotations

import threading
from pathlib import Path
from typing import Any
from zoneinfo import ZoneInfo

import pytest
from pg_server import APP_ROLE, VIEWER_ROLE, PgServer

from blotter.store import SCHEMA_VERSION, StoreError, create_store, pg

psycopg = pytest.importorskip("psycopg")
errors = psycopg.errors

T0 = "2026-11-30T15:00:00.000000Z"
SQLITE_TYPES = {"INTEGER": "bigint", "REAL": "double precision", "TEXT": "text"}
"""The PostgreSQL type of each STRICT SQLite column type (schema_pg.sql says why)."""


def _as(pg_server: PgServer, url: str, role: str) -> Any:
    """A connection to the database of ``url`` as the login role ``role``."""
    database = url.split("///", 1)[1].split("?", 1)[0]
    return psycopg.connect(pg_server.url(database, role))


@pytest.fixture
def pg_book(pg_url: str) -> str:
    """A new PostgreSQL book (tables made, no rows of history) on the session's server."""
    with pg.connect(pg_url) as conn:
        pg.create_schema(conn, ZoneInfo("America/New_York"), "USD")
    return pg_url


def _reference_rows(conn: Any) -> None:
    """An underlying, a call on it and a book, ids left to the server."""
    conn.execute(
        "INSERT INTO underlying (symbol, kind, currency, multiplier, american, cash_settled) "
        "VALUES ('ZQX', 'stock', 'USD', 100, 1, 0)"
    )
    conn.execute(
        "INSERT INTO contract (underlying_id, option_type, strike, expiry, cutoff_time, "
        "american, multiplier, cash_settled) VALUES (1, 'C', 50, '2027-03-19', '16:00', 1, 100, 0)"
    )
    conn.execute("INSERT INTO book (name) VALUES ('main')")


def _trade(conn: Any, quantity: int = 5, at: str = T0) -> int:
    """Append one trade of the call; its id."""
    row = conn.execute(
        "INSERT INTO trade (book_id, contract_id, quantity, price, trade_time, booked_at, who, "
        "source) VALUES (1, 1, %s, 2.5, %s, %s, 'ann', 'typed') RETURNING trade_id",
        (quantity, at, at),
    ).fetchone()
    return int(row[0])


def test_both_schemas_define_the_same_tables_and_columns(pg_book: str, tmp_path: Path) -> None:
    """schema.sql (SQLite) and schema_pg.sql give the same tables, columns in the same order,
    types (mapped) and NOT NULLs, and the same schema version."""
    lite: dict[str, list[tuple[str, str, bool]]] = {}
    with create_store(tmp_path / "book.db") as s:
        c = s.connection
        names = [n for (n,) in c.execute("SELECT name FROM sqlite_master WHERE type = 'table'")]
        for name in names:
            lite[name] = [
                (col, SQLITE_TYPES[typ], bool(notnull or pk))
                for _cid, col, typ, notnull, _dflt, pk in c.execute(f"PRAGMA table_info({name})")
            ]
    server: dict[str, list[tuple[str, str, bool]]] = {}
    with psycopg.connect(pg_book) as conn:
        for table, col, typ, nullable in conn.execute(
            "SELECT table_name, column_name, data_type, is_nullable "
            "FROM information_schema.columns WHERE table_schema = 'public' "
            "ORDER BY table_name, ordinal_position"
        ):
            server.setdefault(table, []).append((col, typ, nullable == "NO"))
        version = pg.schema_version(conn)
    assert set(server) - pg.PG_ONLY_TABLES == set(lite)
    assert {t: server[t] for t in lite} == lite
    assert version == max(pg.pg_sections()) == SCHEMA_VERSION


def test_app_role_appends_but_cannot_update_or_delete_history(
    pg_server: PgServer, pg_book: str
) -> None:
    """The writer role may INSERT; the server refuses its UPDATE, DELETE and TRUNCATE of history
    by privilege, and its own rows of the store's order."""
    with _as(pg_server, pg_book, APP_ROLE) as conn:
        _reference_rows(conn)
        assert _trade(conn) == 1
        conn.commit()
        for sql in (
            "UPDATE trade SET quantity = 7",
            "DELETE FROM trade",
            "TRUNCATE trade",
            "UPDATE mark_set SET note = 'x'",
            "DELETE FROM history",
            "INSERT INTO history (kind, row_id) VALUES ('trade', 99)",
            "UPDATE blotter_meta SET schema_version = 99",
        ):
            with pytest.raises(errors.InsufficientPrivilege):
                conn.execute(sql)
            conn.rollback()
        rows = conn.execute("SELECT trade_id, quantity FROM trade").fetchall()
        history = conn.execute("SELECT seq, kind, row_id FROM history").fetchall()
    assert rows == [(1, 5)]
    assert history == [(1, "trade", 1)]


def test_triggers_refuse_changes_to_history_even_for_the_owner(pg_book: str) -> None:
    """The superuser who owns the tables passes every privilege; the triggers still refuse, in
    schema.sql's words."""
    with psycopg.connect(pg_book) as conn:
        _reference_rows(conn)
        _trade(conn)
        conn.commit()
        for sql, words in (
            ("UPDATE trade SET quantity = 7", "trades are never changed"),
            ("DELETE FROM trade", "trades are never deleted"),
            ("TRUNCATE trade CASCADE", "never truncated"),
            ("UPDATE history SET row_id = 2", "order of history is never changed"),
            ("UPDATE book SET name = 'other'", "books are never renamed"),
            ("DELETE FROM book_zone", "desk zone is never deleted"),
        ):
            with pytest.raises(errors.IntegrityConstraintViolation, match=words):
                conn.execute(sql)
            conn.rollback()
        conn.execute("UPDATE book SET description = 'the main book'")
        conn.commit()
        assert conn.execute("SELECT count(*) FROM trade").fetchone() == (1,)


def test_viewer_role_reads_and_the_server_refuses_its_writes(
    pg_server: PgServer, pg_book: str
) -> None:
    with psycopg.connect(pg_book) as conn:
        _reference_rows(conn)
    with _as(pg_server, pg_book, VIEWER_ROLE) as conn:
        assert conn.execute("SELECT symbol FROM underlying").fetchall() == [("ZQX",)]
        for sql in (
            "INSERT INTO book (name) VALUES ('mine')",
            "UPDATE book SET description = 'x'",
            "DELETE FROM book",
        ):
            with pytest.raises(errors.InsufficientPrivilege):
                conn.execute(sql)
            conn.rollback()


@pytest.mark.parametrize(
    ("sql", "words"),
    [
        # Not a real instant: SQLite's datetime() check refuses it too.
        ("INSERT INTO desk_note (written_at, who, text) VALUES "
         "('2026-02-30T10:00:00.000000Z', 'ann', 'x')", "desk_note_written_at_check"),
        ("INSERT INTO mark_set (kind, marked_at, who, source, mark_count) "
         f"VALUES ('close', '{T0}', 'ann', 'typed', 1)", "names its business date"),
        ("INSERT INTO contract (underlying_id, option_type, strike, expiry, cutoff_time, american, "
         "multiplier, cash_settled) VALUES (1, 'P', 50, '2027-03-19', '25:00', 1, 100, 0)",
         "contract_cutoff_time_check"),
        ("INSERT INTO trade (book_id, contract_id, quantity, price, trade_time, booked_at, who, "
         "source) VALUES (1, 1, 1, 1, '2027-03-21T10:00:00.000000Z', "
         "'2027-03-21T10:00:00.000000Z', 'ann', 'typed')", "more than a day after"),
    ],
)
def test_server_checks_values_and_rules_as_the_file_does(
    pg_book: str, sql: str, words: str
) -> None:
    with psycopg.connect(pg_book) as conn:
        _reference_rows(conn)
        conn.commit()
        with pytest.raises(errors.IntegrityError, match=words):
            conn.execute(sql)


def test_a_mark_set_cannot_gain_a_point_after_it_is_written(pg_book: str) -> None:
    with psycopg.connect(pg_book) as conn:
        _reference_rows(conn)
        conn.execute(
            "INSERT INTO mark_set (kind, marked_at, who, source, mark_count) "
            f"VALUES ('intraday', '{T0}', 'ann', 'typed', 1)"
        )
        point = (
            "INSERT INTO mark (mark_set_id, seq, kind, underlying_id, value, observed_at) "
            "VALUES (1, %s, 'spot', 1, %s, %s)"
        )
        conn.execute(point, (1, 50.0, T0))
        conn.commit()
        with pytest.raises(errors.IntegrityError, match="the mark set is complete"):
            conn.execute(point, (2, 51.0, T0))


def test_history_follows_commit_order_across_writers(pg_server: PgServer, pg_book: str) -> None:
    """A writer that inserted first but commits second takes the later number: the second
    writer's insert waits on the first's advisory lock until it commits."""
    with psycopg.connect(pg_book) as conn:
        _reference_rows(conn)
    first = _as(pg_server, pg_book, APP_ROLE)
    second = _as(pg_server, pg_book, APP_ROLE)
    try:
        a = _trade(first, 1)
        done = threading.Event()

        def write_second() -> None:
            _trade(second, 2)
            second.commit()
            done.set()

        t = threading.Thread(target=write_second)
        t.start()
        assert not done.wait(0.5), "the second writer did not wait for the first"
        first.commit()
        t.join(30)
        assert done.is_set()
    finally:
        first.close()
        second.close()
    with psycopg.connect(pg_book) as conn:
        history = conn.execute("SELECT seq, row_id FROM history ORDER BY seq").fetchall()
    assert history == [(1, a), (2, a + 1)]


def test_a_commit_notifies_listeners_and_a_rollback_does_not(
    pg_server: PgServer, pg_book: str
) -> None:
    with pg.listening(pg_book) as listener, _as(pg_server, pg_book, APP_ROLE) as conn:
        assert not listener.wait(0.2)
        _reference_rows(conn)
        conn.rollback()
        assert not listener.wait(0.5)
        _reference_rows(conn)
        conn.commit()
        assert listener.wait(10)
        assert not listener.wait(0.2), "one commit is one refresh, whatever it wrote"
    assert listener.commits_seen == 1


def test_a_book_is_made_only_in_an_empty_database(pg_book: str) -> None:
    with pg.connect(pg_book) as conn, pytest.raises(StoreError, match="not empty"):
        pg.create_schema(conn, ZoneInfo("UTC"), "USD")


def test_sqlite_and_postgres_number_rows_alike(pg_book: str, tmp_path: Path) -> None:
    """A row given no id takes one more than the largest, explicit ids or not, on both."""
    with create_store(tmp_path / "book.db") as s:
        c = s.connection
        c.execute("INSERT INTO book (book_id, name) VALUES (7, 'a')")
        c.execute("INSERT INTO book (name) VALUES ('b')")
        got_lite = c.execute("SELECT book_id, name FROM book ORDER BY book_id").fetchall()
    with psycopg.connect(pg_book) as conn:
        conn.execute("INSERT INTO book (book_id, name) VALUES (7, 'a')")
        conn.execute("INSERT INTO book (name) VALUES ('b')")
        got_pg = conn.execute("SELECT book_id, name FROM book ORDER BY book_id").fetchall()
    assert got_lite == got_pg == [(7, "a"), (8, "b")]


def test_an_upgrade_runs_each_newer_section_in_its_own_transaction(pg_book: str) -> None:
    """Sections above the book's version run in order, each committed with its version; one that
    fails leaves the book whole at the version before it."""
    sections = {
        **pg.pg_sections(),
        SCHEMA_VERSION + 1: "CREATE TABLE later_table (a bigint);",
        SCHEMA_VERSION + 2: "CREATE TABLE never_made (a bigint); SELECT 1 / 0;",
    }
    with pg.connect(pg_book) as conn:
        with pytest.raises(StoreError, match=f"left at schema {SCHEMA_VERSION + 1}"):
            pg.migrate(conn, sections)
        assert pg.schema_version(conn) == SCHEMA_VERSION + 1
        assert "later_table" in pg.book_tables(conn)
        assert "never_made" not in pg.book_tables(conn)
