"""Each mark point keeps when it was observed: a close copies the points in force with the time
each was last marked (never the close's own time), so a carried mark is never re-dated, and the
market carries every point's time so staleness is read point by point."""

from __future__ import annotations

import sqlite3
from collections.abc import Callable
from datetime import UTC, date, datetime, timedelta
from pathlib import Path

import numpy as np
import pytest

from blotter import store

EXPIRY = date(2027, 1, 15)
T1 = datetime(2026, 12, 1, 15, 0, tzinfo=UTC)
"""10:00 New York on Tuesday 2026-12-01: the spot and the vol are marked."""


class Clock:
    """A clock the test moves by hand."""

    def __init__(self, t: datetime) -> None:
        self.t = t

    def __call__(self) -> datetime:
        return self.t


def points(st: store.Store, set_id: int | None = None) -> dict[str, datetime]:
    return {m.kind: m.observed_at for m in st.marks(set_id)}


def test_a_close_keeps_each_points_own_time_and_a_later_close_does_not_re_date_it(
    new_book: Callable[[], str],
) -> None:
    clock = Clock(T1)
    st = store.create_store(new_book(), clock=clock)
    try:
        st.add_underlying("XYZ", "stock", "USD", 100.0, description="invented for the tests")
        st.log_spot("XYZ", 100.0)
        st.log_vol("XYZ", EXPIRY, 0.30)
        clock.t = T1 + timedelta(hours=2)
        st.log_rate("USD", 365, 0.04)
        clock.t = T1 + timedelta(hours=6, minutes=30)  # 16:30 New York: the close
        first = st.commit_close()
        assert points(st, first) == {
            "spot": T1,
            "vol": T1,
            "rate": T1 + timedelta(hours=2),
        }
        clock.t = T1 + timedelta(days=1)  # the next morning only the spot is marked again
        st.log_spot("XYZ", 101.0)
        clock.t = T1 + timedelta(days=1, hours=6, minutes=30)
        second = st.commit_close()
        assert points(st, second) == {
            "spot": T1 + timedelta(days=1),
            "vol": T1,
            "rate": T1 + timedelta(hours=2),
        }
        assert points(st) == points(st, second)  # the marks in force are the close's copies
        market = st.load_market()
        assert sorted(market.observed_at.tolist()) == sorted(
            t.replace(tzinfo=None) for t in points(st, second).values()
        )
        assert market.marks_as_of == clock.t  # the newest set is still the close itself
    finally:
        st.close()


def test_every_point_of_a_set_given_whole_is_observed_when_the_set_is_marked(
    new_book: Callable[[], str],
) -> None:
    at = T1 - timedelta(days=3)
    st = store.create_store(new_book(), clock=Clock(T1))
    try:
        st.add_underlying("XYZ", "stock", "USD", 100.0, description="invented for the tests")
        spot = store.MarkPoint("spot", 100.0, symbol="XYZ")
        rate = store.MarkPoint("rate", 0.04, currency="USD", tenor_days=365)
        set_id = st.add_mark_set("intraday", [spot, rate], marked_at=at)
        assert points(st, set_id) == {"spot": at, "rate": at}
        observed = st.load_market().observed_at
        assert observed.dtype == np.dtype("datetime64[us]")
        assert observed.tolist() == [at.replace(tzinfo=None)] * 2
    finally:
        st.close()


def _make_v6_book(path: Path) -> None:
    """A book at schema 6 (the sections up to it, as an older blotter made them) holding a
    typed spot and a close that copies it an hour later."""
    from zoneinfo import ZoneInfo

    from blotter.store import db

    conn = sqlite3.connect(path, isolation_level=None)
    conn.execute("PRAGMA journal_mode = WAL")
    db.schema_functions(conn, ZoneInfo("America/New_York"))
    conn.execute("BEGIN")
    conn.execute(f"PRAGMA application_id = {store.APPLICATION_ID:d}")
    for version, statements in sorted(db.schema_sections().items()):
        if version <= 6:
            for statement in statements:
                conn.execute(statement)
    conn.execute("PRAGMA user_version = 6")
    conn.execute("COMMIT")
    conn.executescript(f"""
        INSERT INTO underlying (symbol, kind, currency, multiplier, american, cash_settled)
            VALUES ('OLDA', 'stock', 'USD', 100, 1, 0);
        INSERT INTO mark_set (kind, marked_at, who, source, mark_count)
            VALUES ('intraday', '{T1_TEXT}', 'old', 'typed', 1);
        INSERT INTO mark (mark_set_id, seq, kind, underlying_id, value)
            VALUES (1, 1, 'spot', 1, 99);
        INSERT INTO mark_set (kind, marked_at, who, source, mark_count, business_date)
            VALUES ('close', '{CLOSE_TEXT}', 'old', 'close', 1, '2026-12-01');
        INSERT INTO mark (mark_set_id, seq, kind, underlying_id, value)
            VALUES (2, 1, 'spot', 1, 99);
    """)
    conn.close()


T1_TEXT = "2026-12-01T15:00:00.000000Z"
CLOSE_TEXT = "2026-12-01T21:30:00.000000Z"


def test_a_schema_6_book_is_migrated_each_old_point_observed_at_its_sets_time(
    tmp_path: Path, tmp_book: Path
) -> None:
    """Schema 7 adds the column: points written before it take their own set's time (for an old
    close, the close's, the only time it kept), and the migrated file equals a fresh one."""
    old = tmp_path / "old.db"
    _make_v6_book(old)
    with store.open_store(old) as st:
        assert st.schema_version() == store.SCHEMA_VERSION >= 7
        assert points(st, 1) == {"spot": T1}
        assert points(st, 2) == {"spot": datetime(2026, 12, 1, 21, 30, tzinfo=UTC)}
        assert st.integrity_ok()
    conn = sqlite3.connect(old)
    fresh = sqlite3.connect(tmp_book)
    try:
        for name in ("mark_no_update", "mark_observed"):
            q = "SELECT sql FROM sqlite_master WHERE name = ?"
            assert conn.execute(q, (name,)).fetchone() == fresh.execute(q, (name,)).fetchone()
        cols = "PRAGMA table_xinfo('mark')"
        assert conn.execute(cols).fetchall() == fresh.execute(cols).fetchall()
    finally:
        conn.close()
        fresh.close()


@pytest.mark.parametrize(
    ("sql", "words"),
    [
        ("UPDATE mark SET observed_at = '2030-01-01T00:00:00.000000Z'", "never changed"),
        ("DELETE FROM mark WHERE mark_set_id = 1", "never deleted"),
        (
            "REPLACE INTO mark (mark_id, mark_set_id, seq, kind, underlying_id, value, "
            "observed_at) VALUES (1, 1, 1, 'spot', 1, 5, '2030-01-01T00:00:00.000000Z')",
            "never",
        ),
        (
            "INSERT INTO mark_set (kind, marked_at, who, source, mark_count) VALUES ('intraday', "
            f"'{T1_TEXT}', 'me', 'typed', 1); INSERT INTO mark (mark_set_id, seq, kind, "
            "underlying_id, value) VALUES (last_insert_rowid(), 1, 'spot', 1, 5)",
            "names when it was observed",
        ),
    ],
)
def test_the_observation_time_is_history_like_the_mark(
    tmp_path: Path, sql: str, words: str
) -> None:
    """The history guards hold on the new column: never updated, deleted or replaced, and a
    mark written without its observation time is refused (SQLite refuses, not the store)."""
    path = tmp_path / "book.db"
    with store.create_store(path, clock=Clock(T1)) as st:
        st.add_underlying("XYZ", "stock", "USD", 100.0, description="invented for the tests")
        st.log_spot("XYZ", 100.0)
    conn = sqlite3.connect(path, isolation_level=None)
    try:
        before = conn.execute("SELECT * FROM mark ORDER BY mark_id").fetchall()
        with pytest.raises(sqlite3.IntegrityError, match=words):
            conn.execute("BEGIN")
            for statement in sql.split("; "):
                conn.execute(statement)
        conn.execute("ROLLBACK")
        assert conn.execute("SELECT * FROM mark ORDER BY mark_id").fetchall() == before
    finally:
        conn.close()
