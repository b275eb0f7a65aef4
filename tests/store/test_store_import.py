"""CSV imports: all or nothing, problems named by line and column (RELIABILITY 4-5), BOM and CRLF,
the round trip of the list format, formula neutralisation (15)."""

from __future__ import annotations

import csv
import io
import sqlite3
import tempfile
from collections.abc import Callable, Iterator
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as hs
from store_children import add_underlyings, trade_csv

from blotter.commands.common import neutralise
from blotter.store import (
    MARK_COLUMNS,
    MARK_INFO_COLUMNS,
    TRADE_COLUMNS,
    TRADE_INFO_COLUMNS,
    CsvImportError,
    Store,
    StoreError,
    create_store,
    mark_csv_row,
    open_store,
    trade_csv_row,
)


@pytest.fixture
def store(book: str) -> Iterator[Store]:
    s = open_store(book)
    add_underlyings(s)
    yield s
    s.close()


def _count(s: Store) -> tuple[int, int, int]:
    c = s.connection
    return tuple(
        c.execute(f"SELECT count(*) FROM {t}").fetchone()[0]
        for t in ("trade", "mark", "import_file")
    )  # type: ignore[return-value]


def test_a_good_file_lands_whole(store: Store, tmp_path: Path) -> None:
    rep = store.import_trades_csv(trade_csv(tmp_path / "t.csv", 250))
    assert rep.rows == 250 and rep.last_id - rep.first_id == 249
    assert _count(store) == (250, 0, 1)
    assert {t.source for t in store.trades()} == {"file:t.csv"}
    assert store.integrity_ok()


def _single_problem(store: Store, path: Path) -> CsvImportError:
    before = _count(store)
    with pytest.raises(CsvImportError) as info:
        store.import_trades_csv(path)
    assert _count(store) == before
    assert not store.in_transaction()
    return info.value


def test_negative_price_on_line_181_of_250_imports_nothing(store: Store, tmp_path: Path) -> None:
    err = _single_problem(store, trade_csv(tmp_path / "t.csv", 250, bad_line=181))
    assert err.total == 1
    assert (
        str(err.problems[0])
        == "line 181, column 'price': price must be from 0 to below 1e+12 per unit, got -1.5"
    )
    assert str(err).startswith("t.csv: nothing imported; 1 problem:")


@pytest.mark.parametrize(
    ("edit", "line", "column", "message"),
    [
        (lambda r: r.replace("TSTA", "NOPE"), 3, "symbol", "unknown underlying 'NOPE'"),
        (lambda r: r.replace("2030-06-21", "2030-13-01"), 3, "expiry", "not an ISO date"),
        (lambda r: r.replace(",2,", ",two,"), 3, "quantity", "'two' is not a number"),
        (lambda r: r.replace(",2,", ",0,"), 3, "quantity", "must not be zero"),
        (lambda r: r.replace(",C,", ",X,"), 3, "type", "is not C (call), P (put) or U"),
        (lambda r: r.replace("Z", ""), 3, "trade_time", "no time zone"),
        (lambda r: r.replace("2030-06-21", "2025-06-20"), 3, "trade_time", "after the contract's"),
    ],
)
def test_each_bad_cell_is_named(
    store: Store, tmp_path: Path, edit, line: int, column: str, message: str
) -> None:
    path = trade_csv(tmp_path / "t.csv", 5)
    lines = path.read_text().splitlines()
    lines[line - 1] = edit(lines[line - 1])
    path.write_text("\n".join(lines) + "\n")
    err = _single_problem(store, path)
    assert (err.problems[0].line, err.problems[0].column) == (line, column)
    assert message in err.problems[0].message


def test_header_problems_are_named(store: Store, tmp_path: Path) -> None:
    path = tmp_path / "t.csv"
    path.write_text("book,symbol,type,expiry,strike,qty,price,trade_time\n")
    err = _single_problem(store, path)
    got = {(p.line, p.column, p.message.split(" (")[0]) for p in err.problems}
    assert got == {(1, "qty", "unknown column"), (1, "quantity", "required column is missing")}


def test_up_to_20_problems_are_listed_at_once(store: Store, tmp_path: Path) -> None:
    path = trade_csv(tmp_path / "t.csv", 60)
    text = path.read_text().replace(",TSTA,", ",NOPE,")
    path.write_text(text)
    err = _single_problem(store, path)
    assert err.total == 60 and len(err.problems) == 20
    assert [p.line for p in err.problems] == list(range(2, 22))
    assert str(err).endswith("... and 40 more")


def test_a_row_with_a_missing_cell_is_named(store: Store, tmp_path: Path) -> None:
    path = trade_csv(tmp_path / "t.csv", 5)
    path.write_text(path.read_text().replace(",2026-01-05T15:02:00Z", "", 1))
    err = _single_problem(store, path)
    assert err.problems[0].line == 4 and "7 cells where the header has 8" in str(err)


def test_duplicate_mark_points_are_refused(store: Store, tmp_path: Path) -> None:
    path = tmp_path / "m.csv"
    path.write_text(
        "kind,symbol,expiry,strike,value\nvol,TSTA,2030-06-21,100,0.2\n"
        "spot,TSTA,,,100\nvol,TSTA,2030-06-21,100.0,0.21\n"
    )
    with pytest.raises(CsvImportError, match="line 4: the same point as line 2"):
        store.import_marks_csv(path)
    assert _count(store) == (0, 0, 0)


def test_bom_and_crlf_read_the_same_as_plain_utf8(tmp_path: Path) -> None:
    plain = trade_csv(tmp_path / "plain.csv", 20)
    text = plain.read_text(encoding="utf-8")
    variant = tmp_path / "bom.csv"
    variant.write_bytes(b"\xef\xbb\xbf" + text.replace("\n", "\r\n").encode("utf-8"))
    results = []
    for i, path in enumerate((plain, variant)):
        s = create_store(tmp_path / f"b{i}.db")
        add_underlyings(s)
        s.import_trades_csv(path)
        results.append([trade_csv_row(t)[: len(TRADE_COLUMNS)] for t in s.trades()])
        s.close()
    assert results[0] == results[1] and len(results[0]) == 20


def test_not_utf8_is_named_by_line(store: Store, tmp_path: Path) -> None:
    path = trade_csv(tmp_path / "t.csv", 5)
    path.write_bytes(path.read_bytes().replace(b"imp,TSTA,P", b"imp\xe9,TSTA,P", 1))
    with pytest.raises(StoreError, match="line 2 is not UTF-8"):
        store.import_trades_csv(path)


def test_the_same_file_cannot_land_twice(store: Store, tmp_path: Path) -> None:
    path = trade_csv(tmp_path / "t.csv", 10)
    first = store.import_trades_csv(path)
    with pytest.raises(StoreError, match=f"already imported as import {first.import_id}"):
        store.import_trades_csv(path)
    assert _count(store) == (10, 0, 1)


def _export(rows: list[list[object]], columns: tuple[str, ...]) -> str:
    """What ``print_csv`` writes (the CLI's exporter): header then neutralised cells."""
    out = io.StringIO()
    w = csv.writer(out, lineterminator="\n")
    w.writerow(columns)
    for r in rows:
        w.writerow([neutralise("" if c is None else c) for c in r])
    return out.getvalue()


def test_trade_list_csv_imports_back_unchanged(
    demo_book: str, new_book: Callable[[], str], tmp_path: Path
) -> None:
    with open_store(demo_book, read_only=True) as src:
        trades = src.trades(live_only=True)
        unders = src.connection.execute(
            "SELECT symbol, kind, currency, multiplier, american, cash_settled FROM underlying"
        ).fetchall()
    out = tmp_path / "trades.csv"
    out.write_text(_export([trade_csv_row(t) for t in trades], TRADE_COLUMNS + TRADE_INFO_COLUMNS))
    dst = create_store(new_book())
    for sym, kind, ccy, mult, am, cash in unders:
        dst.add_underlying(sym, kind, ccy, mult, american=bool(am), cash_settled=bool(cash))
    dst.import_trades_csv(out, new_books=True)  # a fresh file has no books: the file starts them
    again = [trade_csv_row(t)[: len(TRADE_COLUMNS)] for t in dst.trades()]
    assert again == [trade_csv_row(t)[: len(TRADE_COLUMNS)] for t in trades]
    assert len(again) > 150
    dst.close()


def test_mark_list_csv_imports_back_unchanged(demo_book: str, tmp_path: Path) -> None:
    with open_store(demo_book) as src:
        marks = src.marks()
        out = tmp_path / "marks.csv"
        out.write_text(_export([mark_csv_row(m) for m in marks], MARK_COLUMNS + MARK_INFO_COLUMNS))
        before = src.load_market()
        rep = src.import_marks_csv(out)
        after = src.load_market()
        assert rep.rows == len(marks) > 400
        assert [mark_csv_row(m)[: len(MARK_COLUMNS)] for m in src.marks(rep.first_id)] == [
            mark_csv_row(m)[: len(MARK_COLUMNS)] for m in marks
        ]
        assert after.spots == before.spots and after.mark_set_id == rep.first_id
        for sym, surf in before.surfaces.items():
            assert after.surfaces[sym].vols.tolist() == surf.vols.tolist()


def test_formula_like_text_is_neutralised_on_export_and_restored_on_import(
    store: Store, tmp_path: Path
) -> None:
    notes = ['=HYPERLINK("http://x")', "+1+1", "@SUM(A1)", "-x", "'=quoted", "'plain", "ok"]
    for n in notes:
        store.add_trade("main", "TSTA", 1, 1.0, note=n)
    text = _export([trade_csv_row(t) for t in store.trades()], TRADE_COLUMNS + TRADE_INFO_COLUMNS)
    cells = [row[TRADE_COLUMNS.index("note")] for row in csv.reader(io.StringIO(text))][1:]
    assert not any(c.startswith(("=", "+", "-", "@")) for c in cells)
    path = tmp_path / "t.csv"
    path.write_text(text)
    other = create_store(tmp_path / "other.db")
    add_underlyings(other)
    other.import_trades_csv(path)
    assert [t.note for t in other.trades()] == notes
    other.close()


@pytest.mark.file_only("the control is sqlite-utils' own pitfall, on a file")
def test_sqlite_utils_without_atomic_keeps_a_partial_batch_ours_keeps_nothing(
    tmp_book: Path, tmp_path: Path
) -> None:
    """The pitfall of RELIABILITY 3 reproduced (control), next to our importer on the same rows."""
    import sqlite_utils

    with open_store(tmp_book) as s:
        add_underlyings(s)
        s.add_trade("main", "TSTA", 1, 1.0, "2030-06-21", 100, True)
    ts = "2026-01-05T15:00:00.000000Z"
    rows = [
        dict(
            book_id=1,
            contract_id=1,
            quantity=1,
            price=-1.0 if i == 180 else 1.0,
            trade_time=ts,
            booked_at=ts,
            who="me",
            source="typed",
        )
        for i in range(250)
    ]
    db = sqlite_utils.Database(sqlite3.connect(tmp_book))
    with pytest.raises(sqlite3.IntegrityError):
        db["trade"].insert_all(rows)
    assert db.execute("SELECT count(*) FROM trade").fetchone()[0] == 1 + 100
    db.conn.close()
    with open_store(tmp_book) as s:
        with pytest.raises(CsvImportError, match="line 182"):
            s.import_trades_csv(trade_csv(tmp_path / "t.csv", 250, bad_line=182))
        assert _count(s)[0] == 101


_cell = hs.text(alphabet=hs.characters(blacklist_categories=("Cs",)), max_size=30)


@settings(
    max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)
@given(
    rows=hs.lists(
        hs.tuples(
            hs.sampled_from(["spot", "vol", "rate", "div_yield", "x", ""]),
            hs.sampled_from(["TSTA", "TSTX", "", "NOPE", "x'); DROP TABLE mark;--"]),
            hs.sampled_from(["", "USD", "usd", "EURO"]),
            hs.sampled_from(["", "2030-06-21", "2030-02-30", "soon"]),
            hs.one_of(hs.just(""), hs.floats(allow_nan=True).map(repr), _cell),
            hs.sampled_from(["", "30", "0", "3.5"]),
            hs.one_of(
                hs.floats(allow_nan=True, allow_infinity=True).map(repr), _cell, hs.just("0.2")
            ),
        ),
        min_size=1,
        max_size=25,
    ),
    bom=hs.booleans(),
    crlf=hs.booleans(),
)
def test_fuzzed_mark_files_import_whole_or_raise_our_error(
    tmp_path: Path,
    new_book: Callable[[], str],
    rows: list[tuple[str, ...]],
    bom: bool,
    crlf: bool,
) -> None:
    """RELIABILITY 5: random cells, BOM, CRLF, quotes: the whole file lands or StoreError, never
    another exception and never part of the file."""
    # A book and a directory of their own per example: hypothesis replays an example while
    # shrinking.
    s = create_store(new_book())
    path = Path(tempfile.mkdtemp(dir=tmp_path)) / "fuzz.csv"
    add_underlyings(s)
    out = io.StringIO()
    w = csv.writer(out, lineterminator="\r\n" if crlf else "\n")
    w.writerow(MARK_COLUMNS)
    w.writerows(rows)
    path.write_bytes((b"\xef\xbb\xbf" if bom else b"") + out.getvalue().encode("utf-8"))
    try:
        rep = s.import_marks_csv(path)
        assert _count(s)[1] == rep.rows
    except StoreError:
        assert _count(s) == (0, 0, 0)
    assert not s.in_transaction() and s.integrity_ok()
    s.close()


def test_an_export_imported_into_its_own_book_is_refused_by_trade_id(
    demo_book: str, tmp_path: Path
) -> None:
    with open_store(demo_book) as s:
        trades = s.trades(live_only=True)
        out = tmp_path / "trades.csv"
        out.write_text(
            _export([trade_csv_row(t) for t in trades], TRADE_COLUMNS + TRADE_INFO_COLUMNS)
        )
        before = _count(s), s.load_book().quantities.tolist()
        with pytest.raises(CsvImportError) as info:
            s.import_trades_csv(out)
        assert info.value.total == len(trades)  # every row is already in the book
        first = info.value.problems[0]
        assert (first.line, first.column) == (2, "trade_id")
        assert f"trade {trades[0].trade_id} is already in this book" in first.message
        assert "line 2, column 'trade_id'" in str(info.value)
        assert (_count(s), s.load_book().quantities.tolist()) == before  # nothing landed


def test_a_trade_id_given_twice_or_not_a_number_is_named(store: Store, tmp_path: Path) -> None:
    path = tmp_path / "t.csv"
    path.write_text(
        "book,symbol,type,quantity,price,trade_time,trade_id\n"
        "main,TSTA,U,1,100,2026-01-05T15:00:00Z,7\n"
        "main,TSTA,U,1,100,2026-01-05T15:00:00Z,7\n"
        "main,TSTA,U,1,100,2026-01-05T15:00:00Z,x\n"
        "main,TSTA,U,1,100,2026-01-05T15:00:00Z,\n"
    )
    with pytest.raises(CsvImportError) as info:
        store.import_trades_csv(path)
    got = [(p.line, p.column) for p in info.value.problems]
    assert got == [(3, "trade_id"), (4, "trade_id")]
    assert "line 2" in info.value.problems[0].message
    assert _count(store) == (0, 0, 0)


def test_an_unknown_book_is_a_row_problem_unless_new_books(store: Store, tmp_path: Path) -> None:
    path = tmp_path / "t.csv"
    path.write_text(
        "book,symbol,type,quantity,price,trade_time\n"
        "main,TSTA,U,1,100,2026-01-05T15:00:00Z\n"
        "mian,TSTA,U,1,100,2026-01-05T15:00:00Z\n"
    )
    with pytest.raises(CsvImportError) as info:
        store.import_trades_csv(path)
    [problem] = info.value.problems
    assert (problem.line, problem.column) == (3, "book")
    assert "no book named 'mian' (books: hedge, imp, main)" in problem.message
    assert _count(store) == (0, 0, 0) and "mian" not in store.book_names()
    rep = store.import_trades_csv(path, new_books=True)
    assert rep.rows == 2 and "mian" in store.book_names()
