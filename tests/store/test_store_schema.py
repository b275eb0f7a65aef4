"""The database itself refuses what is impossible: STRICT types, CHECKs, foreign keys, append-only
triggers (RELIABILITY 11-12); and a migrated old book equals a fresh one (RELIABILITY 14).

Every check here writes through a plain ``sqlite3`` connection, bypassing the store's own
validation, so it is SQLite that refuses (the behaviour of STRICT, CHECK and RAISE(ABORT) is
from SQLite's stricttables.html, lang_createtable.html and lang_createtrigger.html).
"""

from __future__ import annotations

import signal
import sqlite3
from pathlib import Path

import pytest
from store_children import add_underlyings, spawn

import blotter.store as st
from blotter.store import SCHEMA_VERSION, open_store

pytestmark = pytest.mark.file_only("SQLite's STRICT types, CHECKs and triggers at the SQL level")

V1_SQL = Path(__file__).with_name("data") / "schema_v1.sql"
TS = "2026-01-05T15:00:00.000000Z"


def _raw(path: Path) -> sqlite3.Connection:
    conn = sqlite3.connect(path, isolation_level=None)
    conn.execute("PRAGMA foreign_keys = ON")
    return conn


@pytest.fixture
def populated(tmp_book: Path) -> Path:
    with open_store(tmp_book) as s:
        add_underlyings(s)
        tid = s.add_trade("main", "TSTA", 5, 2.0, "2030-06-21", 100, True)
        s.cancel_trade(s.add_trade("main", "TSTA", 1, 2.0, "2030-06-21", 100, True), "test")
        s.log_spot("TSTA", 100.0)
        s.commit_close()
        assert tid == 1
    return tmp_book


def test_every_table_is_strict(tmp_book: Path) -> None:
    conn = _raw(tmp_book)
    tables = conn.execute(
        "SELECT name, strict FROM pragma_table_list WHERE schema = 'main' "
        "AND name NOT LIKE 'sqlite_%'"
    ).fetchall()
    assert len(tables) >= 9 and all(strict == 1 for _, strict in tables), tables
    with pytest.raises(sqlite3.IntegrityError, match="cannot store TEXT value in REAL column"):
        conn.execute(
            "INSERT INTO underlying (symbol, kind, currency, multiplier, american, "
            "cash_settled) VALUES ('Q', 'stock', 'USD', 'ten', 1, 0)"
        )


BAD_ROWS = [
    (
        "strike <= 0",
        "INSERT INTO contract (underlying_id, option_type, strike, expiry, cutoff_time, "
        "american, multiplier, cash_settled) VALUES (1, 'C', 0, '2030-06-21', '16:00', 1, 100, 0)",
    ),
    (
        "unknown option type",
        "INSERT INTO contract (underlying_id, option_type, strike, expiry, "
        "cutoff_time, american, multiplier, cash_settled) VALUES (1, 'X', 100, '2030-06-21', "
        "'16:00', "
        "1, 100, 0)",
    ),
    (
        "impossible date",
        "INSERT INTO contract (underlying_id, option_type, strike, expiry, "
        "cutoff_time, american, multiplier, cash_settled) VALUES (1, 'C', 100, '2030-02-30', "
        "'16:00', "
        "1, 100, 0)",
    ),
    (
        "option without expiry",
        "INSERT INTO contract (underlying_id, option_type, strike, american, "
        "multiplier, cash_settled) VALUES (1, 'C', 100, 1, 100, 0)",
    ),
    (
        "multiplier <= 0",
        "INSERT INTO contract (underlying_id, option_type, american, multiplier, "
        "cash_settled) VALUES (1, 'U', 1, 0, 0)",
    ),
    (
        "unknown underlying kind",
        "INSERT INTO underlying (symbol, kind, currency, multiplier, "
        "american, cash_settled) VALUES ('Q', 'bond', 'USD', 1, 1, 0)",
    ),
    (
        "zero quantity",
        f"INSERT INTO trade (book_id, contract_id, quantity, price, trade_time, "
        f"booked_at, who, source) VALUES (1, 1, 0, 1.0, '{TS}', '{TS}', 'me', 'typed')",
    ),
    (
        "negative price",
        f"INSERT INTO trade (book_id, contract_id, quantity, price, trade_time, "
        f"booked_at, who, source) VALUES (1, 1, 1, -1.0, '{TS}', '{TS}', 'me', 'typed')",
    ),
    (
        "time not UTC ISO",
        "INSERT INTO trade (book_id, contract_id, quantity, price, trade_time, "
        f"booked_at, who, source) VALUES (1, 1, 1, 1.0, '2026-01-05 15:00', '{TS}', 'me', 'typed')",
    ),
    (
        "dealt after booked",
        "INSERT INTO trade (book_id, contract_id, quantity, price, trade_time, "
        f"booked_at, who, source) VALUES (1, 1, 1, 1.0, '2026-01-06T15:00:00.000000Z', '{TS}', "
        f"'me', "
        "'typed')",
    ),
    (
        "unknown contract (foreign key)",
        "INSERT INTO trade (book_id, contract_id, quantity, price, "
        f"trade_time, booked_at, who, source) VALUES (1, 999, 1, 1.0, '{TS}', '{TS}', 'me', "
        f"'typed')",
    ),
    (
        "expiry before trade date",
        "INSERT INTO trade (book_id, contract_id, quantity, price, "
        "trade_time, booked_at, who, source) VALUES (1, 1, 1, 1.0, '2031-01-06T15:00:00.000000Z', "
        "'2031-01-06T15:00:00.000000Z', 'me', 'typed')",
    ),
    (
        "vol <= 0",
        f"INSERT INTO mark_set (kind, marked_at, who, source, mark_count) VALUES "
        f"('intraday', '{TS}', 'me', 'typed', 1); INSERT INTO mark (mark_set_id, seq, kind, "
        "underlying_id, expiry, value, observed_at) VALUES (last_insert_rowid(), 1, 'vol', 1, "
        f"'2030-06-21', 0, '{TS}')",
    ),
    (
        "vol > 10",
        f"INSERT INTO mark_set (kind, marked_at, who, source, mark_count) VALUES "
        f"('intraday', '{TS}', 'me', 'typed', 1); INSERT INTO mark (mark_set_id, seq, kind, "
        "underlying_id, expiry, value, observed_at) VALUES (last_insert_rowid(), 1, 'vol', 1, "
        f"'2030-06-21', 10.5, '{TS}')",
    ),
    (
        "unknown mark kind",
        f"INSERT INTO mark_set (kind, marked_at, who, source, mark_count) VALUES "
        f"('intraday', '{TS}', 'me', 'typed', 1); INSERT INTO mark (mark_set_id, seq, kind, "
        "underlying_id, value, observed_at) VALUES (last_insert_rowid(), 1, 'price', 1, 5, "
        f"'{TS}')",
    ),
    (
        "mark beyond its set's count",
        "INSERT INTO mark (mark_set_id, seq, kind, underlying_id, "
        f"value, observed_at) VALUES (1, 2, 'spot', 1, 5, '{TS}')",
    ),
    (
        "amend of a live trade",
        "INSERT INTO trade (book_id, contract_id, quantity, price, "
        f"trade_time, booked_at, who, source, replaces) VALUES (1, 1, 1, 1.0, '{TS}', '{TS}', "
        f"'me', "
        "'typed', 1)",
    ),
]


@pytest.mark.parametrize(("what", "sql"), BAD_ROWS, ids=[b[0] for b in BAD_ROWS])
def test_impossible_rows_are_refused_by_sqlite(populated: Path, what: str, sql: str) -> None:
    conn = _raw(populated)
    conn.execute("BEGIN")
    with pytest.raises(sqlite3.IntegrityError):
        for statement in sql.split("; "):
            conn.execute(statement)
    conn.execute("ROLLBACK")


@pytest.mark.parametrize(
    "sql",
    [
        "UPDATE trade SET quantity = 50 WHERE trade_id = 1",
        "DELETE FROM trade WHERE trade_id = 1",
        "UPDATE trade_cancel SET reason = 'other'",
        "DELETE FROM trade_cancel",
        "UPDATE mark SET value = 1 WHERE mark_set_id = 2",
        "DELETE FROM mark WHERE mark_set_id = 2",
        "UPDATE mark_set SET note = 'edited' WHERE kind = 'close'",
        "DELETE FROM mark_set WHERE kind = 'close'",
        "UPDATE contract SET strike = 1",
        "DELETE FROM underlying",
        "UPDATE base_currency SET currency = 'JPY'",
        "DELETE FROM base_currency",
    ],
)
def test_history_cannot_be_updated_or_deleted(populated: Path, sql: str) -> None:
    conn = _raw(populated)
    before = conn.execute("SELECT count(*), total(quantity) FROM trade").fetchone()
    with pytest.raises(sqlite3.IntegrityError, match="never"):
        conn.execute(sql)
    assert conn.execute("SELECT count(*), total(quantity) FROM trade").fetchone() == before


def test_every_store_connection_enforces_foreign_keys_and_settings(populated: Path) -> None:
    import threading

    for read_only in (False, True):
        s = open_store(populated, read_only=read_only)
        conns = [s.connection]
        t = threading.Thread(target=lambda s=s, conns=conns: conns.append(s.connection))
        t.start()
        t.join()
        for c in conns:
            assert c.execute("PRAGMA foreign_keys").fetchone()[0] == 1
            assert c.execute("PRAGMA recursive_triggers").fetchone()[0] == 1
            assert c.execute("PRAGMA busy_timeout").fetchone()[0] == st.BUSY_TIMEOUT_MS
            assert c.execute("PRAGMA trusted_schema").fetchone()[0] == 0
            assert c.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
            if read_only:
                assert c.execute("PRAGMA query_only").fetchone()[0] == 1
            else:
                assert c.execute("PRAGMA synchronous").fetchone()[0] == 2  # FULL
        s.close()


def _schema_of(path: Path) -> tuple[int, int, list[tuple[str, str, str]], dict[str, list[tuple]]]:
    conn = sqlite3.connect(path)
    objects = sorted(
        (t, n, " ".join(sql.split()))
        for t, n, sql in conn.execute(
            "SELECT type, name, sql FROM sqlite_master WHERE sql IS NOT NULL"
        )
    )
    columns = {
        n: conn.execute(f"PRAGMA table_xinfo('{n}')").fetchall()
        for t, n, _ in objects
        if t == "table"
    }
    out = (
        conn.execute("PRAGMA user_version").fetchone()[0],
        conn.execute("PRAGMA application_id").fetchone()[0],
        objects,
        columns,
    )
    conn.close()
    return out


def _make_v1_book(path: Path) -> None:
    conn = sqlite3.connect(path, isolation_level=None)
    conn.execute("PRAGMA journal_mode = WAL")
    conn.executescript(V1_SQL.read_text(encoding="utf-8"))
    conn.execute(f"PRAGMA application_id = {st.APPLICATION_ID}")
    conn.execute("PRAGMA user_version = 1")
    conn.executescript(f"""
        INSERT INTO underlying (symbol, kind, currency, multiplier, american, cash_settled)
            VALUES ('OLDA', 'stock', 'USD', 100, 1, 0);
        INSERT INTO book (name) VALUES ('main');
        INSERT INTO contract (underlying_id, option_type, strike, expiry, cutoff_time, american,
            multiplier, cash_settled) VALUES (1, 'C', 100, '2030-06-21', '16:00', 1, 100, 0);
        INSERT INTO trade (book_id, contract_id, quantity, price, trade_time, booked_at, who,
            source) VALUES (1, 1, 7, 2.5, '{TS}', '{TS}', 'old', 'typed');
        INSERT INTO mark_set (kind, marked_at, who, source, mark_count)
            VALUES ('close', '{TS}', 'old', 'close', 1);
        INSERT INTO mark (mark_set_id, seq, kind, underlying_id, value)
            VALUES (1, 1, 'spot', 1, 99);
    """)
    conn.close()


def test_a_migrated_old_book_equals_a_fresh_one(tmp_path: Path, tmp_book: Path) -> None:
    old = tmp_path / "old.db"
    _make_v1_book(old)
    with open_store(old) as s:
        assert s.schema_version() == SCHEMA_VERSION
        assert list(s.load_book().quantities) == [7.0]
        assert s.load_market().spots == {"OLDA": 99.0}
        assert s.integrity_ok()
    assert _schema_of(old) == _schema_of(tmp_book)


def test_the_frozen_first_section_is_still_the_first_section_of_schema_sql() -> None:
    frozen = st.db.split_statements(V1_SQL.read_text(encoding="utf-8").split("\n", 3)[3])
    assert st.schema_sections()[1] == frozen


def test_a_read_only_open_of_an_old_book_asks_for_an_upgrade(tmp_path: Path) -> None:
    old = tmp_path / "old.db"
    _make_v1_book(old)
    with pytest.raises(st.StoreError, match="older schema"):
        open_store(old, read_only=True)


def test_kill_during_migration_leaves_the_old_book_and_a_rerun_finishes(tmp_path: Path) -> None:
    """RELIABILITY 14: SIGKILL inside the migration's transaction; then migrate again."""
    old = tmp_path / "old.db"
    _make_v1_book(old)
    child = spawn("migrate_paused", str(old))
    assert child.stdout is not None
    line = child.stdout.readline().strip()
    assert line == "migrating", child.stderr.read() if child.stderr else line
    child.send_signal(signal.SIGKILL)
    child.wait(10)
    conn = sqlite3.connect(old)
    assert conn.execute("PRAGMA user_version").fetchone()[0] == 1
    assert (
        conn.execute("SELECT count(*) FROM sqlite_master WHERE name = 'import_file'").fetchone()[0]
        == 0
    )
    assert conn.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
    conn.close()
    with open_store(old) as s:
        assert s.schema_version() == SCHEMA_VERSION and s.integrity_ok()


def test_commands_upgrade_an_old_book_unless_read_only(tmp_path: Path) -> None:
    """A report or list command on a book of an older schema upgrades it (saying so on stderr)
    and answers; with the group's --read-only it is refused and the file stays as it was. (A
    read-only open used to refuse it even without --read-only, asking for a flag not given.)"""
    from click.testing import CliRunner

    from blotter.cli import main

    old = tmp_path / "old.db"
    _make_v1_book(old)
    refused = CliRunner().invoke(main, ["--read-only", "--db", str(old), "trade", "list"])
    assert refused.exit_code == 1 and "older schema (1)" in refused.output
    assert sqlite3.connect(old).execute("PRAGMA user_version").fetchone()[0] == 1
    done = CliRunner().invoke(main, ["--db", str(old), "trade", "list", "--json"])
    assert done.exit_code == 0, done.output
    assert "upgraded" in done.stderr and '"quantity": 7' in done.stdout
    assert sqlite3.connect(old).execute("PRAGMA user_version").fetchone()[0] == SCHEMA_VERSION
