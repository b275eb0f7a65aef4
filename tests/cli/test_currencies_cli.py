"""Reports of a book holding a USD and a EUR name: every money field carries its currency, totals
are per currency and the total across both is "—" (null in JSON), never a sum.

Reference: QuantLib 1.44 AnalyticEuropeanEngine values each option (flat curves, Actual365Fixed,
whole days from 2026-12-01 20:00 UTC to the 16:00 New York close of ``EXPIRY``, ``days_to``): a
USD call (S 100, K 100, r 4%, σ 25%, 10 contracts of 100) and a EUR put (S 50, K 50, r 2.5%,
σ 30%, −20 of 100).
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
from ql_reference import EXPIRY, days_to, european

from blotter import store as store_mod

T0 = "2026-12-01T20:00:00Z"
DAYS = days_to(EXPIRY)


def _usd(spot: float = 100.0) -> float:
    return 1000 * european(True, spot, 100.0, 0.04, 0.25, DAYS)


def _eur(spot: float = 50.0) -> float:
    return -2000 * european(False, spot, 50.0, 0.025, 0.30, DAYS)


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
        run("--db", db, "mark", "vol", sym, EXPIRY, vol)
        run("--db", db, "mark", "rate", ccy, "90", rate)
    run("--db", db, "trade", "add", "AAA", "--expiry", EXPIRY, "--strike", "100", "--call",
        "--qty", "10", "--price", "9", "--time", T0)
    run("--db", db, "trade", "add", "BBB", "--expiry", EXPIRY, "--strike", "50", "--put",
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
        ("AAA", "USD"), ("BBB", "EUR"), ("total", "USD"), ("total", "EUR"),
        ("total in base", "USD"), ("fx delta", "USD"),
    ]
    assert float(rows[3]["value"]) == pytest.approx(_eur(), rel=1e-9)
    # No EURUSD spot: the base total and the FX delta of EUR are empty, never a figure.
    assert rows[4]["value"] == rows[4]["vega_pt"] == rows[5]["fx_delta_1pct"] == ""
    assert rows[5]["fx_of"] == "EUR"
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
    ex_rows = _csv(two_currencies, "explain", "--to", "now")
    assert [r["currency"] for r in ex_rows] == ["USD", "EUR", "USD", "EUR", "USD", "USD", "USD"]
    # No EURUSD spot: the base rows are empty, never a sum of two currencies.
    assert [r["total"] for r in ex_rows[4:]] == ["", "", ""]
    assert ex["in_base"]["total"] is None and ex["in_base"]["missing"][0]["of"] == "EURUSD"


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


def test_risk_converts_totals_to_the_base_at_the_marked_fx_spot(two_currencies: str) -> None:
    """With EURUSD marked at 1.25 the book converts: a EUR amount is 1.25 USD (base USD) and a
    USD amount 1 / 1.25 EUR (base EUR); the FX delta is translation only (no pair positions)."""
    db = two_currencies
    run("--db", db, "underlying", "add", "EURUSD", "--kind", "fx", "--currency", "USD",
        "--multiplier", "100000")
    run("--db", db, "mark", "spot", "EURUSD", "1.25")
    out = _json(db, "risk", "--at", T0)
    usd_cash = out["total"]["by_currency"]["USD"]["delta_cash"]
    eur_cash = out["total"]["by_currency"]["EUR"]["delta_cash"]
    base = out["total_in_base"]
    assert out["base_currency"] == "USD" and base["currency"] == "USD"
    assert base["value"] == pytest.approx(_usd() + 1.25 * _eur(), rel=1e-9)
    assert base["delta_cash"] == pytest.approx(usd_cash + 1.25 * eur_cash, rel=1e-12)
    assert base["delta_shares"] is None and base["gamma_1pct"] is None
    assert base["fx_rates"] == {"USD": 1.0, "EUR": 1.25} and base["missing"] == []
    assert out["fx_delta"]["by_currency"] == pytest.approx({"EUR": 0.01 * _eur() * 1.25})
    assert out["total"]["value"] is None  # the plain total still never adds currencies
    rows = _csv(db, "risk", "--at", T0)
    assert (rows[-2]["underlying"], rows[-2]["currency"]) == ("total in base", "USD")
    assert float(rows[-2]["value"]) == pytest.approx(_usd() + 1.25 * _eur(), rel=1e-9)
    assert (rows[-1]["underlying"], rows[-1]["fx_of"]) == ("fx delta", "EUR")
    assert float(rows[-1]["fx_delta_1pct"]) == pytest.approx(0.0125 * _eur(), rel=1e-9)
    table = run("--db", db, "risk", "--at", T0).stdout
    in_usd = next(line for line in table.splitlines() if line.startswith("total in USD"))
    assert f"{_usd() + 1.25 * _eur():,.0f}" in in_usd
    head = "FX delta (USD per +1% of each currency against USD)"
    assert f"{head}: EUR {0.0125 * _eur():,.0f}" in table
    run("--db", db, "base-currency", "EUR")
    out = _json(db, "risk", "--at", T0)
    assert out["total_in_base"]["currency"] == "EUR"
    assert out["total_in_base"]["value"] == pytest.approx(_usd() / 1.25 + _eur(), rel=1e-9)
    assert out["fx_delta"]["by_currency"] == pytest.approx({"USD": 0.01 * _usd() / 1.25})


def test_a_missing_fx_spot_shows_dashes_and_names_the_pair(two_currencies: str) -> None:
    out = _json(two_currencies, "risk", "--at", T0)
    assert out["total_in_base"]["value"] is None
    assert out["fx_delta"]["by_currency"] == {"EUR": None}
    (missing,) = out["total_in_base"]["missing"]
    assert missing["of"] == "EURUSD"
    table = run("--db", two_currencies, "risk", "--at", T0).stdout
    in_usd = next(line for line in table.splitlines() if line.startswith("total in USD"))
    assert set(in_usd.split()[4:]) == {"—"}
    assert "no spot mark for EURUSD" in table and "blotter mark spot EURUSD PRICE" in table
    assert "FX delta (USD per +1% of each currency against USD): EUR —" in table
    csv_run = run("--db", two_currencies, "risk", "--at", T0, "--csv")
    assert "no spot mark for EURUSD" in csv_run.stderr
    # A pair the book holds but has not marked is named as that pair's spot mark.
    run("--db", two_currencies, "underlying", "add", "EURUSD", "--kind", "fx", "--currency",
        "USD", "--multiplier", "100000")
    out = _json(two_currencies, "risk", "--at", T0)
    assert out["total_in_base"]["missing"] == [
        {"mark": "spot", "of": "EURUSD", "command": "blotter mark spot EURUSD PRICE"}
    ]


def test_explain_splits_out_the_fx_translation(tmp_path: Path) -> None:
    """Two closes a day apart, 20:00 UTC each: AAA 100 → 101, BBB 50 → 52, EURUSD 1.25 → 1.30.
    By hand, with QuantLib's value of each option at ``DAYS`` and a day less: P&L in USD =
    P&L(USD) + 1.25 × P&L(EUR) + (1.30 − 1.25) × V1(EUR), which is also the change of
    V(USD) + X × V(EUR) from the start rate to the end rate."""
    at = datetime(2026, 12, 1, 20, 0, tzinfo=UTC)
    with store_mod.use_clock(lambda: at):
        db = _two_currency_book(tmp_path)
        run("--db", db, "underlying", "add", "EURUSD", "--kind", "fx", "--currency", "USD",
            "--multiplier", "100000")
        run("--db", db, "mark", "spot", "EURUSD", "1.25")
        run("--db", db, "mark", "close")
    with store_mod.use_clock(lambda: datetime(2026, 12, 2, 20, 0, tzinfo=UTC)):
        for sym, spot in (("AAA", "101"), ("BBB", "52"), ("EURUSD", "1.30")):
            run("--db", db, "mark", "spot", sym, spot)
        run("--db", db, "mark", "close")
        out = _json(db, "explain")
        rows = _csv(db, "explain")
        table = run("--db", db, "explain").stdout
    usd0, usd1 = 1000 * european(True, 100.0, 100.0, 0.04, 0.25, DAYS), 1000 * european(
        True, 101.0, 100.0, 0.04, 0.25, DAYS - 1)
    eur0, eur1 = -2000 * european(False, 50.0, 50.0, 0.025, 0.30, DAYS), -2000 * european(
        False, 52.0, 50.0, 0.025, 0.30, DAYS - 1)
    at_start = (usd1 - usd0) + 1.25 * (eur1 - eur0)
    translation = (1.30 - 1.25) * eur1
    base = out["in_base"]
    assert out["base_currency"] == "USD" and base["currency"] == "USD"
    assert base["start_rates"] == {"USD": 1.0, "EUR": 1.25}
    assert base["end_rates"] == {"USD": 1.0, "EUR": 1.30}
    assert base["end_values"] == pytest.approx({"USD": usd1, "EUR": eur1}, rel=1e-9)
    assert base["at_start_rates"]["actual"] == pytest.approx(at_start, rel=1e-9)
    assert base["fx_translation"] == pytest.approx(translation, rel=1e-9)
    assert base["total"] == pytest.approx(at_start + translation, rel=1e-9)
    assert base["total"] == pytest.approx((usd1 + 1.30 * eur1) - (usd0 + 1.25 * eur0), rel=1e-9)
    per = out["total"]["by_currency"]
    for term, x in base["at_start_rates"]["terms"].items():
        assert x == pytest.approx(per["USD"]["terms"][term] + 1.25 * per["EUR"]["terms"][term])
    assert base["missing"] == []
    labelled = {r["underlying"]: r for r in rows}
    assert float(labelled["fx translation"]["total"]) == pytest.approx(translation, rel=1e-9)
    assert labelled["fx translation"]["currency"] == "USD"
    assert float(labelled["total in base"]["total"]) == pytest.approx(
        at_start + translation, rel=1e-9
    )
    assert float(labelled["total in base at start rates"]["actual"]) == pytest.approx(
        at_start, rel=1e-9
    )
    line = next(x for x in table.splitlines() if x.startswith("FX translation"))
    assert line.split()[-1] == f"{translation:,.0f}"
