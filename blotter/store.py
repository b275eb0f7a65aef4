"""The SQLite book: trades and marks in one file that loses nothing, read as ``Book``/``Market``.

``schema.sql`` is the only definition of the database. Every connection runs with
``isolation_level=None`` (no implicit transactions), a busy timeout, foreign keys on,
``recursive_triggers`` on, ``synchronous=FULL`` and ``trusted_schema=OFF``; every write goes
through one helper that runs ``BEGIN IMMEDIATE`` ... ``COMMIT`` and rolls back on any error,
so no call leaves a transaction open. Read-only stores open the file by URI ``mode=ro`` with
``query_only`` on and ATTACH disabled. Each thread that uses a ``Store`` gets its own connection.

A read-only viewer writes nothing and creates no file, with one exception SQLite imposes: a WAL
reader needs the ``-shm`` index, so when the book's ``-wal``/``-shm`` files are absent and the
directory is writable, SQLite creates them (empty of data; the book file's bytes are unchanged).

Durability: ``synchronous=FULL`` on every write, so a committed trade or close mark survives a
power cut as well as a crash (WAL with NORMAL may lose the last commits on power loss). Writes
are human-paced and an import is one transaction, so the extra sync per commit (a fraction of a
millisecond on the project's machines) costs nothing a user can see.

Units: prices are per unit of underlying as quoted (a trade's cash is quantity x multiplier x
price); vols, rates and dividend yields are decimals (0.25 = 25%); rates are continuously
compounded zero rates by tenor in calendar days; instants are UTC.
"""

from __future__ import annotations

import csv
import functools
import getpass
import hashlib
import io
import os
import pwd
import re
import sqlite3
import stat
import threading
from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager
from dataclasses import dataclass
from datetime import UTC, date, datetime, time
from importlib import resources
from pathlib import Path
from typing import Any, TypeVar
from urllib.parse import quote
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

import numpy as np

from blotter import calendar as cal
from blotter import limits
from blotter.book import UNDERLYING_KINDS, Book, Underlyings
from blotter.market import Market, RateCurve, VolSurface
from blotter.scenario.grammar import MOVE_WORDS, SYMBOL_PATTERN

APPLICATION_ID = 0x426C7472
"""``PRAGMA application_id`` of a blotter book ("Bltr"), so a foreign SQLite file is recognised."""

BUSY_TIMEOUT_MS = 5000
"""How long a write waits for another writer before giving up with ``BusyError``, milliseconds."""

DEFAULT_BOOK = "main"
"""Book a trade goes to when none is named."""

FILE_MODE = 0o660
"""Permissions a new book is created with (before the umask): owner and group, never others."""

MAX_PROBLEMS = 20
"""How many problems an import lists at once."""

PROGRESS_EVERY = 1000
"""An import calls its ``progress`` callback after this many rows are written."""

MARK_KINDS = ("spot", "vol", "rate", "div_yield")
"""Kinds of mark point; see ``schema.sql`` for what each holds."""

TRADE_COLUMNS = (
    "book",
    "symbol",
    "type",
    "expiry",
    "strike",
    "quantity",
    "price",
    "trade_time",
    "style",
    "multiplier",
    "settlement",
    "note",
)
"""Columns of the trade CSV format, in the order ``trade list --csv`` prints them."""

TRADE_INFO_COLUMNS = ("trade_id", "state", "who", "source", "booked_at", "contract")
"""Columns ``trade list --csv`` adds after the import columns; an import ignores them, except that
``state`` must be ``live`` and a ``trade_id`` must not be a trade already in the book (that row
is an export of it: importing it again would double the position)."""

TRADE_REQUIRED = ("book", "symbol", "type", "quantity", "price", "trade_time")
"""Trade CSV columns that must be present (the others may be left out)."""

MARK_COLUMNS = ("kind", "symbol", "currency", "expiry", "strike", "tenor_days", "value")
"""Columns of the mark CSV format, in the order ``mark list --csv`` prints them."""

MARK_INFO_COLUMNS = ("mark_id", "mark_set_id", "set_kind", "marked_at", "who")
"""Columns ``mark list --csv`` adds after the import columns; an import ignores them."""

MARK_REQUIRED = ("kind", "value")
"""Mark CSV columns that must be present."""

_EPOCH = datetime(1970, 1, 1, tzinfo=UTC)
_TS_FORMAT = "%Y-%m-%dT%H:%M:%S.%fZ"
_SECTION = re.compile(r"^-- @version (\d+)\b", re.MULTILINE)


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


# --------------------------------------------------------------------------------------------
# Records returned to callers (plain values; never cursors or row dicts)


@dataclass(frozen=True)
class MarkSetInfo:
    """One mark set: ``marked_at`` is a UTC datetime; ``corrects`` the close set it corrects."""

    id: int
    kind: str  # 'close' or 'intraday'
    marked_at: datetime
    who: str
    note: str
    corrects: int | None
    source: str = ""
    marks: int = 0  # number of mark points in the set
    superseded_by: int | None = None  # the close set that corrects this one, if any
    business_date: date | None = None  # the desk date a close set closes (None: intraday)
    seq: int = 0  # the set's place in the store's own order of history


@dataclass(frozen=True)
class TradeRecord:
    """One trade row with its contract and state. Price per unit of underlying; times UTC."""

    trade_id: int
    book: str
    contract_id: int
    contract: str  # label, e.g. "DEMOA 2027-03-19 105 C"
    symbol: str
    option_type: str  # 'C', 'P' or 'U' (the underlying itself)
    expiry: date | None
    strike: float | None
    american: bool
    multiplier: float
    cash_settled: bool
    quantity: int
    price: float
    trade_time: datetime
    booked_at: datetime
    who: str
    source: str
    note: str
    state: str  # 'live', 'cancelled' or 'amended'
    replaces: int | None = None
    replaced_by: int | None = None
    cancel_reason: str | None = None
    cancelled_at: datetime | None = None
    cancelled_by: str | None = None
    seq: int = 0  # the trade's place in the store's own order of history
    cancel_seq: int | None = None  # its cancel's place in that order, if cancelled


@dataclass(frozen=True)
class ContractRecord:
    """One contract: ``option_type`` 'C', 'P' or 'U'; ``cutoff_utc`` the expiry instant or None."""

    contract_id: int
    symbol: str
    option_type: str
    expiry: date | None
    strike: float | None
    cutoff_time: str | None  # local exchange time 'HH:MM'
    american: bool
    multiplier: float
    cash_settled: bool
    label: str
    cutoff_utc: datetime | None


@dataclass(frozen=True)
class MarkRecord:
    """One mark point as stored; ``value`` is a price for spot, else a decimal."""

    mark_id: int
    mark_set_id: int
    set_kind: str
    marked_at: datetime
    who: str
    kind: str
    symbol: str | None
    currency: str | None
    expiry: date | None
    strike: float | None
    tenor_days: int | None
    value: float


@dataclass(frozen=True)
class ImportReport:
    """What an import wrote: ``first_id``..``last_id`` are trade ids, or the mark set id twice."""

    path: Path
    kind: str  # 'trades' or 'marks'
    rows: int
    import_id: int
    first_id: int
    last_id: int


@dataclass(frozen=True)
class _Problem:
    line: int
    column: str
    message: str

    def __str__(self) -> str:
        where = f"line {self.line}" + (f", column {self.column!r}" if self.column else "")
        return f"{where}: {self.message}"


class CsvImportError(StoreError):
    """An import refused: ``problems`` lists (line, column, message) for up to ``MAX_PROBLEMS``."""

    def __init__(self, path: Path, problems: Sequence[_Problem], total: int) -> None:
        self.path = path
        self.problems = list(problems)
        self.total = total
        lines = [f"{path.name}: nothing imported; {total} problem{'s' if total != 1 else ''}:"]
        lines += [f"  {p}" for p in self.problems]
        if total > len(self.problems):
            lines.append(f"  ... and {total - len(self.problems)} more")
        super().__init__("\n".join(lines))


# --------------------------------------------------------------------------------------------
# Schema sections and connections


def schema_path() -> Path:
    """``schema.sql``: inside the installed package, else at the top of a source checkout."""
    packaged = resources.files("blotter") / "schema.sql"
    if packaged.is_file():
        return Path(str(packaged))
    return Path(__file__).resolve().parent.parent / "schema.sql"


def schema_sections(text: str | None = None) -> dict[int, list[str]]:
    """The statements of each ``-- @version N`` section of ``schema.sql``, by version."""
    if text is None:
        text = schema_path().read_text(encoding="utf-8")
    marks = list(_SECTION.finditer(text))
    out: dict[int, list[str]] = {}
    for i, m in enumerate(marks):
        end = marks[i + 1].start() if i + 1 < len(marks) else len(text)
        out[int(m.group(1))] = _split_statements(text[m.end() : end])
    if not out:
        raise StoreError(f"{schema_path()} has no '-- @version N' sections")
    return out


def _split_statements(sql: str) -> list[str]:
    """SQL text split into complete statements (trigger bodies kept whole), comments dropped."""
    statements: list[str] = []
    buf: list[str] = []
    for line in sql.splitlines():
        stripped = line.strip()
        if not buf and (not stripped or stripped.startswith("--")):
            continue
        buf.append(line)
        joined = "\n".join(buf)
        if sqlite3.complete_statement(joined):
            statements.append(joined.strip())
            buf = []
    if "\n".join(buf).strip():
        raise StoreError("schema.sql ends inside a statement")
    return statements


SCHEMA_VERSION = max(schema_sections())
"""The schema version this code writes (the last section of ``schema.sql``)."""


def _uri(path: Path, mode: str) -> str:
    return f"file:{quote(str(path.absolute()))}?mode={mode}"


def _connect(path: Path, read_only: bool, mode: str | None = None) -> sqlite3.Connection:
    """A configured connection (see the module docstring); ``mode`` overrides the URI mode."""
    uri = _uri(path, mode or ("ro" if read_only else "rw"))
    conn = sqlite3.connect(
        uri, uri=True, timeout=BUSY_TIMEOUT_MS / 1000, isolation_level=None, check_same_thread=False
    )
    try:
        conn.setlimit(sqlite3.SQLITE_LIMIT_ATTACHED, 0)
        conn.execute(f"PRAGMA busy_timeout = {BUSY_TIMEOUT_MS:d}")
        conn.execute("PRAGMA foreign_keys = ON")
        conn.execute("PRAGMA recursive_triggers = ON")  # REPLACE fires the no-delete triggers
        conn.execute("PRAGMA trusted_schema = OFF")
        conn.execute("PRAGMA mmap_size = 0")
        if read_only:
            conn.execute("PRAGMA query_only = ON")
        else:
            conn.execute("PRAGMA synchronous = FULL")
    except BaseException:
        conn.close()
        raise
    return conn


def _map_error(exc: sqlite3.Error, path: Path | None = None) -> StoreError:
    """A ``StoreError`` saying in plain words what an ``sqlite3`` error means for the user."""
    name = getattr(exc, "sqlite_errorname", "") or ""
    text = str(exc)
    where = f"{path}: " if path else ""
    if name.startswith("SQLITE_BUSY") or "database is locked" in text:
        return BusyError(
            f"{where}the book is busy (another process is writing to it); "
            "nothing was written, try again"
        )
    if name.startswith("SQLITE_READONLY") or "readonly database" in text:
        why = _not_writable(path) if path is not None else None
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


def _now() -> datetime:
    return datetime.now(UTC)


def _ts(t: datetime) -> str:
    """UTC ISO-8601 text with microseconds and Z, the store's instant format."""
    if t.tzinfo is None:
        raise StoreError(f"time {t.isoformat()} has no time zone: give Z for UTC or an offset")
    return t.astimezone(UTC).strftime(_TS_FORMAT)


def _from_ts(text: str) -> datetime:
    return datetime.strptime(text, _TS_FORMAT).replace(tzinfo=UTC)


def business_date(t: datetime, tz: ZoneInfo) -> date:
    """The business date a close at instant ``t`` closes: its date in the desk's time zone ``tz``.

    A close at 16:30 New York on 2026-12-03 closes 2026-12-03, though it is 21:30 UTC.
    """
    return t.astimezone(tz).date()


def _schema_functions(conn: sqlite3.Connection, tz: ZoneInfo) -> None:
    """Functions ``schema.sql``'s upgrade statements call (never its triggers, which any SQLite
    client must be able to run): ``desk_date(instant)``, a stored instant's business date, and
    ``desk_zone()``, the zone the book's closes are dated in from now on."""

    def desk_date(text: str | None) -> str | None:
        return None if text is None else business_date(_from_ts(text), tz).isoformat()

    conn.create_function("desk_date", 1, desk_date, deterministic=True)
    conn.create_function("desk_zone", 0, lambda: tz.key, deterministic=True)


def _book_zone(conn: sqlite3.Connection, path: Path) -> ZoneInfo:
    """The desk zone the book at ``path`` dates its closes in (``book_zone``, written with it)."""
    row = conn.execute("SELECT zone FROM book_zone").fetchone()
    if row is None:
        raise StoreError(f"{path} names no desk time zone (its book_zone row is missing)")
    try:
        return ZoneInfo(str(row[0]))
    except (ZoneInfoNotFoundError, ValueError):
        raise StoreError(
            f"{path} dates its closes in {row[0]!r}, a time zone this machine does not know"
        ) from None


def parse_time(value: datetime | str) -> datetime:
    """An aware UTC datetime from ISO-8601 text with ``Z`` or an offset (naive time refused)."""
    if isinstance(value, datetime):
        t = value
    else:
        text = value.strip()
        if text[-1:] in ("Z", "z"):
            text = text[:-1] + "+00:00"
        try:
            t = datetime.fromisoformat(text)
        except ValueError:
            raise StoreError(
                f"{value!r} is not an ISO-8601 time like 2026-12-01T15:30:00Z"
            ) from None
    if t.tzinfo is None:
        raise StoreError(f"time {value!s} has no time zone: add Z for UTC or an offset like -05:00")
    _within_time(t)
    return t.astimezone(UTC)


def parse_date(value: date | str, field: str = "date") -> date:
    """A date from ISO text ``YYYY-MM-DD``, within ``limits`` (``field`` names it if not)."""
    if isinstance(value, datetime):
        raise StoreError(f"expected a date, got the time {value.isoformat()}")
    if isinstance(value, date):
        d = value
    else:
        try:
            if not re.fullmatch(r"\d{4}-\d{2}-\d{2}", value.strip()):
                raise ValueError
            d = date.fromisoformat(value.strip())
        except ValueError:
            raise StoreError(f"{value!r} is not an ISO date like 2027-03-19") from None
    try:
        return limits.check_date(d, field)
    except limits.LimitError as exc:
        raise StoreError(str(exc)) from None


def who_am_i() -> str:
    """The OS user, recorded as ``who`` on every row this process writes."""
    try:
        return getpass.getuser() or "unknown"
    except Exception:  # getpass raises when no user name can be found (e.g. no passwd entry)
        return f"uid{os.getuid()}"


def contract_label(
    symbol: str, option_type: str, expiry: str | date | None, strike: float | None
) -> str:
    """Human label of a contract, e.g. ``DEMOA 2027-03-19 105 C``; the underlying alone for 'U'."""
    if option_type == "U":
        return symbol
    return f"{symbol} {expiry} {strike:.10g} {option_type}"


def hedge_multiplier(kind: str, option_multiplier: float) -> float:
    """Default units per contract of a trade in the underlying itself: a stock, index or FX
    quantity counts units (1), a future's counts contracts (the underlying's multiplier)."""
    return float(option_multiplier) if kind == "future" else 1.0


def preview_contract(
    underlying: dict[str, Any],
    expiry: date | str | None,
    strike: float | None,
    is_call: bool | None,
    contract_id: int,
) -> ContractRecord:
    """The contract ``add_trade`` would create for these terms with the underlying's defaults,
    built without touching the file (for a trial trade on a contract the store does not know).

    ``underlying`` is a row of ``Store.underlying_records``; ``contract_id`` is the caller's own
    (negative for trials, so it never meets a stored id). StoreError for terms ``add_trade``
    would refuse."""
    opt_type, exp_text, k = _contract_terms(expiry, strike, is_call)
    cutoff = None if opt_type == "U" else str(underlying["cutoff_time"])
    symbol = str(underlying["symbol"])
    return ContractRecord(
        contract_id=contract_id,
        symbol=symbol,
        option_type=opt_type,
        expiry=date.fromisoformat(exp_text) if exp_text else None,
        strike=k,
        cutoff_time=cutoff,
        american=bool(underlying["american"]),
        multiplier=hedge_multiplier(str(underlying["kind"]), float(underlying["multiplier"]))
        if opt_type == "U"
        else float(underlying["multiplier"]),
        cash_settled=bool(underlying["cash_settled"]),
        label=contract_label(symbol, opt_type, exp_text, k),
        cutoff_utc=_cutoff_utc(exp_text, cutoff, str(underlying["time_zone"]))
        if exp_text and cutoff
        else None,
    )


def _cutoff_utc(expiry: str, cutoff: str, tz_name: str) -> datetime:
    hh, mm = (int(x) for x in cutoff.split(":"))
    local = datetime.combine(date.fromisoformat(expiry), time(hh, mm), tzinfo=ZoneInfo(tz_name))
    return local.astimezone(UTC)


def _open_error(exc: sqlite3.Error | UnicodeDecodeError, path: Path) -> StoreError:
    """What an error on a book's first reads means: damage only for SQLite's corruption codes."""
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
    return _map_error(exc, path)


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


def _not_writable(path: Path) -> str | None:
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


_FILE_KINDS = (
    (stat.S_ISFIFO, "a named pipe (FIFO)"),
    (stat.S_ISCHR, "a character device"),
    (stat.S_ISBLK, "a block device"),
    (stat.S_ISSOCK, "a socket"),
)
"""File types that are never a book, with their names in words."""


def _check_book_path(p: Path) -> bool:
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


_CHECKED: dict[str, tuple[Any, ...]] = {}
"""Per book path, the file state (``_file_state``) that last passed ``_check_file``."""

_CHECK_LOCK = threading.Lock()
"""Held while a book is checked, so threads opening one unchanged file check it once."""


def _file_state(path: Path) -> tuple[Any, ...]:
    """Device, inode, size and modification time of the book and of its -wal file (None when
    absent), and the book's ctime: a commit changes the -wal, and a book replaced or rewritten
    changes its inode or ctime (which no tool can set back). The -wal's ctime is left out: SQLite
    changes its owner and mode when it opens it, which changes the ctime without a write."""
    state: list[Any] = []
    for name in (str(path), f"{path}-wal"):
        try:
            st = os.stat(name)
        except FileNotFoundError:
            state.append(None)
            continue
        ctime = st.st_ctime_ns if name == str(path) else None
        state.append((st.st_dev, st.st_ino, st.st_size, st.st_mtime_ns, ctime))
    return tuple(state)


def integrity_problems(conn: sqlite3.Connection) -> list[str]:
    """``PRAGMA integrity_check`` of a snapshot of ``conn``'s book, with CHECK constraints.

    SQLite parses no CHECK constraint for a database it opened read-only, so a viewer's own
    integrity_check cannot see a value its schema forbids; the snapshot (taken by the backup
    API in one read transaction) is an in-memory database, where they are checked. Returns
    ``["ok"]`` for a sound book. Costs about the file's size in memory while it runs.
    """
    mem = sqlite3.connect(":memory:", isolation_level=None)
    try:
        mem.execute("PRAGMA trusted_schema = OFF")
        conn.backup(mem)
        return [str(r[0]) for r in mem.execute("PRAGMA integrity_check")]
    finally:
        mem.close()


def _check_file(conn: sqlite3.Connection, path: Path) -> None:
    """Refuse a damaged book: ``integrity_problems`` on open, once per file state per process.

    quick_check would miss the two kinds of damage that left a book readable with wrong totals:
    index entries that no longer match their rows (a lookup then finds the wrong row) and
    values outside their CHECK constraints (see DEVELOPERS.md, Decisions: the open check).
    """
    key = str(path.absolute())
    with _CHECK_LOCK:
        state = _file_state(path)
        if _CHECKED.get(key) == state:
            return
        try:
            problems = integrity_problems(conn)
        except (sqlite3.Error, UnicodeDecodeError) as exc:
            raise _open_error(exc, path) from None
        if problems != ["ok"]:
            raise StoreError(
                f"{path} is damaged (SQLite's integrity check: {'; '.join(problems[:3])}); "
                "restore it from a backup"
            )
        _CHECKED[key] = state


def _open_checks(conn: sqlite3.Connection, path: Path, verify: bool) -> int:
    """Refuse a foreign, empty, damaged or too-new file; return its schema version."""
    try:
        app_id = conn.execute("PRAGMA application_id").fetchone()[0]
        version = conn.execute("PRAGMA user_version").fetchone()[0]
        tables = {r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
    except (sqlite3.Error, UnicodeDecodeError) as exc:
        raise _open_error(exc, path) from None
    if app_id != APPLICATION_ID:
        if not tables and version == 0:
            raise StoreError(
                f"{path} is not a blotter book (it is empty); make one with "
                f"`blotter demo --out {path.name}`"
            )
        raise StoreError(f"{path} is an SQLite file but not a blotter book")
    if version > SCHEMA_VERSION:
        raise StoreError(
            f"{path} was written by a newer blotter (schema {version}; this one "
            f"knows {SCHEMA_VERSION}): upgrade blotter"
        )
    if not {"trade", "contract", "mark", "mark_set", "underlying"} <= tables:
        raise StoreError(f"{path} is missing blotter tables; restore it from a backup")
    if verify:
        _check_file(conn, path)
    return int(version)


def open_store(
    path: str | os.PathLike[str],
    read_only: bool = False,
    create: bool = False,
    verify: bool = True,
    desk_tz: ZoneInfo | None = None,
) -> Store:
    """Open the book at ``path``; never creates one unless ``create`` (then see ``create_store``).

    ``read_only`` opens by URI ``mode=ro`` with ``query_only`` and no ATTACH. An older schema is
    migrated on a read-write open. ``verify`` checks the file first (``integrity_problems``,
    once per file state in a process). Closes are dated in the book's own desk zone
    (``book_zone``); ``desk_tz`` (the ``desk_tz`` setting; New York when None) is the zone an
    upgrade gives a book that has none yet. Raises ``StoreError`` with a plain message
    for a missing, empty, foreign, damaged or special file; ``NotWritableError`` when a
    read-write open meets a book this user cannot write.
    """
    p = Path(path)
    zone = desk_tz or cal.desk_tz()
    exists = _check_book_path(p)
    if create and not exists:
        return create_store(p, desk_tz=zone)
    if not exists:
        raise StoreError(
            f"no book at {p} (check the path, or make one with `blotter demo --out {p}`)"
        )
    if not read_only and (why := _not_writable(p)) is not None:
        raise NotWritableError(why)
    mode = _IMMUTABLE if read_only and _is_shipped_demo(p) else None
    try:
        conn = _connect(p, read_only, mode)
    except sqlite3.Error as exc:
        if "not a database" in str(exc):
            raise StoreError(f"{p} is not a blotter book (SQLite: {exc})") from None
        if read_only:
            raise StoreError(
                f"cannot open {p} read-only ({exc}): the file and its -wal/-shm files "
                "must be readable, or the directory writable"
            ) from None
        raise _map_error(exc, p) from None
    try:
        version = _open_checks(conn, p, verify)
        if version < SCHEMA_VERSION:
            if read_only:
                raise SchemaUpgradeNeeded(
                    f"{p} uses an older schema ({version}); open it once without "
                    "--read-only to upgrade it",
                    version,
                )
            _migrate(conn, zone)
        if not read_only:
            journal = conn.execute("PRAGMA journal_mode").fetchone()[0]
            if journal != "wal":
                conn.execute("PRAGMA journal_mode = WAL")
        zone = _book_zone(conn, p)
    except sqlite3.Error as exc:
        conn.close()
        raise _map_error(exc, p) from None
    except BaseException:
        conn.close()
        raise
    return Store(p, read_only, conn, mode, desk_tz=zone)


_IMMUTABLE = "ro&immutable=1"
"""URI mode of the shipped demo file opened read-only: nothing ever writes it, so SQLite reads
it without locks or -wal/-shm side files (none are created next to the installed package)."""


def _is_shipped_demo(p: Path) -> bool:
    try:
        return p.resolve() == shipped_demo_path().resolve()
    except OSError:
        return False


def _migrate(conn: sqlite3.Connection, tz: ZoneInfo) -> None:
    """Run each schema section above the file's version, each in one transaction (closes are
    dated in the desk's zone ``tz``)."""
    sections = schema_sections()
    _schema_functions(conn, tz)
    for version in sorted(sections):
        conn.execute("BEGIN IMMEDIATE")
        try:
            current = conn.execute("PRAGMA user_version").fetchone()[0]
            if current < version:
                for statement in sections[version]:
                    conn.execute(statement)
                conn.execute(f"PRAGMA user_version = {int(version):d}")
            conn.execute("COMMIT")
        except BaseException:
            if conn.in_transaction:
                conn.execute("ROLLBACK")
            raise


def create_store(path: str | os.PathLike[str], desk_tz: ZoneInfo | None = None) -> Store:
    """A new, empty book at ``path`` (refused if anything is there): schema applied, WAL mode;
    ``desk_tz`` dates its closes (New York when None).

    The file is created with mode ``FILE_MODE`` (0o660) less the umask, so it is never readable
    or writable by other users; SQLite gives its -wal and -shm files the same permissions.
    """
    p = Path(path)
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
    try:
        conn = _connect(p, read_only=False)
        try:
            conn.execute("PRAGMA journal_mode = WAL")
            _schema_functions(conn, desk_tz or cal.desk_tz())
            conn.execute("BEGIN IMMEDIATE")
            conn.execute(f"PRAGMA application_id = {APPLICATION_ID:d}")
            for _version, statements in sorted(schema_sections().items()):
                for statement in statements:
                    conn.execute(statement)
            conn.execute(f"PRAGMA user_version = {SCHEMA_VERSION:d}")
            conn.execute("COMMIT")
        except BaseException:
            if conn.in_transaction:
                conn.execute("ROLLBACK")
            conn.close()
            raise
    except sqlite3.Error as exc:
        _remove_book_files(p)
        raise _map_error(exc, p) from None
    except BaseException:
        _remove_book_files(p)
        raise
    return Store(p, False, conn, desk_tz=desk_tz or cal.desk_tz())


def _remove_book_files(p: Path) -> None:
    for suffix in ("", "-wal", "-shm"):
        try:
            os.unlink(f"{p}{suffix}")
        except FileNotFoundError:
            pass


def shipped_demo_path() -> Path:
    """The demo book shipped with the package (inside the wheel, or at the top of a checkout)."""
    packaged = resources.files("blotter") / "data" / "demo.db"
    if packaged.is_file():
        return Path(str(packaged))
    return Path(__file__).resolve().parent.parent / "demo.db"


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


# --------------------------------------------------------------------------------------------
# The store


@dataclass(frozen=True)
class _ContractArrays:
    """Every contract read so far, as arrays sorted by id (the store's cache; contracts never
    change). ``expiries`` are UTC cut-off instants and ``expiry_dates`` the expiry dates as
    traded (the exchange's local date), NaT for the underlying itself."""

    ids: np.ndarray  # int64 (m,), ascending
    underlying_ids: np.ndarray  # int64 (m,), the store's underlying ids
    types: np.ndarray  # '<U1' (m,): 'C', 'P' or 'U'
    strikes: np.ndarray  # float64 (m,), NaN for 'U'
    expiries: np.ndarray  # datetime64[s] (m,)
    american: np.ndarray  # bool (m,)
    multipliers: np.ndarray  # float64 (m,)
    cash_settled: np.ndarray  # bool (m,)
    labels: np.ndarray  # object (m,) of str
    expiry_dates: np.ndarray  # datetime64[D] (m,)

    @property
    def last_id(self) -> int:
        return int(self.ids[-1]) if len(self.ids) else 0

    @classmethod
    def empty(cls) -> _ContractArrays:
        z = np.zeros(0)
        return cls(
            z.astype(np.int64),
            z.astype(np.int64),
            z.astype("<U1"),
            z,
            z.astype("datetime64[s]"),
            z.astype(bool),
            z,
            z.astype(bool),
            z.astype(object),
            z.astype("datetime64[D]"),
        )

    def extended(
        self, rows: list[tuple[Any, ...]], underlyings: dict[int, tuple[str, str]]
    ) -> _ContractArrays:
        """These arrays followed by ``rows`` (contract_id, underlying_id, type, strike, expiry,
        cutoff, american, multiplier, cash_settled) with ids above ``last_id``; ``underlyings``
        maps an underlying id to (symbol, time zone)."""
        cols = list(zip(*rows, strict=False))
        zones = [underlyings[u][1] for u in cols[1]]
        keys = list(zip(cols[4], cols[5], zones, strict=False))
        instants = {
            k: (
                np.datetime64("NaT", "s")
                if k[0] is None
                else np.datetime64(_cutoff_utc(*k).replace(tzinfo=None), "s")
            )
            for k in set(keys)
        }
        expiries = np.array([instants[k] for k in keys], dtype="datetime64[s]")
        symbols = [underlyings[u][0] for u in cols[1]]
        labels = np.empty(len(rows), dtype=object)
        labels[:] = [
            sym if t == "U" else f"{sym} {e} {k:.10g} {t}"
            for sym, t, e, k in zip(symbols, cols[2], cols[4], cols[3], strict=False)
        ]
        cat = np.concatenate
        return _ContractArrays(
            ids=cat([self.ids, np.array(cols[0], dtype=np.int64)]),
            underlying_ids=cat([self.underlying_ids, np.array(cols[1], dtype=np.int64)]),
            types=cat([self.types, np.array(cols[2], dtype="<U1")]),
            strikes=cat([self.strikes, np.array(cols[3], dtype=np.float64)]),  # None -> NaN
            expiries=cat([self.expiries, expiries]),
            american=cat([self.american, np.array(cols[6], dtype=bool)]),
            multipliers=cat([self.multipliers, np.array(cols[7], dtype=np.float64)]),
            cash_settled=cat([self.cash_settled, np.array(cols[8], dtype=bool)]),
            labels=cat([self.labels, labels]),
            expiry_dates=cat(
                [self.expiry_dates, np.array([e or "NaT" for e in cols[4]], dtype="datetime64[D]")]
            ),
        )


_F = TypeVar("_F", bound=Callable[..., Any])


def _guard_damage(method: _F) -> _F:
    """A read method whose conversion errors become ``StoreError`` when the file is damaged.

    SQLite keeps no checksums, so a damaged byte can reach Python as text that is not a valid
    date or not UTF-8. Such an error is checked against ``integrity_problems`` (CHECK
    constraints included): a damaged file gives a plain ``StoreError``; a sound file lets the
    original error through (a bug).
    """

    @functools.wraps(method)
    def wrapper(self: Store, *args: Any, **kwargs: Any) -> Any:
        try:
            return method(self, *args, **kwargs)
        except (ValueError, KeyError, TypeError, IndexError, UnicodeDecodeError) as exc:
            try:
                sound = integrity_problems(self._conn()) == ["ok"]
            except (sqlite3.Error, UnicodeDecodeError):
                sound = False
            if sound:
                raise
            raise StoreError(
                f"{self.path} is damaged (it holds values its schema forbids: "
                f"{exc}); restore it from a backup"
            ) from None

    return wrapper  # type: ignore[return-value]


class Store:
    """An open book. Each thread that calls it uses its own connection; ``close()`` closes all.

    Reads run as one short read transaction each, so a viewer never pins a snapshot; writes run
    in ``BEGIN IMMEDIATE`` transactions. ``path`` is the book file; ``read_only`` refuses writes.
    """

    _BEGIN = "BEGIN IMMEDIATE"
    """How a write transaction starts; IMMEDIATE takes the write lock before the first read."""

    def __init__(
        self,
        path: Path,
        read_only: bool,
        conn: sqlite3.Connection,
        mode: str | None = None,
        desk_tz: ZoneInfo | None = None,
    ) -> None:
        self.path = path
        self.desk_tz = desk_tz or cal.desk_tz()  # the book's zone: dates its closes
        self.read_only = read_only
        self._mode = mode  # URI mode override for every thread's connection (see _connect)
        self._local = threading.local()
        self._local.conn = conn
        self._lock = threading.Lock()
        self._conns: list[sqlite3.Connection] = [conn]
        self._closed = False
        self._contracts = _ContractArrays.empty()
        self.who = who_am_i()

    # ---- connections and transactions

    def _conn(self) -> sqlite3.Connection:
        if self._closed:
            raise StoreError("the book is closed")
        conn: sqlite3.Connection | None = getattr(self._local, "conn", None)
        if conn is None:
            try:
                conn = _connect(self.path, self.read_only, self._mode)
            except sqlite3.Error as exc:
                raise _map_error(exc, self.path) from None
            self._local.conn = conn
            with self._lock:
                self._conns.append(conn)
        return conn

    @property
    def connection(self) -> sqlite3.Connection:
        """This thread's connection (for tests and diagnostics; write through the methods)."""
        return self._conn()

    def close(self) -> None:
        """Close every connection this store opened; the store cannot be used afterwards."""
        with self._lock:
            for conn in self._conns:
                conn.close()
            self._conns.clear()
            self._closed = True

    def __enter__(self) -> Store:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def in_transaction(self) -> bool:
        """Whether this thread's connection has a transaction open (never, between calls)."""
        return self._conn().in_transaction

    @contextmanager
    def _write(self) -> Iterator[sqlite3.Connection]:
        """One ``BEGIN IMMEDIATE`` ... ``COMMIT``; rolled back (if still open) on any error."""
        if self.read_only:
            raise ReadOnlyError()
        with self._transaction(self._BEGIN) as conn:
            yield conn

    @contextmanager
    def _read(self) -> Iterator[sqlite3.Connection]:
        """One short read transaction, so several queries see one snapshot; always ended."""
        with self._transaction("BEGIN") as conn:
            yield conn

    @contextmanager
    def _transaction(self, begin: str) -> Iterator[sqlite3.Connection]:
        """``begin`` ... ``COMMIT`` on this thread's connection, never left open.

        On any error the transaction is rolled back if SQLite has not already done so (after an
        I/O error it has), and SQLite's errors become ``StoreError`` with a message for people.
        """
        conn = self._conn()
        try:
            conn.execute(begin)
        except sqlite3.Error as exc:
            raise _map_error(exc, self.path) from None
        try:
            yield conn
            conn.execute("COMMIT")
        except BaseException as exc:
            if conn.in_transaction:
                try:
                    conn.execute("ROLLBACK")
                except sqlite3.Error:
                    pass
            if isinstance(exc, sqlite3.Error):
                raise _map_error(exc, self.path) from None
            if isinstance(exc, UnicodeDecodeError):
                raise StoreError(
                    f"{self.path}: the book holds text that is not UTF-8, so it is "
                    "damaged; restore it from a backup"
                ) from None
            if isinstance(exc, UnicodeEncodeError):
                # Text from a terminal or file whose bytes were not UTF-8 reaches Python with
                # stand-ins that no UTF-8 text may hold (a name, note or reason as typed).
                bad = exc.object[max(0, exc.start - 20) : exc.end + 20]
                raise StoreError(
                    f"text that is not valid UTF-8 cannot be stored ({bad!r}); retype it in "
                    "UTF-8: nothing was written"
                ) from None
            raise

    def data_version(self) -> int:
        """``PRAGMA data_version`` of this thread's connection: changes on others' commits."""
        try:
            return int(self._conn().execute("PRAGMA data_version").fetchone()[0])
        except sqlite3.Error as exc:
            raise _map_error(exc, self.path) from None

    def schema_version(self) -> int:
        """The file's ``PRAGMA user_version``."""
        return int(self._conn().execute("PRAGMA user_version").fetchone()[0])

    def integrity_ok(self) -> bool:
        """``integrity_problems`` (CHECKs included), ``foreign_key_check`` and every mark set
        holding all its marks."""
        if integrity_problems(self._conn()) != ["ok"]:
            return False
        with self._read() as conn:
            if conn.execute("PRAGMA foreign_key_check").fetchone() is not None:
                return False
            broken = conn.execute(
                "SELECT count(*) FROM mark_set s WHERE s.mark_count <> "
                "(SELECT count(*) FROM mark m WHERE m.mark_set_id = s.mark_set_id)"
            ).fetchone()[0]
            return bool(broken == 0)

    def backup(self, dest: str | os.PathLike[str]) -> Path:
        """A consistent copy of the book at ``dest`` (new file, mode 0o660), synced and checked."""
        d = Path(dest)
        if d.exists():
            raise StoreError(f"{d} already exists; choose another path")
        fd = os.open(d, os.O_WRONLY | os.O_CREAT | os.O_EXCL, FILE_MODE)
        os.close(fd)
        try:
            target = sqlite3.connect(_uri(d, "rw"), uri=True, isolation_level=None)
            try:
                self._conn().backup(target)
                target.execute("PRAGMA journal_mode = DELETE")
                ok = [r[0] for r in target.execute("PRAGMA integrity_check")] == ["ok"]
            finally:
                target.close()
            with open(d, "rb+") as f:
                os.fsync(f.fileno())
            if not ok:
                raise StoreError(f"the backup {d} failed its integrity check")
        except sqlite3.Error as exc:
            _remove_book_files(d)
            raise _map_error(exc, d) from None
        except BaseException:
            _remove_book_files(d)
            raise
        return d

    # ---- reference data

    def _underlying_rows(self, conn: sqlite3.Connection) -> list[tuple[Any, ...]]:
        return conn.execute(
            "SELECT underlying_id, symbol, kind, currency, beta, div_yield, calendar, description, "
            "is_reference, multiplier, american, cash_settled, time_zone, cutoff_time "
            "FROM underlying ORDER BY underlying_id"
        ).fetchall()

    @_guard_damage
    def load_underlyings(self) -> Underlyings:
        """Every underlying of the book, in id order (the index the ``Book`` rows point into)."""
        with self._read() as conn:
            return self._underlyings_from(self._underlying_rows(conn))

    @_guard_damage
    def underlying_records(self) -> list[dict[str, Any]]:
        """Every underlying's row, in id order: symbol, kind, currency, multiplier, american,
        cash_settled, div_yield, beta, is_reference (the last three and american as bools),
        calendar, time_zone, cutoff_time, description and underlying_id."""
        names = ("underlying_id", "symbol", "kind", "currency", "beta", "div_yield", "calendar",
                 "description", "is_reference", "multiplier", "american", "cash_settled",
                 "time_zone", "cutoff_time")
        with self._read() as conn:
            rows = [dict(zip(names, r, strict=True)) for r in self._underlying_rows(conn)]
        for r in rows:
            for flag in ("is_reference", "american", "cash_settled"):
                r[flag] = bool(r[flag])
        return rows

    @staticmethod
    def _underlyings_from(rows: list[tuple[Any, ...]]) -> Underlyings:
        return Underlyings(
            symbols=tuple(r[1] for r in rows),
            kinds=tuple(r[2] for r in rows),
            currencies=tuple(r[3] for r in rows),
            betas=np.array([r[4] for r in rows], dtype=np.float64),
            div_yields=np.array([r[5] for r in rows], dtype=np.float64),
            calendars=tuple(r[6] for r in rows),
            descriptions=tuple(r[7] for r in rows),
        )

    def add_underlying(
        self,
        symbol: str,
        kind: str,
        currency: str,
        multiplier: float,
        *,
        description: str = "",
        american: bool = True,
        cash_settled: bool = False,
        div_yield: float = 0.0,
        beta: float = 1.0,
        is_reference: bool = False,
        calendar: str = "NYSE",
        time_zone: str = "America/New_York",
        cutoff_time: str = "16:00",
    ) -> int:
        """Add an underlying (its defaults for contracts) and return its id; symbols are unique."""
        if kind not in UNDERLYING_KINDS:
            raise StoreError(f"kind {kind!r} is not one of {', '.join(UNDERLYING_KINDS)}")
        try:
            ZoneInfo(time_zone)
        except (ZoneInfoNotFoundError, ValueError):
            raise StoreError(f"unknown time zone {time_zone!r}") from None
        _check_symbol(symbol)
        multiplier = _within(limits.MULTIPLIER, multiplier)
        div_yield = _within(limits.RATE, div_yield, "dividend yield")
        beta = _within(limits.BETA, beta)
        if not SYMBOL_PATTERN.match(symbol) or symbol.lower() in MOVE_WORDS:
            raise StoreError(
                f"symbol {symbol!r}: a letter, then letters, digits and . _ / - (no spaces), and "
                f"not a word of the what-if ({', '.join(MOVE_WORDS)})"
            )
        with self._write() as conn:
            if conn.execute("SELECT 1 FROM underlying WHERE symbol = ?", (symbol,)).fetchone():
                raise StoreError(f"underlying {symbol!r} already exists")
            if is_reference and conn.execute(
                "SELECT 1 FROM underlying WHERE is_reference = 1"
            ).fetchone():
                raise StoreError("the book already has a reference index; nothing added")
            cur = conn.execute(
                "INSERT INTO underlying (symbol, description, kind, currency, multiplier, "
                "american, "
                "cash_settled, div_yield, beta, is_reference, calendar, time_zone, cutoff_time) "
                "VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                (
                    symbol,
                    description,
                    kind,
                    currency,
                    float(multiplier),
                    int(american),
                    int(cash_settled),
                    float(div_yield),
                    float(beta),
                    int(is_reference),
                    calendar,
                    time_zone,
                    cutoff_time,
                ),
            )
            return int(cur.lastrowid or 0)

    def add_note(
        self, text: str, written_at: datetime | None = None, who: str | None = None
    ) -> int:
        """Append a free note about the desk or the file; returns its id."""
        with self._write() as conn:
            cur = conn.execute(
                "INSERT INTO desk_note (written_at, who, text) VALUES (?, ?, ?)",
                (_ts(written_at or _now()), who or self.who, text),
            )
            return int(cur.lastrowid or 0)

    @_guard_damage
    def notes(self) -> list[str]:
        """The desk notes, oldest first."""
        with self._read() as conn:
            return [r[0] for r in conn.execute("SELECT text FROM desk_note ORDER BY note_id")]

    @_guard_damage
    def book_names(self) -> list[str]:
        """Names of the books (desk accounts), alphabetically."""
        with self._read() as conn:
            return [r[0] for r in conn.execute("SELECT name FROM book ORDER BY name")]

    def _book_id(self, conn: sqlite3.Connection, name: str, create: bool) -> int | None:
        row = conn.execute("SELECT book_id FROM book WHERE name = ?", (name,)).fetchone()
        if row:
            return int(row[0])
        if not create:
            return None
        if not name or len(name) > 64:
            raise StoreError(f"book name {name!r} must be 1 to 64 characters")
        return int(conn.execute("INSERT INTO book (name) VALUES (?)", (name,)).lastrowid or 0)

    def _known_book_id(self, conn: sqlite3.Connection, name: str, create: bool, hint: str) -> int:
        """The id of book ``name``; a new book only when ``create``, else ``StoreError`` naming
        the books there are and ``hint`` (how to start a new one on purpose)."""
        book_id = self._book_id(conn, name, create=create)
        if book_id is None:
            books = self.book_names_in(conn)
            raise StoreError(
                f"no book named {name!r} (books: {', '.join(books) if books else 'none yet'}); "
                f"{hint}"
            )
        return book_id

    def add_book(self, name: str, description: str = "") -> int:
        """Start a new book (desk account) and return its id; refused if it exists."""
        with self._write() as conn:
            if self._book_id(conn, name, create=False) is not None:
                raise StoreError(f"book {name!r} already exists")
            if not name or len(name) > 64:
                raise StoreError(f"book name {name!r} must be 1 to 64 characters")
            cur = conn.execute(
                "INSERT INTO book (name, description) VALUES (?, ?)", (name, description)
            )
            return int(cur.lastrowid or 0)

    def _underlying(self, conn: sqlite3.Connection, symbol: str) -> tuple[Any, ...]:
        row = conn.execute(
            "SELECT underlying_id, multiplier, american, cash_settled, cutoff_time, kind "
            "FROM underlying WHERE symbol = ?",
            (symbol,),
        ).fetchone()
        if row is None:
            raise StoreError(
                f"unknown underlying {symbol!r} (`blotter underlying list` shows them; "
                "`blotter underlying add` adds one)"
            )
        return tuple(row)

    def find_or_create_contract(
        self,
        symbol: str,
        expiry: date | str | None,
        strike: float | None,
        is_call: bool | None,
        american: bool | None = None,
        multiplier: float | None = None,
        cash_settled: bool | None = None,
    ) -> int:
        """The id of the contract with these terms, created when new; defaults from the underlying.

        ``expiry``, ``strike`` and ``is_call`` all None means the underlying itself (a hedge).
        """
        with self._write() as conn:
            return self._contract_id(
                conn, symbol, expiry, strike, is_call, american, multiplier, cash_settled
            )

    def _contract_id(
        self,
        conn: sqlite3.Connection,
        symbol: str,
        expiry: date | str | None,
        strike: float | None,
        is_call: bool | None,
        american: bool | None,
        multiplier: float | None,
        cash_settled: bool | None,
    ) -> int:
        uid, u_mult, u_am, u_cash, u_cut, kind = self._underlying(conn, symbol)
        terms = _contract_terms(expiry, strike, is_call)
        opt_type, exp_text, k = terms
        am = int(u_am if american is None else bool(american))
        default = hedge_multiplier(kind, u_mult) if opt_type == "U" else u_mult
        mult = float(default) if multiplier is None else _within(limits.MULTIPLIER, multiplier)
        cash = int(u_cash if cash_settled is None else bool(cash_settled))
        if opt_type == "U":
            row = conn.execute(
                "SELECT contract_id FROM contract WHERE underlying_id = ? AND option_type = 'U' "
                "AND american = ? AND multiplier = ? AND cash_settled = ?",
                (uid, am, mult, cash),
            ).fetchone()
            if row is None and multiplier is None:
                # A file booked before hedges defaulted to one unit may hold them at the option
                # multiplier: a new contract at the default would not net against them.
                others = sorted(
                    r[0]
                    for r in conn.execute(
                        "SELECT DISTINCT multiplier FROM contract WHERE underlying_id = ? "
                        "AND option_type = 'U'",
                        (uid,),
                    )
                )
                if others:
                    held = ", ".join(f"{m:g}" for m in others)
                    raise StoreError(
                        f"{symbol} trades in the underlying are held here at {held} units per "
                        f"contract, not the default {mult:g}: give the multiplier (--multiplier)"
                    )
            cutoff = None
        else:
            row = conn.execute(
                "SELECT contract_id FROM contract WHERE underlying_id = ? AND option_type = ? "
                "AND expiry = ? AND strike = ? AND american = ? AND multiplier = ? "
                "AND cash_settled = ?",
                (uid, opt_type, exp_text, k, am, mult, cash),
            ).fetchone()
            cutoff = u_cut
        if row:
            return int(row[0])
        cur = conn.execute(
            "INSERT INTO contract (underlying_id, option_type, strike, expiry, cutoff_time, "
            "american, "
            "multiplier, cash_settled) VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
            (uid, opt_type, k, exp_text, cutoff, am, mult, cash),
        )
        return int(cur.lastrowid or 0)

    @_guard_damage
    def contracts(self) -> list[ContractRecord]:
        """Every contract, in id order, with its label and UTC cut-off instant."""
        with self._read() as conn:
            rows = conn.execute(
                "SELECT c.contract_id, u.symbol, c.option_type, c.expiry, c.strike, c.cutoff_time, "
                "c.american, c.multiplier, c.cash_settled, u.time_zone FROM contract c "
                "JOIN underlying u USING (underlying_id) ORDER BY c.contract_id"
            ).fetchall()
        return [
            ContractRecord(
                contract_id=r[0],
                symbol=r[1],
                option_type=r[2],
                expiry=date.fromisoformat(r[3]) if r[3] else None,
                strike=r[4],
                cutoff_time=r[5],
                american=bool(r[6]),
                multiplier=r[7],
                cash_settled=bool(r[8]),
                label=contract_label(r[1], r[2], r[3], r[4]),
                cutoff_utc=_cutoff_utc(r[3], r[5], r[9]) if r[3] else None,
            )
            for r in rows
        ]

    # ---- trades

    def add_trade(
        self,
        book: str,
        symbol: str,
        quantity: int,
        price: float,
        expiry: date | str | None = None,
        strike: float | None = None,
        is_call: bool | None = None,
        *,
        trade_time: datetime | str | None = None,
        note: str = "",
        source: str = "typed",
        american: bool | None = None,
        multiplier: float | None = None,
        cash_settled: bool | None = None,
        contract_id: int | None = None,
        create_book: bool = False,
    ) -> int:
        """Book a trade and return its id. ``quantity`` signed contracts (shares for a hedge).

        The contract is ``contract_id`` when given, else found or created from ``symbol``,
        ``expiry``, ``strike``, ``is_call`` (all three None for the underlying itself).
        ``price`` per unit of underlying; ``trade_time`` defaults to now and may not be later.
        ``book`` must exist unless ``create_book`` (so a mistyped name never starts a book).
        """
        qty = _check_quantity(quantity)
        px = _check_price(price)
        booked = _now()
        t = booked if trade_time is None else parse_time(trade_time)
        if t > booked:
            raise StoreError(f"trade time {t.isoformat()} is in the future")
        _check_source(source)
        with self._write() as conn:
            book_id = self._known_book_id(
                conn, book, create_book, "start a new book on purpose (command line: --new-book)"
            )
            if contract_id is None:
                cid = self._contract_id(
                    conn, symbol, expiry, strike, is_call, american, multiplier, cash_settled
                )
            else:
                cid = self._existing_contract(conn, contract_id)
            self._check_not_expired(conn, cid, t)
            cur = conn.execute(
                "INSERT INTO trade (book_id, contract_id, quantity, price, trade_time, booked_at, "
                "who, source, note) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)",
                (book_id, cid, qty, px, _ts(t), _ts(booked), self.who, source, note),
            )
            return int(cur.lastrowid or 0)

    @staticmethod
    def _existing_contract(conn: sqlite3.Connection, contract_id: int) -> int:
        contract_id = _check_id(contract_id, "contract id")
        if conn.execute(
            "SELECT 1 FROM contract WHERE contract_id = ?", (int(contract_id),)
        ).fetchone():
            return int(contract_id)
        raise StoreError(f"no contract {contract_id}")

    @staticmethod
    def _check_not_expired(conn: sqlite3.Connection, contract_id: int, t: datetime) -> None:
        """Refuse a trade dealt after the contract's cut-off instant (its expiry date at its
        cut-off time in the exchange's time zone); ``schema.sql`` keeps only a coarse backstop."""
        row = conn.execute(
            "SELECT c.expiry, c.cutoff_time, u.time_zone FROM contract c "
            "JOIN underlying u USING (underlying_id) WHERE c.contract_id = ?",
            (contract_id,),
        ).fetchone()
        if row and row[0]:
            problem = _after_cutoff(t, row[0], row[1], row[2])
            if problem:
                raise StoreError(problem)

    def cancel_trade(self, trade_id: int, reason: str) -> int:
        """Cancel a live trade (a new row naming it and why); returns the cancel's id."""
        trade_id = _check_id(trade_id, "trade id")
        if not reason or not reason.strip():
            raise StoreError("a cancel needs a reason")
        with self._write() as conn:
            self._check_cancellable(conn, trade_id)
            cur = conn.execute(
                "INSERT INTO trade_cancel (trade_id, reason, cancelled_at, who) VALUES (?, ?, "
                "?, ?)",
                (int(trade_id), reason.strip(), _ts(_now()), self.who),
            )
            return int(cur.lastrowid or 0)

    @staticmethod
    def _check_cancellable(conn: sqlite3.Connection, trade_id: int) -> tuple[Any, ...]:
        row = conn.execute(
            "SELECT t.trade_id, b.name, t.contract_id, t.quantity, t.price, t.trade_time, t.note "
            "FROM trade t JOIN book b USING (book_id) WHERE t.trade_id = ?",
            (int(trade_id),),
        ).fetchone()
        if row is None:
            raise StoreError(f"no trade {trade_id}")
        done = conn.execute(
            "SELECT cancelled_at, who FROM trade_cancel WHERE trade_id = ?", (int(trade_id),)
        ).fetchone()
        if done:
            raise StoreError(f"trade {trade_id} was already cancelled at {done[0]} by {done[1]}")
        return tuple(row)

    def amend_trade(
        self,
        trade_id: int,
        *,
        reason: str,
        quantity: int | None = None,
        price: float | None = None,
        trade_time: datetime | str | None = None,
        note: str | None = None,
        book: str | None = None,
        contract_id: int | None = None,
    ) -> int:
        """Cancel ``trade_id`` and book its replacement with the changed fields; returns the new id.

        Fields left None keep the original's value (including its trade time).
        """
        trade_id = _check_id(trade_id, "trade id")
        if not reason or not reason.strip():
            raise StoreError("an amend needs a reason")
        now = _now()
        with self._write() as conn:
            _, old_book, old_cid, old_qty, old_px, old_time, old_note = self._check_cancellable(
                conn, trade_id
            )
            qty = _check_quantity(old_qty if quantity is None else quantity)
            px = _check_price(old_px if price is None else price)
            t = _from_ts(old_time) if trade_time is None else parse_time(trade_time)
            if t > now and trade_time is None:
                # the kept time came from another terminal's clock; the new row is booked by
                # this one, and a trade cannot be dealt after it was booked
                raise StoreError(
                    f"trade {trade_id} was dealt at {old_time} by the clock of the terminal that "
                    f"booked it, later than this terminal's clock ({_ts(now)}): one of the two "
                    "clocks is wrong. Give the true deal time with the amend (--time)"
                )
            if t > now:
                raise StoreError(f"trade time {t.isoformat()} is in the future")
            cid = old_cid if contract_id is None else self._existing_contract(conn, contract_id)
            self._check_not_expired(conn, cid, t)
            book_id = self._known_book_id(
                conn, old_book if book is None else book, False, "an amend moves a trade only "
                "to a book that exists"
            )
            new_note = old_note if note is None else note
            same_book = book is None or book == old_book
            if same_book and (qty, px, _ts(t), cid, new_note) == (
                old_qty,
                old_px,
                old_time,
                old_cid,
                old_note,
            ):
                raise StoreError(
                    f"nothing to amend: the new terms of trade {trade_id} are the same as the "
                    "old ones (give --qty, --price, --time, --note or --book)"
                )
            conn.execute(
                "INSERT INTO trade_cancel (trade_id, reason, cancelled_at, who) VALUES (?, ?, "
                "?, ?)",
                (int(trade_id), f"amended: {reason.strip()}", _ts(now), self.who),
            )
            cur = conn.execute(
                "INSERT INTO trade (book_id, contract_id, quantity, price, trade_time, booked_at, "
                "who, source, note, replaces) VALUES (?, ?, ?, ?, ?, ?, ?, 'typed', ?, ?)",
                (
                    book_id,
                    cid,
                    qty,
                    px,
                    _ts(t),
                    _ts(now),
                    self.who,
                    new_note,
                    int(trade_id),
                ),
            )
            return int(cur.lastrowid or 0)

    def _contract_arrays(self, conn: sqlite3.Connection) -> _ContractArrays:
        """Every contract as arrays by id, read once and then extended by the new ones only.

        Contracts are never changed or deleted (``schema.sql`` refuses it), and ids only grow,
        so the rows read before stay right and only ``contract_id > last`` needs reading.
        """
        with self._lock:
            cache = self._contracts
        rows = conn.execute(
            "SELECT contract_id, underlying_id, option_type, strike, expiry, cutoff_time, "
            "american, "
            "multiplier, cash_settled FROM contract WHERE contract_id > ? ORDER BY contract_id",
            (cache.last_id,),
        ).fetchall()
        if not rows:
            return cache
        unders = {
            r[0]: (r[1], r[2])
            for r in conn.execute("SELECT underlying_id, symbol, time_zone FROM underlying")
        }
        grown = cache.extended(rows, unders)
        with self._lock:
            if grown.last_id > self._contracts.last_id:
                self._contracts = grown
        return grown

    def _book_of(
        self,
        conn: sqlite3.Connection,
        name: str,
        contract_ids: np.ndarray,
        quantities: np.ndarray,
        sort: bool,
    ) -> Book:
        """A ``Book`` of the given contracts and quantities, grouped by underlying, then hedges
        first, expiry, strike and type when ``sort``; in the given order otherwise."""
        urows = self._underlying_rows(conn)
        underlyings = self._underlyings_from(urows)
        reference = next((r[1] for r in urows if r[8]), None)
        table = self._contract_arrays(conn)
        at = np.searchsorted(table.ids, contract_ids)
        if len(at) and (at.max() >= len(table.ids) or (table.ids[at] != contract_ids).any()):
            raise StoreError(
                "a trade names a contract the book does not hold; restore it from a backup"
            )
        index_of = np.full(max((r[0] for r in urows), default=0) + 1, -1, dtype=np.int64)
        index_of[[r[0] for r in urows]] = np.arange(len(urows))
        uidx = index_of[table.underlying_ids[at]]
        types = table.types[at]
        strikes = table.strikes[at]
        expiries = table.expiries[at]
        if sort and len(at):
            order = np.lexsort(
                (
                    contract_ids,
                    types,
                    np.nan_to_num(strikes, nan=0.0),
                    expiries.astype(np.int64),
                    types != "U",
                    uidx,
                )
            )
        else:
            order = np.arange(len(at))
        at, uidx, types = at[order], uidx[order], types[order]
        return Book(
            name=name,
            underlyings=underlyings,
            reference_index=reference,
            contract_ids=contract_ids[order],
            labels=tuple(table.labels[at].tolist()),
            underlying_idx=uidx,
            is_option=types != "U",
            is_call=types == "C",
            american=table.american[at],
            strikes=strikes[order],
            expiries=expiries[order],
            multipliers=table.multipliers[at],
            quantities=quantities[order],
            cash_settled=table.cash_settled[at],
            expiry_dates=table.expiry_dates[at],
        )

    @_guard_damage
    def load_book(
        self, book: str | None = None, as_of: datetime | None = None, before_seq: int | None = None
    ) -> Book:
        """Net positions of live trades (all books when ``book`` is None) as at ``as_of``, or as
        the store held them just before its history row ``before_seq`` (a close's ``seq``).

        With ``as_of`` (a clock instant someone gives) a trade counts once it was both dealt and
        booked at or before it, and a cancel from the instant it was entered. With
        ``before_seq`` the store's own order decides, whatever the clocks said: the trades and
        cancels written before that row. Neither means now. Contracts whose trades net to zero
        are left out. Rows are grouped by underlying, then hedges, expiry, strike and type.
        """
        if as_of is not None and before_seq is not None:
            raise ValueError("give as_of or before_seq, not both")
        cancel_at = ""
        params: list[Any] = []
        where = []
        if as_of is not None:
            t = _ts(parse_time(as_of))
            cancel_at = " AND x.cancelled_at <= ?"
            where.append("t.booked_at <= ? AND t.trade_time <= ?")
            params += [t, t, t]
        elif before_seq is not None:
            seq_of = "(SELECT seq FROM history WHERE kind = '{}' AND row_id = {}) < ?"
            cancel_at = " AND " + seq_of.format("cancel", "x.cancel_id")
            where.append(seq_of.format("trade", "t.trade_id"))
            params += [int(before_seq), int(before_seq)]
        where.insert(
            0, f"NOT EXISTS (SELECT 1 FROM trade_cancel x WHERE x.trade_id = t.trade_id{cancel_at})"
        )
        if book is not None:
            where.append("t.book_id = ?")
        with self._read() as conn:
            if book is not None:
                book_id = self._book_id(conn, book, create=False)
                if book_id is None:
                    raise StoreError(
                        f"no book named {book!r} (books: {', '.join(self.book_names_in(conn))})"
                    )
                params.append(book_id)
            rows = conn.execute(
                f"SELECT contract_id, quantity FROM trade t WHERE {' AND '.join(where)}", params
            ).fetchall()
            pairs = np.array(rows, dtype=np.int64).reshape(-1, 2)
            ids, inverse = np.unique(pairs[:, 0], return_inverse=True)
            net = np.bincount(inverse.ravel(), weights=pairs[:, 1], minlength=len(ids))
            keep = net != 0
            return self._book_of(conn, book or "all books", ids[keep], net[keep], sort=True)

    def last_seq(self) -> int:
        """The newest place in the store's own order of history (0 for an empty book)."""
        with self._read() as conn:
            return int(conn.execute("SELECT coalesce(max(seq), 0) FROM history").fetchone()[0])

    @staticmethod
    def book_names_in(conn: sqlite3.Connection) -> list[str]:
        """Names of the books, read on ``conn``."""
        return [r[0] for r in conn.execute("SELECT name FROM book ORDER BY name")]

    @_guard_damage
    def new_trades(
        self, after_seq: int, before_seq: int | None = None, book: str | None = None
    ) -> tuple[Book, np.ndarray]:
        """One ``Book`` row per trade written between the history rows ``after_seq`` and
        ``before_seq`` (None: up to now) and not cancelled before ``before_seq``.

        These are exactly the trades in ``load_book(before_seq=before_seq)`` that are not in
        ``load_book(before_seq=after_seq)``. Returns the rows in the store's order (quantity =
        the trade's) and each trade's price per unit of underlying, float64 (n,).
        """
        hi = 2**63 - 1 if before_seq is None else int(before_seq)
        params: list[Any] = [int(after_seq), hi, hi]
        book_filter = ""
        if book is not None:
            book_filter = "AND b.name = ?"
            params.append(book)
        with self._read() as conn:
            rows = conn.execute(
                "SELECT t.contract_id, t.quantity, t.price FROM trade t "
                "JOIN book b ON b.book_id = t.book_id "
                "JOIN history h ON h.kind = 'trade' AND h.row_id = t.trade_id "
                "WHERE h.seq > ? AND h.seq < ? AND NOT EXISTS ("
                "SELECT 1 FROM trade_cancel x JOIN history hx ON hx.kind = 'cancel' "
                "AND hx.row_id = x.cancel_id WHERE x.trade_id = t.trade_id AND hx.seq < ?) "
                f"{book_filter} ORDER BY h.seq",
                params,
            ).fetchall()
            ids = np.array([r[0] for r in rows], dtype=np.int64)
            result = self._book_of(
                conn,
                book or "all books",
                ids,
                np.array([r[1] for r in rows], dtype=np.float64),
                sort=False,
            )
        return result, np.array([r[2] for r in rows], dtype=np.float64)

    @_guard_damage
    def trades(
        self,
        book: str | None = None,
        since: datetime | None = None,
        until: datetime | None = None,
        live_only: bool = False,
    ) -> list[TradeRecord]:
        """Trades dealt in (``since``, ``until``] (all when None) with state, in order of deal
        time (the trade's own time, as given or the booking terminal's clock), then of the
        store's own order."""
        where = ["1"]
        params: list[Any] = []
        if book is not None:
            where.append("b.name = ?")
            params.append(book)
        if since is not None:
            where.append("t.trade_time > ?")
            params.append(_ts(parse_time(since)))
        if until is not None:
            where.append("t.trade_time <= ?")
            params.append(_ts(parse_time(until)))
        if live_only:
            where.append("x.trade_id IS NULL")
        with self._read() as conn:
            rows = conn.execute(
                "SELECT t.trade_id, b.name, t.contract_id, u.symbol, c.option_type, c.expiry, "
                "c.strike, c.american, c.multiplier, c.cash_settled, t.quantity, t.price, "
                "t.trade_time, t.booked_at, t.who, t.source, t.note, t.replaces, r.trade_id, "
                "x.reason, x.cancelled_at, x.who, h.seq, hx.seq FROM trade t "
                "JOIN book b ON b.book_id = t.book_id "
                "JOIN contract c ON c.contract_id = t.contract_id "
                "JOIN underlying u ON u.underlying_id = c.underlying_id "
                "JOIN history h ON h.kind = 'trade' AND h.row_id = t.trade_id "
                "LEFT JOIN trade_cancel x ON x.trade_id = t.trade_id "
                "LEFT JOIN history hx ON hx.kind = 'cancel' AND hx.row_id = x.cancel_id "
                "LEFT JOIN trade r ON r.replaces = t.trade_id "
                f"WHERE {' AND '.join(where)} ORDER BY t.trade_time, h.seq",
                params,
            ).fetchall()
        out = []
        for r in rows:
            state = "live" if r[20] is None else ("amended" if r[18] is not None else "cancelled")
            out.append(
                TradeRecord(
                    trade_id=r[0],
                    book=r[1],
                    contract_id=r[2],
                    contract=contract_label(r[3], r[4], r[5], r[6]),
                    symbol=r[3],
                    option_type=r[4],
                    expiry=date.fromisoformat(r[5]) if r[5] else None,
                    strike=r[6],
                    american=bool(r[7]),
                    multiplier=r[8],
                    cash_settled=bool(r[9]),
                    quantity=r[10],
                    price=r[11],
                    trade_time=_from_ts(r[12]),
                    booked_at=_from_ts(r[13]),
                    who=r[14],
                    source=r[15],
                    note=r[16],
                    state=state,
                    replaces=r[17],
                    replaced_by=r[18],
                    cancel_reason=r[19],
                    cancelled_at=_from_ts(r[20]) if r[20] else None,
                    cancelled_by=r[21],
                    seq=r[22],
                    cancel_seq=r[23],
                )
            )
        return out

    # ---- marks

    def _new_mark_set(
        self,
        conn: sqlite3.Connection,
        kind: str,
        count: int,
        *,
        note: str = "",
        source: str = "typed",
        corrects: int | None = None,
        marked_at: datetime | None = None,
        who: str | None = None,
        day: date | None = None,
    ) -> int:
        cur = conn.execute(
            "INSERT INTO mark_set (kind, marked_at, who, note, source, corrects, mark_count, "
            "business_date) VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
            (
                kind,
                _ts(marked_at or _now()),
                who or self.who,
                note or "",
                source,
                corrects,
                count,
                day.isoformat() if day else None,
            ),
        )
        return int(cur.lastrowid or 0)

    def _insert_marks(
        self,
        conn: sqlite3.Connection,
        set_id: int,
        points: Sequence[
            tuple[str, int | None, str | None, str | None, float | None, int | None, float]
        ],
    ) -> tuple[int, int]:
        """Insert points (kind, underlying_id, currency, expiry, strike, tenor_days, value)."""
        first = last = 0
        for seq, p in enumerate(points, start=1):
            cur = conn.execute(
                "INSERT INTO mark (mark_set_id, seq, kind, underlying_id, currency, expiry, "
                "strike, "
                "tenor_days, value) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)",
                (set_id, seq, *p),
            )
            last = int(cur.lastrowid or 0)
            first = first or last
        return first, last

    def _log_one(
        self, point_of: Callable[[sqlite3.Connection], tuple[Any, ...]], note: str | None
    ) -> int:
        with self._write() as conn:
            point = point_of(conn)
            set_id = self._new_mark_set(conn, "intraday", 1, note=note or "")
            return self._insert_marks(conn, set_id, [point])[1]

    def log_spot(self, symbol: str, price: float, note: str | None = None) -> int:
        """Log a spot mark (price per unit, within ``limits.LEVEL``) as its own intraday set;
        returns the mark id."""
        px = _within(limits.LEVEL, price, "spot")
        return self._log_one(
            lambda c: ("spot", self._underlying(c, symbol)[0], None, None, None, None, px), note
        )

    def log_vol(
        self,
        symbol: str,
        expiry: date | str,
        vol: float,
        strike: float | None = None,
        note: str | None = None,
    ) -> int:
        """Log an implied vol (decimal, 0 < vol <= 10) at an expiry and strike (None = ATM)."""
        v = _check_vol(vol)
        e = parse_date(expiry, "expiry").isoformat()
        k = None if strike is None else _check_strike(strike)
        return self._log_one(
            lambda c: ("vol", self._underlying(c, symbol)[0], None, e, k, None, v), note
        )

    def log_rate(self, currency: str, tenor_days: int, rate: float, note: str | None = None) -> int:
        """Log a continuously compounded zero rate (decimal) of ``currency`` at ``tenor_days``."""
        ccy = _check_currency(currency)
        days = _check_tenor(tenor_days)
        r = _check_decimal(rate, "rate")
        return self._log_one(lambda c: ("rate", None, ccy, None, None, days, r), note)

    def log_div_yield(self, symbol: str, q: float, note: str | None = None) -> int:
        """Log a dividend yield (decimal; foreign rate for fx), overriding the default."""
        v = _check_decimal(q, "dividend yield")
        return self._log_one(
            lambda c: ("div_yield", self._underlying(c, symbol)[0], None, None, None, None, v), note
        )

    _IN_FORCE_SQL = """
        SELECT m.mark_id, m.mark_set_id, m.kind, m.underlying_id, m.currency, m.expiry, m.strike,
               m.tenor_days, m.value
        FROM mark m JOIN (
            SELECT max(m2.mark_id) AS mark_id FROM mark m2
            JOIN mark_set s ON s.mark_set_id = m2.mark_set_id
            {where}
            GROUP BY m2.kind, m2.underlying_id, m2.currency, m2.expiry, m2.strike, m2.tenor_days
        ) latest ON latest.mark_id = m.mark_id
        ORDER BY m.kind, m.underlying_id, m.currency, m.expiry, m.strike, m.tenor_days
    """

    _IN_FORCE_WHERE = "WHERE s.corrects IS NULL"
    """Sets that make the marks in force: every set but corrections. A correction holds its close's
    points overlaid with points logged since, all of which are in force by their own rows (or,
    for an older close, superseded by later marks), so leaving it out changes nothing for the
    latest close and keeps a correction of an older day from rolling today's marks back."""

    def _mark_rows(
        self, conn: sqlite3.Connection, mark_set_id: int | None, as_of: datetime | None
    ) -> list[tuple[Any, ...]]:
        if mark_set_id is not None:
            mark_set_id = _check_id(mark_set_id, "mark set id")
            if (
                conn.execute(
                    "SELECT 1 FROM mark_set WHERE mark_set_id = ?", (int(mark_set_id),)
                ).fetchone()
                is None
            ):
                raise StoreError(f"no mark set {mark_set_id}")
            return conn.execute(
                "SELECT mark_id, mark_set_id, kind, underlying_id, currency, expiry, strike, "
                "tenor_days, value FROM mark WHERE mark_set_id = ? ORDER BY seq",
                (int(mark_set_id),),
            ).fetchall()
        if as_of is None:
            return conn.execute(self._IN_FORCE_SQL.format(where=self._IN_FORCE_WHERE)).fetchall()
        return conn.execute(
            self._IN_FORCE_SQL.format(where=self._IN_FORCE_WHERE + " AND s.marked_at <= ?"),
            (_ts(parse_time(as_of)),),
        ).fetchall()

    @_guard_damage
    def load_market(self, mark_set_id: int | None = None, as_of: datetime | None = None) -> Market:
        """The marks in force (latest value of each point across sets, at ``as_of`` or now), or
        exactly the set ``mark_set_id`` as recorded.

        ``version`` is the newest mark id used (0 when there are none), ``marks_as_of`` the
        newest set's time (1970-01-01 UTC when there are none).
        """
        if mark_set_id is not None and as_of is not None:
            raise ValueError("give mark_set_id or as_of, not both")
        with self._read() as conn:
            rows = self._mark_rows(conn, mark_set_id, as_of)
            symbols = dict(conn.execute("SELECT underlying_id, symbol FROM underlying").fetchall())
            set_ids = sorted({r[1] for r in rows})
            sets = {}
            if set_ids:
                marks = ",".join("?" * len(set_ids)) if len(set_ids) < 900 else None
                if marks:
                    sets = {
                        r[0]: (r[1], r[2])
                        for r in conn.execute(
                            f"SELECT mark_set_id, kind, marked_at FROM mark_set WHERE "
                            f"mark_set_id IN "
                            f"({marks})",
                            set_ids,
                        )
                    }
                else:
                    sets = {
                        r[0]: (r[1], r[2])
                        for r in conn.execute("SELECT mark_set_id, kind, marked_at FROM mark_set")
                    }
        spots: dict[str, float] = {}
        divs: dict[str, float] = {}
        vols: dict[str, list[tuple[str, float, float]]] = {}
        rates: dict[str, list[tuple[int, float]]] = {}
        for _id, _set, kind, uid, ccy, expiry, strike, tenor, value in rows:
            if kind == "spot":
                spots[symbols[uid]] = value
            elif kind == "div_yield":
                divs[symbols[uid]] = value
            elif kind == "vol":
                vols.setdefault(symbols[uid], []).append(
                    (expiry, np.nan if strike is None else strike, value)
                )
            else:
                rates.setdefault(ccy, []).append((tenor, value))
        surfaces = {}
        for sym, pts in vols.items():
            pts.sort(key=lambda p: (p[0], -np.inf if np.isnan(p[1]) else p[1]))
            surfaces[sym] = VolSurface(
                expiries=np.array([p[0] for p in pts], dtype="datetime64[D]"),
                strikes=np.array([p[1] for p in pts], dtype=np.float64),
                vols=np.array([p[2] for p in pts], dtype=np.float64),
                atm_strike=spots.get(sym, np.nan),
            )
        curves = {
            ccy: RateCurve(
                tenor_days=np.array([p[0] for p in pts], dtype=np.float64),
                zero_rates=np.array([p[1] for p in pts], dtype=np.float64),
            )
            for ccy, pts in rates.items()
        }
        version = max((r[0] for r in rows), default=0)
        newest = max((sets[s][1] for s in set_ids), default=None)
        if mark_set_id is not None:
            set_id, kind = int(mark_set_id), sets[int(mark_set_id)][0] if set_ids else "intraday"
        elif len(set_ids) == 1:
            set_id, kind = set_ids[0], sets[set_ids[0]][0]
        else:
            set_id, kind = None, "intraday"
        return Market(
            version=int(version),
            marks_as_of=_from_ts(newest) if newest else _EPOCH,
            spots=spots,
            surfaces=surfaces,
            curves=curves,
            div_yields=divs,
            mark_set_id=set_id,
            mark_kind=kind,
        )

    @_guard_damage
    def marks(
        self, mark_set_id: int | None = None, as_of: datetime | None = None
    ) -> list[MarkRecord]:
        """Mark points: those in force (at ``as_of`` or now), or exactly the set ``mark_set_id``."""
        with self._read() as conn:
            rows = self._mark_rows(conn, mark_set_id, as_of)
            symbols = dict(conn.execute("SELECT underlying_id, symbol FROM underlying").fetchall())
            sets = {
                r[0]: r[1:]
                for r in conn.execute("SELECT mark_set_id, kind, marked_at, who FROM mark_set")
            }
        return [
            MarkRecord(
                mark_id=r[0],
                mark_set_id=r[1],
                set_kind=sets[r[1]][0],
                marked_at=_from_ts(sets[r[1]][1]),
                who=sets[r[1]][2],
                kind=r[2],
                symbol=symbols.get(r[3]) if r[3] is not None else None,
                currency=r[4],
                expiry=date.fromisoformat(r[5]) if r[5] else None,
                strike=r[6],
                tenor_days=r[7],
                value=r[8],
            )
            for r in rows
        ]

    def commit_close(
        self,
        note: str | None = None,
        corrects: int | str | date | None = None,
        marked_at: datetime | None = None,
        who: str | None = None,
        source: str = "close",
    ) -> int:
        """Write the marks in force now as one immutable close set; returns its id.

        The set closes the business date of ``marked_at`` (``business_date``); a date closes
        once, and a second close for it is refused unless it is a correction. ``corrects`` names
        the close it replaces (it stays on record), by set id or by business date (the close in
        force for that date); the correction closes the same date and holds that set's own points
        overlaid with the intraday points logged since the newest close set (log the fixed
        points, then commit the correction). Corrections are left out of the marks in force, so
        correcting an older day leaves today's marks as they are. ``marked_at`` and ``who``
        default to now and the OS user (the demo sets them). ``commit_close_info`` takes the same
        arguments and returns the set's record.
        """
        return self.commit_close_info(note, corrects, marked_at, who, source).id

    def commit_close_info(
        self,
        note: str | None = None,
        corrects: int | str | date | None = None,
        marked_at: datetime | None = None,
        who: str | None = None,
        source: str = "close",
    ) -> MarkSetInfo:
        """As ``commit_close``, returning the record of the set written (its id, time and mark
        count as committed), read in the same transaction so no later commit can be mistaken
        for it."""
        when = marked_at or _now()
        with self._write() as conn:
            if corrects is not None:
                corrects, day = self._close_to_correct(conn, corrects)
            else:
                day = business_date(when, self.desk_tz)
                taken = self._close_in_force(conn, day)
                if taken is not None:
                    raise StoreError(
                        f"the close of {day} is already written (set {taken[0]}, {taken[1]} "
                        f"by {taken[2]}): a date closes once. To change it, log the fixed "
                        f"marks and write a correction (mark close --corrects {taken[0]})"
                    )
            if corrects is None:
                cur = conn.execute(self._IN_FORCE_SQL.format(where=self._IN_FORCE_WHERE))
            else:
                # the corrected set's own points, overlaid with the intraday points logged since
                # the newest close (the fixes): never the marks other closes copied
                since = conn.execute(
                    "SELECT max(mark_set_id) FROM mark_set WHERE kind = 'close'"
                ).fetchone()[0]
                cur = conn.execute(
                    self._IN_FORCE_SQL.format(
                        where="WHERE s.mark_set_id = ? OR (s.kind = 'intraday' "
                        "AND s.mark_set_id > ?)"
                    ),
                    (int(corrects), int(since)),
                )
            rows = cur.fetchall()
            if not rows:
                raise StoreError("there are no marks to commit as a close")
            set_id = self._new_mark_set(
                conn,
                "close",
                len(rows),
                note=note or "",
                source=source,
                corrects=corrects,
                marked_at=when,
                who=who,
                day=day,
            )
            self._insert_marks(conn, set_id, [tuple(r[2:]) for r in rows])
            row = conn.execute(
                "SELECT kind, marked_at, who, note, corrects, source, mark_count, business_date, "
                "(SELECT seq FROM history WHERE kind = 'mark_set' AND row_id = mark_set_id) "
                "FROM mark_set WHERE mark_set_id = ?",
                (set_id,),
            ).fetchone()
        return MarkSetInfo(
            id=set_id,
            kind=row[0],
            marked_at=_from_ts(row[1]),
            who=row[2],
            note=row[3],
            corrects=row[4],
            source=row[5],
            marks=row[6],
            business_date=date.fromisoformat(row[7]),
            seq=row[8],
        )

    def todays_close(self) -> tuple[date, int | None]:
        """(the business date a close written now closes, the id of the close in force for it
        or None), so a review can say whether a close now is the day's first or a correction."""
        day = business_date(_now(), self.desk_tz)
        with self._read() as conn:
            found = self._close_in_force(conn, day)
        return day, None if found is None else found[0]

    @staticmethod
    def _close_in_force(conn: sqlite3.Connection, day: date) -> tuple[int, str, str] | None:
        """(id, time, who) of the close in force for business date ``day``: the newest set of
        that date that no correction replaces; None when the date has no close."""
        row = conn.execute(
            "SELECT s.mark_set_id, s.marked_at, s.who FROM mark_set s WHERE s.kind = 'close' "
            "AND s.business_date = ? AND NOT EXISTS (SELECT 1 FROM mark_set c "
            "WHERE c.corrects = s.mark_set_id) ORDER BY s.mark_set_id DESC LIMIT 1",
            (day.isoformat(),),
        ).fetchone()
        return None if row is None else (int(row[0]), str(row[1]), str(row[2]))

    def _close_to_correct(
        self, conn: sqlite3.Connection, ref: int | str | date
    ) -> tuple[int, date]:
        """(id, business date) of the close a correction names: a set id, or a business date
        (ISO text or ``date``) meaning the close in force for that date."""
        text = ref.isoformat() if isinstance(ref, date) else str(ref).strip()
        if re.fullmatch(r"\d{4}-\d{2}-\d{2}", text):
            day = parse_date(text)
            found = self._close_in_force(conn, day)
            if found is None:
                raise StoreError(f"no close for {day}: there is nothing to correct")
            return found[0], day
        try:
            set_id = int(text)
        except ValueError:
            raise StoreError(
                f"{ref!r} names no close: give a close set id or a business date like 2026-12-03"
            ) from None
        set_id = _check_id(set_id, "the id of the close set corrected")
        row = conn.execute(
            "SELECT kind, business_date FROM mark_set WHERE mark_set_id = ?", (set_id,)
        ).fetchone()
        if row is None or row[0] != "close":
            raise StoreError(f"mark set {set_id} is not a close set")
        done = conn.execute(
            "SELECT mark_set_id FROM mark_set WHERE corrects = ?", (set_id,)
        ).fetchone()
        if done:
            raise StoreError(
                f"close set {set_id} was already corrected by set {done[0]}: correct set "
                f"{done[0]} (or name the date, --corrects {row[1]})"
            )
        return set_id, date.fromisoformat(row[1])

    @_guard_damage
    def mark_sets(self, kind: str | None = None) -> list[MarkSetInfo]:
        """Mark sets in the store's order (only ``kind`` 'close' or 'intraday' when given)."""
        if kind is not None and kind not in ("close", "intraday"):
            raise StoreError(f"mark set kind must be 'close' or 'intraday', got {kind!r}")
        with self._read() as conn:
            rows = conn.execute(
                "SELECT s.mark_set_id, s.kind, s.marked_at, s.who, s.note, s.corrects, s.source, "
                "s.mark_count, (SELECT c.mark_set_id FROM mark_set c WHERE c.corrects = "
                "s.mark_set_id), s.business_date, h.seq "
                "FROM mark_set s JOIN history h ON h.kind = 'mark_set' AND h.row_id = "
                "s.mark_set_id WHERE ? IS NULL OR s.kind = ? ORDER BY h.seq",
                (kind, kind),
            ).fetchall()
        return [
            MarkSetInfo(
                id=r[0],
                kind=r[1],
                marked_at=_from_ts(r[2]),
                who=r[3],
                note=r[4],
                corrects=r[5],
                source=r[6],
                marks=r[7],
                superseded_by=r[8],
                business_date=date.fromisoformat(r[9]) if r[9] else None,
                seq=r[10],
            )
            for r in rows
        ]

    # ---- CSV imports

    def import_trades_csv(
        self,
        path: str | os.PathLike[str],
        progress: Callable[[int], None] | None = None,
        *,
        new_books: bool = False,
    ) -> ImportReport:
        """Import a trade CSV (``TRADE_COLUMNS``) as one transaction: all rows or none.

        Every row is checked before anything is written; problems name the line and column
        (up to ``MAX_PROBLEMS`` at once). A file already imported (same content) is refused.
        A row's book must exist unless ``new_books`` (then the file may start new books).
        ``progress(rows_written)`` is called every ``PROGRESS_EVERY`` rows.
        """
        p, data, digest, header, rows = _read_csv(
            path, TRADE_COLUMNS + TRADE_INFO_COLUMNS, TRADE_REQUIRED
        )
        with self._read() as conn:
            unders = {r[1]: r for r in self._underlying_rows(conn)}
            self._check_not_imported(conn, "trades", digest, p)  # the clearer message first
            problems = self._trade_id_problems(conn, rows)
            books = self.book_names_in(conn)
        if not new_books:
            known = set(books)
            for line, rec in rows:
                name = _cell(rec, "book")
                if name and name not in known:
                    problems.append(
                        _Problem(
                            line,
                            "book",
                            f"no book named {name!r} (books: "
                            f"{', '.join(books) if books else 'none yet'}); import with "
                            "--new-books to start new books",
                        )
                    )
        parsed: list[tuple[Any, ...]] = []
        now = _now()
        for line, rec in rows:
            item = _parse_trade_row(line, rec, unders, now, problems)
            if item is not None:
                parsed.append(item)
        problems.sort(key=lambda q: q.line)
        _raise_if(p, problems)
        if not parsed:
            raise StoreError(f"{p.name}: nothing imported; the file has no trade rows")
        source = f"file:{p.name}"
        with self._write() as conn:
            self._check_not_imported(conn, "trades", digest, p)
            _raise_if(p, self._trade_id_problems(conn, rows))  # again, under the write lock
            booked = _ts(now)
            ids: list[int] = []
            contract_cache: dict[tuple[Any, ...], int] = {}
            for i, (
                book,
                symbol,
                expiry,
                strike,
                is_call,
                qty,
                px,
                t,
                am,
                mult,
                cash,
                note,
            ) in enumerate(parsed, start=1):
                key = (symbol, expiry, strike, is_call, am, mult, cash)
                cid = contract_cache.get(key)
                if cid is None:
                    cid = self._contract_id(conn, symbol, expiry, strike, is_call, am, mult, cash)
                    contract_cache[key] = cid
                book_id = self._known_book_id(
                    conn, book, new_books, "import with --new-books to start new books"
                )
                cur = conn.execute(
                    "INSERT INTO trade (book_id, contract_id, quantity, price, trade_time, "
                    "booked_at, who, source, note) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)",
                    (book_id, cid, qty, px, _ts(t), booked, self.who, source, note),
                )
                ids.append(int(cur.lastrowid or 0))
                if progress is not None and i % PROGRESS_EVERY == 0:
                    progress(i)
            import_id = self._record_import(conn, "trades", p, digest, len(ids), ids[0], ids[-1])
        return ImportReport(
            path=p,
            kind="trades",
            rows=len(ids),
            import_id=import_id,
            first_id=ids[0],
            last_id=ids[-1],
        )

    def import_marks_csv(
        self, path: str | os.PathLike[str], progress: Callable[[int], None] | None = None
    ) -> ImportReport:
        """Import a mark CSV (``MARK_COLUMNS``) as one intraday mark set: all points or none."""
        p, data, digest, header, rows = _read_csv(
            path, MARK_COLUMNS + MARK_INFO_COLUMNS, MARK_REQUIRED
        )
        with self._read() as conn:
            unders = {r[1]: r[0] for r in self._underlying_rows(conn)}
        problems: list[_Problem] = []
        points: list[tuple[Any, ...]] = []
        seen: dict[tuple[Any, ...], int] = {}
        for line, rec in rows:
            point = _parse_mark_row(line, rec, unders, problems)
            if point is None:
                continue
            key = point[:6]
            if key in seen:
                problems.append(_Problem(line, "", f"the same point as line {seen[key]}"))
                continue
            seen[key] = line
            points.append(point)
        _raise_if(p, problems)
        if not points:
            raise StoreError(f"{p.name}: nothing imported; the file has no mark rows")
        with self._write() as conn:
            self._check_not_imported(conn, "marks", digest, p)
            set_id = self._new_mark_set(
                conn, "intraday", len(points), note=f"import of {p.name}", source=f"file:{p.name}"
            )
            for start in range(0, len(points), PROGRESS_EVERY):
                chunk = points[start : start + PROGRESS_EVERY]
                conn.executemany(
                    "INSERT INTO mark (mark_set_id, seq, kind, underlying_id, currency, expiry, "
                    "strike, tenor_days, value) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)",
                    [(set_id, start + j + 1, *pt) for j, pt in enumerate(chunk)],
                )
                if progress is not None and start + len(chunk) < len(points):
                    progress(start + len(chunk))
            import_id = self._record_import(conn, "marks", p, digest, len(points), set_id, set_id)
        return ImportReport(
            path=p,
            kind="marks",
            rows=len(points),
            import_id=import_id,
            first_id=set_id,
            last_id=set_id,
        )

    @staticmethod
    def _trade_id_problems(
        conn: sqlite3.Connection, rows: list[tuple[int, dict[str, str]]]
    ) -> list[_Problem]:
        """Problems of the ``trade_id`` cells (an export's): a row naming a trade already in this
        book is that trade again, and importing it would double the position; an id given twice
        or not a whole number is named too. Empty cells (and no column) are new trades."""
        problems: list[_Problem] = []
        first_line: dict[int, int] = {}
        for line, rec in rows:
            text = _cell(rec, "trade_id")
            if not text:
                continue
            if not re.fullmatch(r"[0-9]{1,18}", text):
                problems.append(_Problem(line, "trade_id", f"{text!r} is not a trade id"))
            elif int(text) in first_line:
                problems.append(
                    _Problem(line, "trade_id", f"the same trade as line {first_line[int(text)]}")
                )
            else:
                first_line[int(text)] = line
        ids = sorted(first_line)
        for start in range(0, len(ids), 500):
            chunk = ids[start : start + 500]
            found = conn.execute(
                f"SELECT trade_id FROM trade WHERE trade_id IN ({','.join('?' * len(chunk))})",
                chunk,
            ).fetchall()
            for (tid,) in found:
                problems.append(
                    _Problem(
                        first_line[tid],
                        "trade_id",
                        f"trade {tid} is already in this book (the row is an export of it; "
                        "importing it again would double the position). To book the rows as "
                        "new trades, leave the trade_id column out",
                    )
                )
        return sorted(problems, key=lambda q: q.line)

    @staticmethod
    def _check_not_imported(conn: sqlite3.Connection, kind: str, digest: str, p: Path) -> None:
        row = conn.execute(
            "SELECT import_id, file_name, imported_at, who FROM import_file "
            "WHERE kind = ? AND sha256 = ?",
            (kind, digest),
        ).fetchone()
        if row:
            raise StoreError(
                f"{p.name}: nothing imported; the same content was already imported "
                f"as import {row[0]} ({row[1]}, at {row[2]} by {row[3]})"
            )

    def _record_import(
        self,
        conn: sqlite3.Connection,
        kind: str,
        p: Path,
        digest: str,
        rows: int,
        first: int,
        last: int,
    ) -> int:
        cur = conn.execute(
            "INSERT INTO import_file (kind, file_name, sha256, rows, imported_at, who, first_id, "
            "last_id) VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
            (kind, p.name, digest, rows, _ts(_now()), self.who, first, last),
        )
        return int(cur.lastrowid or 0)


# --------------------------------------------------------------------------------------------
# Validation helpers (raise StoreError with a plain message)


def _after_cutoff(t: datetime, expiry: str, cutoff: str, tz_name: str) -> str | None:
    """Why a trade dealt at ``t`` (aware) is too late for a contract expiring on ``expiry`` at
    local ``cutoff`` in ``tz_name``, or None when it was dealt at or before that instant."""
    end = _cutoff_utc(expiry, cutoff, tz_name)
    if t <= end:
        return None
    return (
        f"the contract expired at {expiry} {cutoff} {tz_name} ({_ts(end)}): the trade time "
        f"{_ts(t)} is after the contract's cut-off"
    )


def _check_symbol(symbol: str) -> None:
    if not isinstance(symbol, str) or not symbol.strip() or len(symbol) > 64:
        raise StoreError(f"symbol {symbol!r} must be 1 to 64 characters")


def _within(bound: limits.Bound, value: Any, field: str | None = None) -> float:
    """``value`` checked against ``bound`` (``limits``); else a ``StoreError`` naming the field."""
    try:
        return bound.check(value, field)
    except limits.LimitError as exc:
        raise StoreError(str(exc)) from None


def _within_time(t: datetime, field: str = "time") -> None:
    try:
        limits.check_time(t, field)
    except limits.LimitError as exc:
        raise StoreError(str(exc)) from None


def _check_id(value: Any, field: str) -> int:
    """A row id as an exact int of SQLite's 64-bit range; a ``StoreError`` naming ``field``."""
    try:
        return limits.ID.check_whole(value, field)
    except limits.LimitError as exc:
        raise StoreError(str(exc)) from None


def _check_quantity(quantity: Any) -> int:
    q = _within(limits.QUANTITY, quantity)
    if q == 0:
        raise StoreError("quantity must not be zero")
    return int(q)


def _check_price(price: Any) -> float:
    return _within(limits.PRICE, price)


def _check_strike(strike: Any) -> float:
    return round(_within(limits.LEVEL, strike, "strike"), 8)


def _check_vol(vol: Any) -> float:
    return _within(limits.VOL, vol)


def _check_decimal(value: Any, what: str) -> float:
    return _within(limits.RATE, value, what)


def _check_currency(currency: Any) -> str:
    if not isinstance(currency, str) or not re.fullmatch(r"[A-Z]{3}", currency):
        raise StoreError(f"currency {currency!r} must be an ISO 4217 code like USD")
    return currency


def _check_tenor(tenor_days: Any) -> int:
    return int(_within(limits.TENOR, tenor_days))


def _check_source(source: str) -> None:
    if source not in ("typed", "exercise", "demo") and not (
        source.startswith("file:") and len(source) > 5
    ):
        raise StoreError(f"source {source!r} must be typed, exercise, demo or file:NAME")


def _contract_terms(
    expiry: date | str | None, strike: float | None, is_call: bool | None
) -> tuple[str, str | None, float | None]:
    """(option_type, expiry text, strike) from user terms; all None = the underlying itself."""
    if expiry is None and strike is None and is_call is None:
        return "U", None, None
    if expiry is None or strike is None or is_call is None:
        raise StoreError(
            "an option needs an expiry, a strike and call or put "
            "(leave all three out for the underlying itself)"
        )
    return (
        ("C" if is_call else "P"),
        parse_date(expiry, "expiry").isoformat(),
        _check_strike(strike),
    )


# --------------------------------------------------------------------------------------------
# CSV reading and row parsing


def _read_csv(
    path: str | os.PathLike[str], known: Sequence[str], required: Sequence[str]
) -> tuple[Path, bytes, str, list[str], list[tuple[int, dict[str, str]]]]:
    """(path, bytes, sha256, header, [(line, {column: text})]) of a UTF-8 CSV (BOM, CRLF or LF)."""
    p = Path(path)
    try:
        data = p.read_bytes()
    except FileNotFoundError:
        raise StoreError(f"no file {p}") from None
    except OSError as exc:
        raise StoreError(f"cannot read {p}: {exc.strerror}") from None
    digest = hashlib.sha256(data).hexdigest()
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = data[: exc.start].count(b"\n") + 1
        raise StoreError(
            f"{p.name}: nothing imported; line {line} is not UTF-8 (byte {exc.start + 1})"
        ) from None
    if "\x00" in text:
        line = text[: text.index("\x00")].count("\n") + 1
        raise StoreError(f"{p.name}: nothing imported; line {line} holds a NUL character")
    reader = csv.reader(io.StringIO(text, newline=""), strict=True)
    try:
        header = next(reader)
    except StopIteration:
        raise StoreError(f"{p.name}: nothing imported; the file is empty") from None
    except csv.Error as exc:
        raise StoreError(f"{p.name}: nothing imported; line 1: {exc}") from None
    header = [h.strip() for h in header]
    problems: list[_Problem] = []
    for i, h in enumerate(header):
        if h not in known:
            problems.append(_Problem(1, h, f"unknown column (known: {', '.join(known)})"))
        elif header.index(h) != i:
            problems.append(_Problem(1, h, "column given twice"))
    for col in required:
        if col not in header:
            problems.append(_Problem(1, col, "required column is missing"))
    _raise_if(p, problems)
    rows: list[tuple[int, dict[str, str]]] = []
    start = reader.line_num + 1
    while True:
        try:
            rec = next(reader)
        except StopIteration:
            break
        except csv.Error as exc:
            problems.append(_Problem(start, "", f"cannot read the CSV: {exc}"))
            _raise_if(p, problems)
        if rec and any(c.strip() for c in rec):
            if len(rec) != len(header):
                problems.append(
                    _Problem(start, "", f"{len(rec)} cells where the header has {len(header)}")
                )
            else:
                rows.append((start, dict(zip(header, rec, strict=False))))
        start = reader.line_num + 1
    _raise_if(p, problems)
    return p, data, digest, header, rows


def _raise_if(p: Path, problems: list[_Problem]) -> None:
    if problems:
        raise CsvImportError(p, problems[:MAX_PROBLEMS], len(problems))


def _unneutralise(text: str) -> str:
    """Undo the leading quote export puts before formula-like text or text starting with a quote."""
    if len(text) >= 2 and text[0] == "'" and text[1] in "'=+-@\t\r":
        return text[1:]
    return text


def _escape_quote(text: str) -> str:
    """Text for export: a leading quote is doubled, so the importer's ``_unneutralise`` is exact."""
    return "'" + text if text.startswith("'") else text


def _cell(rec: dict[str, str], col: str) -> str:
    return _unneutralise(rec.get(col, "").strip())


def _parse_trade_row(
    line: int,
    rec: dict[str, str],
    unders: dict[str, tuple[Any, ...]],
    now: datetime,
    problems: list[_Problem],
) -> tuple[Any, ...] | None:
    """One checked trade row, or None after appending its problems."""
    before = len(problems)

    def bad(col: str, msg: str) -> None:
        problems.append(_Problem(line, col, msg))

    book = _cell(rec, "book")
    if not 1 <= len(book) <= 64:
        bad("book", "must be 1 to 64 characters")
    symbol = _cell(rec, "symbol")
    if symbol not in unders:
        bad("symbol", f"unknown underlying {symbol!r}")
    typ = _cell(rec, "type").upper()
    expiry_text, strike_text = _cell(rec, "expiry"), _cell(rec, "strike")
    expiry: str | None = None
    strike: float | None = None
    is_call: bool | None = None
    if typ in ("C", "P"):
        is_call = typ == "C"
        try:
            expiry = parse_date(expiry_text, "expiry").isoformat()
        except StoreError as exc:
            bad("expiry", str(exc))
        try:
            strike = _check_strike(strike_text)
        except StoreError as exc:
            bad("strike", str(exc) if strike_text else "an option needs a strike")
    elif typ == "U":
        if expiry_text or strike_text:
            bad(
                "expiry" if expiry_text else "strike",
                "the underlying itself (type U) has no expiry or strike",
            )
    else:
        bad("type", f"{typ!r} is not C (call), P (put) or U (the underlying itself)")
    qty = price = None
    try:
        qty = _check_quantity(_cell(rec, "quantity"))
    except StoreError as exc:
        bad("quantity", str(exc))
    try:
        price = _check_price(_cell(rec, "price"))
    except StoreError as exc:
        bad("price", str(exc))
    t = None
    try:
        t = parse_time(_cell(rec, "trade_time"))
        if t > now:
            bad("trade_time", f"{t.isoformat()} is in the future")
        elif expiry is not None and symbol in unders:
            late = _after_cutoff(t, expiry, unders[symbol][13], unders[symbol][12])
            if late:
                bad("trade_time", late)
    except StoreError as exc:
        bad("trade_time", str(exc))
    style = _cell(rec, "style").lower()
    american = {"": None, "american": True, "european": False}.get(style, "bad")
    if american == "bad":
        bad("style", f"{style!r} is not american or european")
    mult_text = _cell(rec, "multiplier")
    mult = None
    if mult_text:
        try:
            mult = _within(limits.MULTIPLIER, mult_text)
        except StoreError as exc:
            bad("multiplier", str(exc))
    settlement = _cell(rec, "settlement").lower()
    cash = {"": None, "cash": True, "physical": False}.get(settlement, "bad")
    if cash == "bad":
        bad("settlement", f"{settlement!r} is not cash or physical")
    state = _cell(rec, "state")
    if state and state != "live":
        bad("state", f"only live trades can be imported, this one is {state!r}")
    if len(problems) > before:
        return None
    return (
        book,
        symbol,
        expiry,
        strike,
        is_call,
        qty,
        price,
        t,
        american,
        mult,
        cash,
        _cell(rec, "note"),
    )


def _parse_mark_row(
    line: int, rec: dict[str, str], unders: dict[str, int], problems: list[_Problem]
) -> tuple[Any, ...] | None:
    """One checked mark point (kind, underlying_id, currency, expiry, strike, tenor, value)."""
    before = len(problems)

    def bad(col: str, msg: str) -> None:
        problems.append(_Problem(line, col, msg))

    kind = _cell(rec, "kind").lower()
    symbol, ccy = _cell(rec, "symbol"), _cell(rec, "currency")
    expiry_text, strike_text, tenor_text = (
        _cell(rec, "expiry"),
        _cell(rec, "strike"),
        _cell(rec, "tenor_days"),
    )
    value_text = _cell(rec, "value")
    if kind not in MARK_KINDS:
        bad("kind", f"{kind!r} is not one of {', '.join(MARK_KINDS)}")
        return None
    uid = None
    if kind == "rate":
        for col, text in (("symbol", symbol), ("expiry", expiry_text), ("strike", strike_text)):
            if text:
                bad(col, "a rate mark has no " + col)
    else:
        if symbol not in unders:
            bad("symbol", f"unknown underlying {symbol!r}")
        else:
            uid = unders[symbol]
        for col, text in (("currency", ccy), ("tenor_days", tenor_text)):
            if text:
                bad(col, f"a {kind} mark has no {col}")
    expiry = strike = tenor = None
    currency = None
    if kind == "vol":
        try:
            expiry = parse_date(expiry_text, "expiry").isoformat()
        except StoreError as exc:
            bad("expiry", str(exc))
        if strike_text:
            try:
                strike = _check_strike(strike_text)
            except StoreError as exc:
                bad("strike", str(exc))
    elif kind in ("spot", "div_yield"):
        for col, text in (("expiry", expiry_text), ("strike", strike_text)):
            if text:
                bad(col, f"a {kind} mark has no {col}")
    if kind == "rate":
        try:
            currency = _check_currency(ccy)
        except StoreError as exc:
            bad("currency", str(exc))
        try:
            tenor = _check_tenor(tenor_text)
        except StoreError as exc:
            bad("tenor_days", str(exc))
    value = None
    try:
        if kind == "spot":
            value = _within(limits.LEVEL, value_text, "spot")
        elif kind == "vol":
            value = _check_vol(value_text)
        else:
            value = _check_decimal(value_text, "rate" if kind == "rate" else "dividend yield")
    except StoreError as exc:
        bad("value", str(exc))
    if len(problems) > before:
        return None
    return (kind, uid, currency, expiry, strike, tenor, value)


def trade_csv_row(t: TradeRecord) -> list[Any]:
    """The CSV cells of a trade: ``TRADE_COLUMNS`` then ``TRADE_INFO_COLUMNS`` (import format)."""
    return [
        _escape_quote(t.book),
        _escape_quote(t.symbol),
        t.option_type,
        t.expiry.isoformat() if t.expiry else "",
        "" if t.strike is None else repr(float(t.strike)).removesuffix(".0"),
        t.quantity,
        repr(float(t.price)),
        _ts(t.trade_time),
        "american" if t.american else "european",
        repr(float(t.multiplier)).removesuffix(".0"),
        "cash" if t.cash_settled else "physical",
        _escape_quote(t.note),
        t.trade_id,
        t.state,
        t.who,
        t.source,
        _ts(t.booked_at),
        t.contract,
    ]


def mark_csv_row(m: MarkRecord) -> list[Any]:
    """The CSV cells of a mark point, ``MARK_COLUMNS`` then ``MARK_INFO_COLUMNS``."""
    return [
        m.kind,
        _escape_quote(m.symbol or ""),
        m.currency or "",
        m.expiry.isoformat() if m.expiry else "",
        "" if m.strike is None else repr(float(m.strike)).removesuffix(".0"),
        "" if m.tenor_days is None else m.tenor_days,
        repr(float(m.value)),
        m.mark_id,
        m.mark_set_id,
        m.set_kind,
        _ts(m.marked_at),
        m.who,
    ]


def timestamp_text(t: datetime) -> str:
    """The store's text for an instant (UTC, microseconds, Z)."""
    return _ts(t)
