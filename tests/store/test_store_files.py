"""Opening files: read-only fences (RELIABILITY 6), corrupt or foreign files (13), file modes and
the per-user demo copy (15), backups (14)."""

from __future__ import annotations

import os
import random
import shutil
import sqlite3
import stat
import time
from pathlib import Path

import pytest

import blotter.store as st
from blotter.store import StoreError, create_store, open_store, user_demo_copy

pytestmark = pytest.mark.file_only("paths, modes, read-only fences and backups of a book file")


def _files(d: Path) -> set[str]:
    return {p.name for p in d.iterdir()}


READ_ONLY_ATTEMPTS = [
    "INSERT INTO book (name) VALUES ('x')",
    "UPDATE book SET description = 'x'",
    "DELETE FROM book",
    "CREATE TABLE t (x INTEGER)",
    "DROP TABLE desk_note",
    "CREATE TEMP TABLE t (x INTEGER)",
    "PRAGMA user_version = 99",
    "PRAGMA journal_mode = DELETE",
    "ATTACH DATABASE '{dir}/new.db' AS other",
    "VACUUM INTO '{dir}/copy.db'",
]


SQLITE_SIDE_FILES = {"demo.db-wal", "demo.db-shm"}
"""The one exception to "a viewer creates no file": SQLite's WAL reader needs the -shm index and
opens (creating, when the directory is writable) the -wal, even with ``mode=ro``. They hold no
data of ours, and the book file itself is left byte for byte as it was."""


@pytest.mark.parametrize("sql", READ_ONLY_ATTEMPTS)
def test_a_read_only_viewer_cannot_write_or_create_a_file(demo_db: Path, sql: str) -> None:
    with sqlite3.connect(demo_db) as raw:
        version = raw.execute("PRAGMA user_version").fetchone()[0]
    raw.close()
    before = _files(demo_db.parent)  # taken before the viewer opens anything
    assert before == {"demo.db"}
    content = demo_db.read_bytes()
    ro = open_store(demo_db, read_only=True)
    ro.load_book()
    with pytest.raises(sqlite3.Error):
        ro.connection.execute(sql.format(dir=demo_db.parent))
    assert not ro.in_transaction()
    ro.close()
    assert _files(demo_db.parent) - before <= SQLITE_SIDE_FILES  # no other file appears
    assert demo_db.read_bytes() == content  # the book's bytes are unchanged
    with open_store(demo_db, read_only=True) as again:
        assert again.schema_version() == version


def test_mode_ro_alone_lets_attach_create_a_file(demo_db: Path) -> None:
    """The control for the test above: without the ATTACH limit, a new file appears."""
    conn = sqlite3.connect(f"file:{demo_db}?mode=ro", uri=True)
    conn.execute("PRAGMA query_only = ON")
    conn.execute(f"ATTACH DATABASE '{demo_db.parent}/new.db' AS other")
    conn.close()
    assert (demo_db.parent / "new.db").exists()


def test_viewer_reads_a_0444_book_whose_side_files_exist(demo_db: Path) -> None:
    writer = open_store(demo_db)
    writer.log_spot("DEMOA", 181.0)  # keeps -wal/-shm while the writer is open
    demo_db.chmod(0o444)
    try:
        ro = open_store(demo_db, read_only=True)
        assert ro.load_market().spots["DEMOA"] == 181.0
        ro.close()
    finally:
        writer.close()
        demo_db.chmod(0o660)


@pytest.mark.skipif(os.geteuid() == 0, reason="root reads files whatever their mode")
def test_viewer_says_clearly_when_it_cannot_open(demo_db: Path) -> None:
    demo_db.chmod(0o000)
    try:
        with pytest.raises(StoreError, match="cannot open"):
            open_store(demo_db, read_only=True)
    finally:
        demo_db.chmod(0o660)


def test_a_mistyped_path_is_refused_and_never_created(tmp_path: Path) -> None:
    for read_only in (False, True):
        with pytest.raises(StoreError, match="no book at"):
            open_store(tmp_path / "typo.db", read_only=read_only)
    assert _files(tmp_path) == set()
    with pytest.raises(StoreError, match="directory"):
        open_store(tmp_path)


def test_foreign_empty_and_newer_files_are_refused_with_a_message(
    tmp_path: Path, demo_db: Path
) -> None:
    text = tmp_path / "notes.db"
    text.write_text("these are not the books\n" * 100)
    empty = tmp_path / "empty.db"
    empty.touch()
    other = tmp_path / "other.db"
    conn = sqlite3.connect(other)
    conn.execute("CREATE TABLE things (x)")
    conn.commit()
    conn.close()
    newer = tmp_path / "newer.db"
    shutil.copyfile(demo_db, newer)
    conn = sqlite3.connect(newer)
    conn.execute(f"PRAGMA user_version = {st.SCHEMA_VERSION + 1}")
    conn.close()
    for path, message in [
        (text, "not a blotter book"),
        (empty, "it is empty"),
        (other, "not a blotter book"),
        (newer, "newer blotter"),
    ]:
        for read_only in (False, True):
            with pytest.raises(StoreError, match=message):
                open_store(path, read_only=read_only)


def test_damaged_files_are_refused_never_a_traceback(demo_db: Path, tmp_path: Path) -> None:
    """RELIABILITY 13: flipped bytes (as in SQLite's malformed-file tests) give StoreError or a
    book that passes its checks; a damaged page header is always refused."""
    size = demo_db.stat().st_size
    page = 4096
    header = tmp_path / "header.db"
    shutil.copyfile(demo_db, header)
    with open(header, "r+b") as f:
        f.write(b"\x00" * 16)  # the SQLite magic string
    with pytest.raises(StoreError, match="not a"):
        open_store(header)
    btree = tmp_path / "btree.db"
    shutil.copyfile(demo_db, btree)
    with open(btree, "r+b") as f:
        for p in range(2, size // page):
            f.seek((p - 1) * page)
            f.write(b"\xff\xff\xff\xff\xff\xff\xff\xff")  # each page's b-tree header
    with pytest.raises(StoreError):
        s = open_store(btree)
        s.load_book()
        s.load_market()
    rng = random.Random(7)
    refused = 0
    for i in range(200):
        copy = tmp_path / f"flip{i}.db"
        shutil.copyfile(demo_db, copy)
        with open(copy, "r+b") as f:
            for _ in range(8):
                f.seek(rng.randrange(100, size))
                f.write(bytes([rng.randrange(256)]))
        try:
            s = open_store(copy, read_only=True)
            s.load_book()
            s.load_market()
            s.close()
        except StoreError:
            refused += 1
    assert refused > 0


def test_a_value_the_schema_forbids_is_damage_in_a_read_only_open_too(tmp_book: Path) -> None:
    """SQLite's integrity_check skips CHECK constraints on a read-only database; the store
    checks such a book as a writable copy in memory, so a bad value is damage, not a traceback."""
    with open_store(tmp_book) as s:
        s.add_underlying("TSTA", "stock", "USD", 100)
        s.add_trade("main", "TSTA", 1, 2.0, "2030-06-21", 100, True, create_book=True)
    conn = sqlite3.connect(tmp_book, isolation_level=None)
    conn.execute("PRAGMA ignore_check_constraints = ON")  # as a flipped byte would leave it
    conn.execute(
        "INSERT INTO contract (underlying_id, option_type, strike, expiry, cutoff_time, american, "
        "multiplier, cash_settled) VALUES (1, 'P', 90, '2030-06-21', '1;:00', 1, 100, 0)"
    )
    conn.close()
    with pytest.raises(StoreError, match="is damaged"):
        open_store(tmp_book)
    with pytest.raises(StoreError, match="is damaged"):
        open_store(tmp_book, read_only=True)  # checked as a copy: CHECKs hold there


def test_new_book_and_its_side_files_are_not_open_to_other_users(tmp_path: Path) -> None:
    old = os.umask(0o000)  # the most permissive umask there is
    try:
        s = create_store(tmp_path / "new.db")
        s.add_underlying("TSTA", "stock", "USD", 100)
        backup = s.backup(tmp_path / "backup.db")
        for name in ("new.db", "new.db-wal", "new.db-shm", backup.name):
            mode = stat.S_IMODE((tmp_path / name).stat().st_mode)
            assert mode & 0o007 == 0, f"{name} is {oct(mode)}"
            assert mode & 0o600 == 0o600
        s.close()
    finally:
        os.umask(old)
    with pytest.raises(StoreError, match="already exists"):
        create_store(tmp_path / "new.db")


def test_demo_copy_goes_to_the_users_data_dir_once(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path / "data"))
    first = user_demo_copy()
    assert first == tmp_path / "data" / "blotter" / "demo.db"
    assert stat.S_IMODE(first.stat().st_mode) & 0o007 == 0
    with open_store(first) as s:
        s.log_spot("DEMOA", 1.0)
    assert user_demo_copy() == first  # not copied over again
    with open_store(first, read_only=True) as s:
        assert s.load_market().spots["DEMOA"] == 1.0
    shipped = st.shipped_demo_path()
    assert shipped.resolve() != first.resolve()


def test_backup_while_a_writer_commits_is_consistent(tmp_book: Path, tmp_path: Path) -> None:
    """RELIABILITY 14: an online backup taken during another process's commits restores whole,
    and holds exactly the marks and trades the live book held at the backup's newest row."""
    from store_children import add_underlyings, spawn

    with open_store(tmp_book) as s:
        add_underlyings(s)
    child = spawn("close_writer", str(tmp_book), "150")
    assert child.stdout is not None and child.stdout.readline().strip() == "ready"
    src = open_store(tmp_book, read_only=True)
    copies = []
    for i in range(3):
        while len(src.mark_sets("close")) < 30 * (i + 1) and child.poll() is None:
            time.sleep(0.01)
        copies.append(src.backup(tmp_path / f"backup{i}.db"))
    assert child.wait(120) == 0, child.stderr.read() if child.stderr else ""
    for copy in copies:
        with open_store(copy, read_only=True) as b:
            assert b.integrity_ok()
            market = b.load_market()
            assert market.version > 0
            again = src.load_market(as_of=market.marks_as_of)
            assert market.spots == again.spots and market.version == again.version
            for info in b.mark_sets("close"):
                assert (
                    b.load_market(info.id).surfaces["TSTA"].vols.tolist()
                    == src.load_market(info.id).surfaces["TSTA"].vols.tolist()
                )
            book = b.load_book()
            same = src.load_book(as_of=max(t.booked_at for t in b.trades()))
            assert dict(zip(book.labels, book.quantities, strict=False)) == dict(
                zip(same.labels, same.quantities, strict=False)
            )
    src.close()


@pytest.mark.parametrize("mode", ["ro", "rw"])
def test_a_full_disk_at_open_is_not_called_damage(demo_db: Path, mode: str) -> None:
    """RELIABILITY 10 at open: SQLite must create the -shm to read a WAL book, and a full disk
    (RLIMIT_FSIZE here, SQLITE_IOERR_SHMSIZE) refuses it. The book is sound, so the message
    says what is wrong and never advises a restore, which would throw away good data."""
    from store_children import spawn

    with open_store(demo_db) as s:  # leave the book in WAL mode with no side files
        s.load_book()
    assert not Path(f"{demo_db}-shm").exists()
    out, err = spawn("fsize_open", str(demo_db), mode).communicate(timeout=60)
    assert out.startswith("refused StoreError"), (out, err)
    assert "disk may be full" in out and "no sign of damage" in out
    assert "restore" not in out and "damaged" not in out
    with open_store(demo_db, read_only=True) as s:
        assert s.integrity_ok()
