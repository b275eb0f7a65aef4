"""Several processes on one book: nothing lost, crashes leave whole transactions, viewers see
commits, busy and full disks fail cleanly (RELIABILITY 1, 2, 3, 7, 9, 10).

Children are fresh Python processes (``store_children.py``), never forks of this one.
"""

from __future__ import annotations

import os
import random
import shutil
import signal
import time
from collections.abc import Callable
from pathlib import Path

import pytest
from store_children import add_underlyings, spawn, trade_csv

from blotter.store import BusyError, Store, create_store, open_store

WRITERS = 4
MARKS_EACH = 500


@pytest.fixture
def book(new_book: Callable[[], str]) -> str:
    """A new book of the test's backend holding the test underlyings and books."""
    name = new_book()
    with create_store(name) as s:
        add_underlyings(s)
    return name


def _run_loggers(book: str, begin: str) -> tuple[list[str], int, int]:
    kids = [
        spawn("mark_logger", str(book), f"w{i}", str(MARKS_EACH), begin) for i in range(WRITERS)
    ]
    outs = []
    for k in kids:
        out, err = k.communicate(timeout=240)
        outs.append(out.strip() or err.strip().splitlines()[-1])
    with open_store(book, read_only=True) as s:
        c = s.connection
        rows = c.execute("SELECT count(*) FROM mark").fetchone()[0]
        distinct = c.execute("SELECT count(DISTINCT note) FROM mark_set").fetchone()[0]
    return outs, rows, distinct


def test_concurrent_mark_loggers_lose_nothing(book: str) -> None:
    """RELIABILITY 1: 4 processes x 500 read-then-write marks through the store's API."""
    outs, rows, distinct = _run_loggers(book, "immediate")
    assert outs == ["errors 0"] * WRITERS
    assert rows == distinct == WRITERS * MARKS_EACH


@pytest.mark.file_only("SQLite's deferred BEGIN (the server's control: postgres processes test)")
def test_control_a_plain_deferred_begin_loses_marks(book: str) -> None:
    """The control: the same loggers with BEGIN instead of BEGIN IMMEDIATE fail, so the test above
    can see the bug it guards against."""
    outs, rows, _ = _run_loggers(book, "deferred")
    errors = sum(int(o.split()[-1]) for o in outs if o.startswith("errors"))
    assert rows < WRITERS * MARKS_EACH and errors > 0, (outs, rows)


def _assert_sound(book: str) -> None:
    """The file's integrity and foreign-key checks pass (a database's server enforces both as it
    writes), and every mark set holds all its marks."""
    with open_store(book, read_only=True) as s:
        assert s.integrity_ok()


def test_kill_9_in_the_middle_of_an_import_leaves_none_of_the_file(
    book: str, tmp_path: Path
) -> None:
    """RELIABILITY 2: SIGKILL at a progress line inside the import's transaction; then re-run."""
    path = trade_csv(tmp_path / "big.csv", 30_000)
    with open_store(book) as s:
        s.add_trade("main", "TSTA", 1, 1.0)
    child = spawn("importer", str(book), str(path), "trades")
    assert child.stdout is not None
    line = child.stdout.readline().strip()
    assert line.startswith("progress"), child.stderr.read() if child.stderr else line
    child.send_signal(signal.SIGKILL)
    child.wait(10)
    _assert_sound(book)
    with open_store(book) as s:
        c = s.connection
        assert c.execute("SELECT count(*) FROM trade").fetchone()[0] == 1
        assert c.execute("SELECT count(*) FROM import_file").fetchone()[0] == 0
        rep = s.import_trades_csv(path)  # the same file, once, whole
        assert rep.rows == 30_000
        assert c.execute("SELECT count(*) FROM trade").fetchone()[0] == 30_001
        assert s.integrity_ok()


@pytest.mark.file_only("snapshots are backups of the file")
def test_snapshots_at_random_instants_hold_only_whole_transactions(
    book: str, tmp_path: Path
) -> None:
    """RELIABILITY 3: SIGSTOP the writer at random moments, copy the book and its WAL, go on;
    every copy is sound and every mark set in it holds all its marks."""
    child = spawn("close_writer", str(book), "100000")
    assert child.stdout is not None and child.stdout.readline().strip() == "ready"
    rng = random.Random(3)
    copies = []
    try:
        for i in range(60):
            time.sleep(rng.uniform(0.0, 0.02))
            child.send_signal(signal.SIGSTOP)
            dest = tmp_path / f"snap{i}"
            dest.mkdir()
            for suffix in ("", "-wal"):
                src = Path(f"{book}{suffix}")
                if src.exists():
                    shutil.copyfile(src, dest / f"book.db{suffix}")
            child.send_signal(signal.SIGCONT)
            copies.append(dest / "book.db")
    finally:
        child.send_signal(signal.SIGCONT)
        child.kill()
        child.wait(10)
    sets_seen = set()
    for copy in copies:
        with open_store(copy) as s:  # read-write: recovers the copied WAL
            assert s.integrity_ok(), copy
            c = s.connection
            sets_seen.add(c.execute("SELECT count(*) FROM mark_set").fetchone()[0])
            trades = c.execute("SELECT count(*) FROM trade").fetchone()[0]
            closes = c.execute("SELECT count(*) FROM mark_set WHERE kind = 'close'").fetchone()[0]
            assert closes - 1 <= trades <= closes  # each round: close, then a trade
    assert len(sets_seen) > 10  # the snapshots caught many states


def test_a_viewer_sees_another_process_commit_within_a_second(book: str) -> None:
    """RELIABILITY 7: poll data_version; no change while idle; no read transaction left open."""
    viewer = open_store(book, read_only=True)
    seen = viewer.data_version()
    market = viewer.load_market()
    idle_changes = 0
    for _ in range(20):
        time.sleep(0.01)
        idle_changes += viewer.data_version() != seen
    assert idle_changes == 0 and not viewer.in_transaction()
    child = spawn("spot_once", str(book), "123.5")
    t0 = time.monotonic()
    while viewer.data_version() == seen and time.monotonic() - t0 < 10:
        time.sleep(0.01)
    assert child.wait(30) == 0
    assert viewer.data_version() != seen
    fresh = viewer.load_market()
    assert fresh.spots == {"TSTA": 123.5} and fresh.version > market.version
    assert not viewer.in_transaction()
    viewer.close()


@pytest.mark.file_only("the -wal file and its checkpoint")
def test_the_wal_stays_bounded_while_a_viewer_polls(book: str) -> None:
    """RELIABILITY 7: many commits while a viewer refreshes; the viewer never pins the WAL."""
    viewer = open_store(book, read_only=True)
    writer = open_store(book)
    seen = viewer.data_version()
    for i in range(2000):
        writer.log_spot("TSTA", 100.0 + i % 50)
        if i % 10 == 0 and viewer.data_version() != seen:
            seen = viewer.data_version()
            viewer.load_market()
            assert not viewer.in_transaction()
    busy, _log, _done = writer.connection.execute("PRAGMA wal_checkpoint(PASSIVE)").fetchone()
    assert busy == 0
    assert Path(f"{book}-wal").stat().st_size < 16 * 2**20
    writer.close()
    viewer.close()


def test_a_writer_held_off_past_the_timeout_fails_cleanly(
    book: str, monkeypatch: pytest.MonkeyPatch
) -> None:
    """RELIABILITY 9 across processes: another process holds BEGIN IMMEDIATE; we get BusyError,
    nothing changes, and the same write succeeds once the lock is released."""
    from blotter.store import db

    monkeypatch.setattr(db, "BUSY_TIMEOUT_MS", 200)  # read as each connection is made
    s: Store = open_store(book)
    before = s.load_market().version
    holder = spawn("hold_lock", str(book), "1.5")
    assert holder.stdout is not None and holder.stdout.readline().strip() == "locked"
    with pytest.raises(BusyError, match="busy .* try again"):
        s.add_trade("main", "TSTA", 5, 1.0)
    assert not s.in_transaction()
    assert holder.stdout.readline().strip() == "released"
    holder.wait(10)
    assert s.load_market().version == before and s.trades() == []
    s.add_trade("main", "TSTA", 5, 1.0)
    assert [t.quantity for t in s.trades()] == [5]
    s.close()


@pytest.mark.file_only("a file size limit on the writing process")
def test_a_full_disk_gives_a_clear_error_and_a_later_retry_lands(
    book: str, tmp_path: Path
) -> None:
    """RELIABILITY 10: RLIMIT_FSIZE makes the WAL write fail (SQLITE_IOERR or SQLITE_FULL)."""
    rows = ["kind,symbol,expiry,strike,value"]
    rows += [f"vol,TSTA,2030-06-21,{50 + i * 0.01:.2f},0.2" for i in range(20_000)]
    path = tmp_path / "marks.csv"
    path.write_text("\n".join(rows) + "\n")
    limit = os.path.getsize(book) + 64 * 1024
    child = spawn("fsize_import", str(book), str(path), str(limit))
    out, err = child.communicate(timeout=120)
    assert "refused StoreError" in out and "nothing was written" in out, (out, err)
    assert "in_transaction False" in out
    _assert_sound(book)
    with open_store(book) as s:
        assert s.connection.execute("SELECT count(*) FROM mark").fetchone()[0] == 0
        rep = s.import_marks_csv(path)
        assert rep.rows == 20_000 and s.integrity_ok()
