"""The SQLite file itself: ``schema.sql`` in versioned sections, configured connections, creating
and migrating a book, and the checks every open makes.

Every connection runs with ``isolation_level=None`` (no implicit transactions), a busy timeout,
foreign keys on, ``recursive_triggers`` on, ``synchronous=FULL`` and ``trusted_schema=OFF``.
Read-only connections open the file by URI ``mode=ro`` with ``query_only`` on and ATTACH
disabled (``mode=ro`` alone lets ATTACH create files).
"""

from __future__ import annotations

import itertools
import os
import re
import sqlite3
import threading
from collections.abc import Iterable, Iterator, Sequence
from contextlib import contextmanager
from pathlib import Path
from typing import TYPE_CHECKING, Any
from urllib.parse import quote
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

from blotter.store.errors import StoreError, open_error, sql_error
from blotter.store.files import packaged_file, remove_book_files
from blotter.store.times import business_date, from_timestamp

if TYPE_CHECKING:
    from typing import TypeAlias

    import sqlite_utils

    from blotter.store import dialect

    Conn: TypeAlias = sqlite3.Connection | dialect.Connection
    """A store connection: an SQLite file's, or a PostgreSQL book's (``dialect.Connection``)."""

    Row: TypeAlias = sqlite3.Row | dialect.Row
    """A result row read by column name or position."""

APPLICATION_ID = 0x426C7472
"""``PRAGMA application_id`` of a blotter book ("Bltr"), so a foreign SQLite file is recognised."""

BUSY_TIMEOUT_MS = 5000
"""How long a write waits for another writer before giving up with ``BusyError``, milliseconds.

Read when each connection is made, so a test may set it here for the connections it opens."""

IMMUTABLE = "ro&immutable=1"
"""URI mode of a file nothing ever writes (the shipped demo, an idle book read once): SQLite reads
it without locks or -wal/-shm side files."""

DEFAULT_BASE_CURRENCY = "USD"
"""The base currency of a book made without one, and of a book upgraded to schema 9."""

BOOK_TABLES = frozenset({"trade", "contract", "mark", "mark_set", "underlying"})
"""Tables every blotter book has; a file missing one is refused."""

_SECTION = re.compile(r"^-- @version (\d+)\b", re.MULTILINE)


def schema_path() -> Path:
    """``schema.sql``: inside the installed package, else at the top of a source checkout."""
    return packaged_file("schema.sql")


def split_statements(sql: str) -> list[str]:
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


def schema_sections(text: str | None = None) -> dict[int, list[str]]:
    """The statements of each ``-- @version N`` section of ``schema.sql``, by version."""
    if text is None:
        text = schema_path().read_text(encoding="utf-8")
    marks = list(_SECTION.finditer(text))
    out: dict[int, list[str]] = {}
    for i, m in enumerate(marks):
        end = marks[i + 1].start() if i + 1 < len(marks) else len(text)
        out[int(m.group(1))] = split_statements(text[m.end() : end])
    if not out:
        raise StoreError(f"{schema_path()} has no '-- @version N' sections")
    return out


SCHEMA_VERSION = max(schema_sections())
"""The schema version this code writes (the last section of ``schema.sql``)."""


def uri(path: Path, mode: str) -> str:
    """The ``file:`` URI SQLite opens ``path`` by, in URI mode ``mode`` (``ro``, ``rw``, ...)."""
    return f"file:{quote(str(path.absolute()))}?mode={mode}"


def connect(path: Path, read_only: bool, mode: str | None = None) -> sqlite3.Connection:
    """A configured connection (see the module docstring); ``mode`` overrides the URI mode."""
    conn = sqlite3.connect(
        uri(path, mode or ("ro" if read_only else "rw")),
        uri=True,
        timeout=BUSY_TIMEOUT_MS / 1000,
        isolation_level=None,
        check_same_thread=False,
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


def rows(conn: Conn, sql: str, params: Sequence[Any] = ()) -> list[Row]:
    """The rows of a query, each read by column name (``row["symbol"]``)."""
    if not isinstance(conn, sqlite3.Connection):
        return list(conn.rows(sql, params))
    cur = conn.cursor()
    cur.row_factory = sqlite3.Row
    return cur.execute(sql, params).fetchall()


def one(conn: Conn, sql: str, params: Sequence[Any] = ()) -> Row | None:
    """The first row of a query, read by column name, or None when there is none."""
    if not isinstance(conn, sqlite3.Connection):
        found = conn.rows(sql, params)
        return found[0] if found else None
    cur = conn.cursor()
    cur.row_factory = sqlite3.Row
    row: sqlite3.Row | None = cur.execute(sql, params).fetchone()
    return row


def columns(
    conn: Conn, sql: str, params: Sequence[Any] = ()
) -> dict[str, tuple[Any, ...]]:
    """The result of a query by column: each column's values in row order, by column name
    (for results read into arrays, where one tuple per column is what is wanted)."""
    cur = conn.execute(sql, params)
    names = [d[0] for d in cur.description]
    found = cur.fetchall()
    if not found:
        return {name: () for name in names}
    return dict(zip(names, zip(*found, strict=True), strict=True))


def scalar(conn: Conn, sql: str, params: Sequence[Any] = ()) -> Any:
    """The single value a query returns (a count, a pragma, a max)."""
    return conn.execute(sql, params).fetchone()[0]


def utils_db(conn: sqlite3.Connection) -> sqlite_utils.Database:
    """sqlite-utils over ``conn`` as it is: no pragma changed, no plugin loaded.

    Its writes join the transaction ``conn`` has open (each batch in a savepoint), so inside a
    store transaction it never commits on its own. Imported here, on first use, so reads that
    never need it do not pay for loading it.
    """
    import sqlite_utils

    return sqlite_utils.Database(conn, recursive_triggers=False, execute_plugins=False)


def schema_functions(
    conn: sqlite3.Connection, tz: ZoneInfo, base_currency: str = DEFAULT_BASE_CURRENCY
) -> None:
    """Functions ``schema.sql``'s upgrade statements call (never its triggers, which any SQLite
    client must be able to run): ``desk_date(instant)``, a stored instant's business date,
    ``desk_zone()``, the zone the book's closes are dated in from now on, and
    ``base_currency_default()``, the base currency a new or upgraded book starts with."""

    def desk_date(text: str | None) -> str | None:
        return None if text is None else business_date(from_timestamp(text), tz).isoformat()

    conn.create_function("desk_date", 1, desk_date, deterministic=True)
    conn.create_function("desk_zone", 0, lambda: tz.key, deterministic=True)
    conn.create_function("base_currency_default", 0, lambda: base_currency, deterministic=True)


def book_zone(conn: Conn, path: Path | str) -> ZoneInfo:
    """The desk zone the book at ``path`` dates its closes in (``book_zone``, written with it)."""
    row = one(conn, "SELECT zone FROM book_zone")
    if row is None:
        raise StoreError(f"{path} names no desk time zone (its book_zone row is missing)")
    try:
        return ZoneInfo(str(row["zone"]))
    except (ZoneInfoNotFoundError, ValueError):
        raise StoreError(
            f"{path} dates its closes in {row['zone']!r}, a time zone this machine does not know"
        ) from None


@contextmanager
def immediate(conn: sqlite3.Connection) -> Iterator[None]:
    """One ``BEGIN IMMEDIATE`` ... ``COMMIT`` on ``conn``, rolled back (if still open) on any
    error; for the schema's own transactions, before a ``Store`` exists."""
    conn.execute("BEGIN IMMEDIATE")
    try:
        yield
        conn.execute("COMMIT")
    except BaseException:
        if conn.in_transaction:
            conn.execute("ROLLBACK")
        raise


@contextmanager
def removed_on_failure(path: Path) -> Iterator[None]:
    """Remove the new file ``path`` (and its side files) when the block fails, SQLite's errors
    said in words: a book or backup half made is never left behind."""
    try:
        yield
    except sqlite3.Error as exc:
        remove_book_files(path)
        raise sql_error(exc, path) from None
    except BaseException:
        remove_book_files(path)
        raise


def apply_schema(
    conn: sqlite3.Connection, tz: ZoneInfo, base_currency: str = DEFAULT_BASE_CURRENCY
) -> None:
    """Make a new book on the empty file ``conn`` has open: WAL mode, then every schema section
    and the application id in one transaction (closes dated in the desk zone ``tz``, totals
    converted to ``base_currency``)."""
    conn.execute("PRAGMA journal_mode = WAL")
    schema_functions(conn, tz, base_currency)
    with immediate(conn):
        conn.execute(f"PRAGMA application_id = {APPLICATION_ID:d}")
        for _version, statements in sorted(schema_sections().items()):
            for statement in statements:
                conn.execute(statement)
        conn.execute(f"PRAGMA user_version = {SCHEMA_VERSION:d}")


def migrate(conn: sqlite3.Connection, tz: ZoneInfo) -> None:
    """Run each schema section above the file's version, each in one transaction with its
    ``user_version`` (closes are dated in the desk's zone ``tz``), so a migration killed midway
    leaves the last version whole and a rerun finishes it."""
    sections = schema_sections()
    schema_functions(conn, tz)
    for version in sorted(sections):
        with immediate(conn):
            if scalar(conn, "PRAGMA user_version") < version:
                for statement in sections[version]:
                    conn.execute(statement)
                conn.execute(f"PRAGMA user_version = {int(version):d}")


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


_CHECKED: dict[str, tuple[Any, ...]] = {}
"""Per book path, the file state (``_file_state``) that last passed ``check_file``."""

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


def check_file(conn: sqlite3.Connection, path: Path) -> None:
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
            raise open_error(exc, path) from None
        if problems != ["ok"]:
            raise StoreError(
                f"{path} is damaged (SQLite's integrity check: {'; '.join(problems[:3])}); "
                "restore it from a backup"
            )
        _CHECKED[key] = state


def open_checks(conn: sqlite3.Connection, path: Path, verify: bool) -> int:
    """Refuse a foreign, empty, damaged or too-new file; return its schema version."""
    try:
        app_id = scalar(conn, "PRAGMA application_id")
        version = scalar(conn, "PRAGMA user_version")
        tables = {
            r["name"] for r in rows(conn, "SELECT name FROM sqlite_master WHERE type = 'table'")
        }
    except (sqlite3.Error, UnicodeDecodeError) as exc:
        raise open_error(exc, path) from None
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
    if not BOOK_TABLES <= tables:
        raise StoreError(f"{path} is missing blotter tables; restore it from a backup")
    if verify:
        check_file(conn, path)
    return int(version)


INSERT_BATCH = 100
"""Rows per multi-row INSERT statement of a bulk insert (sqlite-utils caps it by column count)."""


def insert_rows(
    conn: Conn,
    table: str,
    names: Sequence[str],
    values: Iterable[Sequence[Any]],
) -> None:
    """Insert ``values`` (one sequence per row, in the order of ``names``) into ``table`` with
    sqlite-utils' ``insert_all``: multi-row INSERT statements of ``INSERT_BATCH`` rows, in the
    order given, each in a savepoint of the transaction ``conn`` has open.

    Refused outside a transaction, where sqlite-utils would commit each batch on its own (a
    failure midway would then leave the batches before it written). A PostgreSQL book takes the
    rows by one COPY in the open transaction (``dialect.Connection.copy_rows``).
    """
    if not conn.in_transaction:
        raise RuntimeError(f"a bulk insert into {table} must run inside a store transaction")
    if not isinstance(conn, sqlite3.Connection):
        conn.copy_rows(table, names, values)
        return
    utils_db(conn).table(table).insert_all(
        itertools.chain([list(names)], values), batch_size=INSERT_BATCH
    )
