"""Reports of a book holding a USD and a EUR name: every money field carries its currency, totals
are per currency and the total across both is "—" (null in JSON), never a sum.

Reference: QuantLib 1.44 AnalyticEuropeanEngine values each option (flat curves, Actual365Fixed,
199 days: 2026-12-01 20:00 UTC to the 16:00 New York close of 2027-06-18): a USD call (S 100,
K 100, r 4%, σ 25%, 10 contracts of 100) and a EUR put (S 50, K 50, r 2.5%, σ 30%, −20 of 100).
That amounts in two currencies do not add without an exchange rate is common practice.
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
from ql_reference import european

from blotter import store as store_mod

T0 = "2026-12-01T20:00:00Z"


def _usd(spot: float = 100.0) -> float:
    return 1000 * european(True, spot, 100.0, 0.04, 0.25, 199)


def _eur(spot: float = 50.0) -> float:
    return -2000 * european(False, spot, 50.0, 0.025, 0.30, 199)


@pytest.fixture
def two_currencies(tmp_path: Path) -> Iterator[str]:
    """AAA in USD and BBB in EUR, fully marked, one option each, the same expiry."""
    with store_mod.use_clock(lambda: datetime(2026, 12, 1, 20, 30, tzinfo=UTC)):
        yield _two_currency_book(tmp_path)


def _two_currency_book(tmp_path: Path) -> str:
    db = str(tmp_path / "fx.db")
    run("create", db, "--book", "desk")
    for sym, ccy, spot, vol, rate in (
        ("AAA", "USD", "100", "25%", "4%"),
        ("BBB", "EUR", "50", "30%", "2.5%"),
    ):
        run("--db", db, "underlying", "add", sym, "--kind", "stock", "--currency", ccy,
            "--multiplier", "100", "--european")
        run("--db", db, "mark", "spot", sym, spot)
        run("--db", db, "mark", "vol", sym, "2027-06-18", vol)
        run("--db", db, "mark", "rate", ccy, "90", rate)
    run("--db", db, "trade", "add", "AAA", "--expiry", "2027-06-18", "--strike", "100", "--call",
        "--qty", "10", "--price", "9", "--time", T0)
    run("--db", db, "trade", "add", "BBB", "--expiry", "2027-06-18", "--strike", "50", "--put",
        "--qty", "-20", "--price", "4", "--time", T0)
    return db


def _json(db: str, *args: str) -> dict[str, Any]:
    return json.loads(run("--db", db, *args, "--json").stdout)


def _csv(db: str, *args: str) -> list[dict[str, str]]:
    return list(csv.DictReader(io.StringIO(run("--db", db, *args, "--csv").stdout)))


def test_risk_totals_per_currency(two_currencies: str) -> None:
    out = _json(two_currencies, "risk", "--at", T0, "--by", "expiry")
    assert {r["underlying"]: r["currency"] for r in out["by_underlying"]} == {
        "AAA": "USD", "BBB": "EUR"
    }
    total = out["total"]
    assert total["currency"] is None and total["value"] is None and total["vega_pt"] is None
    assert {c: d["value"] for c, d in total["by_currency"].items()} == pytest.approx(
        {"USD": _usd(), "EUR": _eur()}, rel=1e-9
    )
    (bucket,) = out["by_expiry"]  # both options expire in one month
    assert bucket["currency"] is None and bucket["delta_cash"] is None
    assert set(bucket["by_currency"]) == {"USD", "EUR"}
    rows = _csv(two_currencies, "risk", "--at", T0)
    assert [(r["underlying"], r["currency"]) for r in rows] == [
        ("AAA", "USD"), ("BBB", "EUR"), ("total", "USD"), ("total", "EUR")
    ]
    assert float(rows[3]["value"]) == pytest.approx(_eur(), rel=1e-9)
    table = run("--db", two_currencies, "risk", "--at", T0).stdout
    assert "money in each underlying's currency (USD, EUR)" in table
    all_row = next(line for line in table.splitlines() if line.split()[:2] == ["total", "all"])
    assert set(all_row.split()[2:]) == {"—"}
    assert "book currency" not in table and "$/pt" not in table.split("\n\n")[-1]


def test_whatif_ladder_and_explain_never_add_currencies(two_currencies: str) -> None:
    moved = {"USD": _usd(97.0) - _usd(), "EUR": _eur(48.5) - _eur()}
    out = _json(two_currencies, "whatif", "spot -3%", "--at", T0)
    assert out["total"]["currency"] is None and out["total"]["full"] is None
    assert {c: r["full"] for c, r in out["total"]["by_currency"].items()} == pytest.approx(
        moved, rel=1e-9
    )
    assert [r["currency"] for r in out["by_underlying"]] == ["USD", "EUR"]
    rows = _csv(two_currencies, "whatif", "spot -3%", "--at", T0)
    assert [(r["underlying"], r["currency"]) for r in rows][-2:] == [
        ("total", "USD"), ("total", "EUR")
    ]
    lad = _json(two_currencies, "grid", "--spot", "-3", "--vol", "0", "--at", T0)
    assert lad["full"] is None and lad["worst"] is None and lad["currency"] is None
    assert {c: g["full"][0][0] for c, g in lad["by_currency"].items()} == pytest.approx(
        moved, rel=1e-9
    )
    cells = _csv(two_currencies, "grid", "--spot", "-3", "--vol", "0", "--at", T0)
    assert {r["currency"]: float(r["full"]) for r in cells} == pytest.approx(moved, rel=1e-9)
    text = run("--db", two_currencies, "grid", "--at", T0).stdout
    assert "worst cell in USD" in text and "worst cell in EUR" in text
    with store_mod.use_clock(lambda: datetime(2026, 12, 1, 21, 0, tzinfo=UTC)):
        run("--db", two_currencies, "mark", "close")
    ex = _json(two_currencies, "explain", "--to", "now")
    assert ex["total"]["currency"] is None and ex["total"]["actual"] is None
    assert set(ex["total"]["by_currency"]) == {"USD", "EUR"}
    assert [r["currency"] for r in ex["by_underlying"]] == ["USD", "EUR"]
    assert [r["currency"] for r in _csv(two_currencies, "explain", "--to", "now")] == [
        "USD", "EUR", "USD", "EUR"
    ]


def test_a_single_currency_book_adds_only_the_currency_fields(demo_db: Path) -> None:
    out = _json(str(demo_db), "risk", "--at", "2026-11-30T16:45")
    total = out["total"]
    assert total["currency"] == "USD" and list(total["by_currency"]) == ["USD"]
    assert total["by_currency"]["USD"]["value"] == total["value"]
    assert all(r["currency"] == "USD" for r in out["by_underlying"])
    move = _json(str(demo_db), "whatif", "spot -3%", "--at", "2026-11-30T16:45")
    assert move["total"]["by_currency"]["USD"]["full"] == move["total"]["full"]
    lad = _json(str(demo_db), "grid", "--at", "2026-11-30T16:45")
    assert lad["currency"] == "USD" and lad["by_currency"]["USD"]["full"] == lad["full"]
