"""``blotter hedge`` on a fresh copy of the demo book: the JSON against ``blotter risk --json`` of
the same book and time (the delta hedged is risk's), the trade in whole lots with the residual
it leaves, ``--book``, ``--lot``, ``--csv`` and the refusals in words. That the hedge zeroes the
delta on a full revaluation is checked in tests/desk/test_hedge.py."""

from __future__ import annotations

import csv
import io
import json
from pathlib import Path
from typing import Any

import pytest
from cli_helpers import run

AT = "2026-11-30T16:45"
"""Valuation time (desk-local): a quarter hour after the demo's last close."""


def report_json(command: str, db: Path, *args: str) -> dict[str, Any]:
    """``blotter COMMAND --db DB --at AT --json ARGS`` read back."""
    out: dict[str, Any] = json.loads(
        run(command, "--db", str(db), "--at", AT, "--json", *args).output
    )
    return out


def hedge_json(db: Path, *args: str) -> dict[str, Any]:
    return report_json("hedge", db, *args)


def risk_json(db: Path) -> dict[str, Any]:
    return report_json("risk", db)


def test_hedge_json_hedges_risks_delta_in_whole_lots(demo_db: Path) -> None:
    out = hedge_json(demo_db)
    risk = risk_json(demo_db)
    assert out["as_of"] == risk["as_of"] and out["reference_index"] == "DEMOIX"
    by_symbol = {h["target"]: h for h in out["hedges"]}
    assert list(by_symbol) == [r["underlying"] for r in risk["by_underlying"]] + ["book"]
    lots = {"DEMOIX": 1.0, "DEMOA": 100.0, "DEMOB": 100.0, "DEMOC": 100.0, "DEMOFU": 50.0}
    for row in risk["by_underlying"]:
        h = by_symbol[row["underlying"]]
        assert h["instrument"] == row["underlying"] and not h["beta_weighted"]
        assert h["delta_units"] == pytest.approx(row["delta_shares"], rel=1e-12)
        assert h["lot_units"] == lots[h["instrument"]]
        assert h["units"] == pytest.approx(h["quantity"] * h["units_per_contract"])
        assert h["units"] == pytest.approx(h["lots"] * h["lot_units"])
        assert h["residual_units"] == pytest.approx(h["delta_units"] + h["units"])
        assert abs(h["residual_units"]) <= h["lot_units"] / 2
        assert h["residual_cash"] == pytest.approx(h["residual_units"] * row["spot"])
        assert h["side"] == ("buy" if h["quantity"] > 0 else "sell")
    book = by_symbol["book"]
    assert book["beta_weighted"] and book["instrument"] == "DEMOIX"
    assert book["delta_units"] == pytest.approx(risk["beta_delta_index_units"], rel=1e-12)
    assert abs(book["residual_units"]) <= 0.5


def test_hedge_of_one_book_with_a_lot_of_one_unit(demo_db: Path) -> None:
    """--book equity-vol hedges that book's positions; a lot of 1 unit is not a whole DEMOFU
    contract, which is said for that row."""
    everyone = {h["target"]: h for h in hedge_json(demo_db, "--lot", "1")["hedges"]}
    equity = {h["target"]: h for h in hedge_json(demo_db, "--book", "equity-vol", "--lot", "1")
              ["hedges"]}
    assert "DEMOIX" not in equity and set(equity) < set(everyone)
    assert "not a whole number of DEMOFU contracts" in everyone["DEMOFU"]["refused"]
    for h in equity.values():
        assert h["lot_units"] == 1.0 and abs(h["residual_units"]) <= 0.5
    index = {h["target"]: h for h in hedge_json(demo_db, "--book", "index-vol")["hedges"]}
    for symbol in ("DEMOA", "DEMOB", "DEMOC"):  # held in equity-vol only
        assert equity[symbol]["delta_units"] == pytest.approx(everyone[symbol]["delta_units"])
        assert symbol not in index


def test_hedge_csv_and_table(demo_db: Path) -> None:
    rows = list(csv.DictReader(io.StringIO(run("hedge", "--db", str(demo_db), "--at", AT,
                                               "--csv", "--lot", "1").output)))
    assert [r["target"] for r in rows][-1] == "book"
    fut = next(r for r in rows if r["target"] == "DEMOFU")
    assert fut["quantity"] == "" and "whole number" in fut["refused"]
    table = run("hedge", "--db", str(demo_db), "--at", AT).output
    assert "book (β)" in table and "100 shares, a round lot of a US stock" in table
    assert "1 contract of 50 units" in table


def test_hedge_refuses_in_words(demo_db: Path, tmp_book: Path) -> None:
    out = run("hedge", "--db", str(demo_db), "--book", "nosuch", code=1).output
    assert "no book named 'nosuch'" in out
    for lot in ("0", "-3", "nan"):
        run("hedge", "--db", str(demo_db), "--lot", lot, code=2)
    run("underlying", "add", "XYZ", "--kind", "stock", "--currency", "USD", "--multiplier",
        "100", "--db", str(tmp_book))
    run("mark", "spot", "XYZ", "100", "--db", str(tmp_book))
    run("trade", "add", "XYZ", "--qty", "-250", "--price", "100", "--new-book", "--book", "desk",
        "--db", str(tmp_book))
    out = json.loads(run("hedge", "--db", str(tmp_book), "--json").output)
    xyz, book = out["hedges"]
    assert (xyz["quantity"], xyz["residual_units"]) == (300, 50.0)  # 2.5 lots: away from 0
    assert "no reference index" in book["refused"]
