"""A book kept in a PostgreSQL database: ``schema_pg.sql`` in versioned sections, connections
through psycopg 3 (the optional ``postgres`` extra), making a book's tables, and listening for
commits.

A book here is one database (its ``public`` schema), named by a ``postgresql://`` URL. The
server enforces what the SQLite file's triggers do, and privileges besides: see the head of
``schema_pg.sql``. psycopg is imported on first use, so nothing else of the store loads it.
"""

from __future__ import annotations

import functools
import re
import sys
import threading
import time
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import TYPE_CHECKING, Any
from urllib.parse import urlsplit, urlunsplit
from zoneinfo import ZoneInfo

from blotter.store.db import APPLICATION_ID
from blotter.store.dialect import KEYS, Connection
from blotter.store.errors import StoreError
from blotter.store.files import packaged_file

if TYPE_CHECKING:
    import psycopg

URL_SCHEMES = ("postgresql://", "postgres://")
"""How a ``--db`` value names a PostgreSQL book instead of a file."""

CHANNEL = "blotter_book"
"""The channel every commit that writes a book's tables notifies (``schema_pg.sql``)."""

WRITER_ROLE = "blotter_writer"
"""The group role that reads and appends (the app's)."""

READER_ROLE = "blotter_reader"
"""The group role that only reads (viewers')."""

PG_ONLY_TABLES = frozenset({"blotter_meta"})
"""Tables only a PostgreSQL book has: its id and schema version (SQLite keeps them in PRAGMAs)."""

INSTALL_HINT = "PostgreSQL books need psycopg: pip install 'blotter[postgres]'"

_SECTION = re.compile(r"^-- @version (\d+)\b", re.MULTILINE)


def is_url(text: str) -> bool:
    """Whether ``text`` names a PostgreSQL book (a ``postgresql://`` URL) rather than a file."""
    return text.startswith(URL_SCHEMES)


def schema_pg_path() -> Path:
    """``schema_pg.sql``: inside the installed package, else at the top of a source checkout."""
    return packaged_file("schema_pg.sql")


def pg_sections(text: str | None = None) -> dict[int, str]:
    """The text of each ``-- @version N`` section of ``schema_pg.sql``, by version; each runs as
    one multi-statement call, so plpgsql bodies need no splitting."""
    if text is None:
        text = schema_pg_path().read_text(encoding="utf-8")
    marks = list(_SECTION.finditer(text))
    if not marks:
        raise StoreError(f"{schema_pg_path()} has no '-- @version N' sections")
    ends = [m.start() for m in marks[1:]] + [len(text)]
    return {int(m.group(1)): text[m.end() : end] for m, end in zip(marks, ends, strict=True)}


def connect(url: str, autocommit: bool = False) -> psycopg.Connection[Any]:
    """A connection to the database ``url`` names; ``StoreError`` in words when psycopg is not
    installed or the server refuses."""
    try:
        import psycopg
    except ImportError:
        raise StoreError(INSTALL_HINT) from None
    try:
        return psycopg.connect(url, autocommit=autocommit)
    except psycopg.Error as exc:
        raise StoreError(f"cannot connect to the PostgreSQL book ({exc})".strip()) from None


def schema_version(conn: psycopg.Connection[Any]) -> int | None:
    """The schema version the database holds, or None when it holds no blotter book."""
    found = conn.execute("SELECT to_regclass('public.blotter_meta') IS NOT NULL").fetchone()
    if not found or not found[0]:
        return None
    row = conn.execute("SELECT schema_version FROM blotter_meta").fetchone()
    return None if row is None else int(row[0])


def book_tables(conn: psycopg.Connection[Any]) -> set[str]:
    """The tables of the database's ``public`` schema."""
    found = conn.execute(
        "SELECT table_name FROM information_schema.tables "
        "WHERE table_schema = 'public' AND table_type = 'BASE TABLE'"
    ).fetchall()
    return {str(name) for (name,) in found}


def create_schema(conn: psycopg.Connection[Any], zone: ZoneInfo, base_currency: str) -> int:
    """Make a book's tables in the empty database ``conn`` has open, inside the transaction the
    caller holds: every section, then the version, the desk zone and the first base currency.
    Refuses a database that holds any table. Returns the version made."""
    tables = book_tables(conn)
    if tables:
        raise StoreError(
            "the PostgreSQL database is not empty (it holds "
            f"{', '.join(sorted(tables)[:5])}): a book is made only in an empty database"
        )
    sections = pg_sections()
    for version in sorted(sections):
        conn.execute(sections[version].encode("utf-8"))
    version = max(sections)
    conn.execute(
        "INSERT INTO blotter_meta (only_row, application_id, schema_version) "
        "VALUES (1, %s, %s)",
        (APPLICATION_ID, version),
    )
    conn.execute("INSERT INTO book_zone (only_row, zone) VALUES (1, %s)", (zone.key,))
    conn.execute(
        "INSERT INTO base_currency (base_id, currency) VALUES (1, %s)", (base_currency,)
    )
    return version


def migrate(conn: psycopg.Connection[Any], sections: dict[int, str] | None = None) -> int:
    """Run each section of ``schema_pg.sql`` (or ``sections``) above the database's version,
    each in one transaction with the version it reaches, so an upgrade stopped midway leaves
    the last version whole and a rerun finishes it; returns the version reached. ``conn`` has
    no transaction open."""
    import psycopg

    if sections is None:
        sections = pg_sections()
    version = schema_version(conn)
    conn.rollback()
    if version is None:
        raise StoreError("the PostgreSQL database holds no blotter book")
    for number in sorted(n for n in sections if n > version):
        try:
            with conn.transaction():
                conn.execute(sections[number].encode("utf-8"))
                conn.execute("UPDATE blotter_meta SET schema_version = %s", (number,))
        except psycopg.Error as exc:
            raise StoreError(
                f"upgrading the PostgreSQL book to schema {number} failed ({str(exc).strip()}); "
                f"it is left at schema {version}, whole"
            ) from None
        version = number
    return version


@contextmanager
def listening(url: str) -> Iterator[ChangeListener]:
    """A ``ChangeListener`` on its own connection, closed when the block ends."""
    conn = connect(url, autocommit=True)
    try:
        conn.execute(f"LISTEN {CHANNEL}")
        yield ChangeListener(conn)
    finally:
        conn.close()


class ChangeListener:
    """Commits to a PostgreSQL book, as the server announces them (LISTEN/NOTIFY)."""

    def __init__(self, conn: psycopg.Connection[Any]) -> None:
        self._conn = conn
        self.commits_seen = 0

    def wait(self, timeout_s: float) -> bool:
        """Wait up to ``timeout_s`` for a commit's notification; whether one came (all that
        arrived meanwhile are taken, so a burst of commits counts as one refresh)."""
        got = False
        for _note in self._conn.notifies(timeout=timeout_s, stop_after=1):
            got = True
        if got:
            for _note in self._conn.notifies(timeout=0):
                pass
            self.commits_seen += 1
        return got


def shown(book: str) -> str:
    """``book`` as it may be printed: a URL's password replaced by ``***``, a path as it is."""
    if not is_url(book):
        return book
    parts = urlsplit(book)
    if parts.password is None:
        return book
    user = parts.username or ""
    host = parts.netloc.rsplit("@", 1)[1]
    return urlunsplit(parts._replace(netloc=f"{user}:***@{host}"))


STOP_CHECK_S = 0.5
"""How often a watch waiting for a commit looks at its stop event, seconds."""


def _woken(listener: ChangeListener, stop: threading.Event, interval_s: float) -> bool:
    """Wait up to ``interval_s`` for a commit, in slices so ``stop`` ends the wait soon; whether
    a commit came."""
    deadline = time.monotonic() + interval_s
    while not stop.is_set():
        left = deadline - time.monotonic()
        if left <= 0:
            return False
        if listener.wait(min(left, STOP_CHECK_S)):
            return True
    return False


def changes(url: str, stop: threading.Event, interval_s: float) -> Iterator[int | None]:
    """A count of the commits announced to the book ``url``: at once when listening starts, then
    at each commit and at least once every ``interval_s`` until ``stop`` is set
    (``Store.changes``'s protocol, woken by LISTEN/NOTIFY instead of a poll). None for a tick
    when the server could not be reached; the count then moves on once listening again, since
    commits may have been missed meanwhile."""
    import psycopg

    seen, lost = 0, False
    while not stop.is_set():
        try:
            with listening(url) as listener:
                if lost:
                    seen, lost = seen + 1, False
                yield seen
                while not stop.is_set():
                    if _woken(listener, stop, interval_s):
                        seen += 1
                    yield seen
        except (psycopg.Error, StoreError):
            lost = True
            yield None
            stop.wait(interval_s)


# ---- the store's connection to a PostgreSQL book

LOCK_KEY = APPLICATION_ID
"""The advisory lock every write transaction takes first (``schema_pg.sql``'s writer lock)."""

BEGIN_WRITE = ("BEGIN", f"SELECT pg_advisory_xact_lock({LOCK_KEY:d})")
"""How a write transaction starts: READ COMMITTED, so each statement after the lock sees every
commit before it (BEGIN IMMEDIATE's part)."""

BEGIN_READ = ("BEGIN ISOLATION LEVEL REPEATABLE READ READ ONLY",)
"""How a read transaction starts: one snapshot for all its queries, as SQLite's read gives."""

def _member_of(conn: psycopg.Connection[Any], role: str) -> bool:
    """Whether the login may act as ``role`` (a superuser may act as any)."""
    row = conn.execute(
        "SELECT EXISTS (SELECT 1 FROM pg_roles WHERE rolname = %s) "
        "AND pg_has_role(current_user, %s, 'MEMBER')",
        (role, role),
    ).fetchone()
    return bool(row and row[0])


def open_connection(url: str, read_only: bool, busy_timeout_ms: int) -> Connection:
    """A store connection to the book ``url``: autocommit (the store begins and ends its own
    transactions), UTC, a lock timeout of ``busy_timeout_ms`` (SQLite's busy timeout). Read-only:
    as ``blotter_reader`` when the login may act as it, and every transaction READ ONLY either way,
    so the server refuses any write."""
    raw = connect(url, autocommit=True)
    import psycopg

    try:
        raw.execute("SET TIME ZONE 'UTC'")
        raw.execute(f"SET lock_timeout = {int(busy_timeout_ms):d}")
        if read_only:
            if _member_of(raw, READER_ROLE):
                raw.execute(f"SET ROLE {READER_ROLE}")
            raw.execute("SET default_transaction_read_only = on")
    except psycopg.Error as exc:
        raw.close()
        raise StoreError(f"cannot use the PostgreSQL book ({str(exc).strip()})") from None
    except BaseException:
        raw.close()
        raise
    return Connection(raw)


def may_write(conn: Connection) -> bool:
    """Whether the login may append to the book (its trades, as the writer role may)."""
    row = conn.raw.execute("SELECT has_table_privilege('trade', 'INSERT')").fetchone()
    return bool(row and row[0])


def login(conn: Connection) -> str:
    """The login role the connection was made as."""
    row = conn.raw.execute("SELECT session_user").fetchone()
    return str(row[0]) if row else "?"


def data_version(conn: Connection) -> int:
    """A counter that moves with every commit that writes the book: the sum of each table's
    newest id (every table is append-only, so each insert moves it up) and of the book rows'
    ``xmin`` (a description's update, the one update allowed)."""
    parts = " + ".join(f"(SELECT coalesce(max({key}), 0) FROM {t})" for t, key in KEYS.items())
    row = conn.raw.execute(
        f"SELECT {parts} + (SELECT coalesce(sum(xmin::text::bigint), 0) FROM book)"
    ).fetchone()
    return int(row[0]) if row else 0


_NO_REPLACE = re.compile(
    r"CREATE TRIGGER (\w+)_no_replace BEFORE INSERT ON \1\b.*?RAISE\(ABORT, '((?:[^']|'')*)'\)",
    re.DOTALL,
)


@functools.cache
def replace_words() -> dict[str, str]:
    """Per table, the words ``schema.sql``'s no-replace trigger refuses a row with, which the
    server's unique keys say as a duplicate key: a refusal reads the same on either backend."""
    from blotter.store.db import schema_path

    text = schema_path().read_text(encoding="utf-8")
    return {m.group(1): m.group(2).replace("''", "'") for m in _NO_REPLACE.finditer(text)}


def is_error(exc: BaseException) -> bool:
    """Whether ``exc`` is psycopg's (without importing psycopg when nothing has)."""
    module = sys.modules.get("psycopg")
    return module is not None and isinstance(exc, module.Error)


def error(exc: BaseException, where: str) -> StoreError:
    """A ``StoreError`` saying what a psycopg error means for the user, in the words
    ``errors.sql_error`` gives SQLite's, logged as they are."""
    import psycopg
    from psycopg import errors as e

    from blotter.store.errors import BusyError, NotWritableError, ReadOnlyError, log_refusal

    prefix = f"{where}: " if where else ""
    text = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
    if isinstance(exc, psycopg.Error) and exc.diag.message_primary:
        text = exc.diag.message_primary
    said: StoreError
    if isinstance(exc, (e.LockNotAvailable, e.DeadlockDetected, e.QueryCanceled)):
        said = BusyError(
            f"{prefix}the book is busy (another process is writing to it); "
            "nothing was written, try again"
        )
    elif isinstance(exc, e.ReadOnlySqlTransaction):
        said = ReadOnlyError()
    elif isinstance(exc, e.InsufficientPrivilege):
        said = NotWritableError(
            f"{prefix}the PostgreSQL server refused the write ({text}): this login may only "
            "read the book"
        )
    elif isinstance(exc, e.UniqueViolation) and exc.diag.table_name in replace_words():
        said = StoreError(f"{prefix}refused by the book: {replace_words()[exc.diag.table_name]}")
    elif isinstance(exc, (e.IntegrityError, e.RaiseException)):
        said = StoreError(f"{prefix}refused by the book: {text}")
    elif isinstance(exc, psycopg.OperationalError):
        said = StoreError(
            f"{prefix}the PostgreSQL server could not be reached or ended the connection "
            f"({text}); nothing was written"
        )
    else:
        said = StoreError(f"{prefix}{text}")
    return log_refusal(said, exc)
