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
    r = as_other_user("--db", str(book), "risk", "--json")
    assert r.returncode == 1, r.stderr
    assert "Traceback" not in r.stderr
    assert f"cannot write to the folder {book.parent}" in r.stderr
    assert "not damaged" in r.stderr and "restore" not in r.stderr
    assert book.read_bytes() == before
