"""Child processes for the PostgreSQL book's process tests: ``python pg_children.py COMMAND
ARGS...``, each a fresh Python process (never a fork of the test process)."""

from __future__ import annotations

import subprocess
import sys
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

HERE = Path(__file__).resolve()

T0 = "2026-11-30T15:00:00.000000Z"


def spawn(*args: str) -> subprocess.Popen[str]:
    """Start ``pg_children.py`` with ``args`` in a new Python process (text pipes)."""
    return subprocess.Popen(
        [sys.executable, str(HERE), *args],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )


def _mark_writer(url: str, writer: str, n: str) -> None:
    """Write ``n`` one-point intraday mark sets, each its own transaction, reading the latest
    spot first (read-then-write, as the store's loggers do); print the errors met."""
    import psycopg

    errors = 0
    with psycopg.connect(url) as conn:
        for i in range(int(n)):
            try:
                with conn.transaction():
                    conn.execute("SELECT max(value) FROM mark").fetchone()
                    row = conn.execute(
                        "INSERT INTO mark_set (kind, marked_at, who, note, source, mark_count) "
                        "VALUES ('intraday', %s, %s, %s, 'typed', 1) RETURNING mark_set_id",
                        (T0, writer, f"{writer}-{i}"),
                    ).fetchone()
                    assert row is not None
                    conn.execute(
                        "INSERT INTO mark (mark_set_id, seq, kind, underlying_id, value, "
                        "observed_at) VALUES (%s, 1, 'spot', 1, %s, %s)",
                        (row[0], 100 + i / 100, T0),
                    )
            except psycopg.Error:
                errors += 1
    print(f"errors {errors}", flush=True)


def _paused_copy(source: str, dest: str) -> None:
    """``copy_book`` that stops once it has written the marks, nothing committed, until it is
    killed (psycopg's ``executemany`` is wrapped, so the copy's own code runs unchanged)."""
    import psycopg

    from blotter.store.copy import copy_book

    real = psycopg.Cursor.executemany

    def pausing(cur: Any, query: Any, params_seq: Any, **kw: Any) -> None:
        real(cur, query, params_seq, **kw)
        if str(query).startswith("INSERT INTO mark ("):
            print("written", flush=True)
            time.sleep(120)

    psycopg.Cursor.executemany = pausing  # type: ignore[method-assign, assignment]
    copy_book(source, dest)


def main(argv: list[str]) -> None:
    sys.path.insert(0, str(HERE.parents[2]))
    commands: dict[str, Callable[..., None]] = {
        "mark_writer": _mark_writer,
        "paused_copy": _paused_copy,
    }
    commands[argv[0]](*argv[1:])


if __name__ == "__main__":
    main(sys.argv[1:])
