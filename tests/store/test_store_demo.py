"""The invented demo book: what it holds, that it is labelled fictitious, and that the shipped
``demo.db`` is exactly what ``build_demo`` writes (so it is never edited by hand)."""

from __future__ import annotations

import sqlite3
from datetime import timedelta
from pathlib import Path

import numpy as np
import pytest

from blotter.store import StoreError, open_store, shipped_demo_path
from blotter.store.demo import DEMO_AS_OF, build_demo, demo_close_times

pytestmark = pytest.mark.file_only("the shipped demo.db and the file build_demo writes")


def _contents(path: Path) -> list[object]:
    """Everything that matters in a book: pragmas, schema and every row of every table."""
    conn = sqlite3.connect(f"file:{path}?mode=ro", uri=True)
    out: list[object] = [
        conn.execute(f"PRAGMA {p}").fetchone()[0]
        for p in ("user_version", "application_id", "journal_mode")
    ]
    tables = [
        r[0]
        for r in conn.execute("SELECT name FROM sqlite_master WHERE type = 'table' ORDER BY name")
    ]
    out.append(sorted(conn.execute("SELECT type, name, sql FROM sqlite_master")))
    for t in tables:
        out.append((t, conn.execute(f'SELECT * FROM "{t}" ORDER BY rowid').fetchall()))
    conn.close()
    return out


def test_shipped_demo_db_is_what_build_demo_writes(tmp_path: Path) -> None:
    shipped = shipped_demo_path()
    assert shipped.stat().st_size > 0
    rebuilt = build_demo(tmp_path / "demo.db")
    assert _contents(rebuilt) == _contents(shipped), (
        "demo.db is stale: regenerate it with `blotter demo --out demo.db --force`"
    )


def test_same_seed_same_book_other_seed_other_book(tmp_path: Path) -> None:
    a = _contents(build_demo(tmp_path / "a.db", seed=5))
    b = _contents(build_demo(tmp_path / "b.db", seed=5))
    c = _contents(build_demo(tmp_path / "c.db", seed=6))
    assert a == b and a != c


def test_the_demo_says_it_is_invented(demo_db: Path) -> None:
    with open_store(demo_db, read_only=True) as s:
        u = s.load_underlyings()
        notes = s.notes()
    assert 4 <= len(u) <= 6
    assert all(sym.startswith("DEMO") for sym in u.symbols)
    assert all("fictitious" in d for d in u.descriptions)
    assert any("invented" in n and "fictitious" in n for n in notes)
    assert {"index", "stock", "future"} <= set(u.kinds)


def test_the_demo_book_holds_what_the_issue_asks_for(demo_db: Path) -> None:
    with open_store(demo_db, read_only=True) as s:
        book = s.load_book()
        closes = s.mark_sets("close")
        market = s.load_market()
        trades = s.trades()
    assert book.reference_index == "DEMOIX"
    n_options = int(book.is_option.sum())
    assert n_options == 150
    hedges = [book.labels[i] for i in np.flatnonzero(~book.is_option)]
    assert set(hedges) >= {"DEMOA", "DEMOB", "DEMOC", "DEMOFU"}
    as_of = np.datetime64(DEMO_AS_OF)
    days = (book.expiries[book.is_option].astype("datetime64[D]") - as_of).astype(int)
    assert days.min() >= 7 and days.max() >= 700 and days.max() <= 740  # a week to two years
    assert len(np.unique(book.expiries[book.is_option])) >= 8
    assert len(closes) == 2 and market.mark_set_id == closes[-1].id and market.mark_kind == "close"
    assert [c.marked_at for c in closes] == list(demo_close_times())
    for sym, surf in market.surfaces.items():
        for e in np.unique(surf.expiries):
            rows = surf.expiries == e
            ks, vs = surf.strikes[rows], surf.vols[rows]
            assert rows.sum() >= 5, (sym, e)
            low, atm = vs[np.argmin(ks)], vs[np.argmin(np.abs(ks - market.spots[sym]))]
            assert low > atm, f"{sym} {e}: no downside skew"  # a smile per expiry
    assert set(market.spots) == set(book.underlyings.symbols)
    assert market.curves["USD"].tenor_days.size >= 6
    states = {t.state for t in trades}
    assert states == {"live", "cancelled", "amended"}
    assert all(t.who == "demo" and t.source == "demo" for t in trades)


def test_the_trade_history_builds_the_book(demo_db: Path) -> None:
    close1, close2 = demo_close_times()
    with open_store(demo_db, read_only=True) as s:
        book = s.load_book()
        net: dict[int, int] = {}
        for t in s.trades(live_only=True):
            net[t.contract_id] = net.get(t.contract_id, 0) + t.quantity
        assert dict(zip(book.contract_ids.tolist(), book.quantities.tolist(), strict=False)) == {
            c: float(q) for c, q in net.items() if q
        }
        cut1, cut2 = (c.seq for c in s.mark_sets("close"))
        first = s.load_book(before_seq=cut1)
        assert first.quantities.tolist() == s.load_book(as_of=close1).quantities.tolist()
        new, prices = s.new_trades(cut1, cut2)
        assert 0 < len(new) < 30 and (prices > 0).all()
        total = dict(zip(first.contract_ids.tolist(), first.quantities.tolist(), strict=False))
        for c, q in zip(new.contract_ids.tolist(), new.quantities.tolist(), strict=False):
            total[c] = total.get(c, 0.0) + q
        assert {c: q for c, q in total.items() if q} == dict(
            zip(book.contract_ids.tolist(), book.quantities.tolist(), strict=False)
        )
        assert (
            s.load_market(as_of=close1 + timedelta(minutes=1)).mark_set_id
            == s.mark_sets("close")[0].id
        )


def test_a_large_synthetic_book_has_exactly_the_positions_asked(tmp_path: Path) -> None:
    path = build_demo(tmp_path / "big.db", positions=3000)
    with open_store(path, read_only=True) as s:
        book = s.load_book()
        assert int(book.is_option.sum()) == 3000
        assert len(set(book.labels)) == len(book)
        assert len(np.unique(book.expiries[book.is_option])) > 50  # weekly expiries
        assert s.integrity_ok()


def test_an_existing_file_is_kept_unless_forced_and_a_demo_book(tmp_path: Path) -> None:
    path = tmp_path / "demo.db"
    path.write_text("precious")
    with pytest.raises(StoreError, match="--force"):
        build_demo(path)
    with pytest.raises(StoreError, match="is not a demo book"):
        build_demo(path, force=True)
    assert path.read_text() == "precious"
    path.unlink()
    build_demo(path, positions=40)
    build_demo(path, force=True)
    with open_store(path, read_only=True) as s:
        assert len(s.load_book()) > 150


def test_a_build_killed_midway_leaves_nothing_behind_the_next(tmp_path: Path) -> None:
    """A ``demo --force`` killed mid-build leaves its half-built file; the next build of the same
    book removes those of processes that are gone (no PID is above Linux's 2**22 limit)."""
    for suffix in ("", "-wal", "-shm"):
        (tmp_path / f".demo.db.999999999.building{suffix}").write_bytes(b"half")
    build_demo(tmp_path / "demo.db")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["demo.db"]
