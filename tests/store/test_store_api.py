"""The store's API: trades, cancels, amends, positions as of a time, marks in force and recalled
closes, expiry cut-offs, and that no call leaves a transaction open."""

from __future__ import annotations

import threading
from collections.abc import Iterator
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from store_children import add_underlyings

from blotter.store import CsvImportError, ReadOnlyError, Store, StoreError, open_store

UTC = UTC


@pytest.fixture
def store(book: str) -> Iterator[Store]:
    s = open_store(book)
    add_underlyings(s)
    yield s
    s.close()


def test_trades_net_into_positions_and_cancels_and_amends_stay_on_record(store: Store) -> None:
    a = store.add_trade("main", "TSTA", 10, 2.5, "2030-06-21", 100, True)
    b = store.add_trade("main", "TSTA", -4, 2.7, "2030-06-21", 100, True)
    h = store.add_trade("hedge", "TSTA", -500, 101.25)
    x = store.add_trade("main", "TSTX", 3, 40.0, "2030-06-21", 4000, False)
    store.cancel_trade(x, "wrong underlying")
    new_b = store.amend_trade(b, quantity=-5, reason="quantity was 5")
    book = store.load_book()
    got = dict(zip(book.labels, book.quantities, strict=False))
    assert got == {"TSTA": -500.0, "TSTA 2030-06-21 100 C": 5.0}
    assert store.load_book("hedge").labels == ("TSTA",)
    states = {t.trade_id: t.state for t in store.trades()}
    assert states == {a: "live", b: "amended", h: "live", x: "cancelled", new_b: "live"}
    rec = {t.trade_id: t for t in store.trades()}
    assert rec[new_b].replaces == b and rec[b].replaced_by == new_b
    assert rec[new_b].trade_time == rec[b].trade_time  # an amend keeps the deal time
    assert rec[x].cancel_reason == "wrong underlying" and rec[x].cancelled_by == store.who
    with pytest.raises(StoreError, match="already cancelled"):
        store.cancel_trade(x, "again")
    with pytest.raises(StoreError, match="no trade 999"):
        store.cancel_trade(999, "missing")


def test_book_rows_carry_contract_terms(store: Store) -> None:
    store.add_trade("main", "TSTX", 2, 55.0, "2030-06-21", 4000, False)
    store.add_trade("main", "TSTA", 7, 3.0, "2030-01-18", 95, False, american=True, multiplier=150)
    book = store.load_book()
    assert book.reference_index == "TSTX"
    i = book.labels.index("TSTX 2030-06-21 4000 P")
    assert not book.is_call[i] and book.is_option[i] and not book.american[i]
    assert book.cash_settled[i] and book.multipliers[i] == 100.0 and book.strikes[i] == 4000.0
    j = book.labels.index("TSTA 2030-01-18 95 P")
    assert book.multipliers[j] == 150.0 and book.american[j]  # an adjusted contract
    assert book.underlyings.symbols[book.underlying_idx[j]] == "TSTA"


def test_expiry_is_the_cutoff_instant_in_utc(store: Store) -> None:
    # Common practice: 16:00 New York is 21:00 UTC in standard time (UTC-5) and 20:00 UTC in
    # daylight time (UTC-4); US daylight time runs from the second Sunday of March.
    store.add_trade("main", "TSTA", 1, 1.0, "2030-01-18", 100, True)
    store.add_trade("main", "TSTA", 1, 1.0, "2030-06-21", 100, True)
    book = store.load_book()
    got = {lab: str(e) for lab, e in zip(book.labels, book.expiries, strict=False)}
    assert got["TSTA 2030-01-18 100 C"] == "2030-01-18T21:00:00"
    assert got["TSTA 2030-06-21 100 C"] == "2030-06-21T20:00:00"
    assert book.expiries.dtype == np.dtype("datetime64[s]")


def test_book_as_of_counts_trades_and_cancels_by_when_they_were_booked(store: Store) -> None:
    t0 = datetime.now(UTC)
    a = store.add_trade("main", "TSTA", 10, 2.5, "2030-06-21", 100, True)
    t1 = datetime.now(UTC)
    cut = store.last_seq()  # the store's own order: a is the newest row here
    new_a = store.amend_trade(a, quantity=12, reason="size")
    t2 = datetime.now(UTC)
    store.add_trade(
        "main", "TSTA", 3, 2.0, "2030-06-21", 100, True, trade_time=t0 - timedelta(days=1)
    )  # dealt yesterday, booked now
    assert len(store.load_book(as_of=t0)) == 0
    assert list(store.load_book(as_of=t1).quantities) == [10.0]
    assert list(store.load_book(as_of=t2).quantities) == [12.0]  # never 22: no double count
    assert list(store.load_book().quantities) == [15.0]
    rows, prices = store.new_trades(cut, None)
    assert sorted(rows.quantities) == [3.0, 12.0] and sorted(prices) == [2.0, 2.5]
    before, after = store.load_book(before_seq=cut + 1), store.load_book()
    assert list(before.quantities) == [10.0]
    assert after.quantities.sum() == before.quantities.sum() - 10 + rows.quantities.sum()
    assert {t.trade_id for t in store.trades(since=t0 - timedelta(hours=1))} == {a, new_a}


def test_bad_trades_are_refused_with_a_clear_message(store: Store) -> None:
    cases = [
        (dict(quantity=0), "must not be zero"),
        (dict(quantity=1.5), "whole number"),
        (dict(price=-1.0), "price must be from 0 to below 1e"),
        (dict(price=float("nan")), "finite"),
        (dict(strike=-5.0), "strike must be from 1e-06"),
        (dict(expiry="2030-02-30"), "not an ISO date"),
        (dict(symbol="NOPE"), "unknown underlying"),
        (dict(is_call=None), "needs an expiry, a strike and call or put"),
        (dict(trade_time="2030-01-01T10:00:00"), "no time zone"),
        (dict(trade_time=datetime.now(UTC) + timedelta(hours=1)), "in the future"),
        (dict(expiry="2020-01-17", trade_time="2021-01-04T15:00:00Z"), "expired"),
    ]
    base = dict(
        book="main",
        symbol="TSTA",
        quantity=1,
        price=1.0,
        expiry="2030-06-21",
        strike=100.0,
        is_call=True,
    )
    for change, message in cases:
        kw = base | change
        with pytest.raises(StoreError, match=message):
            store.add_trade(
                kw.pop("book"),
                kw.pop("symbol"),
                kw.pop("quantity"),
                kw.pop("price"),
                kw.pop("expiry"),
                kw.pop("strike"),
                kw.pop("is_call"),
                **kw,
            )
        assert not store.in_transaction()
    assert store.trades() == []


def test_marks_in_force_are_the_latest_of_each_point_and_closes_recall_exactly(
    store: Store,
) -> None:
    store.log_spot("TSTA", 100.0)
    store.log_vol("TSTA", "2030-06-21", 0.25)
    store.log_vol("TSTA", "2030-06-21", 0.30, strike=80)
    store.log_rate("USD", 30, 0.04)
    store.log_rate("USD", 365, 0.035)
    store.log_div_yield("TSTA", 0.01)
    close1 = store.commit_close(note="day 1")
    store.log_spot("TSTA", 103.0)
    store.log_vol("TSTA", "2030-06-21", 0.24)
    live = store.load_market()
    assert live.spots == {"TSTA": 103.0} and live.mark_set_id is None
    surf = live.surfaces["TSTA"]
    assert list(surf.expiries.astype(str)) == ["2030-06-21", "2030-06-21"]
    assert np.isnan(surf.strikes[0]) and surf.vols[0] == 0.24  # ATM point first
    assert surf.strikes[1] == 80 and surf.vols[1] == 0.30
    assert list(live.curves["USD"].tenor_days) == [30, 365]
    assert live.div_yields == {"TSTA": 0.01}
    recalled = store.load_market(close1)
    assert recalled.spots == {"TSTA": 100.0} and recalled.mark_kind == "close"
    assert recalled.surfaces["TSTA"].vols[0] == 0.25 and recalled.mark_set_id == close1
    assert live.version > recalled.version
    store.log_spot("TSTA", 104.0)
    assert store.load_market().version > live.version


def test_correction_keeps_history_and_as_of_rebuilds_past_marks(store: Store) -> None:
    store.log_spot("TSTA", 100.0)
    close1 = store.commit_close(note="day 1")
    when_close1 = store.mark_sets("close")[0].marked_at
    store.log_spot("TSTA", 101.0)  # the close was wrong: correct it
    fixed = store.commit_close(note="day 1, corrected", corrects=close1)
    sets = {s.id: s for s in store.mark_sets()}
    assert sets[close1].superseded_by == fixed and sets[fixed].corrects == close1
    assert store.load_market(close1).spots == {"TSTA": 100.0}  # the original is kept exactly
    assert store.load_market(as_of=when_close1).spots == {"TSTA": 100.0}
    assert store.load_market().spots == {"TSTA": 101.0}
    with pytest.raises(StoreError, match="already corrected"):
        store.commit_close(corrects=close1)
    intraday = store.mark_sets("intraday")[0].id
    with pytest.raises(StoreError, match="not a close set"):
        store.commit_close(corrects=intraday)


def test_bad_marks_are_refused(store: Store) -> None:
    for call, message in [
        (lambda: store.log_spot("TSTA", 0.0), "spot must be from 1e-06"),
        (lambda: store.log_spot("NOPE", 1.0), "unknown underlying"),
        (lambda: store.log_vol("TSTA", "2030-06-21", 0.0), "above 0"),
        (lambda: store.log_vol("TSTA", "2030-06-21", 12.0), "at most 10"),
        (lambda: store.log_vol("TSTA", "21/06/2030", 0.2), "ISO date"),
        (lambda: store.log_rate("usd", 30, 0.04), "ISO 4217"),
        (lambda: store.log_rate("USD", 0, 0.04), "tenor"),
        (lambda: store.log_rate("USD", 30, 4.0), "rate must be from -1 to 1"),
        (lambda: store.commit_close(), "no marks"),
    ]:
        with pytest.raises(StoreError, match=message):
            call()
        assert not store.in_transaction()
    assert store.mark_sets() == []


def test_every_public_write_leaves_no_transaction_open(store: Store, tmp_path: Path) -> None:
    """RELIABILITY 8: after each write returns or raises, the connection has no transaction."""
    bad_csv = tmp_path / "bad.csv"
    bad_csv.write_text("kind,symbol,value\nspot,NOPE,1\n", encoding="utf-8")
    good_csv = tmp_path / "good.csv"
    good_csv.write_text("kind,symbol,value\nspot,TSTA,99\n", encoding="utf-8")
    tid = store.add_trade("main", "TSTA", 1, 1.0)
    calls = [
        lambda: store.add_trade("main", "TSTA", 2, 1.0),
        lambda: store.add_trade("main", "TSTA", 0, 1.0),
        lambda: store.cancel_trade(tid, "x"),
        lambda: store.cancel_trade(tid, "twice"),  # refused inside the transaction
        lambda: store.amend_trade(tid, reason="cancelled already"),
        lambda: store.find_or_create_contract("TSTA", "2030-06-21", 90, False),
        lambda: store.log_spot("TSTA", 99.0),
        lambda: store.log_vol("TSTA", "2030-06-21", 0.2),
        lambda: store.log_rate("USD", 7, 0.04),
        lambda: store.log_div_yield("TSTA", 0.02),
        lambda: store.commit_close(),
        lambda: store.commit_close(corrects=12345),
        lambda: store.import_marks_csv(bad_csv),
        lambda: store.import_marks_csv(good_csv),
        lambda: store.import_marks_csv(good_csv),  # refused: already imported
        lambda: store.add_underlying("TSTA", "stock", "USD", 100),
        lambda: store.add_note("a note"),
    ]
    for call in calls:
        try:
            call()
        except StoreError:
            pass
        assert not store.in_transaction()
        assert not store.connection.in_transaction


def test_busy_database_fails_clearly_and_keeps_nothing(
    store: Store, book: str, writer_lock: Any, monkeypatch: pytest.MonkeyPatch
) -> None:
    """RELIABILITY 9 (in one process): another connection holds the write lock past the timeout."""
    from blotter.store import BusyError, db

    with writer_lock(book) as release:
        with monkeypatch.context() as patched:
            patched.setattr(db, "BUSY_TIMEOUT_MS", 300)  # read as each connection is made
            quick = open_store(book)
        try:
            before = quick.load_market().version
            with pytest.raises(BusyError, match="busy"):
                quick.log_spot("TSTA", 50.0)
            assert not quick.in_transaction()
            release()
            assert quick.load_market().version == before
            quick.log_spot("TSTA", 50.0)  # the same mark, retried, lands
            assert quick.load_market().spots == {"TSTA": 50.0}
        finally:
            quick.close()


def test_each_thread_gets_its_own_connection(store: Store) -> None:
    store.log_spot("TSTA", 100.0)
    seen: list[object] = []

    def work() -> None:
        seen.append(store.connection)
        seen.append(store.load_market().spots["TSTA"])
        store.log_spot("TSTA", 101.0)

    t = threading.Thread(target=work)
    t.start()
    t.join()
    assert seen[0] is not store.connection and seen[1] == 100.0
    assert store.load_market().spots == {"TSTA": 101.0}


def test_read_only_store_refuses_every_write_method(book: str) -> None:
    with open_store(book) as s:
        add_underlyings(s)
        s.log_spot("TSTA", 100.0)
        tid = s.add_trade("main", "TSTA", 1, 1.0)
    ro = open_store(book, read_only=True)
    for call in [
        lambda: ro.add_trade("main", "TSTA", 1, 1.0),
        lambda: ro.cancel_trade(tid, "x"),
        lambda: ro.amend_trade(tid, reason="x"),
        lambda: ro.log_spot("TSTA", 1.0),
        lambda: ro.log_vol("TSTA", "2030-06-21", 0.2),
        lambda: ro.log_rate("USD", 1, 0.01),
        lambda: ro.log_div_yield("TSTA", 0.0),
        lambda: ro.commit_close(),
        lambda: ro.find_or_create_contract("TSTA", None, None, None),
        lambda: ro.add_note("x"),
        lambda: ro.add_underlying("Q", "stock", "USD", 1),
    ]:
        with pytest.raises(ReadOnlyError, match="the book is open read-only"):
            call()
    assert len(ro.load_book()) == 1 and ro.load_market().spots == {"TSTA": 100.0}
    ro.close()


def test_user_input_is_stored_literally_never_run_as_sql(book: str) -> None:
    """RELIABILITY 15: a description, book and note made of SQL are stored and read back as text;
    a symbol made of SQL is refused (a symbol is one word of the what-if) and changes nothing."""
    evil = "x'); DROP TABLE trade;--"
    with open_store(book) as s:
        with pytest.raises(StoreError, match="no spaces"):
            s.add_underlying(evil, "stock", "USD", 100)
        s.add_underlying("EVL", "stock", "USD", 100, description=evil)
        tid = s.add_trade(evil, "EVL", 1, 1.0, note=evil, create_book=True)
        s.log_spot("EVL", 10.0)
        assert s.load_book(evil).labels == ("EVL",)
        rec = s.trades()[0]
        assert (rec.trade_id, rec.symbol, rec.book, rec.note) == (tid, "EVL", evil, evil)
        assert [r["description"] for r in s.underlying_records()] == [evil]
        assert s.load_market().spots == {"EVL": 10.0}
        assert s.integrity_ok()


def test_a_cached_store_sees_contracts_added_by_another_connection(book: str) -> None:
    with open_store(book) as s:
        add_underlyings(s)
        s.add_trade("main", "TSTA", 1, 1.0, "2030-06-21", 100, True)
    viewer = open_store(book, read_only=True)
    assert viewer.load_book().labels == ("TSTA 2030-06-21 100 C",)
    with open_store(book) as other:
        other.add_trade("main", "TSTA", -2, 1.0, "2030-06-21", 90, False)
        other.add_trade("main", "TSTA", 50, 99.0)
    seen = viewer.load_book()
    assert seen.labels == ("TSTA", "TSTA 2030-06-21 90 P", "TSTA 2030-06-21 100 C")
    assert list(seen.quantities) == [50.0, -2.0, 1.0]
    viewer.close()


def test_an_amend_that_changes_nothing_is_refused(store: Store) -> None:
    tid = store.add_trade("main", "TSTA", 10, 2.5, "2030-06-21", 100, True, note="n")
    before = store.trades()
    for same in [
        {},
        {"quantity": 10, "price": 2.5, "note": "n", "book": "main"},
        {"trade_time": before[0].trade_time},
    ]:
        with pytest.raises(StoreError, match="nothing to amend"):
            store.amend_trade(tid, reason="typo", **same)
        assert not store.in_transaction()
    assert store.trades() == before
    assert store.amend_trade(tid, reason="size", quantity=11) > tid


def test_correcting_an_older_close_keeps_its_own_points_not_todays_marks(store: Store) -> None:
    store.log_spot("TSTA", 100.0)
    store.log_spot("TSTX", 4000.0)
    store.log_vol("TSTA", "2030-06-21", 0.25)
    day1 = datetime.now(UTC) - timedelta(days=1)  # a date closes once: day 1 is yesterday
    close1 = store.commit_close(note="day 1", marked_at=day1)
    store.log_spot("TSTX", 4100.0)  # day 2's marks
    store.log_vol("TSTA", "2030-06-21", 0.27)
    close2 = store.commit_close(note="day 2")
    store.log_spot("TSTA", 99.5)  # day 1's TSTA close was wrong: the fixed value
    fixed = store.commit_close_info(note="day 1, TSTA fixed", corrects=close1)
    recalled = store.load_market(fixed.id)
    assert recalled.spots == {"TSTA": 99.5, "TSTX": 4000.0}  # not day 2's 4100
    assert list(recalled.surfaces["TSTA"].vols) == [0.25]  # not day 2's 0.27
    assert fixed.marks == 3 and fixed.corrects == close1
    assert store.load_market(close1).spots == {"TSTA": 100.0, "TSTX": 4000.0}  # kept exactly
    assert store.load_market(close2).spots == {"TSTA": 100.0, "TSTX": 4100.0}
    live = store.load_market()  # the correction of an old day does not roll today's marks back
    assert live.spots == {"TSTA": 99.5, "TSTX": 4100.0}
    assert list(live.surfaces["TSTA"].vols) == [0.27]


def test_a_mistyped_book_is_refused_and_names_the_books(store: Store) -> None:
    before = store.book_names()
    with pytest.raises(StoreError, match=r"no book named 'mian' \(books: hedge, imp, main\)"):
        store.add_trade("mian", "TSTA", 1, 100.0)
    tid = store.add_trade("main", "TSTA", 1, 100.0)  # an existing book, as the trade form calls it
    with pytest.raises(StoreError, match="no book named 'hegde'"):
        store.amend_trade(tid, reason="move", book="hegde")
    assert store.book_names() == before and [t.trade_id for t in store.trades()] == [tid]
    new = store.add_trade("fx-hedges", "TSTA", 1, 100.0, create_book=True)  # on purpose
    assert store.book_names() == sorted([*before, "fx-hedges"])
    assert store.trades(book="fx-hedges")[0].trade_id == new
    with pytest.raises(StoreError, match="already exists"):
        store.add_book("main")


def test_a_trade_after_the_cutoff_on_expiry_day_is_refused(store: Store, tmp_path: Path) -> None:
    """Common practice: an option stops trading at its cut-off (16:00 New York for TSTA), so a
    deal at 16:30 New York on the expiry date (21:30 UTC, still that UTC date) is refused."""
    args = ("main", "TSTA", 1, 1.0, "2026-11-20", 100, True)
    ok = store.add_trade(*args, trade_time="2026-11-20T15:59:00-05:00")
    with pytest.raises(StoreError, match="after the contract's cut-off"):
        store.add_trade(*args, trade_time="2026-11-20T16:30:00-05:00")
    with pytest.raises(StoreError, match="after the contract's cut-off"):
        store.amend_trade(ok, reason="late", trade_time="2026-11-20T21:00:01Z")
    path = tmp_path / "late.csv"
    path.write_text(
        "book,symbol,type,expiry,strike,quantity,price,trade_time\n"
        "main,TSTA,C,2026-11-20,100,1,1,2026-11-20T20:59:00Z\n"
        "main,TSTA,C,2026-11-20,100,1,1,2026-11-20T21:30:00Z\n"
    )
    with pytest.raises(CsvImportError) as info:
        store.import_trades_csv(path)
    [problem] = info.value.problems
    assert (problem.line, problem.column) == (3, "trade_time")
    assert "cut-off" in problem.message
    assert [t.trade_id for t in store.trades()] == [ok]


def test_the_database_accepts_a_legal_trade_whose_utc_date_is_the_next_day(store: Store) -> None:
    """16:00 Honolulu (UTC-10, no daylight time) is 02:00 UTC the next day: a deal at 15:00
    Honolulu on the expiry date is before the cut-off, though its UTC date is the day after."""
    store.add_underlying(
        "TSTH", "stock", "USD", 100, time_zone="Pacific/Honolulu", description="invented"
    )
    tid = store.add_trade(
        "main", "TSTH", 1, 1.0, "2026-11-20", 50, True, trade_time="2026-11-20T15:00:00-10:00"
    )
    assert store.trades()[0].trade_id == tid
