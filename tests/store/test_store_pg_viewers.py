"""Read-only viewers of a PostgreSQL book: ``--read-only`` and a ``blotter_reader`` login connect
so that the server itself refuses every write, in the store's words, and nothing changes; and
what only a book file has is refused on a database in words."""

from __future__ import annotations

from pathlib import Path

import pytest
from pg_server import APP_ROLE, VIEWER_ROLE, PgServer
from store_children import add_underlyings

from blotter.store import (
    NotWritableError,
    ReadOnlyError,
    Store,
    StoreError,
    create_store,
    open_store,
)


def _login(pg_server: PgServer, url: str, role: str) -> str:
    """The URL of ``url``'s database as the login role ``role``."""
    return pg_server.url(url.split("///", 1)[1].split("?", 1)[0], role)


@pytest.fixture
def pg_book(pg_server: PgServer, pg_url: str) -> str:
    """A PostgreSQL book made by its owner, holding the test underlyings and one trade."""
    with create_store(pg_url) as s:
        add_underlyings(s)
        s.add_trade("main", "TSTA", 3, 1.0)
    return pg_url


def _snapshot(url: str) -> tuple[dict[str, int], int]:
    """Rows per table and the book's change counter, read as the owner."""
    with open_store(url, read_only=True) as s:
        return s.counts(), s.data_version()


def _server_refuses_every_write(viewer: Store) -> None:
    """With the store's own read-only check out of the way, each write reaches the server, which
    refuses it (a READ ONLY transaction, or the role's missing privilege, whichever the server
    checks first); the words are the store's."""
    viewer.read_only = False  # a client that ignored the flag: only the server stands in the way
    for call in (
        lambda: viewer.add_book("sneaked"),
        lambda: viewer.log_spot("TSTA", 1.0),
        lambda: viewer.add_trade("main", "TSTA", 1, 1.0),
        lambda: viewer.add_note("x"),
    ):
        with pytest.raises(ReadOnlyError, match="(open read-only|may only read the book).*nothing"):
            call()
        assert not viewer.in_transaction()


def test_a_viewer_login_reads_and_the_server_refuses_its_writes(
    pg_server: PgServer, pg_book: str
) -> None:
    before = _snapshot(pg_book)
    url = _login(pg_server, pg_book, VIEWER_ROLE)
    with pytest.raises(NotWritableError, match=f"the login {VIEWER_ROLE} may only read"):
        open_store(url)  # a read-write open is refused as a file the user cannot write is
    with open_store(url, read_only=True) as viewer:
        assert viewer.load_book().quantities.tolist() == [3.0]
        with pytest.raises(ReadOnlyError, match="the book is open read-only"):
            viewer.add_book("sneaked")
        _server_refuses_every_write(viewer)
    assert _snapshot(pg_book) == before


def test_read_only_on_a_writer_login_is_enforced_by_the_server(
    pg_server: PgServer, pg_book: str
) -> None:
    """A trader's own login opened with --read-only: READ ONLY transactions, so the server
    refuses a write that reaches it."""
    before = _snapshot(pg_book)
    with open_store(_login(pg_server, pg_book, APP_ROLE), read_only=True) as viewer:
        assert viewer.load_book().quantities.tolist() == [3.0]
        _server_refuses_every_write(viewer)
    assert _snapshot(pg_book) == before


def test_the_owner_read_only_acts_as_the_reader_role(pg_book: str) -> None:
    """The superuser who made the book, with --read-only, reads as ``blotter_reader``."""
    before = _snapshot(pg_book)
    with open_store(pg_book, read_only=True) as viewer:
        role = viewer.connection.execute("SELECT current_user").fetchone()[0]
        assert role == "blotter_reader"
        _server_refuses_every_write(viewer)
    assert _snapshot(pg_book) == before


def test_the_app_login_writes(pg_server: PgServer, pg_book: str) -> None:
    with open_store(_login(pg_server, pg_book, APP_ROLE)) as trader:
        trader.add_trade("main", "TSTA", 2, 1.0)
        assert trader.load_book().quantities.tolist() == [5.0]


def test_the_demo_is_written_to_a_file_and_says_how_to_move_it() -> None:
    """``blotter demo --out URL`` names the way to a database instead of a file named like it."""
    from click.testing import CliRunner

    from blotter.cli import main

    result = CliRunner().invoke(main, ["demo", "--out", "postgresql:///somebook?host=/nowhere"])
    assert result.exit_code == 1
    assert "blotter copy" in result.output and "directory" not in result.output


def test_a_file_backup_and_checkpoint_are_refused_in_words(pg_book: str, tmp_path: Path) -> None:
    with open_store(pg_book) as s:
        with pytest.raises(StoreError, match="blotter copy URL FILE"):
            s.backup(tmp_path / "copy.db")
        with pytest.raises(StoreError, match="no -wal file"):
            s.checkpoint()
    assert not (tmp_path / "copy.db").exists()
