"""Live refresh: the change counter a viewer watches moves on another writer's commit, on the
file (``Store.changes``, a poll of SQLite's data version) and on a PostgreSQL book
(``pg.changes``, woken by LISTEN/NOTIFY), and stops when asked."""

from __future__ import annotations

import queue
import threading
from collections.abc import Callable, Iterator
from pathlib import Path
from zoneinfo import ZoneInfo

import pytest

from blotter.store import create_store, open_store

TICK_S = 0.05
"""The file's poll interval in these tests (the app's is a setting)."""

WAKE_S = 120.0
"""The database's interval here: longer than the test waits for the commit, so only the
commit's notification can bring the tick in time."""

WAIT_S = 30.0
"""How long the test waits for a tick on this shared machine."""

Changes = Callable[[threading.Event], Iterator[int | None]]


@pytest.fixture(params=["sqlite", "postgres"])
def backend(request: pytest.FixtureRequest, tmp_book: Path) -> Iterator[tuple[Changes, str]]:
    """(changes(stop), book) for a new book of each kind: a file or a database URL."""
    if request.param == "sqlite":
        with open_store(tmp_book, read_only=True) as viewer:
            yield (lambda stop: viewer.changes(stop, TICK_S)), str(tmp_book)
        return
    url: str = request.getfixturevalue("pg_url")
    create_store(url, desk_tz=ZoneInfo("UTC")).close()
    with open_store(url, read_only=True) as viewer:  # its changes are pg.changes
        yield (lambda stop: viewer.changes(stop, WAKE_S)), url


def _commit(book: str) -> None:
    """Another writer commits a new book name."""
    with open_store(book) as writer:
        writer.add_book("second")


def test_a_commit_moves_the_counter_and_stop_ends_the_watch(
    backend: tuple[Changes, str],
) -> None:
    changes, book = backend
    stop = threading.Event()
    seen: queue.Queue[int | None] = queue.Queue()

    def watch() -> None:
        for version in changes(stop):
            seen.put(version)

    t = threading.Thread(target=watch)
    t.start()
    try:
        baseline = seen.get(timeout=WAIT_S)  # the watch is live from here
        _commit(book)
        moved = seen.get(timeout=WAIT_S)
        while moved == baseline:
            moved = seen.get(timeout=WAIT_S)
    finally:
        stop.set()
        t.join(WAKE_S + WAIT_S)
    assert baseline is not None and moved is not None and moved != baseline
    assert not t.is_alive()
