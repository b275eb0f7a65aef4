"""``--book NAME`` on every report command: one book's trades, the file's marks; an unknown name
is refused in words that list the books there are."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from cli_helpers import run

from blotter import calendar as cal
from blotter.risk import total, value_book
from blotter.store import open_store

AT = "2026-11-30T16:45"
"""Valuation time (desk-local): a quarter hour after the demo's last close."""

REPORTS = (
    ["risk"],
    ["whatif", "spot", "-3%"],
    ["ladder"],
    ["explain"],
)


def _books(db: Path) -> list[str]:
    with open_store(db, read_only=True) as s:
        return s.book_names()


@pytest.mark.parametrize("command", REPORTS, ids=lambda c: c[0])
def test_an_unknown_book_is_refused_listing_the_books(demo_db: Path, command: list[str]) -> None:
    out = run(*command, "--db", str(demo_db), "--book", "nope", code=1)
    assert "no book named 'nope'" in out.output
    for name in _books(demo_db):
        assert name in out.output


def test_risk_of_one_book_is_that_books_positions(demo_db: Path) -> None:
    names = _books(demo_db)
    assert len(names) >= 2, "the demo book has several books"
    totals = []
    for name in names:
        out = json.loads(run("risk", "--db", str(demo_db), "--at", AT, "--book", name,
                             "--json").stdout)
        assert out["book"] == name
        with open_store(demo_db, read_only=True) as s:
            v = value_book(s.load_book(name), s.load_market(), cal.to_instant(AT))
        assert out["total"]["value"] == pytest.approx(total(v).value, rel=1e-12)
        totals.append(out["total"]["vega_pt"])
    every = json.loads(run("risk", "--db", str(demo_db), "--at", AT, "--json").stdout)
    assert every["book"] is None
    # Vega adds across books (one currency in the demo).
    assert sum(totals) == pytest.approx(every["total"]["vega_pt"], rel=1e-9)


@pytest.mark.parametrize("command", REPORTS, ids=lambda c: c[0])
def test_every_report_takes_a_book(demo_db: Path, command: list[str]) -> None:
    name = _books(demo_db)[0]
    out = run(*command, "--db", str(demo_db), "--book", name)
    assert out.output.strip()


def test_explain_of_each_book_adds_to_all_books(demo_db: Path) -> None:
    parts = [
        json.loads(run("explain", "--db", str(demo_db), "--book", n, "--json").stdout)
        for n in _books(demo_db)
    ]
    every = json.loads(run("explain", "--db", str(demo_db), "--json").stdout)
    assert sum(p["total"]["actual"] for p in parts) == pytest.approx(
        every["total"]["actual"], rel=1e-9, abs=1e-6
    )
    assert sum(p["total"]["new_trades"] for p in parts) == pytest.approx(
        every["total"]["new_trades"], rel=1e-9, abs=1e-6
    )


def test_risk_by_position_has_quantity_mark_vol_days_and_pnl_today(demo_db: Path) -> None:
    from blotter.desk.pnl_today import pnl_today

    out = json.loads(run("risk", "--db", str(demo_db), "--at", AT, "--by", "position",
                         "--json").stdout)
    with open_store(demo_db, read_only=True) as s:
        v = value_book(s.load_book(), s.load_market(), cal.to_instant(AT))
        today = pnl_today(s, cal.to_instant(AT))
    rows = out["by_position"]
    assert len(rows) == len(v.book)
    for i, row in enumerate(rows):
        assert row["quantity"] == float(v.book.quantities[i])
        assert row["currency"] == "USD"
        if row["is_call"] is None:
            assert row["mark_price"] == float(v.spot[i]) and row["days_to_expiry"] is None
        else:
            assert row["mark_price"] == pytest.approx(float(v.greeks.price[i]), rel=1e-12)
            assert row["days_to_expiry"] == pytest.approx(float(v.years[i]) * 365, rel=1e-12)
            assert row["vol"] == pytest.approx(float(v.vol[i]), rel=1e-12)
    assert out["pnl_today"]["close_id"] == today.close_id
    assert out["pnl_today"]["by_currency"]["USD"] == pytest.approx(today.total("USD"))
    text = run("risk", "--db", str(demo_db), "--at", AT, "--by", "position").stdout
    assert "P&L today (since close set" in text
    assert "mark price" in text and "vol %" in text and "days" in text
    csv_head = run("risk", "--db", str(demo_db), "--at", AT, "--by", "position",
                   "--csv").stdout.splitlines()[0]
    assert {"quantity", "mark_price", "vol", "days_to_expiry", "currency"} <= set(
        csv_head.split(",")
    )
