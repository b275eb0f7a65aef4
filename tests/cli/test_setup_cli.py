"""``blotter create`` and ``blotter underlying add|list``: a book file of one's own, from nothing
to a valued position, and refusals that change nothing.

The valued position is checked against QuantLib 1.44 (``FdBlackScholesVanillaEngine`` on an
800 × 800 grid for the American call, Actual/365 flat curves); the symbols are invented here.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from cli_helpers import run
from click.testing import CliRunner
from ql_reference import EXPIRY, days_to

from blotter.cli import main
from blotter.store import open_store


@pytest.fixture(autouse=True)
def _own_data_dir(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path / "xdg"))
    monkeypatch.delenv("BLOTTER_DB", raising=False)


def _file_state(db: Path) -> tuple[object, ...]:
    s = open_store(db, read_only=True)
    try:
        return (repr(s.underlying_records()), len(s.trades()), len(s.mark_sets()))
    finally:
        s.close()


def test_create_then_underlyings_are_listed_with_their_defaults(tmp_path: Path) -> None:
    db = tmp_path / "own.db"
    out = json.loads(run("create", str(db), "--book", "vol-desk", "--json").stdout)
    assert out == {"path": str(db), "book": "vol-desk", "base_currency": "USD"}
    run("--db", str(db), "underlying", "add", "QQZ", "--kind", "stock", "--currency", "USD",
        "--multiplier", "100", "--div-yield", "1.5%", "--beta", "1.3", "--description", "test")
    run("--db", str(db), "underlying", "add", "QQIX", "--kind", "index", "--currency", "USD",
        "--multiplier", "50", "--european", "--cash-settled", "--reference", "--cutoff", "16:15")
    rows = json.loads(run("--db", str(db), "underlying", "list", "--json").stdout)
    assert [r["symbol"] for r in rows] == ["QQZ", "QQIX"]
    assert rows[0] == {
        "symbol": "QQZ", "kind": "stock", "currency": "USD", "multiplier": 100.0,
        "american": True, "cash_settled": False, "div_yield": 0.015, "beta": 1.3,
        "is_reference": False, "calendar": "NYSE", "time_zone": "America/New_York",
        "cutoff_time": "16:00", "description": "test", "tick": 0.01,
    }
    assert rows[1]["american"] is False and rows[1]["cash_settled"] is True
    assert rows[1]["is_reference"] is True and rows[1]["cutoff_time"] == "16:15"
    csv_text = run("--db", str(db), "underlying", "list", "--csv").stdout
    assert csv_text.splitlines()[0].startswith("symbol,kind,currency,multiplier")
    assert "QQIX" in run("--db", str(db), "underlying", "list").stdout


@pytest.mark.parametrize(
    ("args", "message"),
    [
        (["QQZ"], "already exists"),
        (["Q Z"], "no spaces"),
        (["QQY\n"], "no spaces"),
        (["spot"], "not a word of the what-if"),
        (["QQY", "--currency-x", "USD"], "No such option"),
        (["QQY", "--reference"], "already has a reference index"),
        (["QQY", "--calendar", "NOWHERE"], "unknown exchange calendar"),
        (["QQY", "--zone", "Mars/Olympus"], "unknown time zone"),
        (["QQY", "--cutoff", "4pm"], "HH:MM"),
        (["QQY", "--div-yield", "150%"], "a dividend yield must be from -100% to 100%, got 150%"),
        (["QQY", "--multiplier", "0"], "multiplier must be from 1e-06 to 10,000,000"),
        (["QQY", "--beta", "40"], "beta must be from -20 to 20"),
    ],
)
def test_bad_underlyings_are_refused_and_change_nothing(
    tmp_path: Path, args: list[str], message: str
) -> None:
    db = tmp_path / "own.db"
    run("create", str(db))
    base = ["--db", str(db), "underlying", "add"]
    run(*base, "QQZ", "--kind", "index", "--currency", "USD", "--multiplier", "100", "--reference")
    before = _file_state(db)
    sym, *rest = args
    required = ["--kind", "stock", "--currency", "USD", "--multiplier", "100"]
    if "--currency-x" in rest:
        required = ["--kind", "stock"]
    elif "--multiplier" in rest:
        required = required[:4]
    full = [*base, sym, *required, *rest]
    result = CliRunner().invoke(main, full)
    assert result.exit_code != 0
    assert message in result.output
    assert _file_state(db) == before


def test_lowercase_currency_and_existing_file_are_refused(tmp_path: Path) -> None:
    db = tmp_path / "own.db"
    run("create", str(db))
    r = run("--db", str(db), "underlying", "add", "QQZ", "--kind", "stock", "--currency", "usd",
            "--multiplier", "100", code=2)
    assert "three capital letters" in r.output
    r = run("create", str(db), code=1)
    assert "already exists" in r.output
    r = run("--read-only", "create", str(tmp_path / "other.db"), code=1)
    assert "--read-only" in r.output and not (tmp_path / "other.db").exists()


def test_from_an_empty_file_to_a_valued_position(tmp_path: Path) -> None:
    ql = pytest.importorskip("QuantLib")
    db = str(tmp_path / "own.db")
    run("create", db, "--book", "vol-desk")
    empty = run("--db", db, "risk")
    assert "marks none yet" in empty.stdout and "older" not in empty.stderr
    run("--db", db, "underlying", "add", "QQZ", "--kind", "stock", "--currency", "USD",
        "--multiplier", "100", "--div-yield", "2%")
    t0 = "2026-12-01T20:00:00Z"
    run("--db", db, "trade", "add", "QQZ", "--expiry", EXPIRY, "--strike", "100", "--call",
        "--qty", "-10", "--price", "9.10", "--time", t0)
    missing = run("--db", db, "risk", "--at", t0)
    assert "blotter mark spot QQZ PRICE" in missing.stdout and "not valued" in missing.stdout
    run("--db", db, "mark", "spot", "QQZ", "104")
    run("--db", db, "mark", "vol", "QQZ", EXPIRY, "30%")
    missing = run("--db", db, "risk", "--at", t0)
    assert "blotter mark rate USD DAYS RATE" in missing.stdout
    run("--db", db, "mark", "rate", "USD", "180", "4%")
    out = json.loads(run("--db", db, "risk", "--by", "position", "--at", t0, "--json").stdout)
    value = out["total"]["value"]
    # QuantLib: American call, S 104, K 100, r 4%, q 2%, σ 30%, whole days to EXPIRY: t0 is
    # 20:00 UTC, and the expiry is its 16:00 New York close, 20:00 UTC (summer time).
    today = ql.Date(1, 12, 2026)
    ql.Settings.instance().evaluationDate = today
    dc = ql.Actual365Fixed()
    expiry = today + days_to(EXPIRY)
    flat = lambda r: ql.YieldTermStructureHandle(ql.FlatForward(today, r, dc))  # noqa: E731
    process = ql.BlackScholesMertonProcess(
        ql.QuoteHandle(ql.SimpleQuote(104.0)), flat(0.02), flat(0.04),
        ql.BlackVolTermStructureHandle(ql.BlackConstantVol(today, ql.NullCalendar(), 0.30, dc)),
    )
    option = ql.VanillaOption(ql.PlainVanillaPayoff(ql.Option.Call, 100.0),
                              ql.AmericanExercise(today, expiry))
    option.setPricingEngine(
        ql.QdFpAmericanEngine(process, ql.QdFpAmericanEngine.highPrecisionScheme())
    )
    # The engine's American value is converged: within 1e-6 of the strike of QuantLib 1.44's
    # high-precision QdFp engine (blotter/engine/ACCURACY.md).
    per_share = -value / (10 * 100)
    assert per_share == pytest.approx(option.NPV(), abs=1e-6 * 100.0)


def test_options_of_zoned_cut_offs_take_the_vol_marked_for_their_expiry(tmp_path: Path) -> None:
    """Vol slices are keyed by the contract's expiry date in its exchange's zone. A Los Angeles
    16:00 cut-off in January is past midnight UTC and a Sydney 10:00 cut-off is the evening
    before in UTC; each option still takes exactly the vol marked for its expiry date. At 08:00
    in Sydney (still the day before in UTC) the slice that expired yesterday in Sydney is not
    used: an option before the first live slice takes its vol flat."""
    db = tmp_path / "zones.db"
    run("create", str(db), "--book", "desk")
    g = ["--db", str(db)]
    for sym, zone, cut in (("LAX", "America/Los_Angeles", "16:00"),
                           ("SYD", "Australia/Sydney", "10:00")):
        run(*g, "underlying", "add", sym, "--kind", "stock", "--currency", "USD",
            "--multiplier", "100", "--european", "--zone", zone, "--cutoff", cut)
    run(*g, "mark", "spot", "LAX", "100")
    run(*g, "mark", "spot", "SYD", "50")
    run(*g, "mark", "rate", "USD", "365", "4%")
    for sym, expiry, vol in (("LAX", "2027-01-15", "20%"), ("LAX", "2027-02-19", "30%"),
                             ("SYD", "2027-01-14", "25%"), ("SYD", "2027-03-18", "30%"),
                             ("SYD", "2027-06-17", "22%")):
        run(*g, "mark", "vol", sym, expiry, vol)
    for sym, expiry, strike in (("LAX", "2027-01-15", "100"), ("SYD", "2027-03-18", "50"),
                                ("SYD", "2027-02-18", "50")):
        run(*g, "trade", "add", sym, "--expiry", expiry, "--strike", strike, "--put",
            "--qty", "10", "--price", "3", "--time", "2026-12-01T15:00:00Z")

    def vols(at: str) -> dict[str, float]:
        out = json.loads(run(*g, "risk", "--by", "position", "--json", "--at", at).stdout)
        return {p["contract"]: p["vol"] for p in out["by_position"]}

    before = vols("2026-12-02T15:00:00Z")
    assert before["LAX 2027-01-15 100 P"] == 0.20 and before["SYD 2027-03-18 50 P"] == 0.30
    morning = vols("2027-01-14T21:00:00Z")  # 08:00 on 2027-01-15 in Sydney
    assert morning["SYD 2027-02-18 50 P"] == 0.30
    assert morning["LAX 2027-01-15 100 P"] == 0.20
    # The position report gives the listed expiry date and, apart, the cut-off instant (UTC).
    out = json.loads(run(*g, "risk", "--by", "position", "--json").stdout)
    lax = next(p for p in out["by_position"] if p["contract"] == "LAX 2027-01-15 100 P")
    assert (lax["expiry"], lax["cutoff"]) == ("2027-01-15", "2027-01-16T00:00:00+00:00")


def test_an_atm_vol_beside_strike_vols_is_the_smile_point_at_the_spot(tmp_path: Path) -> None:
    """An ATM vol mark of an expiry that also has strike marks is the vol at the strike equal to
    the spot, between the strike points (linear in strike); where a strike mark sits exactly at
    the spot, the two marks are averaged. Expected values are worked by hand from that rule."""
    db = tmp_path / "atm.db"
    run("create", str(db), "--book", "desk")
    g = ["--db", str(db)]
    run(*g, "underlying", "add", "QQV", "--kind", "stock", "--currency", "USD",
        "--multiplier", "100", "--european")
    run(*g, "mark", "spot", "QQV", "100")
    run(*g, "mark", "rate", "USD", "365", "4%")
    run(*g, "mark", "vol", "QQV", "2027-03-19", "8%", "--strike", "90")
    run(*g, "mark", "vol", "QQV", "2027-03-19", "3%", "--strike", "110")
    run(*g, "mark", "vol", "QQV", "2027-03-19", "4%")
    for strike in ("95", "100", "105"):
        run(*g, "trade", "add", "QQV", "--expiry", "2027-03-19", "--strike", strike, "--call",
            "--qty", "1", "--price", "1", "--time", "2026-12-01T15:00:00Z", "--force")

    def vols() -> dict[str, float]:
        out = json.loads(run(*g, "risk", "--by", "position", "--json", "--at",
                             "2026-12-02T15:00:00Z").stdout)
        return {p["contract"]: p["vol"] for p in out["by_position"]}

    assert vols() == pytest.approx({"QQV 2027-03-19 95 C": 0.06, "QQV 2027-03-19 100 C": 0.04,
                                    "QQV 2027-03-19 105 C": 0.035}, rel=1e-12)
    run(*g, "mark", "vol", "QQV", "2027-03-19", "5%", "--strike", "100")
    assert vols()["QQV 2027-03-19 100 C"] == pytest.approx(0.045, rel=1e-12)
    run(*g, "mark", "spot", "QQV", "102")
    assert vols()["QQV 2027-03-19 100 C"] == pytest.approx(0.05, rel=1e-12)
    assert vols()["QQV 2027-03-19 105 C"] == pytest.approx(0.04 - 0.01 * 3 / 8, rel=1e-12)
