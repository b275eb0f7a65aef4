"""``Store.atomic()`` and the store's bulk writes: one ``BEGIN IMMEDIATE`` transaction whole or
not at all (RELIABILITY 1 and 8), sqlite-utils' batched inserts inside it never committing on
their own (RELIABILITY 3: sqlite-utils commits each batch unless a transaction is open), the
store's clock, and no caller reaching into the store's private names."""

from __future__ import annotations

import ast
import sqlite3
from collections.abc import Iterator
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

import pytest
from store_children import add_underlyings

from blotter.store import (
    MarkPoint,
    NewContract,
    NewTrade,
    ReadOnlyError,
    Store,
    StoreError,
    db,
    open_store,
    use_clock,
)

EXPIRY = "2030-06-21"
ROOT = Path(__file__).resolve().parents[2]


@pytest.fixture
def store(book: str) -> Iterator[Store]:
    s = open_store(book)
    add_underlyings(s)
    yield s
    s.close()


def _rows(store: Store, table: str) -> int:
    return int(store.connection.execute(f"SELECT count(*) FROM {table}").fetchone()[0])


def _statements(store: Store) -> list[str] | None:
    """Every statement this thread's connection runs from now on (SQLite's trace callback); None
    on a PostgreSQL book, whose driver has no such callback."""
    conn = store.connection
    if not isinstance(conn, sqlite3.Connection):
        return None
    seen: list[str] = []
    conn.set_trace_callback(seen.append)
    return seen


def _transactions(seen: list[str]) -> list[str]:
    """The statements that begin or end a transaction (not a savepoint) among ``seen``."""
    return [s for s in seen if s.startswith("BEGIN") or s in ("COMMIT", "ROLLBACK")]


def _options(store: Store, n: int) -> list[int]:
    terms = [NewContract("TSTA", EXPIRY, 100 + i, i % 2 == 0) for i in range(n)]
    return store.add_contracts(terms)


def test_a_block_is_written_whole_or_not_at_all(store: Store) -> None:
    before = (_rows(store, "trade"), _rows(store, "mark_set"))
    with pytest.raises(RuntimeError, match="the caller's own error"), store.atomic():
        store.add_trade("main", "TSTA", 5, 2.0)
        store.log_spot("TSTA", 101.0)
        assert _rows(store, "trade") == before[0] + 1  # the block sees its own writes
        raise RuntimeError("the caller's own error")
    assert (_rows(store, "trade"), _rows(store, "mark_set")) == before
    assert not store.in_transaction()
    with store.atomic() as s:
        s.add_trade("main", "TSTA", 5, 2.0)
        s.log_spot("TSTA", 101.0)
    assert (_rows(store, "trade"), _rows(store, "mark_set")) == (before[0] + 1, before[1] + 1)
    assert store.load_market().spots == {"TSTA": 101.0}


@pytest.mark.file_only("reads the statements through SQLite's trace callback")
def test_a_block_is_one_immediate_transaction_and_its_calls_savepoints(store: Store) -> None:
    """RELIABILITY 1: the write lock is taken before the first read, and the calls inside the
    block do not begin or commit transactions of their own."""
    seen = _statements(store)
    assert seen is not None
    with store.atomic():
        store.add_trade("main", "TSTA", 5, 2.0)
        store.log_spot("TSTA", 101.0)
    assert _transactions(seen) == ["BEGIN IMMEDIATE", "COMMIT"]
    assert seen[0] == "BEGIN IMMEDIATE" and seen[-1] == "COMMIT"
    assert sum(s.startswith("SAVEPOINT") for s in seen) == sum(
        s.startswith("RELEASE") for s in seen
    )


def test_a_refused_call_inside_a_block_leaves_the_blocks_other_writes(store: Store) -> None:
    """A call refused inside a block undoes its own savepoint only; the block goes on."""
    with store.atomic():
        kept = store.add_trade("main", "TSTA", 5, 2.0)
        store.cancel_trade(kept, "first")
        with pytest.raises(StoreError, match="already cancelled"):
            store.cancel_trade(kept, "again")
        with pytest.raises(StoreError, match="unknown underlying 'NOPE'"):
            store.log_spot("NOPE", 1.0)
        store.log_spot("TSTA", 99.0)
    assert [(t.trade_id, t.state, t.cancel_reason) for t in store.trades()] == [
        (kept, "cancelled", "first")
    ]
    assert [len(store.marks(s.id)) for s in store.mark_sets()] == [1]
    assert not store.in_transaction()


def test_a_read_only_store_refuses_a_block(book: str) -> None:
    with open_store(book, read_only=True) as ro:
        with pytest.raises(ReadOnlyError), ro.atomic():
            pytest.fail("the block must not run")
        assert not ro.in_transaction()


def test_a_block_waits_for_another_writer_then_fails_cleanly(
    store: Store, book: str, writer_lock: Any, monkeypatch: pytest.MonkeyPatch
) -> None:
    """RELIABILITY 9: another connection holds the write lock; the block never starts."""
    with writer_lock(book):
        with monkeypatch.context() as patched:
            patched.setattr(db, "BUSY_TIMEOUT_MS", 100)
            quick = open_store(book)
        with pytest.raises(StoreError, match="busy"), quick.atomic():
            pytest.fail("the block must not run")
        assert not quick.in_transaction()
        quick.close()


def test_bulk_trades_fail_midway_leaving_nothing(store: Store) -> None:
    """sqlite-utils inserts the rows in batches of ``db.INSERT_BATCH``; a row refused by the
    book's triggers in the third batch undoes the two batches already run."""
    cids = _options(store, 3)
    taken = store.add_trade("main", "TSTA", 1, 1.0, contract_id=cids[0])
    before = (_rows(store, "trade"), _rows(store, "history"))
    rows = [NewTrade("main", cids[i % 3], 1 + i % 7, 2.0) for i in range(250)]
    rows[230] = rows[230]._replace(trade_id=taken)  # the id of a trade already in the book
    assert 230 > 2 * db.INSERT_BATCH
    seen = _statements(store)
    with pytest.raises(StoreError, match="trades are never replaced"):
        store.add_trades(rows)
    assert (_rows(store, "trade"), _rows(store, "history")) == before
    assert not store.in_transaction()
    if seen is not None:  # the file: sqlite-utils' batches, traced
        batches = dict.fromkeys(s for s in seen if s.startswith('INSERT INTO "trade"'))
        assert len(batches) == 3  # two whole batches ran before the failing one
        assert _transactions(seen) == ["BEGIN IMMEDIATE", "ROLLBACK"]


def test_bulk_trades_commit_once_and_number_new_ids_as_sqlite_would(store: Store) -> None:
    cids = _options(store, 2)
    first = store.add_trade("main", "TSTA", 1, 1.0, contract_id=cids[0])
    seen = _statements(store)
    ids = store.add_trades([NewTrade("main", cids[i % 2], 1, 2.0) for i in range(250)])
    assert ids == list(range(first + 1, first + 251))
    if seen is not None:
        assert _transactions(seen) == ["BEGIN IMMEDIATE", "COMMIT"]
    assert [t.trade_id for t in store.trades()] == [first, *ids]  # history numbers them in order
    assert [t.seq for t in store.trades()] == sorted(t.seq for t in store.trades())


def test_bulk_trades_are_checked_as_one_trade_is(store: Store) -> None:
    cid = _options(store, 1)[0]
    good = NewTrade("main", cid, 1, 2.0)
    cases = [
        (good._replace(quantity=0), "quantity must not be zero"),
        (good._replace(price=-1.0), "price must be"),
        (good._replace(book="nope"), "no book named 'nope'"),
        (good._replace(contract_id=999), "no contract 999"),
        (good._replace(source="scraped"), "source 'scraped'"),
        (good._replace(trade_time="2031-01-02T00:00:00Z"), "after the trade was booked"),
        (
            good._replace(
                trade_time="2030-06-22T00:00:00Z", booked_at=datetime(2030, 7, 1, tzinfo=UTC)
            ),
            "after the contract's cut-off",
        ),
    ]
    for bad, words in cases:
        with pytest.raises(StoreError, match=words):
            store.add_trades([good, bad])
        assert _rows(store, "trade") == 0


def test_sqlite_utils_is_never_left_to_commit_on_its_own(store: Store) -> None:
    """Outside a transaction sqlite-utils would commit each batch; the store refuses that."""
    with pytest.raises(RuntimeError, match="inside a store transaction"):
        db.insert_rows(store.connection, "book", ("name",), [("x",)])
    assert store.book_names() == ["hedge", "imp", "main"]


def test_a_mark_set_of_many_points_is_written_whole(store: Store) -> None:
    points = [
        MarkPoint("vol", 0.2 + i / 1e4, "TSTA", expiry=EXPIRY, strike=50 + i) for i in range(300)
    ]
    points.append(MarkPoint("spot", 100.0, "TSTA"))
    set_id = store.add_mark_set("intraday", points, note="grid")
    assert [m.mark_set_id for m in store.marks(set_id)] == [set_id] * 301
    assert store.load_market(mark_set_id=set_id).surfaces["TSTA"].vols.size == 300
    bad = [*points[:250], MarkPoint("vol", 0.3, "TSTA", expiry=EXPIRY, strike=50)]  # a repeat
    with pytest.raises(StoreError, match="marks are never replaced"):
        store.add_mark_set("intraday", bad)
    for words, point in (
        ("vol must be", MarkPoint("vol", 11.0, "TSTA", expiry=EXPIRY)),
        ("a vol mark needs an expiry", MarkPoint("vol", 0.2, "TSTA")),
        ("unknown underlying 'NOPE'", MarkPoint("spot", 1.0, "NOPE")),
        ("a rate mark has a currency and a tenor", MarkPoint("rate", 0.01, "TSTA")),
        ("not one of spot, vol, rate, div_yield", MarkPoint("price", 1.0, "TSTA")),
    ):
        with pytest.raises(StoreError, match=words):
            store.add_mark_set("intraday", [points[-1], point])
    assert [s.id for s in store.mark_sets()] == [set_id]


def test_a_close_set_closes_its_date_once(store: Store) -> None:
    at = datetime(2026, 12, 3, 21, 30, tzinfo=UTC)  # 16:30 New York
    spot = [MarkPoint("spot", 100.0, "TSTA")]
    first = store.add_mark_set("close", spot, marked_at=at)
    assert store.mark_sets("close")[0].business_date.isoformat() == "2026-12-03"  # type: ignore[union-attr]
    with pytest.raises(StoreError, match=f"already written \\(set {first}"):
        store.add_mark_set("close", spot, marked_at=at + timedelta(hours=1))


def test_contracts_are_found_or_made_in_one_go(store: Store) -> None:
    made = _options(store, 3)
    again = store.add_contracts(
        [NewContract("TSTA", EXPIRY, 101, False), NewContract("TSTA", EXPIRY, 200, True)] * 2
    )
    assert again[0] == made[1] and again[1] > max(made) and again[2:] == again[:2]
    assert len(store.contracts()) == 4
    with pytest.raises(StoreError, match="held here at 100 units per contract"):
        store.add_contracts([NewContract("TSTA", multiplier=100), NewContract("TSTA")])
    assert len(store.contracts()) == 4


def test_the_store_reads_its_own_clock_else_the_process_clock(book: str) -> None:
    then = datetime(2026, 11, 30, 15, 0, tzinfo=UTC)
    with open_store(book, clock=lambda: then) as own:
        add_underlyings(own)
        with use_clock(lambda: then + timedelta(days=1)):  # the store's own clock wins
            tid = own.add_trade("main", "TSTA", 1, 1.0)
        assert own.trades()[0].booked_at == then and own.now() == then
    with open_store(book) as plain:
        with use_clock(lambda: then + timedelta(hours=1)):
            with use_clock(lambda: then + timedelta(hours=2)):
                plain.cancel_trade(tid, "late")
            assert plain.now() == then + timedelta(hours=1)  # blocks nest
            assert plain.todays_close() == (then.date(), None)
        assert abs(plain.now() - datetime.now(UTC)) < timedelta(minutes=1)
        assert plain.trades()[0].cancelled_at == then + timedelta(hours=2)
    with open_store(book, clock=lambda: datetime(2026, 1, 1)) as naive:
        with pytest.raises(StoreError, match="a time with no zone"):
            naive.log_spot("TSTA", 1.0)
        assert not naive.in_transaction()


@pytest.mark.file_only("lists the tables from SQLite's sqlite_master")
def test_counts_reads_every_table(store: Store) -> None:
    store.add_trade("main", "TSTA", 1, 1.0)
    counts = store.counts()
    assert counts["trade"] == 1 and counts["underlying"] == 2 and counts["book"] == 3
    names = {
        r[0]
        for r in store.connection.execute("SELECT name FROM sqlite_master WHERE type = 'table'")
    }
    assert set(counts) == names


def _store_private_names() -> set[str]:
    """Every private name the store package defines: functions, methods, constants and
    attributes it sets on ``self``."""
    names: set[str] = set()
    for path in (ROOT / "blotter" / "store").glob("*.py"):
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.FunctionDef | ast.ClassDef):
                names.add(node.name)
            elif isinstance(node, ast.Name) and isinstance(node.ctx, ast.Store):
                names.add(node.id)
            elif isinstance(node, ast.Attribute) and isinstance(node.ctx, ast.Store):
                names.add(node.attr)
    return {n for n in names if n.startswith("_") and not n.startswith("__")}


def _private_reaches(path: Path, private: set[str]) -> list[str]:
    """Where a file outside the store package names a private name of the store: any ``_name``
    imported from a store module or read off a store module, and any of the store's
    ``private`` names read off anything but ``self``."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    modules: set[str] = set()  # names bound to a store module in this file
    found: list[str] = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            modules |= {
                a.asname or a.name for a in node.names if a.name.startswith("blotter.store")
            }
        elif isinstance(node, ast.ImportFrom) and (node.module or "").startswith("blotter"):
            for a in node.names:
                whole = f"{node.module}.{a.name}"
                if whole.startswith("blotter.store") and a.name.startswith("_"):
                    found.append(f"{path}:{node.lineno} imports {a.name}")
                elif whole.startswith("blotter.store"):
                    modules.add(a.asname or a.name)
    for node in ast.walk(tree):
        if not isinstance(node, ast.Attribute) or not node.attr.startswith("_"):
            continue
        receiver = node.value.id if isinstance(node.value, ast.Name) else ""
        if node.attr.startswith("__") or receiver in ("self", "cls"):
            continue
        if receiver in modules or node.attr in private:
            found.append(f"{path}:{node.lineno} reads {receiver or '…'}.{node.attr}")
    return found


def test_no_caller_reaches_into_the_stores_private_names() -> None:
    """Every caller outside ``blotter/store/`` (the other layers, the tests) uses the public API,
    so the package can change its insides freely."""
    private = _store_private_names()
    assert {"_write", "_read", "_conn", "_transaction", "_contract_table"} <= private
    files = [
        p for p in (ROOT / "blotter").rglob("*.py") if (ROOT / "blotter" / "store") not in p.parents
    ]
    files += list((ROOT / "tests").rglob("*.py"))
    reaches = [r for p in files for r in _private_reaches(p, private)]
    assert reaches == []
