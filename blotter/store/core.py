"""An open book's connections and transactions: one connection per thread, ``atomic()`` write
transactions, short read transactions, and the file-wide questions (version, integrity, backup).

Every write runs inside ``atomic()``: ``BEGIN IMMEDIATE`` ... ``COMMIT`` (IMMEDIATE takes the write
lock before the first read, so a write never fails half-way on another writer's commit), rolled
back on any error if SQLite has not already done so, so no call leaves a transaction open. Each
read is one short transaction, so a viewer never pins a snapshot.
"""

from __future__ import annotations

import functools
import getpass
import os
import sqlite3
import threading
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from datetime import datetime
from pathlib import Path
from typing import Any, Self, TypeVar
from zoneinfo import ZoneInfo

from blotter import calendar as cal
from blotter.store import db, dialect, pg
from blotter.store.errors import ReadOnlyError, StoreError, sql_error
from blotter.store.files import create_empty
from blotter.store.times import Clock
from blotter.store.times import now as process_now

BEGIN_WRITE = "BEGIN IMMEDIATE"
"""How a write transaction starts."""


def who_am_i() -> str:
    """The OS user, recorded as ``who`` on every row this process writes."""
    try:
        return getpass.getuser() or "unknown"
    except Exception:  # getpass raises when no user name can be found (e.g. no passwd entry)
        return f"uid{os.getuid()}"


def _translated(exc: BaseException, path: Path | str) -> BaseException | None:
    """The ``StoreError`` an error leaving a transaction becomes, or None to let it through."""
    if isinstance(exc, sqlite3.Error):
        return sql_error(exc, path)
    if pg.is_error(exc):
        return pg.error(exc, str(path))
    if isinstance(exc, UnicodeDecodeError):
        return StoreError(
            f"{path}: the book holds text that is not UTF-8, so it is damaged; restore it "
            "from a backup"
        )
    if isinstance(exc, UnicodeEncodeError):
        # Text from a terminal or file whose bytes were not UTF-8 reaches Python with stand-ins
        # that no UTF-8 text may hold (a name, note or reason as typed).
        bad = exc.object[max(0, exc.start - 20) : exc.end + 20]
        return StoreError(
            f"text that is not valid UTF-8 cannot be stored ({bad!r}); retype it in UTF-8: "
            "nothing was written"
        )
    return None


class StoreCore:
    """An open book's connections and transactions; ``Store`` adds what it holds.

    ``path`` is the book file, or for a PostgreSQL book (``url``) its URL as it may be shown;
    ``read_only`` refuses writes, ``desk_tz`` is the zone its closes are dated in, ``who`` the OS
    user written on every row, and ``clock`` the store's own clock (None: the process's, see
    ``blotter.store.use_clock``).
    """

    def __init__(
        self,
        path: Path | str,
        read_only: bool,
        conn: db.Conn,
        mode: str | None = None,
        desk_tz: ZoneInfo | None = None,
        clock: Clock | None = None,
        url: str | None = None,
    ) -> None:
        self.path = path
        self.url = url  # a PostgreSQL book's URL as given (with any password), else None
        self._begin = (pg.BEGIN_READ, pg.BEGIN_WRITE) if url else (("BEGIN",), (BEGIN_WRITE,))
        self.desk_tz = desk_tz or cal.desk_tz()
        self.read_only = read_only
        self.clock = clock
        self.who = who_am_i()
        self._mode = mode  # URI mode override for every thread's connection (see db.connect)
        self._local = threading.local()
        self._local.conn = conn
        self._lock = threading.Lock()
        self._conns: list[db.Conn] = [conn]
        self._closed = False

    # ---- connections

    def _conn(self) -> db.Conn:
        """This thread's connection, opened on its first call in the thread."""
        if self._closed:
            raise StoreError("the book is closed")
        conn: db.Conn | None = getattr(self._local, "conn", None)
        if conn is None:
            if self.url is not None:
                conn = pg.open_connection(self.url, self.read_only, db.BUSY_TIMEOUT_MS)
            else:
                try:
                    conn = db.connect(Path(self.path), self.read_only, self._mode)
                except sqlite3.Error as exc:
                    raise sql_error(exc, self.path) from None
            self._local.conn = conn
            with self._lock:
                self._conns.append(conn)
        return conn

    @property
    def connection(self) -> db.Conn:
        """This thread's connection (for tests and diagnostics; write through the methods)."""
        return self._conn()

    def close(self) -> None:
        """Close every connection this store opened; the store cannot be used afterwards."""
        with self._lock:
            for conn in self._conns:
                conn.close()
            self._conns.clear()
            self._closed = True

    def __enter__(self) -> Self:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def now(self) -> datetime:
        """The current instant by this store's clock (aware)."""
        t = (self.clock or process_now)()
        if t.tzinfo is None:
            raise StoreError(f"the store's clock gave {t.isoformat()}, a time with no zone")
        return t

    # ---- transactions

    def in_transaction(self) -> bool:
        """Whether this thread's connection has a transaction open (only inside ``atomic()``)."""
        return self._conn().in_transaction

    @contextmanager
    def atomic(self) -> Iterator[Self]:
        """One write transaction on this thread's connection: ``BEGIN IMMEDIATE`` ... ``COMMIT``.

        Every write method runs in one, and those called inside the block join it (each in a
        savepoint, so a refused call leaves the block's other writes as they were). An error
        leaving the block rolls the whole transaction back (if SQLite has not already) and
        SQLite's errors leave it as ``StoreError``: all of the block is written, or none of it.
        """
        if self.read_only:
            raise ReadOnlyError()
        with self._transaction(write=True):
            yield self

    @contextmanager
    def _write(self) -> Iterator[db.Conn]:
        """This thread's connection inside ``atomic()``."""
        with self.atomic():
            yield self._conn()

    @contextmanager
    def _read(self) -> Iterator[db.Conn]:
        """One short read transaction, so several queries see one snapshot; always ended. Inside
        ``atomic()`` it reads in that transaction, seeing the block's own writes."""
        with self._transaction(write=False) as conn:
            yield conn

    @contextmanager
    def _transaction(self, write: bool) -> Iterator[db.Conn]:
        """A transaction on this thread's connection, never left open: ``BEGIN IMMEDIATE`` (a
        write) or ``BEGIN`` (a read) ... ``COMMIT``; inside one already open, a write runs in a
        savepoint of its own and a read in the open transaction.

        On any error what it began is rolled back if SQLite has not already done so (after an
        I/O error it has), and SQLite's errors become ``StoreError`` with a message for people.
        """
        conn = self._conn()
        local = self._local
        depth: int = getattr(local, "depth", 0)
        begin: tuple[str, ...] = self._begin[write]
        end: tuple[str, ...] = ("COMMIT",)
        undo: tuple[str, ...] = ("ROLLBACK",)
        if depth:
            if write and not local.writing:
                raise RuntimeError("a write cannot start inside a read transaction of the store")
            if not conn.in_transaction:
                raise self._ended()
            name = f"store_{depth}"
            begin, end = ((f"SAVEPOINT {name}",), (f"RELEASE {name}",)) if write else ((), ())
            undo = (f"ROLLBACK TO {name}", f"RELEASE {name}") if write else ()
        try:
            for sql in begin:
                conn.execute(sql)
        except BaseException as exc:
            if depth == 0 and conn.in_transaction:
                conn.execute("ROLLBACK")  # a write's lock wait that failed after its BEGIN
            mapped = _translated(exc, self.path)
            if mapped is None:
                raise
            raise mapped from None
        if not depth:
            local.writing = write
        local.depth = depth + 1
        try:
            yield conn
            if not conn.in_transaction:
                raise self._ended()
            for sql in end:
                conn.execute(sql)
        except BaseException as exc:
            if conn.in_transaction:
                try:
                    for sql in undo:
                        conn.execute(sql)
                except Exception as undo_exc:  # noqa: BLE001 - the first error is the one said
                    if _translated(undo_exc, self.path) is None:
                        raise
            mapped = _translated(exc, self.path)
            if mapped is None:
                raise
            raise mapped from None
        finally:
            local.depth = depth

    def _ended(self) -> StoreError:
        """The error of a block whose transaction SQLite has already rolled back."""
        return StoreError(
            f"{self.path}: SQLite rolled the transaction back after an error; nothing of it "
            "was written"
        )

    # ---- the file

    def data_version(self) -> int:
        """``PRAGMA data_version`` of this thread's connection: changes on others' commits (of a
        PostgreSQL book, ``pg.data_version``, which moves on every commit)."""
        conn = self._conn()
        if not isinstance(conn, sqlite3.Connection):
            with self._read() as read:
                assert isinstance(read, dialect.Connection)
                return pg.data_version(read)
        try:
            return int(db.scalar(conn, "PRAGMA data_version"))
        except sqlite3.Error as exc:
            raise sql_error(exc, self.path) from None

    def changes(self, stop: threading.Event, interval_s: float) -> Iterator[int | None]:
        """The book's change counter (``data_version``) at once, then every ``interval_s`` until
        ``stop`` is set; None for a tick when the book could not be read (busy or gone).

        A viewer refreshes when the counter differs from the last it saw. SQLite announces no
        commit to other processes, so the file is asked at each tick; a PostgreSQL book's
        counterpart is ``blotter.store.pg.changes``, which wakes at the commit itself and is what
        a PostgreSQL book's store yields."""
        if self.url is not None:
            yield from pg.changes(self.url, stop, interval_s)
            return
        while True:
            try:
                yield self.data_version()
            except StoreError:
                yield None
            if stop.wait(interval_s):
                return

    def schema_version(self) -> int:
        """The file's ``PRAGMA user_version`` (a PostgreSQL book's ``blotter_meta``)."""
        conn = self._conn()
        if not isinstance(conn, sqlite3.Connection):
            with self._read() as read:
                assert isinstance(read, dialect.Connection)
                return pg.schema_version(read.raw) or 0
        return int(db.scalar(conn, "PRAGMA user_version"))

    def integrity_ok(self) -> bool:
        """``integrity_problems`` (CHECKs included), ``foreign_key_check`` and every mark set
        holding all its marks (of a PostgreSQL book, whose server enforces the first two as it
        writes, the last)."""
        file = self._conn()
        if isinstance(file, sqlite3.Connection) and db.integrity_problems(file) != ["ok"]:
            return False
        with self._read() as conn:
            if self.url is None and conn.execute("PRAGMA foreign_key_check").fetchone():
                return False
            broken = db.scalar(
                conn,
                "SELECT count(*) FROM mark_set s WHERE s.mark_count <> "
                "(SELECT count(*) FROM mark m WHERE m.mark_set_id = s.mark_set_id)",
            )
            return bool(broken == 0)

    def checkpoint(self) -> None:
        """Copy every commit in the ``-wal`` file into the book file and empty the ``-wal``
        (``PRAGMA wal_checkpoint(TRUNCATE)``), so the book file alone holds the book."""
        if self.read_only:
            raise ReadOnlyError()
        self._file_only("has no -wal file to checkpoint")
        try:
            self._conn().execute("PRAGMA wal_checkpoint(TRUNCATE)")
        except sqlite3.Error as exc:
            raise sql_error(exc, self.path) from None

    def counts(self) -> dict[str, int]:
        """The number of rows in each table of the book, by table name (one read)."""
        with self._read() as conn:
            if not isinstance(conn, sqlite3.Connection):
                names = sorted(pg.book_tables(conn.raw) - pg.PG_ONLY_TABLES)
                return {n: int(db.scalar(conn, f"SELECT count(*) FROM {n}")) for n in names}
            tables = db.utils_db(conn)
            return {name: tables.table(name).count for name in tables.table_names()}

    def backup(self, dest: str | os.PathLike[str]) -> Path:
        """A consistent copy of the book at ``dest`` (new file, mode 0o660), synced and checked."""
        self._file_only("is copied to a file with `blotter copy URL FILE`")
        d = Path(dest)
        create_empty(d)
        with db.removed_on_failure(d):
            target = sqlite3.connect(db.uri(d, "rw"), uri=True, isolation_level=None)
            try:
                source = self._conn()
                assert isinstance(source, sqlite3.Connection)
                source.backup(target)
                target.execute("PRAGMA journal_mode = DELETE")
                ok = [r[0] for r in target.execute("PRAGMA integrity_check")] == ["ok"]
            finally:
                target.close()
            with open(d, "rb+") as f:
                os.fsync(f.fileno())
            if not ok:
                raise StoreError(f"the backup {d} failed its integrity check")
        return d

    def _file_only(self, why: str) -> None:
        """Refuse what only a book file has: a PostgreSQL book ``why`` (in words)."""
        if self.url is not None:
            raise StoreError(f"a PostgreSQL book {why}")


_F = TypeVar("_F", bound=Callable[..., Any])


def guard_damage(method: _F) -> _F:
    """A read method whose conversion errors become ``StoreError`` when the file is damaged.

    SQLite keeps no checksums, so a damaged byte can reach Python as text that is not a valid
    date or not UTF-8. Such an error is checked against ``integrity_problems`` (CHECK
    constraints included): a damaged file gives a plain ``StoreError``; a sound file lets the
    original error through (a bug).
    """

    @functools.wraps(method)
    def wrapper(self: StoreCore, *args: Any, **kwargs: Any) -> Any:
        try:
            return method(self, *args, **kwargs)
        except (ValueError, KeyError, TypeError, IndexError, UnicodeDecodeError) as exc:
            conn = self._conn()
            if not isinstance(conn, sqlite3.Connection):
                raise  # the server checks every value as it is written
            try:
                sound = db.integrity_problems(conn) == ["ok"]
            except (sqlite3.Error, UnicodeDecodeError):
                sound = False
            if sound:
                raise
            raise StoreError(
                f"{self.path} is damaged (it holds values its schema forbids: "
                f"{exc}); restore it from a backup"
            ) from None

    return wrapper  # type: ignore[return-value]
