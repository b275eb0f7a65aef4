"""Child processes for the store's reliability tests, and helpers the tests share.

Run as ``python store_children.py COMMAND ARGS...``; each command uses the store's real API in a
fresh process (never a fork of the test process, which holds open connections).
"""

from __future__ import annotations

import signal
import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve()


def spawn(*args: str, **kw: object) -> subprocess.Popen[str]:
    """Start ``store_children.py`` with ``args`` in a new Python process (text pipes)."""
    return subprocess.Popen(
        [sys.executable, str(HERE), *args],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        **kw,
    )  # type: ignore[call-overload]


TEST_BOOKS = ("main", "hedge", "imp")
"""Books ``add_underlyings`` starts (a trade goes only to a book that exists)."""


def add_underlyings(store: object) -> None:
    """Two invented underlyings and the books ``TEST_BOOKS`` for tests on an empty book."""
    for name in TEST_BOOKS:
        store.add_book(name)  # type: ignore[attr-defined]
    store.add_underlying("TSTA", "stock", "USD", 100, description="test stock (invented)")  # type: ignore[attr-defined]
    store.add_underlying(
        "TSTX",
        "index",
        "USD",
        100,
        american=False,
        cash_settled=True,  # type: ignore[attr-defined]
        is_reference=True,
        description="test index (invented)",
    )


def trade_csv(path: Path, n: int, bad_line: int | None = None, symbol: str = "TSTA") -> Path:
    """A trade CSV of ``n`` option rows; ``bad_line`` (file line number) gets a negative price."""
    lines = ["book,symbol,type,expiry,strike,quantity,price,trade_time"]
    for i in range(n):
        price = "-1.5" if bad_line is not None and i + 2 == bad_line else f"{1 + (i % 50) / 10:.2f}"
        lines.append(
            f"imp,{symbol},{'C' if i % 2 else 'P'},2030-06-21,{100 + i % 40},"
            f"{1 + i % 9},{price},2026-01-05T15:{i % 60:02d}:00Z"
        )
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def _mark_logger(db: str, writer: str, n: str, begin: str) -> None:
    """Log ``n`` spot marks, reading the market before each write; print errors, then 'done'."""
    from blotter.store import StoreError, core, open_store

    if begin != "immediate":
        core.BEGIN_WRITE = "BEGIN"  # the control: a plain deferred transaction
    store = open_store(db)
    errors = 0
    for seq in range(int(n)):
        store.load_market()
        try:
            store.log_spot("TSTA", 100 + seq * 0.01, note=f"{writer}-{seq}")
        except StoreError:
            errors += 1
    print(f"errors {errors}", flush=True)
    store.close()


def _importer(db: str, csv_path: str, kind: str) -> None:
    """Import a CSV, printing a line at each progress call (the parent kills us there)."""
    from blotter.store import open_store

    store = open_store(db)
    fn = store.import_trades_csv if kind == "trades" else store.import_marks_csv
    rep = fn(csv_path, progress=lambda k: print(f"progress {k}", flush=True))
    print(f"imported {rep.rows}", flush=True)


def _close_writer(db: str, rounds: str) -> None:
    """Commit ``rounds`` close sets (a spot mark and a close each), printing 'ready' first.

    A date closes once, so each round after the first writes a correction of the round before.
    """
    from blotter.store import open_store

    store = open_store(db)
    print("ready", flush=True)
    last = None
    for i in range(int(rounds)):
        store.log_spot("TSTA", 100 + (i % 100) * 0.1)
        store.log_vol("TSTA", "2030-06-21", 0.2 + (i % 10) / 100, strike=100 + i % 7)
        last = store.commit_close(note=f"round {i}", corrects=last)
        store.add_trade("main", "TSTA", 1 + i % 5, 2.0, "2030-06-21", 100, True)
    print("done", flush=True)


def _hold_lock(db: str, seconds: str) -> None:
    """Hold the write lock (BEGIN IMMEDIATE, the server's writer lock) for ``seconds``, printing
    'locked' once held."""
    from blotter.store import open_store, pg

    store = open_store(db)
    conn = store.connection
    for sql in pg.BEGIN_WRITE if pg.is_url(db) else ("BEGIN IMMEDIATE",):
        conn.execute(sql)
    print("locked", flush=True)
    time.sleep(float(seconds))
    conn.execute("ROLLBACK")
    print("released", flush=True)


def _fsize_import(db: str, csv_path: str, limit: str) -> None:
    """Import marks with RLIMIT_FSIZE set (SIGXFSZ ignored): the write fails with an I/O error."""
    import resource

    from blotter.store import StoreError, open_store

    store = open_store(db)
    signal.signal(signal.SIGXFSZ, signal.SIG_IGN)
    resource.setrlimit(resource.RLIMIT_FSIZE, (int(limit), int(limit)))
    try:
        store.import_marks_csv(csv_path)
        print("imported", flush=True)
    except StoreError as exc:
        print(f"refused {type(exc).__name__}: {exc}".replace("\n", " "), flush=True)
        print(f"in_transaction {store.in_transaction()}", flush=True)


def _fsize_open(db: str, read_only: str) -> None:
    """Open a book whose -shm does not exist yet with RLIMIT_FSIZE at 1 KiB (SIGXFSZ ignored), so
    SQLite cannot create the -shm: the state of a full disk. Print what the store said."""
    import resource

    from blotter.store import StoreError, open_store

    signal.signal(signal.SIGXFSZ, signal.SIG_IGN)
    resource.setrlimit(resource.RLIMIT_FSIZE, (1024, 1024))
    try:
        with open_store(db, read_only=read_only == "ro") as store:
            store.load_book()
        print("opened", flush=True)
    except StoreError as exc:
        print(f"refused {type(exc).__name__}: {exc}".replace("\n", " "), flush=True)


def _spot_once(db: str, price: str) -> None:
    """Log one spot mark and exit."""
    from blotter.store import open_store

    with open_store(db) as store:
        store.log_spot("TSTA", float(price))


def _close_racer(db: str, name: str) -> None:
    """Open the book, print 'ready', wait for a line on stdin, then write today's close; print
    'closed ID' or 'refused: MESSAGE'."""
    from blotter.store import StoreError, open_store

    store = open_store(db)
    print("ready", flush=True)
    sys.stdin.readline()
    try:
        print(f"closed {store.commit_close(note=name)}", flush=True)
    except StoreError as exc:
        print(f"refused: {exc}", flush=True)


def _migrate_paused(db: str) -> None:
    """Open an old book (which migrates it), pausing inside the migration: the parent kills us."""
    import sqlite3

    import blotter.store as st
    from blotter.store import db as store_db

    real = store_db.connect

    def traced(*args: object, **kw: object) -> sqlite3.Connection:
        conn = real(*args, **kw)  # type: ignore[arg-type]

        def trace(sql: str) -> None:
            if sql.startswith("CREATE TRIGGER import_file_no_delete"):
                print("migrating", flush=True)
                time.sleep(60)

        conn.set_trace_callback(trace)
        return conn

    store_db.connect = traced  # type: ignore[assignment]
    st.open_store(db)
    print("migrated", flush=True)


def main(argv: list[str]) -> None:
    sys.path.insert(0, str(HERE.parents[2]))
    commands = {
        "mark_logger": _mark_logger,
        "importer": _importer,
        "close_writer": _close_writer,
        "hold_lock": _hold_lock,
        "fsize_import": _fsize_import,
        "fsize_open": _fsize_open,
        "spot_once": _spot_once,
        "close_racer": _close_racer,
        "migrate_paused": _migrate_paused,
    }
    commands[argv[0]](*argv[1:])


if __name__ == "__main__":
    main(sys.argv[1:])
