"""Several processes on a PostgreSQL book: writers lose nothing and history follows commit
order; a writer killed with SIGKILL mid-transaction leaves nothing and holds nothing
(RELIABILITY 1 and 2, held by the server)."""

from __future__ import annotations

import os
import signal
from pathlib import Path
from zoneinfo import ZoneInfo

import pytest
from pg_children import T0, spawn
from pg_server import APP_ROLE, PgServer

from blotter.store import pg
from blotter.store.copy import copy_book

psycopg = pytest.importorskip("psycopg")

WRITERS = 4
SETS_EACH = 150
CONTROL_SETS_EACH = 40
"""Fewer for the control, whose colliding writers each wait on the server's deadlock check."""


def _database(url: str) -> str:
    return url.split("///", 1)[1].split("?", 1)[0]


def _no_writer_lock() -> str:
    """The control: schema_pg.sql's id trigger function as it is, less its writer lock."""
    text = pg.schema_pg_path().read_text(encoding="utf-8")
    start = text.index("CREATE FUNCTION blotter_next_id()")
    body = text[start : text.index("END $$;", start) + len("END $$;")]
    lock = "    PERFORM pg_advisory_xact_lock(1114403954);\n"
    assert lock in body
    return body.replace("CREATE FUNCTION", "CREATE OR REPLACE FUNCTION").replace(lock, "")


def _run_writers(
    pg_server: PgServer, pg_url: str, control: bool, each: int = SETS_EACH
) -> tuple[list[str], int]:
    """The writers' outputs and the mark sets they wrote, on a new book."""
    with pg.connect(pg_url) as conn:
        pg.create_schema(conn, ZoneInfo("UTC"), "USD")
        conn.execute(
            "INSERT INTO underlying (symbol, kind, currency, multiplier, american, cash_settled) "
            "VALUES ('ZQX', 'stock', 'USD', 100, 1, 0)"
        )
        conn.execute(
            "INSERT INTO mark_set (kind, marked_at, who, source, mark_count) "
            "VALUES ('intraday', %s, 'ann', 'typed', 1)",
            (T0,),
        )
        conn.execute(
            "INSERT INTO mark (mark_set_id, seq, kind, underlying_id, value, observed_at) "
            "VALUES (1, 1, 'spot', 1, 100, %s)",
            (T0,),
        )
        if control:
            conn.execute(_no_writer_lock().encode())
    app_url = pg_server.url(_database(pg_url), APP_ROLE)
    kids = [spawn("mark_writer", app_url, f"w{i}", str(each)) for i in range(WRITERS)]
    outs = []
    for k in kids:
        out, err = k.communicate(timeout=240)
        outs.append(out.strip() or err.strip().splitlines()[-1])
    with psycopg.connect(pg_url) as conn:
        notes = conn.execute("SELECT count(DISTINCT note) FROM mark_set WHERE who <> 'ann'")
        written = int(notes.fetchone()[0])
    return outs, written


def test_concurrent_writers_lose_nothing_and_history_follows_commits(
    pg_server: PgServer, pg_url: str
) -> None:
    outs, written = _run_writers(pg_server, pg_url, control=False)
    assert outs == ["errors 0"] * WRITERS
    assert written == WRITERS * SETS_EACH
    with psycopg.connect(pg_url) as conn:
        history = conn.execute("SELECT seq, row_id FROM history ORDER BY seq").fetchall()
    total = WRITERS * SETS_EACH + 1
    # Numbered 1..n with no gap, and mark set ids in the same order: one writer at a time.
    assert history == [(i, i) for i in range(1, total + 1)]


def test_control_without_the_writer_lock_writers_collide(pg_server: PgServer, pg_url: str) -> None:
    """The same writers on ids numbered without the lock fail, so the test above can see the
    bug it guards against."""
    outs, written = _run_writers(pg_server, pg_url, control=True, each=CONTROL_SETS_EACH)
    errors = sum(int(o.split()[-1]) for o in outs if o.startswith("errors"))
    assert errors > 0 and written < WRITERS * CONTROL_SETS_EACH, (outs, written)


def test_a_copy_killed_mid_write_leaves_an_empty_database_and_no_lock(
    demo_db: Path, pg_url: str
) -> None:
    kid = spawn("paused_copy", str(demo_db), pg_url)
    assert kid.stdout is not None
    line = kid.stdout.readline().strip()
    assert line == "written", kid.stderr.read() if kid.stderr else ""
    os.kill(kid.pid, signal.SIGKILL)
    kid.communicate(timeout=60)
    with psycopg.connect(pg_url) as conn:
        tables = conn.execute(
            "SELECT count(*) FROM information_schema.tables WHERE table_schema = 'public'"
        ).fetchone()
    assert tables == (0,)
    report = copy_book(str(demo_db), pg_url)  # the server let the killed writer's lock go
    assert report.rows["trade"] > 0
