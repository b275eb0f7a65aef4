"""History in the store's own order: cancels and amends whatever the terminals' clocks say, one
close per business date, corrections, and the order and dates an upgraded old book is given.

Facts of trade practice used here: a close belongs to the exchange or desk date it closes, so the
16:30 New York close of 2026-12-03 is that date's close although it is 21:30 UTC (common
practice). SQLite's behaviour (triggers, RAISE(ABORT)) is from lang_createtrigger.html.
"""

from __future__ import annotations

import sqlite3
import subprocess
from collections.abc import Callable, Iterator
from datetime import UTC, date, datetime, timedelta
from pathlib import Path
from zoneinfo import ZoneInfo

import pytest
from store_children import add_underlyings, spawn

import blotter.store as st
from blotter.store import Store, StoreError, open_store

EXPIRY = "2030-06-21"


@pytest.fixture
def store(book: str) -> Iterator[Store]:
    s = open_store(book)
    add_underlyings(s)
    s.log_spot("TSTA", 100.0)
    yield s
    s.close()


def _fast_terminal(ahead: timedelta) -> st.Clock:
    """The clock of a terminal running ``ahead`` of the right time."""
    return lambda: datetime.now(UTC) + ahead


def test_a_trade_from_a_terminal_an_hour_fast_can_be_cancelled_at_once(store: Store) -> None:
    with st.use_clock(_fast_terminal(timedelta(hours=1))):
        tid = store.add_trade("main", "TSTA", 5, 2.0, EXPIRY, 100, True)
    store.cancel_trade(tid, "booked in error")  # this terminal's clock is right
    t = store.trades()[0]
    assert t.state == "cancelled" and len(store.load_book()) == 0
    assert t.cancelled_at is not None and t.cancelled_at < t.booked_at  # both clocks kept
    assert t.cancel_seq is not None and t.cancel_seq > t.seq  # the store's order: cancel after


def test_amending_a_fast_terminals_trade_asks_for_the_deal_time(store: Store) -> None:
    """The replacement is booked on this terminal's clock, before the deal time the fast clock
    recorded: refused in words naming both clocks, nothing written; with a deal time it goes."""
    with st.use_clock(_fast_terminal(timedelta(hours=1))):
        tid = store.add_trade("main", "TSTA", 5, 2.0, EXPIRY, 100, True)
    before = store.trades()
    with pytest.raises(StoreError, match="one of the two clocks is wrong") as refused:
        store.amend_trade(tid, reason="price", price=2.1)
    assert f"trade {tid} was dealt at" in str(refused.value) and "--time" in str(refused.value)
    assert store.trades() == before
    dealt = datetime.now(UTC) - timedelta(minutes=5)
    new = store.amend_trade(tid, reason="price", price=2.1, trade_time=dealt)
    assert {t.trade_id: t.state for t in store.trades()} == {tid: "amended", new: "live"}


def test_the_store_numbers_every_history_row_in_the_order_it_was_written(store: Store) -> None:
    a = store.add_trade("main", "TSTA", 1, 2.0, EXPIRY, 100, True)
    with st.use_clock(_fast_terminal(timedelta(hours=2))):
        b = store.add_trade("main", "TSTA", 2, 2.0, EXPIRY, 100, True)
    close = store.commit_close_info()
    store.cancel_trade(a, "test")
    rows = {t.trade_id: t for t in store.trades()}
    cancelled = rows[a].cancel_seq
    assert cancelled is not None
    order = [rows[a].seq, rows[b].seq, close.seq, cancelled]
    assert order == sorted(order) and len(set(order)) == 4
    assert rows[b].booked_at > close.marked_at  # by the clocks, b came after the close
    assert store.last_seq() == rows[a].cancel_seq
    # The close holds both trades and neither cancel: the store's order, not the clocks.
    held = store.load_book(before_seq=close.seq)
    assert held.quantities.tolist() == [3.0]


@pytest.mark.parametrize(
    ("zone", "instant", "closes"),
    [
        ("America/New_York", "2026-12-03T21:30:00Z", "2026-12-03"),  # 16:30 New York
        ("America/New_York", "2026-12-04T02:30:00Z", "2026-12-03"),  # 21:30 New York
        ("Asia/Tokyo", "2026-12-03T06:00:00Z", "2026-12-03"),  # 15:00 Tokyo
        ("Asia/Tokyo", "2026-12-03T16:00:00Z", "2026-12-04"),  # 01:00 Tokyo, the next day
    ],
)
def test_a_close_closes_the_desk_date_of_its_time(
    new_book: Callable[[], str], zone: str, instant: str, closes: str
) -> None:
    """The book's own desk zone (the zone of the terminal that made it) dates its closes,
    whatever the zone of the terminal that writes one."""
    place = new_book()
    with st.create_store(place, desk_tz=ZoneInfo(zone)) as made:
        add_underlyings(made)
        made.log_spot("TSTA", 100.0)
    with st.open_store(place, desk_tz=ZoneInfo("Pacific/Kiritimati")) as desk:
        assert desk.desk_tz == ZoneInfo(zone)
        info = desk.commit_close_info(marked_at=st.parse_time(instant))
        assert info.business_date == date.fromisoformat(closes)
        assert desk.mark_sets("close")[-1].business_date == info.business_date


def test_terminals_of_different_zones_date_one_close_alike(new_book: Callable[[], str]) -> None:
    """A terminal set to Kiritimati (UTC+14) and one set to New York close the same book a
    moment apart: both are dated in the book's zone, so the second is a second close of the
    same date and is refused (two dates a day apart made explain run backwards)."""
    place = new_book()
    with st.create_store(place, desk_tz=ZoneInfo("America/New_York")) as made:
        add_underlyings(made)
        made.log_spot("TSTA", 100.0)
    now = st.parse_time("2026-12-03T21:30:00Z")  # 16:30 New York, 11:30 on the 4th Kiritimati
    with st.open_store(place, desk_tz=ZoneInfo("Pacific/Kiritimati")) as far:
        first = far.commit_close_info(marked_at=now)
    with st.open_store(place, desk_tz=ZoneInfo("America/New_York")) as near:
        with pytest.raises(StoreError, match="the close of 2026-12-03 is already written"):
            near.commit_close_info(marked_at=now + timedelta(seconds=1))
    assert first.business_date == date(2026, 12, 3)


def test_a_date_closes_once_and_a_correction_names_its_close(store: Store) -> None:
    first = store.commit_close_info(note="today")
    day = first.business_date
    assert day is not None
    sets = store.mark_sets()
    with pytest.raises(StoreError, match=f"the close of {day} is already written") as refused:
        store.commit_close(note="again")
    assert f"--corrects {first.id}" in str(refused.value) and not store.in_transaction()
    assert store.mark_sets() == sets
    store.log_spot("TSTA", 101.0)
    by_date = store.commit_close_info(corrects=day.isoformat())
    assert (by_date.corrects, by_date.business_date) == (first.id, day)
    store.log_spot("TSTA", 102.0)
    by_id = store.commit_close_info(corrects=by_date.id)
    assert (by_id.corrects, by_id.business_date) == (by_date.id, day)
    with pytest.raises(StoreError, match=f"already corrected by set {by_date.id}: correct set"):
        store.commit_close(corrects=first.id)
    store.log_spot("TSTA", 103.0)
    assert store.commit_close_info(corrects=day).corrects == by_id.id  # the close in force
    with pytest.raises(StoreError, match="no close for 2001-01-02"):
        store.commit_close(corrects="2001-01-02")
    with pytest.raises(StoreError, match="names no close"):
        store.commit_close(corrects="yesterday")
    with pytest.raises(StoreError, match="must be from 1 to 9,223,372,036,854,775,807"):
        store.commit_close(corrects=2**70)
    assert store.todays_close() == (day, store.mark_sets("close")[-1].id)


def _raw(path: Path) -> sqlite3.Connection:
    conn = sqlite3.connect(path, isolation_level=None)
    conn.execute("PRAGMA foreign_keys = ON")
    return conn


@pytest.mark.file_only("SQLite's triggers by a plain connection (the server's: postgres tests)")
def test_sqlite_itself_keeps_one_close_a_day_and_numbers_raw_writes(store: Store) -> None:
    """Through a plain connection, bypassing the store's checks."""
    close = store.commit_close(marked_at=datetime(2026, 12, 3, 21, 30, tzinfo=UTC))
    conn = _raw(Path(store.path))
    ts = "'2026-12-03T21:40:00.000000Z'"
    insert = "INSERT INTO mark_set (kind, marked_at, who, source, mark_count, corrects, " + (
        "business_date) VALUES ('{}', " + ts + ", 'raw', 'typed', 1, {}, {})"
    )
    for sql, words in [
        (insert.format("close", "NULL", "'2026-12-03'"), "has a close already"),
        (insert.format("close", "NULL", "NULL"), "names its business date"),
        (insert.format("intraday", "NULL", "'2026-12-03'"), "an intraday set none"),
        (insert.format("close", close, "'2026-12-02'"), "the business date of the close"),
        ("UPDATE history SET seq = seq + 100", "never changed"),
        ("DELETE FROM history", "never deleted"),
    ]:
        with pytest.raises(sqlite3.IntegrityError, match=words):
            conn.execute(sql)
    conn.execute(insert.format("close", close, "'2026-12-03'"))  # a correction of that date
    tid = store.add_trade("main", "TSTA", 1, 2.0, EXPIRY, 100, True)
    # A cancel entered on a clock behind the booking terminal's is not refused any more.
    conn.execute(
        "INSERT INTO trade_cancel (trade_id, reason, cancelled_at, who) "
        f"VALUES ({tid}, 'raw', '2000-01-01T00:00:00.000000Z', 'raw')"
    )
    kinds = [r[0] for r in conn.execute("SELECT kind FROM history ORDER BY seq")]
    assert kinds[-3:] == ["mark_set", "trade", "cancel"]
    conn.close()


def test_two_processes_closing_at_once_write_one_close(new_book: Callable[[], str]) -> None:
    """Each round a fresh book and two processes released together: one close, one refusal."""
    for _round in range(3):
        path = new_book()
        with st.create_store(path) as s:
            add_underlyings(s)
            s.log_spot("TSTA", 100.0)
        kids = [
            spawn("close_racer", str(path), f"p{i}", stdin=subprocess.PIPE) for i in range(2)
        ]
        for k in kids:
            assert k.stdout is not None and k.stdout.readline().strip() == "ready"
        for k in kids:
            assert k.stdin is not None
            k.stdin.write("go\n")
            k.stdin.flush()
        outs = sorted(k.communicate(timeout=60)[0].strip() for k in kids)
        assert outs[0].startswith("closed "), outs
        assert outs[1].startswith("refused: the close of ") and "already written" in outs[1]
        with open_store(path, read_only=True) as s:
            closes = s.mark_sets("close")
        assert [c.id for c in closes] == [int(outs[0].split()[1])]


V1_SQL = Path(__file__).with_name("data") / "schema_v1.sql"


@pytest.mark.file_only("upgrades a file of schema 1 (a PostgreSQL book starts at schema 9)")
def test_an_upgraded_book_numbers_its_history_by_clock_and_dates_its_closes(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    """A schema-1 book kept only clock times: the upgrade orders its rows by them (at one instant a
    trade, a cancel, an amend's replacing trade, a mark set) and dates each close in the desk's
    zone, a correction by the close it corrects."""
    monkeypatch.setenv("BLOTTER_TZ", "America/New_York")
    old = tmp_path / "old.db"
    conn = sqlite3.connect(old, isolation_level=None)
    conn.executescript(V1_SQL.read_text(encoding="utf-8"))
    conn.execute(f"PRAGMA application_id = {st.APPLICATION_ID}")
    conn.execute("PRAGMA user_version = 1")
    conn.executescript("""
        INSERT INTO underlying (symbol, kind, currency, multiplier, american, cash_settled)
            VALUES ('OLDA', 'stock', 'USD', 100, 1, 0);
        INSERT INTO book (name) VALUES ('main');
        INSERT INTO contract (underlying_id, option_type, strike, expiry, cutoff_time, american,
            multiplier, cash_settled) VALUES (1, 'C', 100, '2030-06-21', '16:00', 1, 100, 0);
    """)
    trade = (
        "INSERT INTO trade (trade_id, book_id, contract_id, quantity, price, trade_time, "
        "booked_at, who, source, replaces) VALUES (?, 1, 1, 1, 1.0, ?, ?, 'old', 'typed', ?)"
    )
    mark_set = (
        "INSERT INTO mark_set (mark_set_id, kind, marked_at, who, source, mark_count, corrects) "
        "VALUES (?, ?, ?, 'old', 'close', 1, ?)"
    )
    rows = [  # written in id order, given here out of time order where ids allow
        (trade, (1, "2026-01-05T15:00:00.000000Z", "2026-01-05T15:00:00.000000Z", None)),
        (trade, (2, "2026-01-05T20:00:00.000000Z", "2026-01-05T21:00:00.000000Z", None)),
        (mark_set, (1, "close", "2026-01-05T21:00:00.000000Z", None)),  # 16:00 NY, 01-05
        (trade, (3, "2026-01-06T02:30:00.000000Z", "2026-01-06T02:30:00.000000Z", None)),
        (
            "INSERT INTO trade_cancel (cancel_id, trade_id, reason, cancelled_at, who) "
            "VALUES (1, 1, 'amended: size', '2026-01-06T03:00:00.000000Z', 'old')",
            (),
        ),
        (trade, (4, "2026-01-05T15:00:00.000000Z", "2026-01-06T03:00:00.000000Z", 1)),
        (mark_set, (2, "intraday", "2026-01-06T15:00:00.000000Z", None)),
        (mark_set, (3, "close", "2026-01-07T03:30:00.000000Z", None)),  # 22:30 NY, 01-06
        (mark_set, (4, "close", "2026-01-08T15:00:00.000000Z", 1)),  # corrects the 01-05 close
    ]
    for sql, args in rows:
        conn.execute(sql, args)
    for set_id in (1, 2, 3, 4):
        conn.execute(
            "INSERT INTO mark (mark_set_id, seq, kind, underlying_id, value) "
            "VALUES (?, 1, 'spot', 1, 99)",
            (set_id,),
        )
    conn.close()
    with open_store(old) as s:
        assert s.schema_version() == st.SCHEMA_VERSION and s.integrity_ok()
        dates = {m.id: m.business_date for m in s.mark_sets()}
        assert dates == {
            1: date(2026, 1, 5),
            2: None,
            3: date(2026, 1, 6),  # its New York date, not its UTC date (01-07)
            4: date(2026, 1, 5),  # the date of the close it corrects, not its own
        }
        order = s.connection.execute("SELECT kind, row_id FROM history ORDER BY seq").fetchall()
        assert order == [
            ("trade", 1),
            ("trade", 2),  # booked at the instant of the close: before it
            ("mark_set", 1),
            ("trade", 3),
            ("cancel", 1),
            ("trade", 4),  # the amend's replacement, after the cancel of the same instant
            ("mark_set", 2),
            ("mark_set", 3),
            ("mark_set", 4),
        ]
        with pytest.raises(StoreError, match="the close of 2026-01-06 is already written"):
            s.commit_close(marked_at=datetime(2026, 1, 6, 21, 0, tzinfo=UTC))
