"""The store's tests over both backends: ``book`` is a new, empty book in a fresh SQLite file or
in a fresh database on the session's private PostgreSQL server (``pg_server``), so one test
checks the store's behaviour on each; ``new_book`` names a place a test makes its own book in.

A test about the file itself (damage, WAL, file replacement, backups, PRAGMAs) is marked
``@pytest.mark.file_only("why")`` and runs on the SQLite file only. The PostgreSQL parameter is
skipped, saying why, where PostgreSQL or psycopg is absent.
"""

from __future__ import annotations

import itertools
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import pytest

from blotter.store import create_store, db, pg
from blotter.store.copy import copy_book

BACKENDS = ("sqlite", "postgres")


def pytest_collection_modifyitems(config: pytest.Config, items: list[pytest.Item]) -> None:
    """Leave out the PostgreSQL case of a test marked ``file_only`` (it is about the file)."""
    keep: list[pytest.Item] = []
    dropped: list[pytest.Item] = []
    for item in items:
        callspec = getattr(item, "callspec", None)
        on_pg = callspec is not None and callspec.params.get("backend") == "postgres"
        (dropped if on_pg and item.get_closest_marker("file_only") else keep).append(item)
    if dropped:
        config.hook.pytest_deselected(items=dropped)
        items[:] = keep


@pytest.fixture(params=BACKENDS)
def backend(request: pytest.FixtureRequest) -> str:
    """The kind of book the test runs on: ``sqlite`` or ``postgres``."""
    if request.param == "postgres":
        request.getfixturevalue("pg_server")  # skips, saying why, without PostgreSQL
    return str(request.param)


@pytest.fixture
def new_book(backend: str, tmp_path: Path, request: pytest.FixtureRequest) -> Callable[[], str]:
    """A function giving a new place for a book on the test's backend, each call another: a
    file path with nothing there, or the URL of a new, empty database (as its superuser)."""
    numbers = itertools.count(1)
    if backend == "sqlite":
        return lambda: str(tmp_path / f"book{next(numbers)}.db")
    server = request.getfixturevalue("pg_server")
    return lambda: str(server.url(server.new_database()))


@pytest.fixture
def book(new_book: Callable[[], str]) -> str:
    """A new, empty book (schema only) on the test's backend: its path or URL."""
    name = new_book()
    create_store(name).close()
    return name


@pytest.fixture
def writer_lock() -> Callable[[str], Any]:
    """``writer_lock_held``, for a test to hold a book's write lock from another connection."""
    return writer_lock_held


@pytest.fixture
def demo_book(backend: str, demo_db: Path, new_book: Callable[[], str]) -> str:
    """A fresh, writable demo book on the test's backend: the session's demo file copied, or
    moved into a new database by ``blotter copy``'s ``copy_book``."""
    if backend == "sqlite":
        return str(demo_db)
    url = new_book()
    copy_book(str(demo_db), url)
    return url


@contextmanager
def writer_lock_held(book: str) -> Iterator[Callable[[], None]]:
    """Another connection holding ``book``'s write lock (SQLite's ``BEGIN IMMEDIATE``, the
    server's writer advisory lock) until the function it gives is called or the block ends."""
    conn: Any
    if pg.is_url(book):
        conn = pg.connect(book, autocommit=True)
        conn.execute("BEGIN")
        conn.execute(f"SELECT pg_advisory_xact_lock({pg.LOCK_KEY:d})")
    else:
        conn = db.connect(Path(book), read_only=False)
        conn.execute("BEGIN IMMEDIATE")

    def release() -> None:
        conn.execute("ROLLBACK")

    try:
        yield release
    finally:
        conn.close()
