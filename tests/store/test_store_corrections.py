"""Corrections of an underlying's reference data (schema 8): recorded as new rows, never an
update; for each field the latest correction that sets it is in force; the table refuses UPDATE,
DELETE and REPLACE like the other history tables; an older book gains the table on upgrade."""

from __future__ import annotations

import sqlite3
from pathlib import Path
from zoneinfo import ZoneInfo

import pytest
from click.testing import CliRunner
from store_children import add_underlyings

import blotter.store as st
from blotter.store import SCHEMA_VERSION, open_store

BEFORE = 6
"""The schema version of a book older than observed times (7), corrections (8) and the base
currency (9)."""


def _book(book: str) -> str:
    with open_store(book) as s:
        add_underlyings(s)
    return book


def test_latest_correction_of_each_field_wins_and_nothing_is_updated(book: str) -> None:
    path = _book(book)
    with open_store(path) as s:
        before = s.underlying_records()[0]
        assert before["symbol"] == "TSTA" and before["tick"] == 0.01  # a stock's default
        s.correct_underlying("TSTA", "tick is a nickel", {"tick": 0.05, "beta": 1.3})
        s.correct_underlying("TSTA", "beta re-estimated", {"beta": 1.1})
        rec = s.underlying_records()[0]
        assert (rec["tick"], rec["beta"], rec["multiplier"]) == (0.05, 1.1, 100.0)
        und = s.load_underlyings()
        assert und.ticks[0] == 0.05 and und.betas[0] == 1.1
        assert [c["reason"] for c in s.underlying_corrections("TSTA")] == [
            "tick is a nickel",
            "beta re-estimated",
        ]
        assert s.underlying_records()[0]["beta"] == 1.1


@pytest.mark.file_only("SQLite's triggers by a plain connection (the server's: postgres tests)")
def test_the_file_refuses_to_update_or_replace_a_correction(book: str) -> None:
    path = _book(book)
    with open_store(path) as s:
        s.correct_underlying("TSTA", "beta re-estimated", {"beta": 1.1})
    raw = sqlite3.connect(path)
    # The underlying's own row is as written.
    assert raw.execute("SELECT beta FROM underlying WHERE symbol = 'TSTA'").fetchone()[0] == 1.0
    for sql in (
        "UPDATE underlying_correction SET beta = 2",
        "DELETE FROM underlying_correction",
        "INSERT OR REPLACE INTO underlying_correction (correction_id, underlying_id, "
        "corrected_at, who, reason, tick) VALUES (1, 1, '2026-12-03T15:00:00.000000Z', 'x', "
        "'x', 1)",
    ):
        with pytest.raises(sqlite3.IntegrityError, match="never"):
            raw.execute(sql)
    raw.close()


def test_a_bad_correction_is_refused_in_words_and_writes_nothing(book: str) -> None:
    path = _book(book)
    with open_store(path) as s:
        with pytest.raises(st.StoreError, match="nothing to correct"):
            s.correct_underlying("TSTA", "why", {})
        with pytest.raises(st.StoreError, match="unknown underlying"):
            s.correct_underlying("NOPE", "why", {"tick": 0.05})
        with pytest.raises(st.StoreError, match="tick"):
            s.correct_underlying("TSTA", "why", {"tick": -1.0})
        with pytest.raises(st.StoreError, match="cannot correct kind"):
            s.correct_underlying("TSTA", "why", {"kind": "fx"})
        with pytest.raises(st.StoreError, match="reason"):
            s.correct_underlying("TSTA", "  ", {"tick": 0.05})
        assert s.underlying_corrections() == []


def test_the_cli_records_a_correction_and_the_list_shows_it(book: str) -> None:
    from blotter.cli import main

    path = _book(book)
    run = CliRunner().invoke(
        main,
        ["--db", str(path), "underlying", "correct", "TSTA", "--tick", "0.05",
         "--description", "test stock, corrected (invented)", "--reason", "typo"],
    )
    assert run.exit_code == 0, run.output
    assert "corrected" in run.output and "tick 0.05" in run.output
    listed = CliRunner().invoke(main, ["--db", str(path), "underlying", "list", "--json"])
    assert '"tick": 0.05' in listed.output
    bad = CliRunner().invoke(
        main, ["--db", str(path), "underlying", "correct", "TSTA", "--reason", "typo"]
    )
    assert bad.exit_code != 0 and "at least one of" in bad.output


def _v6_book(path: Path) -> None:
    """A book as schema 6 wrote it (before observed times, corrections and base currency)."""
    conn = sqlite3.connect(path, isolation_level=None)
    conn.execute("PRAGMA journal_mode = WAL")
    st.db.schema_functions(conn, ZoneInfo("America/New_York"))
    conn.execute("BEGIN")
    conn.execute(f"PRAGMA application_id = {st.db.APPLICATION_ID:d}")
    for version, statements in sorted(st.schema_sections().items()):
        if version <= BEFORE:
            for statement in statements:
                conn.execute(statement)
    conn.execute(f"PRAGMA user_version = {BEFORE:d}")
    conn.execute(
        "INSERT INTO underlying (symbol, kind, currency, multiplier, american, cash_settled) "
        "VALUES ('OLDF', 'fx', 'USD', 1000, 0, 0)"
    )
    conn.execute("COMMIT")
    conn.close()


def test_a_book_of_schema_6_upgrades_and_takes_corrections(tmp_path: Path) -> None:
    old = tmp_path / "v6.db"
    _v6_book(old)
    assert sqlite3.connect(old).execute("PRAGMA user_version").fetchone()[0] == 6
    with open_store(old) as s:
        assert s.schema_version() == SCHEMA_VERSION
        assert s.load_underlyings().ticks == (0.00001,)  # an fx rate's default
        s.correct_underlying("OLDF", "quoted to four places", {"tick": 0.0001})
        assert s.load_underlyings().ticks == (0.0001,)
        assert s.integrity_ok()
