"""Books the user may not write or reach, and paths that are not books: clear words, no traceback,
and never a restore advised for a sound book.

Permission bits bind only a user who is not root, so these run ``blotter`` in a new process as
another user (``as_other_user`` in ``tests/conftest.py``: ``nobody`` through ``setpriv`` when the
tests run as root). SQLite's own rules: a WAL book is read through its ``-shm`` file, which a
reader must be able to create when it is missing (wal.html §5, "read-only databases").
"""

from __future__ import annotations

import shutil
import subprocess
from collections.abc import Callable
from pathlib import Path

RunAs = Callable[..., "subprocess.CompletedProcess[str]"]


def _book_in(folder: Path, demo_db: Path) -> Path:
    folder.mkdir(mode=0o755)
    book = folder / "book.db"
    shutil.copyfile(demo_db, book)
    book.chmod(0o644)
    return book


def test_a_viewer_in_a_folder_it_cannot_write_is_told_why_not_to_restore(
    demo_db: Path, shared_dir: Path, as_other_user: RunAs
) -> None:
    book = _book_in(shared_dir / "desk", demo_db)
    book.parent.chmod(0o555)
    assert not Path(f"{book}-shm").exists()
    before = book.read_bytes()
    r = as_other_user("-m", "blotter", "--db", str(book), "risk", "--json")
    assert r.returncode == 1, r.stderr
    assert "Traceback" not in r.stderr
    assert f"cannot write to the folder {book.parent}" in r.stderr
    assert "not damaged" in r.stderr and "restore" not in r.stderr
    assert book.read_bytes() == before


def test_a_book_the_user_cannot_write_is_refused_by_writes_in_those_words(
    demo_db: Path, shared_dir: Path, as_other_user: RunAs
) -> None:
    """Readable, not writable, in a folder the user may write: SQLite opens it read-only without
    a word, and a write used to be refused as if the user had asked for read-only."""
    book = _book_in(shared_dir / "desk", demo_db)
    book.parent.chmod(0o777)
    book.chmod(0o444)
    before = book.read_bytes()
    db = ("-m", "blotter", "--db", str(book))
    for args in [
        ("mark", "spot", "DEMOA", "181"),
        ("trade", "add", "DEMOA", "--qty", "1", "--price", "1", "--book", "equity-vol"),
        ("trade", "cancel", "1", "--reason", "test"),
        ("mark", "close"),
    ]:
        r = as_other_user(*db, *args)
        assert r.returncode == 1, (args, r.stdout, r.stderr)
        assert f"you cannot write to {book}; nothing was written" in r.stderr, args
        assert "open read-only" not in r.stderr and "Traceback" not in r.stderr
    assert as_other_user(*db, "trade", "list", "--json").returncode == 0  # reading still works
    code = (
        "import sys; from blotter.commands.app import check_book; from blotter.config import "
        "Settings; s, notice = check_book(sys.argv[1], Settings()); print(s.read_only, notice)"
    )
    r = as_other_user("-c", code, str(book))
    assert r.stdout.strip() == f"True you cannot write to {book}; opened read-only", r.stderr
    assert book.read_bytes() == before


def test_a_book_behind_a_folder_the_user_cannot_search_is_named_not_a_traceback(
    demo_db: Path, shared_dir: Path, as_other_user: RunAs
) -> None:
    book = _book_in(shared_dir / "private", demo_db)
    book.parent.chmod(0o600)  # readable listing, but no search (x) permission
    for args in [
        ("--db", str(book), "trade", "list"),
        ("--db", str(book), "mark", "spot", "DEMOA", "181"),
        ("--db", str(book), "risk"),
        ("create", str(book.parent / "new.db")),
        ("demo", "--out", str(book.parent / "new.db")),
    ]:
        r = as_other_user("-m", "blotter", *args)
        assert r.returncode == 1, (args, r.stdout, r.stderr)
        assert "Traceback" not in r.stderr, (args, r.stderr)
        assert "cannot reach" in r.stderr or "Permission denied" in r.stderr, (args, r.stderr)


def test_a_fifo_is_refused_without_being_read(tmp_path: Path, demo_db: Path) -> None:
    """Opening a FIFO for reading waits for a writer, so SQLite hung on it; the file type is
    looked at first. Each command runs in its own process with a timeout, so the old hang fails
    the test instead of stopping the suite."""
    import os
    import sys

    fifo = tmp_path / "pipe.db"
    os.mkfifo(fifo)
    wal = Path(f"{demo_db}-wal")  # a FIFO where SQLite would open the book's -wal
    os.mkfifo(wal)
    for db, named in [(fifo, fifo), (demo_db, wal)]:
        for args in [("risk",), ("trade", "list"), ("mark", "spot", "DEMOA", "1"), ("explain",)]:
            r = subprocess.run(
                [sys.executable, "-m", "blotter", "--db", str(db), *args],
                capture_output=True,
                text=True,
                timeout=30,
                check=False,
            )
            assert r.returncode == 1, (args, r.stderr)
            assert f"{named} is a named pipe (FIFO), not a book file" in r.stderr, r.stderr


def test_side_files_another_user_left_are_named_with_their_owner(
    demo_db: Path, shared_dir: Path, as_other_user: RunAs
) -> None:
    """A reader makes the book's -wal and -shm with the book's mode but its own owner, so the
    book's owner may find them in the way of a write: the refusal names the owner of the file
    and what to do, instead of calling the book read-only."""
    import os
    import pwd

    import pytest

    from tests.conftest import OTHER_UID

    if os.geteuid() != 0:
        pytest.skip("needs root to give the book and its side files different owners")
    book = _book_in(shared_dir / "desk", demo_db)
    book.parent.chmod(0o1777)
    os.chown(book, OTHER_UID, OTHER_UID)  # the book's owner: the other user
    for side in ("-wal", "-shm"):  # left by a viewer, root here: the book's mode, root's owner
        Path(f"{book}{side}").write_bytes(b"")
        Path(f"{book}{side}").chmod(0o644)
    before = book.read_bytes()
    r = as_other_user("-m", "blotter", "--db", str(book), "mark", "spot", "DEMOA", "181")
    assert r.returncode == 1, (r.stdout, r.stderr)
    assert "Traceback" not in r.stderr
    viewer = pwd.getpwuid(0).pw_name
    assert f"{book}-wal, which belongs to {viewer}" in r.stderr, r.stderr
    assert "remove book.db-wal and book.db-shm" in r.stderr
    assert book.read_bytes() == before
