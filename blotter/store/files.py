"""The files of a book on disk: what may be opened as one, creating and removing one, and where
the demo book is shipped and copied to.

A book is one SQLite file with its ``-wal`` and ``-shm`` side files beside it; they are created
with mode ``FILE_MODE`` (less the umask), never readable by other users.
"""

from __future__ import annotations

import os
import stat
from importlib import resources
from pathlib import Path

from blotter.store.errors import StoreError

FILE_MODE = 0o660
"""Permissions a new book is created with (before the umask): owner and group, never others."""

SOURCE_ROOT = Path(__file__).resolve().parents[2]
"""The top of a source checkout, where ``schema.sql`` and ``demo.db`` are when not installed."""

_FILE_KINDS = (
    (stat.S_ISFIFO, "a named pipe (FIFO)"),
    (stat.S_ISCHR, "a character device"),
    (stat.S_ISBLK, "a block device"),
    (stat.S_ISSOCK, "a socket"),
)
"""File types that are never a book, with their names in words."""


def packaged_file(*parts: str) -> Path:
    """A file shipped inside the installed package, else its place at the top of a checkout."""
    packaged = resources.files("blotter")
    for part in parts:
        packaged = packaged / part
    if packaged.is_file():
        return Path(str(packaged))
    return SOURCE_ROOT / parts[-1]


def check_book_path(p: Path) -> bool:
    """Whether ``p`` exists, refusing in words a path that cannot be a book: a folder, a FIFO or
    other special file (SQLite would wait forever reading a FIFO), or one behind a folder this
    user cannot search. Looks at the file type without opening the file."""
    for name in (str(p), f"{p}-wal", f"{p}-shm"):
        try:
            mode = os.stat(name).st_mode
        except FileNotFoundError:
            if name == str(p):
                return False
            continue
        except PermissionError:
            raise StoreError(
                f"cannot reach {name}: a folder on its path does not let you search it "
                "(permission denied); you need execute (x) permission on every folder down to "
                f"{p.absolute().parent}"
            ) from None
        except NotADirectoryError:
            raise StoreError(f"no book at {p}: part of the path is a file, not a folder") from None
        except OSError as exc:
            raise StoreError(f"cannot look at {name}: {exc.strerror}") from None
        if stat.S_ISDIR(mode):
            raise StoreError(f"{name} is a directory, not a book file")
        for test, words in _FILE_KINDS:
            if test(mode):
                raise StoreError(f"{name} is {words}, not a book file; nothing was read")
    return True


def create_empty(p: Path) -> None:
    """Create the empty file ``p`` with ``FILE_MODE``, refusing in words anything already there
    (a book is never created over another file)."""
    try:
        os.lstat(p)
    except FileNotFoundError:
        pass
    except OSError as exc:  # e.g. a folder on the path that this user cannot search
        raise StoreError(f"cannot create {p}: {exc.strerror}") from None
    else:
        raise StoreError(f"{p} already exists; choose another path")
    try:
        fd = os.open(p, os.O_WRONLY | os.O_CREAT | os.O_EXCL, FILE_MODE)
    except FileNotFoundError:
        raise StoreError(f"cannot create {p}: the directory {p.parent} does not exist") from None
    except OSError as exc:
        raise StoreError(f"cannot create {p}: {exc.strerror}") from None
    os.close(fd)


def remove_book_files(p: Path) -> None:
    """Remove the book file ``p`` and its ``-wal`` and ``-shm`` files, those that exist."""
    for suffix in ("", "-wal", "-shm"):
        try:
            os.unlink(f"{p}{suffix}")
        except FileNotFoundError:
            pass


def shipped_demo_path() -> Path:
    """The demo book shipped with the package (inside the wheel, or at the top of a checkout)."""
    return packaged_file("data", "demo.db")


def is_shipped_demo(p: Path) -> bool:
    """Whether ``p`` is the shipped demo file itself (which nothing ever writes)."""
    try:
        return p.resolve() == shipped_demo_path().resolve()
    except OSError:
        return False


def user_data_dir() -> Path:
    """``$XDG_DATA_HOME/blotter``, else ``~/.local/share/blotter``."""
    base = os.environ.get("XDG_DATA_HOME") or os.path.join(
        os.path.expanduser("~"), ".local", "share"
    )
    return Path(base) / "blotter"


def user_demo_copy() -> Path:
    """The user's own copy of the shipped demo book, copied on first use (never the package's file).

    The copy goes to a temporary name in the user's data directory (mode 0o700) and is renamed
    into place, so a half-written copy is never opened.
    """
    target = user_data_dir() / "demo.db"
    if target.exists():
        return target
    source = shipped_demo_path()
    if not source.is_file() or source.stat().st_size == 0:
        raise StoreError(
            f"the shipped demo book {source} is missing; run `blotter demo --out "
            f"{target}` to make one"
        )
    target.parent.mkdir(parents=True, exist_ok=True, mode=0o700)
    tmp = target.with_name(f".demo.db.{os.getpid()}.tmp")
    try:
        fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_TRUNC, FILE_MODE)
        with os.fdopen(fd, "wb") as out, open(source, "rb") as src:
            while chunk := src.read(1 << 20):
                out.write(chunk)
            out.flush()
            os.fsync(out.fileno())
        os.replace(tmp, target)
    finally:
        if tmp.exists():
            tmp.unlink()
    return target
