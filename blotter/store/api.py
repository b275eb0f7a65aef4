"""Opening a book: ``open_store`` and ``create_store`` give a ``Store``, the one object every
caller reads and writes a book through."""

from __future__ import annotations

import os
import sqlite3
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from zoneinfo import ZoneInfo

from blotter import calendar as cal
from blotter.store import db, dialect, pg
from blotter.store.checks import check_currency
from blotter.store.errors import (
    NotWritableError,
    SchemaUpgradeNeeded,
    StoreError,
    not_writable,
    sql_error,
)
from blotter.store.files import check_book_path, create_empty, is_shipped_demo
from blotter.store.imports import Imports
from blotter.store.times import Clock


class Store(Imports):
    """An open book. Each thread that calls it uses its own connection; ``close()`` closes all.

    Reads run as one short read transaction each, so a viewer never pins a snapshot; writes run
    in ``atomic()`` transactions (``BEGIN IMMEDIATE``), which a caller may widen to group
    writes. ``path`` is the book file; ``read_only`` refuses writes. What it holds is read and
    written by concern: reference data (``blotter.store.reference``), contracts
    (``contracts``), trades (``trades``), marks (``marks``) and CSV imports (``imports``).
    """


def open_store(
    path: str | os.PathLike[str],
    read_only: bool = False,
    create: bool = False,
    verify: bool = True,
    desk_tz: ZoneInfo | None = None,
    clock: Clock | None = None,
) -> Store:
    """Open the book at ``path``; never creates one unless ``create`` (then see ``create_store``).

    ``read_only`` opens by URI ``mode=ro`` with ``query_only`` and no ATTACH. An older schema is
    migrated on a read-write open. ``verify`` checks the file first (``integrity_problems``,
    once per file state in a process). Closes are dated in the book's own desk zone
    (``book_zone``); ``desk_tz`` (the ``desk_tz`` setting; New York when None) is the zone an
    upgrade gives a book that has none yet. ``clock`` is the store's clock for the times it
    writes (None: the process's, ``use_clock``). Raises ``StoreError`` with a plain message
    for a missing, empty, foreign, damaged or special file; ``NotWritableError`` when a
    read-write open meets a book this user cannot write.
    """
    if pg.is_url(str(path)):
        return _open_pg(str(path), read_only, create, desk_tz, clock)
    p = Path(path)
    zone = desk_tz or cal.desk_tz()
    exists = check_book_path(p)
    if create and not exists:
        return create_store(p, desk_tz=zone, clock=clock)
    if not exists:
        raise StoreError(
            f"no book at {p} (check the path, or make one with `blotter demo --out {p}`)"
        )
    if not read_only and (why := not_writable(p)) is not None:
        raise NotWritableError(why)
    mode = db.IMMUTABLE if read_only and is_shipped_demo(p) else None
    try:
        conn = db.connect(p, read_only, mode)
    except sqlite3.Error as exc:
        if "not a database" in str(exc):
            raise StoreError(f"{p} is not a blotter book (SQLite: {exc})") from None
        if read_only:
            raise StoreError(
                f"cannot open {p} read-only ({exc}): the file and its -wal/-shm files "
                "must be readable, or the directory writable"
            ) from None
        raise sql_error(exc, p) from None
    try:
        version = db.open_checks(conn, p, verify)
        if version < db.SCHEMA_VERSION:
            if read_only:
                raise SchemaUpgradeNeeded(
                    f"{p} uses an older schema ({version}); open it once without "
                    "--read-only to upgrade it",
                    version,
                )
            db.migrate(conn, zone)
        if not read_only and db.scalar(conn, "PRAGMA journal_mode") != "wal":
            conn.execute("PRAGMA journal_mode = WAL")
        zone = db.book_zone(conn, p)
    except sqlite3.Error as exc:
        conn.close()
        raise sql_error(exc, p) from None
    except BaseException:
        conn.close()
        raise
    return Store(p, read_only, conn, mode, desk_tz=zone, clock=clock)


@contextmanager
def _closed_on_failure(conn: dialect.Connection, where: str) -> Iterator[None]:
    """Close ``conn`` when the block fails, the server's errors said in words."""
    try:
        yield
    except BaseException as exc:
        conn.close()
        if pg.is_error(exc):
            raise pg.error(exc, where) from None
        raise


def _open_pg(
    url: str, read_only: bool, create: bool, desk_tz: ZoneInfo | None, clock: Clock | None
) -> Store:
    """``open_store`` of the PostgreSQL book ``url``: the same refusals in the same words, a
    viewer login (no INSERT on the book's tables) refused a read-write open as a file this user
    cannot write is."""
    where = pg.shown(url)
    conn = pg.open_connection(url, read_only, db.BUSY_TIMEOUT_MS)
    with _closed_on_failure(conn, where):
        version = pg.schema_version(conn.raw)
        if version is None:
            if create and not read_only:
                conn.close()
                return create_store(url, desk_tz=desk_tz, clock=clock)
            raise StoreError(
                f"{where} holds no blotter book; make one there with "
                "`blotter copy BOOK.db URL` (or open it with create)"
            )
        if version > db.SCHEMA_VERSION:
            raise StoreError(
                f"{where} was written by a newer blotter (schema {version}; this one "
                f"knows {db.SCHEMA_VERSION}): upgrade blotter"
            )
        if not read_only and not pg.may_write(conn):
            raise NotWritableError(
                f"the login {pg.login(conn)} may only read the PostgreSQL book {where} "
                f"(it is not in {pg.WRITER_ROLE})"
            )
        if version < db.SCHEMA_VERSION:
            if read_only:
                raise SchemaUpgradeNeeded(
                    f"{where} uses an older schema ({version}); open it once without "
                    "--read-only to upgrade it",
                    version,
                )
            pg.migrate(conn.raw)
        zone = db.book_zone(conn, where)
    return Store(where, read_only, conn, desk_tz=zone, clock=clock, url=url)


def _create_pg(url: str, zone: ZoneInfo, clock: Clock | None, base_currency: str) -> Store:
    """``create_store`` in the empty PostgreSQL database ``url``: its schema in one
    transaction."""
    where = pg.shown(url)
    conn = pg.open_connection(url, False, db.BUSY_TIMEOUT_MS)
    with _closed_on_failure(conn, where), conn.raw.transaction():
        pg.create_schema(conn.raw, zone, base_currency)
    return Store(where, False, conn, desk_tz=zone, clock=clock, url=url)


def create_store(
    path: str | os.PathLike[str],
    desk_tz: ZoneInfo | None = None,
    clock: Clock | None = None,
    base_currency: str = db.DEFAULT_BASE_CURRENCY,
) -> Store:
    """A new, empty book at ``path`` (refused if anything is there): schema applied, WAL mode;
    ``desk_tz`` dates its closes (New York when None), ``base_currency`` is the currency its
    totals convert to, ``clock`` as for ``open_store``.

    The file is created with mode ``FILE_MODE`` (0o660) less the umask, so it is never readable
    or writable by other users; SQLite gives its -wal and -shm files the same permissions.
    """
    zone = desk_tz or cal.desk_tz()
    check_currency(base_currency)
    if pg.is_url(str(path)):
        return _create_pg(str(path), zone, clock, base_currency)
    p = Path(path)
    create_empty(p)
    with db.removed_on_failure(p):
        conn = db.connect(p, read_only=False)
        try:
            db.apply_schema(conn, zone, base_currency)
        except BaseException:
            conn.close()
            raise
    return Store(p, False, conn, desk_tz=zone, clock=clock)
