"""A book kept in a PostgreSQL database: ``schema_pg.sql`` in versioned sections, connections
through psycopg 3 (the optional ``postgres`` extra), making a book's tables, and listening for
commits.

A book here is one database (its ``public`` schema), named by a ``postgresql://`` URL. The
server enforces what the SQLite file's triggers do, and privileges besides: see the head of
``schema_pg.sql``. psycopg is imported on first use, so nothing else of the store loads it.
"""

from __future__ import annotations

import re
import threading
import time
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import TYPE_CHECKING, Any
from urllib.parse import urlsplit, urlunsplit
from zoneinfo import ZoneInfo

from blotter.store.db import APPLICATION_ID
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

NOT_OPENED = (
    "a PostgreSQL book is copied to and from with `blotter copy SRC DST`; the app and the other "
    "commands open book files only in this version"
)
"""Why ``open_store`` refuses a URL."""

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
