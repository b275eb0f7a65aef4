"""History cannot be rewritten by INSERT OR REPLACE (RELIABILITY 11), on every append-only table.

SQLite's REPLACE conflict resolution deletes the rows a new row collides with and fires no DELETE
trigger unless ``recursive_triggers`` is on (lang_conflict.html; pragma.html, recursive_triggers),
so the no-delete triggers alone let it rewrite a trade in place. Each case here REPLACEs a row of
a populated book at the SQL level, both through the store's own connection and through a plain
``sqlite3`` connection (recursive triggers off), and checks that SQLite refuses it and that the
table holds exactly what it held before.
"""

from __future__ import annotations

import sqlite3
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest
from store_children import add_underlyings, trade_csv

from blotter.store import open_store

pytestmark = pytest.mark.file_only("SQLite's INSERT OR REPLACE, which PostgreSQL lacks")

PROTECTED = (
    "underlying",
    "contract",
    "book",
    "trade",
    "trade_cancel",
    "mark_set",
    "mark",
    "desk_note",
    "import_file",
    "history",
    "book_zone",
    "underlying_correction",
    "base_currency",
)
"""Every append-only table of the schema (each has a no-delete trigger)."""


@pytest.fixture(scope="module")
def history(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A book with at least one row in every protected table, and a row on each unique key:
    an amend (``trade.replaces``), a correcting close (``mark_set.corrects``), an import, a
    contract no trade names and a book no trade is in (so only the triggers can refuse them)."""
    path = tmp_path_factory.mktemp("history") / "book.db"
    with open_store(path, create=True) as s:
        add_underlyings(s)
        s.add_note("a note about the desk")
        first = s.add_trade("main", "TSTA", 5, 2.0, "2030-06-21", 100, True)
        s.amend_trade(first, reason="wrong price", price=2.5)
        s.find_or_create_contract("TSTA", "2031-06-20", 120, False)
        s.log_spot("TSTA", 100.0)
        s.log_spot("TSTX", 4000.0)
        close = s.commit_close(note="close")
        s.commit_close(note="correction", corrects=close)
        s.import_trades_csv(trade_csv(path.with_name("t.csv"), 3))
        s.correct_underlying("TSTA", "tick is a nickel", {"tick": 0.05})
    path.chmod(0o440)
    return path


def _row(conn: sqlite3.Connection, table: str, where: str) -> dict[str, Any]:
    cur = conn.execute(f"SELECT * FROM {table} WHERE {where} LIMIT 1")
    names = [d[0] for d in cur.description]
    row = cur.fetchone()
    assert row is not None, (table, where)
    return dict(zip(names, row, strict=True))


CLOSE = "(SELECT min(mark_set_id) FROM mark_set WHERE kind = 'close')"
"""The first close set of ``history`` (two spot marks)."""

# (table, which row, changes): each REPLACE collides with that row on its id (the changes keep
# the id) or on a unique key (the changes set the id to NULL, so SQLite assigns a new one).
CASES: list[tuple[str, str, str, dict[str, Any]]] = [
    ("underlying id", "underlying", "symbol = 'TSTA'", {"description": "rewritten", "beta": 3.0}),
    ("underlying symbol", "underlying", "symbol = 'TSTA'", {"underlying_id": None, "beta": 3.0}),
    (
        "underlying reference",
        "underlying",
        "is_reference = 1",
        {"underlying_id": None, "symbol": "NEWX"},
    ),
    ("contract id", "contract", "contract_id = 1", {"strike": 555.0}),
    ("contract terms", "contract", "expiry = '2031-06-20'", {"contract_id": None}),
    ("book id", "book", "name = 'main'", {"name": "renamed"}),
    ("book name", "book", "name = 'hedge'", {"book_id": None, "description": "rewritten"}),
    ("trade id", "trade", "trade_id = 1", {"quantity": 50}),
    ("trade replaces", "trade", "replaces IS NOT NULL", {"trade_id": None, "quantity": 50}),
    ("cancel id", "trade_cancel", "1", {"reason": "rewritten"}),
    ("cancel of a trade", "trade_cancel", "1", {"cancel_id": None, "reason": "rewritten"}),
    ("close set id", "mark_set", "kind = 'close'", {"note": "rewritten"}),
    (
        "correction of a close",
        "mark_set",
        "corrects IS NOT NULL",
        {"mark_set_id": None, "note": "rewritten"},
    ),
    ("close mark id", "mark", f"mark_set_id = {CLOSE}", {"value": 123.0}),
    ("close mark seq", "mark", f"mark_set_id = {CLOSE}", {"mark_id": None, "value": 123.0}),
    ("close mark point", "mark", f"mark_set_id = {CLOSE} AND seq = 1", {"mark_id": None, "seq": 2}),
    ("note id", "desk_note", "1", {"text": "rewritten"}),
    ("import id", "import_file", "1", {"file_name": "other.csv"}),
    ("import file", "import_file", "1", {"import_id": None, "file_name": "other.csv"}),
    ("history seq", "history", "kind = 'trade'", {"row_id": 999}),
    ("history row", "history", "kind = 'trade'", {"seq": None}),
    ("book zone", "book_zone", "1", {"zone": "Asia/Tokyo"}),
    ("underlying correction", "underlying_correction", "1", {"tick": 0.5}),
    ("base currency", "base_currency", "base_id = 1", {"currency": "JPY"}),
]


@pytest.fixture(params=["store", "plain"])
def conn(request: pytest.FixtureRequest, history: Path, tmp_path: Path) -> Iterator[Any]:
    """A writable copy of ``history`` and a connection to it: the store's own, or plain sqlite3
    with foreign keys on and recursive triggers off (another program's)."""
    copy = tmp_path / "book.db"
    copy.write_bytes(history.read_bytes())
    if request.param == "store":
        s = open_store(copy)
        yield _file(s)
        s.close()
    else:
        raw = sqlite3.connect(copy, isolation_level=None)
        raw.execute("PRAGMA foreign_keys = ON")
        assert raw.execute("PRAGMA recursive_triggers").fetchone()[0] == 0
        yield raw
        raw.close()


def _replace(conn: sqlite3.Connection, verb: str, table: str, row: dict[str, Any]) -> None:
    """``verb`` (REPLACE INTO or INSERT OR REPLACE INTO) ``row`` into ``table``, values bound."""
    columns, marks = ", ".join(row), ", ".join("?" * len(row))
    conn.execute(f"{verb} {table} ({columns}) VALUES ({marks})", tuple(row.values()))


def _file(store: Any) -> sqlite3.Connection:
    """The store's connection to its file (these tests are about SQLite's triggers)."""
    conn = store.connection
    assert isinstance(conn, sqlite3.Connection)
    return conn


def _table(conn: sqlite3.Connection, table: str) -> list[tuple[Any, ...]]:
    return conn.execute(f"SELECT * FROM {table} ORDER BY rowid").fetchall()


@pytest.mark.parametrize(("what", "table", "where", "changes"), CASES, ids=[c[0] for c in CASES])
@pytest.mark.parametrize("verb", ["REPLACE INTO", "INSERT OR REPLACE INTO"])
def test_replace_cannot_rewrite_history(
    conn: sqlite3.Connection,
    what: str,
    table: str,
    where: str,
    changes: dict[str, Any],
    verb: str,
) -> None:
    row = _row(conn, table, where) | changes
    before = {t: _table(conn, t) for t in PROTECTED}
    with pytest.raises(sqlite3.IntegrityError, match="never"):
        _replace(conn, verb, table, row)
    assert not conn.in_transaction
    assert {t: _table(conn, t) for t in PROTECTED} == before
    assert conn.execute("PRAGMA integrity_check").fetchone()[0] == "ok"


def test_every_protected_table_has_a_case() -> None:
    assert {c[1] for c in CASES} == set(PROTECTED)


def test_a_replace_that_collides_with_nothing_is_an_ordinary_insert(
    conn: sqlite3.Connection,
) -> None:
    """Appending stays possible where an insert is allowed, and is refused where an insert is
    (a mark beyond its set's count)."""
    n = conn.execute("SELECT count(*) FROM desk_note").fetchone()[0]
    conn.execute(
        "REPLACE INTO desk_note (written_at, who, text) "
        "VALUES ('2026-01-05T15:00:00.000000Z', 'me', 'appended')"
    )
    assert conn.execute("SELECT count(*) FROM desk_note").fetchone()[0] == n + 1
    marks = _table(conn, "mark")
    with pytest.raises(sqlite3.IntegrityError, match="the mark set is complete"):
        conn.execute(
            "REPLACE INTO mark (mark_set_id, seq, kind, underlying_id, value, observed_at) "
            f"VALUES ({CLOSE}, 3, 'div_yield', 1, 0.01, '2026-01-05T15:00:00.000000Z')"
        )
    assert _table(conn, "mark") == marks


def test_the_store_still_writes_every_protected_table(history: Path, tmp_path: Path) -> None:
    """The guards refuse collisions only: each of the store's own writes still lands."""
    copy = tmp_path / "book.db"
    copy.write_bytes(history.read_bytes())
    with open_store(copy) as s:
        before = {t: len(_table(_file(s), t)) for t in PROTECTED}
        s.add_book("new")
        s.add_underlying("TSTB", "stock", "USD", 100)
        s.add_note("another note")
        tid = s.add_trade("new", "TSTB", 1, 1.0, "2030-06-21", 50, True)
        s.amend_trade(tid, reason="price", price=1.5)
        s.log_spot("TSTB", 50.0)
        s.commit_close(note="a correction", corrects=s.todays_close()[1])  # one close a day
        s.import_trades_csv(trade_csv(tmp_path / "u.csv", 2, symbol="TSTB"))
        s.correct_underlying("TSTB", "beta re-estimated", {"beta": 1.2})
        s.set_base_currency("EUR")
        after = {t: len(_table(_file(s), t)) for t in PROTECTED}
        grown = [t for t in PROTECTED if t != "book_zone"]  # written once, with the book
        assert all(after[t] > before[t] for t in grown), (before, after)
        assert s.integrity_ok()


def test_the_stores_connections_refuse_a_replace_even_without_the_guards(
    history: Path, tmp_path: Path
) -> None:
    """The second fence: the store turns ``recursive_triggers`` on, so a REPLACE fires the
    no-delete triggers even in a file whose insert guards were dropped by another program."""
    copy = tmp_path / "book.db"
    copy.write_bytes(history.read_bytes())
    raw = sqlite3.connect(copy, isolation_level=None)
    guards = [
        r[0]
        for r in raw.execute(
            "SELECT name FROM sqlite_master WHERE type = 'trigger' AND name LIKE '%_no_replace'"
        )
    ]
    assert len(guards) == len(PROTECTED)
    for name in guards:
        raw.execute(f"DROP TRIGGER {name}")
    raw.close()
    with open_store(copy) as s:
        conn = _file(s)
        assert conn.execute("PRAGMA recursive_triggers").fetchone()[0] == 1
        for _what, table, where, changes in CASES:
            row = _row(conn, table, where) | changes
            before = _table(conn, table)
            # A close set also meets the one-close-a-day rule, whichever fires first.
            with pytest.raises(sqlite3.IntegrityError, match="never|has a close already"):
                _replace(conn, "REPLACE INTO", table, row)
            assert _table(conn, table) == before
