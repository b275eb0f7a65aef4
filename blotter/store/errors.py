"""What the store refuses, in words the user can act on: the ``StoreError`` family, and how an
``sqlite3`` error is said to them.

Every refusal leaves the book as it was: a write that fails is rolled back whole.
"""

from __future__ import annotations

import logging
import os
import pwd
import sqlite3
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

from blotter.logs import STORE, logger

log = logger(STORE)

MAX_PROBLEMS = 20
"""How many problems an import lists at once."""


class StoreError(Exception):
    """A problem the user can fix (bad input, missing or foreign file); nothing was written."""


class ReadOnlyError(StoreError):
    """A write was attempted on a book opened read-only."""

    def __init__(self, message: str = "the book is open read-only: nothing can be written") -> None:
        super().__init__(message)


class NotWritableError(ReadOnlyError):
    """The user's permissions do not let them write the book (or the folder its -wal and -shm
    files go in); nothing was written. ``why`` says which file, in words."""

    def __init__(self, why: str) -> None:
        super().__init__(f"{why}; nothing was written")
        self.why = why


class SchemaUpgradeNeeded(StoreError):
    """A read-only open found an older schema; a read-write open would migrate it."""

    def __init__(self, message: str, version: int) -> None:
        super().__init__(message)
        self.version = version


class BusyError(StoreError):
    """Another process held the write lock longer than the busy timeout; nothing was written."""


@dataclass(frozen=True)
class Problem:
    """One refused cell or line of an imported file: its line, its column ('' for the whole line)
    and what is wrong, in words."""

    line: int
    column: str
    message: str

    def __str__(self) -> str:
        where = f"line {self.line}" + (f", column {self.column!r}" if self.column else "")
        return f"{where}: {self.message}"


class CsvImportError(StoreError):
    """An import refused: ``problems`` lists (line, column, message) for up to ``MAX_PROBLEMS``."""

    def __init__(self, path: Path, problems: Sequence[Problem], total: int) -> None:
        self.path = path
        self.problems = list(problems)
        self.total = total
        lines = [f"{path.name}: nothing imported; {total} problem{'s' if total != 1 else ''}:"]
        lines += [f"  {p}" for p in self.problems]
        if total > len(self.problems):
            lines.append(f"  ... and {total - len(self.problems)} more")
        super().__init__("\n".join(lines))


def raise_if(path: Path, problems: list[Problem]) -> None:
    """Raise ``CsvImportError`` naming the first ``MAX_PROBLEMS`` of ``problems``, if any."""
    if problems:
        raise CsvImportError(path, problems[:MAX_PROBLEMS], len(problems))


def sql_error(exc: sqlite3.Error, path: Path | str | None = None) -> StoreError:
    """A ``StoreError`` saying in plain words what an ``sqlite3`` error means for the user,
    logged with SQLite's own code (a busy book as a warning, anything else as an error)."""
    return log_refusal(_said(exc, path), exc)


def log_refusal(error: StoreError, exc: BaseException) -> StoreError:
    """``error``, logged with the words and code of ``exc`` (a busy book as a warning)."""
    code = getattr(exc, "sqlite_errorname", "") or type(exc).__name__
    log.log(
        logging.WARNING if isinstance(error, BusyError) else logging.ERROR,
        "%s [%s: %s]", error, code, exc,
    )
    return error


def _said(exc: sqlite3.Error, path: Path | str | None) -> StoreError:
    """``sql_error``'s words for ``exc``."""
    name = getattr(exc, "sqlite_errorname", "") or ""
    text = str(exc)
    where = f"{path}: " if path else ""
    if name.startswith("SQLITE_BUSY") or "database is locked" in text:
        return BusyError(
            f"{where}the book is busy (another process is writing to it); "
            "nothing was written, try again"
        )
    if name.startswith("SQLITE_READONLY") or "readonly database" in text:
        why = not_writable(Path(path)) if path is not None else None
        if why is not None:
            return NotWritableError(why)
        return ReadOnlyError()
    if isinstance(exc, sqlite3.IntegrityError):
        return StoreError(f"{where}refused by the book: {text}")
    if name == "SQLITE_FULL" or name.startswith("SQLITE_IOERR"):
        return StoreError(
            f"{where}the disk or file system refused SQLite ({name}: {text}): the disk may be "
            "full, or a file may not be writable for you; nothing was written, and this is no "
            "sign of damage to the book. Free some space or fix the permissions, then retry"
        )
    if name.startswith("SQLITE_CORRUPT") or name == "SQLITE_NOTADB" or "not a database" in text:
        return StoreError(
            f"{where}the file is not a readable blotter book ({text}); restore it from a backup"
        )
    if name.startswith("SQLITE_CANTOPEN"):
        return StoreError(f"{where}cannot open the book ({text})")
    return StoreError(f"{where}{text}")


def open_error(exc: sqlite3.Error | UnicodeDecodeError, path: Path) -> StoreError:
    """What an error on a book's first reads means: damage only for SQLite's corruption codes;
    logged as ``sql_error`` logs."""
    return log_refusal(_open_said(exc, path), exc)


def _open_said(exc: sqlite3.Error | UnicodeDecodeError, path: Path) -> StoreError:
    """``open_error``'s words for ``exc``."""
    if isinstance(exc, UnicodeDecodeError):
        return StoreError(f"{path} is damaged ({exc}); restore it from a backup")
    name = getattr(exc, "sqlite_errorname", "") or ""
    if name == "SQLITE_NOTADB" or "not a database" in str(exc):
        return StoreError(f"{path} is not a blotter book (SQLite: {exc})")
    if name.startswith("SQLITE_CORRUPT"):
        return StoreError(f"{path} is damaged ({exc}); restore it from a backup")
    folder = path.absolute().parent
    if (
        name.startswith(("SQLITE_READONLY", "SQLITE_CANTOPEN"))
        and not os.path.lexists(f"{path}-shm")
        and not os.access(folder, os.W_OK)
    ):
        return StoreError(
            f"cannot read {path}: SQLite reads a book through its shared-memory file "
            f"{path.name}-shm, which does not exist, and you cannot create it because you "
            f"cannot write to the folder {folder}. The book is not damaged: make the folder "
            "writable for you, or read a copy kept in a folder you can write to"
        )
    return _said(exc, path)


def _side_file_words(path: Path, side: str) -> str:
    """Why a book this user may write cannot be written: its side file ``side`` (-wal or -shm)
    belongs to another user, typically a read-only viewer that made it (SQLite creates them for
    every reader, with the book's mode but the reader's owner)."""
    try:
        owner = pwd.getpwuid(os.stat(side).st_uid).pw_name
    except (KeyError, OSError):
        owner = "another user"
    return (
        f"you cannot write to {side}, which belongs to {owner} (SQLite makes it for whoever "
        f"opens the book first, a read-only viewer too). Once nobody has {path.name} open, "
        f"{owner} or an administrator can remove {path.name}-wal and {path.name}-shm (they hold "
        "nothing then); to share a book, keep it in a folder owned by the desk's group with "
        "the setgid bit, and the file group-writable"
    )


def not_writable(path: Path) -> str | None:
    """Words for the first of the book, its -wal and -shm files and (while those are absent) its
    folder that this user cannot write; None when nothing stands in the way of a write."""
    for name in (str(path), f"{path}-wal", f"{path}-shm"):
        if os.path.lexists(name) and not os.access(name, os.W_OK):
            if name != str(path) and os.access(str(path), os.W_OK):
                return _side_file_words(path, name)
            return f"you cannot write to {name}"
    folder = path.absolute().parent
    sides = os.path.lexists(f"{path}-wal") and os.path.lexists(f"{path}-shm")
    if not sides and not os.access(folder, os.W_OK):
        return (
            f"you cannot write to the folder {folder}, where SQLite keeps {path.name}-wal and "
            f"{path.name}-shm while {path.name} is written"
        )
    return None
