"""Every report values what it can when one name lacks its marks, and lists what it left out.

Reference: QuantLib 1.44 AnalyticEuropeanEngine values the one valued option (European call,
S 100, K 100, r 4%, q 0, σ 25%, whole days of Actual365Fixed from 2026-12-01 20:00 UTC to the
16:00 New York close of ``EXPIRY``, ``days_to``).
"""

from __future__ import annotations

import csv
import io
import json
from collections.abc import Iterator
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import pytest
from cli_helpers import run
from ql_reference import EXPIRY, days_to, european

from blotter import store as store_mod

T0 = "2026-12-01T20:00:00Z"


def _ql_call(spot: float) -> float:
    return european(True, spot, 100.0, 0.04, 0.25, days_to(EXPIRY))


@pytest.fixture
def half_marked(tmp_path: Path) -> Iterator[str]:
    """A book of two names: AAA fully marked, CCC with no mark at all; the store's clock reads
    half an hour after the trades, so a close written later falls well after their booking."""
    with store_mod.use_clock(lambda: datetime(2026, 12, 1, 20, 30, tzinfo=UTC)):
        yield _half_marked_book(tmp_path)


def _half_marked_book(tmp_path: Path) -> str:
    db = str(tmp_path / "half.db")
    run("create", db, "--book", "desk")
    for sym in ("AAA", "CCC"):
        run("--db", db, "underlying", "add", sym, "--kind", "stock", "--currency", "USD",
            "--multiplier", "100", "--european")
    run("--db", db, "mark", "spot", "AAA", "100")
    run("--db", db, "mark", "vol", "AAA", EXPIRY, "25%")
    run("--db", db, "mark", "rate", "USD", "90", "4%")
    run("--db", db, "trade", "add", "AAA", "--expiry", EXPIRY, "--strike", "100", "--call",
        "--qty", "10", "--price", "9", "--time", T0)
    run("--db", db, "trade", "add", "CCC", "--expiry", EXPIRY, "--strike", "20", "--put",
        "--qty", "-5", "--price", "1", "--time", T0)
    return db


def _unvalued_is_ccc(out: dict[str, Any]) -> None:
    assert out["partial"] is True
    (u,) = out["unvalued"]
    assert u["underlying"] == "CCC" and u["contract"].startswith(f"CCC {EXPIRY} 20")
    assert [(m["mark"], m["command"]) for m in u["missing"]] == [
        ("spot", "blotter mark spot CCC PRICE"),
        ("vol", "blotter mark vol CCC YYYY-MM-DD VOL"),
    ]


def test_risk_values_the_marked_name_and_lists_the_other(half_marked: str) -> None:
    out = json.loads(run("--db", half_marked, "risk", "--at", T0, "--json").stdout)
    assert out["total"]["value"] == pytest.approx(1000 * _ql_call(100.0), rel=1e-9)
    assert [r["underlying"] for r in out["by_underlying"]] == ["AAA"]
    _unvalued_is_ccc(out)
    table = run("--db", half_marked, "risk", "--at", T0).stdout
    assert "total of valued" in table
    assert "1 position not valued" in table and "blotter mark spot CCC PRICE" in table
    csv_run = run("--db", half_marked, "risk", "--at", T0, "--csv")
    rows = list(csv.DictReader(io.StringIO(csv_run.stdout)))
    assert [r["underlying"] for r in rows] == ["AAA", "total"]
    assert "not valued" in csv_run.stderr and "blotter mark spot CCC PRICE" in csv_run.stderr


def test_whatif_ladder_and_explain_value_the_rest(half_marked: str) -> None:
    out = json.loads(
        run("--db", half_marked, "whatif", "spot -3%", "--at", T0, "--json").stdout
    )
    change = 1000 * (_ql_call(97.0) - _ql_call(100.0))
    assert out["total"]["full"] == pytest.approx(change, rel=1e-9)
    _unvalued_is_ccc(out)
    assert "total of valued" in run("--db", half_marked, "whatif", "spot -3%", "--at", T0).stdout
    lad = json.loads(
        run("--db", half_marked, "grid", "--spot", "-3", "--vol", "0", "--at", T0,
            "--json").stdout
    )
    assert lad["full"][0][0] == pytest.approx(change, rel=1e-9)
    _unvalued_is_ccc(lad)
    assert "of the valued positions" in run("--db", half_marked, "grid", "--at", T0).stdout
    # the 16:00 New York close of 2026-12-01
    with store_mod.use_clock(lambda: datetime(2026, 12, 1, 21, 0, tzinfo=UTC)):
        run("--db", half_marked, "mark", "close")
    ex = json.loads(run("--db", half_marked, "explain", "--to", "now", "--json").stdout)
    assert [r["underlying"] for r in ex["by_underlying"]] == ["AAA"]
    _unvalued_is_ccc(ex)
    assert ex["unvalued"][0]["where"].startswith("start (set")
    # The start is a written close: logging the mark now does not mend it, its correction does.
    close_id = ex["from"]["id"]
    assert ex["unvalued"][0]["correct_closes"] == [close_id]
    text = run("--db", half_marked, "explain", "--to", "now").stdout
    assert "total of valued" in text and "blotter mark spot CCC PRICE" in text
    assert f"then blotter mark close --corrects {close_id}" in text
