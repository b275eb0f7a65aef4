"""``blotter risk``, ``whatif``, ``grid`` and ``explain`` on a fresh copy of the demo book.

The JSON keys are the ones issue 4 fixes for outside checks; the numbers are checked against the
library functions called directly on the same book and marks, and for internal consistency
(rows add to the total, error = full − estimate). The library itself is checked against QuantLib
and published values in tests/scenario.
"""

from __future__ import annotations

import csv
import io
import json
import math
import re
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from click.testing import CliRunner

from blotter import calendar as cal
from blotter.cli import main
from blotter.risk import value_book
from blotter.scenario import apply_move, parse_move
from blotter.store import open_store

AT = "2026-11-30T16:45"
"""Valuation time of the checks (desk-local): a quarter hour after the demo's last close."""

EXPOSURE_KEYS = {
    "value",
    "delta_shares",
    "delta_cash",
    "gamma_1pct",
    "vega_pt",
    "theta_day",
    "rho_pct",
    "vanna_pt",
    "volga_pt",
    "beta_delta_cash",
}
POSITION_KEYS = {
    "underlying",
    "spot",
    "contract",
    "is_call",
    "american",
    "strike",
    "years",
    "rate",
    "carry",
    "vol",
    "quantity",
    "multiplier",
}
ROW_KEYS = {"full", "estimate_1", "estimate_2", "error_1", "error_2", "terms"}
TERMS = {"delta", "gamma", "vega", "volga", "vanna", "theta", "rho"}


def _run(args: list[str], code: int = 0) -> Any:
    result = CliRunner().invoke(main, args, catch_exceptions=False)
    assert result.exit_code == code, result.output
    return result


def _json(args: list[str]) -> dict[str, Any]:
    return json.loads(_run([*args, "--json"]).stdout)


def _all_finite(obj: Any) -> bool:
    if isinstance(obj, float):
        return math.isfinite(obj)
    if isinstance(obj, dict):
        return all(_all_finite(v) for v in obj.values())
    if isinstance(obj, list):
        return all(_all_finite(v) for v in obj)
    return True


def _valuation(db: Path):
    store = open_store(db, read_only=True)
    return value_book(store.load_book(), store.load_market(), cal.to_instant(AT))


def test_valuation_time_follows_the_demo_close(demo_db: Path) -> None:
    last = open_store(demo_db, read_only=True).mark_sets("close")[-1]
    assert cal.to_instant(AT) - cal.to_instant(last.marked_at) == np.timedelta64(15 * 60, "s")


def test_risk_json_keys_and_totals(demo_db: Path) -> None:
    out = _json(["risk", "--db", str(demo_db), "--at", AT])
    assert {"as_of", "marks_as_of", "by_underlying", "total"} <= set(out)
    assert out["as_of"] == cal.iso(cal.to_instant(AT))
    assert out["by_underlying"], "the demo book has underlyings"
    for row in out["by_underlying"]:
        assert EXPOSURE_KEYS | {"underlying", "spot"} <= set(row)
    assert EXPOSURE_KEYS <= set(out["total"])
    assert "underlying" not in out["total"] and "spot" not in out["total"]
    for key in EXPOSURE_KEYS - {"delta_shares", "gamma_1pct", "vanna_pt"}:
        assert sum(r[key] for r in out["by_underlying"]) == pytest.approx(
            out["total"][key], rel=1e-9, abs=1e-6
        )
    assert _all_finite(out)  # share counts of several names are null, not summed


def test_risk_json_numbers_are_the_librarys(demo_db: Path) -> None:
    out = _json(["risk", "--db", str(demo_db), "--at", AT])
    v = _valuation(demo_db)
    assert out["total"]["value"] == pytest.approx(float(v.value.sum()), rel=1e-12)
    assert out["total"]["vega_pt"] == pytest.approx(float(v.vega_pt.sum()), rel=1e-12)
    assert out["total"]["beta_delta_cash"] == pytest.approx(
        float(v.beta_delta_cash.sum()), rel=1e-12
    )


def test_risk_by_position_and_expiry(demo_db: Path) -> None:
    out = _json(["risk", "--db", str(demo_db), "--at", AT, "--by", "position"])
    rows = out["by_position"]
    assert len(rows) == len(_valuation(demo_db).book)
    for row in rows:
        assert POSITION_KEYS | EXPOSURE_KEYS <= set(row)
    hedges = [r for r in rows if r["is_call"] is None]
    assert hedges, "the demo book holds hedges"
    for h in hedges:  # delta 1 per unit, nothing else
        assert h["delta_shares"] == pytest.approx(h["quantity"] * h["multiplier"])
        assert h["vega_pt"] == 0.0 and h["gamma_1pct"] == 0.0
    assert sum(r["value"] for r in rows) == pytest.approx(out["total"]["value"], rel=1e-9)
    exp = _json(["risk", "--db", str(demo_db), "--at", AT, "--by", "expiry"])
    assert sum(r["vega_pt"] for r in exp["by_expiry"]) == pytest.approx(
        exp["total"]["vega_pt"], rel=1e-9
    )
    assert "by_position" not in exp


def test_risk_table_and_csv(demo_db: Path) -> None:
    table = _run(["risk", "--db", str(demo_db), "--at", AT]).stdout
    for label in ("Δ sh", "Δ $", "Γ 1%", "vega $/pt", "θ $/day", "ρ $/1%", "βΔ $", "total"):
        assert label in table
    assert (
        "vega $/1.00 vol"
        in _run(["risk", "--db", str(demo_db), "--at", AT, "--vega-unit", "vol"]).stdout
    )
    rows = list(
        csv.DictReader(
            io.StringIO(_run(["risk", "--db", str(demo_db), "--at", AT, "--csv"]).stdout)
        )
    )
    assert rows[-1]["underlying"] == "total"
    assert EXPOSURE_KEYS <= set(rows[0])
    _run(["risk", "--db", str(demo_db), "--json", "--csv"], code=2)


FORMS = [
    "spot -3%",
    "spot +2.5",
    "DEMOA spot -5%",
    "spot -3% beta",
    "vol +2",
    "vol -10%",
    "vol +2 weighted",
    "days 3",
    "bdays 1",
    "rate +25bp",
    "spot -3% vol +2 days 1",
]


@pytest.mark.parametrize("move", FORMS)
def test_whatif_json_for_each_form(demo_db: Path, move: str) -> None:
    out = _json(["whatif", "--db", str(demo_db), "--at", AT, move])
    assert {"as_of", "move", "total", "by_underlying", "expiring"} <= set(out)
    assert ROW_KEYS <= set(out["total"]) and set(out["total"]["terms"]) == TERMS
    for row in out["by_underlying"]:
        assert ROW_KEYS | {"underlying"} <= set(row)
    t = out["total"]
    assert t["error_1"] == pytest.approx(t["full"] - t["estimate_1"])
    assert t["error_2"] == pytest.approx(t["full"] - t["estimate_2"])
    assert t["estimate_2"] == pytest.approx(sum(t["terms"].values()))
    assert sum(r["full"] for r in out["by_underlying"]) == pytest.approx(
        t["full"], rel=1e-9, abs=1e-6
    )
    assert out["move"]["text"] == move


def test_whatif_matches_the_library(demo_db: Path) -> None:
    out = _json(["whatif", "--db", str(demo_db), "--at", AT, "spot -3% vol +2 days 1"])
    v = _valuation(demo_db)
    res = apply_move(v, parse_move("spot -3% vol +2 days 1"))
    assert out["total"]["full"] == pytest.approx(res.total.full, rel=1e-12)
    assert out["total"]["terms"]["gamma"] == pytest.approx(res.total.terms["gamma"], rel=1e-12)


def test_whatif_unquoted_words_table_and_csv(demo_db: Path) -> None:
    table = _run(["whatif", "--db", str(demo_db), "--at", AT, "spot", "-3%", "vol", "+2"]).stdout
    assert "sticky strike" in table and "err 2 %" in table and "total" in table
    rows = list(
        csv.DictReader(
            io.StringIO(
                _run(["whatif", "--db", str(demo_db), "--at", AT, "spot -1%", "--csv"]).stdout
            )
        )
    )
    assert rows[-1]["underlying"] == "total" and TERMS <= set(rows[0])


def test_whatif_says_the_move_in_units_and_warns_of_a_large_absolute_spot_move(
    demo_db: Path,
) -> None:
    """An absolute spot move in money is said in the book's currency, and one larger than 10% of
    a spot it moves is warned of on stderr and in the JSON, as the app's what-if bar does."""
    spot = _valuation(demo_db).market.spot("DEMOC")
    result = _run(["whatif", "--db", str(demo_db), "--at", AT, "spot -3 vol +2"])
    assert "what-if: every spot -3.00 USD, vol +2.00 pts" in result.stdout
    pct = -3.0 / spot * 100
    assert f"warning: -3.00 USD is {pct:+.1f}% of DEMOC" in result.stderr
    out = _json(["whatif", "--db", str(demo_db), "--at", AT, "spot -3"])
    assert out["warning"].startswith(f"-3.00 USD is {pct:+.1f}% of DEMOC")
    calm = _json(["whatif", "--db", str(demo_db), "--at", AT, "DEMOA spot +2.5%"])
    assert calm["warning"] is None and calm["move_words"] == "DEMOA spot +2.50%"


def test_whatif_lists_expiring_positions(demo_db: Path) -> None:
    out = _json(["whatif", "--db", str(demo_db), "--at", AT, "days 30"])
    assert out["expiring"], "the demo book has options expiring within 30 days"
    assert out["total"]["through_expiry"] == len(out["expiring"])
    for e in out["expiring"]:
        assert e["intrinsic"] >= 0 and isinstance(e["pin_risk"], bool)


@pytest.mark.parametrize(
    ("move", "word"),
    [("spot -3% foo", "foo"), ("spot 3%", "3%"), ("NOPE spot -1%", "NOPE"), ("", "")],
)
def test_whatif_malformed_move_points_at_the_word_and_changes_nothing(
    demo_db: Path, move: str, word: str
) -> None:
    before = demo_db.read_bytes()
    result = _run(["whatif", "--db", str(demo_db), move], code=2)
    if word:
        line, caret = [ln for ln in result.output.splitlines() if ln.strip()][-2:]
        start = caret.index("^")
        assert line[start : start + len(word)] == word
    assert demo_db.read_bytes() == before


def test_whatif_help_documents_the_grammar() -> None:
    text = _run(["whatif", "--help"]).stdout
    for form in (
        "spot -3%",
        "spot +2.5",
        "spot -3% beta",
        "vol +2 weighted",
        "bdays 1",
        "rate +25bp",
    ):
        assert form in text


def _american_tol(v: Any) -> float:
    """American grid cells come from premium tables, the what-if's from one quadrature each:
    they agree within the method's 1e-6 of the strike per unit."""
    am = v.book.american & v.book.is_option
    return 1e-6 * float(np.nansum(np.abs(v.units[am] * v.book.strikes[am])))


def test_ladder_json(demo_db: Path) -> None:
    out = _json(["grid", "--db", str(demo_db), "--at", AT])
    assert out["rule"] == "sticky strike"
    full, est, err = (np.array(out[k]) for k in ("full", "estimate", "error"))
    assert full.shape == (9, 5) and est.shape == (9, 5)
    assert err == pytest.approx(full - est)
    assert out["spot_pcts"] == [-10, -5, -2, -1, 0, 1, 2, 5, 10] and out["vol_pts"] == [
        -5,
        -2,
        0,
        2,
        5,
    ]
    assert full[4, 2] == pytest.approx(0.0, abs=1e-6)
    assert out["worst"]["full"] == pytest.approx(full.min())
    v = _valuation(demo_db)
    res = apply_move(v, parse_move("spot -5% vol +2"))
    assert full[1, 3] == pytest.approx(res.total.full, rel=1e-12, abs=_american_tol(v))


def test_ladder_on_worker_processes_equals_this_process(demo_db: Path) -> None:
    """``--workers 2`` shards the positions over two processes; the grids sum to the same."""
    here = _json(["grid", "--db", str(demo_db), "--at", AT])
    pool = _json(["grid", "--db", str(demo_db), "--at", AT, "--workers", "2"])
    for key in ("full", "estimate", "error"):
        np.testing.assert_allclose(np.array(pool[key]), np.array(here[key]), rtol=1e-9, atol=1e-6)
    assert pool["worst"] == here["worst"]


def test_ladder_on_an_unreachable_cluster_is_refused_in_words(demo_db: Path) -> None:
    pytest.importorskip("distributed", reason="the cluster extra is not installed")
    out = _run(["grid", "--db", str(demo_db), "--at", AT, "--cluster", "tcp://127.0.0.1:9"], 1)
    assert "cannot reach the cluster at tcp://127.0.0.1:9" in out.output


def test_ladder_options_table_and_errors(demo_db: Path) -> None:
    out = _json(
        [
            "grid",
            "--db",
            str(demo_db),
            "--at",
            AT,
            "--spot",
            "-4,0,4",
            "--vol",
            "-1,1",
            "--days",
            "2",
        ]
    )
    assert np.array(out["full"]).shape == (3, 2) and out["days"] == 2
    table = _run(["grid", "--db", str(demo_db), "--at", AT]).stdout
    assert table.count("sticky strike") >= 3 and "worst cell" in table
    _run(["grid", "--db", str(demo_db), "--spot", "-5,x"], code=2)
    _run(["grid", "--db", str(demo_db), "--spot", "-100"], code=2)


def test_ladder_is_a_hidden_old_name_of_grid(demo_db: Path) -> None:
    args = ["--db", str(demo_db), "--at", AT, "--spot", "-3,3", "--vol", "0"]
    grid = _run(["grid", *args, "--json"]).stdout
    old = CliRunner().invoke(main, ["ladder", *args, "--json"], catch_exceptions=False)
    assert old.exit_code == 0, old.output
    assert old.stdout == grid  # the same command, so scripts keep working for one release
    assert "blotter ladder is now blotter grid" in old.stderr
    listing = _run(["--help"]).stdout
    assert re.search(r"^  grid ", listing, re.M) and not re.search(r"^  ladder ", listing, re.M)


def test_explain_json_default_sets(demo_db: Path) -> None:
    out = _json(["explain", "--db", str(demo_db)])
    closes = [s for s in open_store(demo_db, read_only=True).mark_sets("close")]
    assert out["from"]["id"] == closes[-2].id and out["to"]["id"] == closes[-1].id
    t = out["total"]
    assert set(t["terms"]) == TERMS | {"carry"}
    assert t["unexplained"] == pytest.approx(t["actual"] - sum(t["terms"].values()))
    assert t["total"] == pytest.approx(t["actual"] + t["new_trades"])
    assert sum(r["actual"] for r in out["by_underlying"]) == pytest.approx(t["actual"], rel=1e-9)
    assert sum(r["new_trades"] for r in out["by_underlying"]) == pytest.approx(
        t["new_trades"], rel=1e-9, abs=1e-9
    )


def test_explain_to_now_table_and_bad_set(demo_db: Path) -> None:
    out = _json(["explain", "--db", str(demo_db), "--to", "now"])
    assert out["to"] == "now"
    table = _run(["explain", "--db", str(demo_db)]).stdout
    assert "unexplained" in table and "new trades" in table
    result = _run(["explain", "--db", str(demo_db), "--from", "999"], code=1)
    assert "999" in result.output
    _run(["explain", "--db", str(demo_db), "--to", "yesterday"], code=2)


def test_moneyness_rule_reaches_the_outputs(demo_db: Path) -> None:
    out = _json(
        [
            "grid",
            "--db",
            str(demo_db),
            "--at",
            AT,
            "--rule",
            "moneyness",
            "--spot",
            "-5,5",
            "--vol",
            "0",
        ]
    )
    assert out["rule"] == "sticky moneyness"
    v = _valuation(demo_db)
    from blotter.scenario import MONEYNESS_RULE, ladder

    lad = ladder(v, [-5, 5], [0], rule=MONEYNESS_RULE)
    assert np.array(out["full"]) == pytest.approx(lad.full, rel=1e-12)
    w = _json(["whatif", "--db", str(demo_db), "--at", AT, "spot -5% moneyness"])
    assert w["move"]["vol_rule"] == "sticky moneyness" and w["vol_rule"] == "sticky moneyness"
    assert w["total"]["full"] == pytest.approx(lad.full[0, 0], rel=1e-12, abs=_american_tol(v))
    assert (
        "sticky moneyness"
        in _run(["grid", "--db", str(demo_db), "--at", AT, "--rule", "moneyness"]).stdout
    )


@pytest.mark.parametrize(
    ("args", "columns_module_name"),
    [(["trade", "list"], "TRADE_TABLE"), (["mark", "list"], "MARK_TABLE")],
)
def test_tables_keep_every_column_and_id_at_80_columns(
    demo_db: Path, monkeypatch: pytest.MonkeyPatch, args: list[str], columns_module_name: str
) -> None:
    """At an 80-column terminal every header and every row's id is printed whole (no cut cells,
    no dropped columns): the ids are what ``trade cancel`` and ``mark list --set`` take."""
    from blotter.commands import store_cmds

    monkeypatch.setenv("COLUMNS", "80")
    out = _run([*args, "--db", str(demo_db)]).stdout
    lines = out.splitlines()
    header = lines[1]
    for col in getattr(store_cmds, columns_module_name):
        assert col in header, (col, header)
    assert "…" not in out
    store = open_store(demo_db, read_only=True)
    ids = (
        [t.trade_id for t in store.trades(live_only=True)]
        if args[0] == "trade"
        else [m.mark_id for m in store.marks()]
    )
    body = lines[3:]
    assert len(body) == len(ids)
    assert [int(line.split()[0]) for line in body] == ids


def test_risk_by_expiry_blanks_share_counts_of_several_names(demo_db: Path) -> None:
    """Δ sh, Γ 1% and vanna are shares of one name: a bucket holding several underlyings shows
    them null (JSON), empty (CSV) and blank (table); a one-name bucket keeps the library's sum."""
    v = _valuation(demo_db)
    out = _json(["risk", "--db", str(demo_db), "--at", AT, "--by", "expiry"])
    names_of = {
        label: set(v.book.underlying_idx[v.bucket_codes == j].tolist())
        for j, label in enumerate(v.bucket_labels)
    }
    mixed = [r for r in out["by_expiry"] if len(names_of[r["bucket"]]) > 1]
    single = [r for r in out["by_expiry"] if len(names_of[r["bucket"]]) == 1]
    assert mixed, "the demo book has buckets of several underlyings"
    for r in mixed:
        assert r["delta_shares"] is None and r["gamma_1pct"] is None and r["vanna_pt"] is None
        assert r["delta_cash"] is not None and r["vega_pt"] is not None
    for r in single:
        rows = v.bucket_codes == v.bucket_labels.index(r["bucket"])
        assert r["delta_shares"] == pytest.approx(float(v.delta_shares[rows].sum()), rel=1e-12)
    text = _run(["risk", "--db", str(demo_db), "--at", AT, "--by", "expiry", "--csv"]).stdout
    by_label = {row["expiry"]: row for row in csv.DictReader(io.StringIO(text))}
    for r in mixed:
        assert by_label[r["bucket"]]["delta_shares"] == ""
    table = _run(["risk", "--db", str(demo_db), "--at", AT, "--by", "expiry"]).stdout
    first = table.split("\n\n")[1].splitlines()  # expiry, positions, value, Δ sh, Δ $, Γ 1%, βΔ $
    spans = [m.span() for m in re.finditer(r"-+", first[1])]  # column extents from the rule
    at = [c.strip() for c in (first[0][a:b] for a, b in spans)].index("Δ sh")
    blanked = 0
    for line in first[2:]:
        cells = [line[a:b].strip() for a, b in spans]
        if cells[0] in {r["bucket"] for r in mixed}:
            assert cells[at] == "" and cells[at + 1] != "", line  # Δ sh blank, Δ $ shown
            blanked += 1
    assert blanked == len(mixed)


def test_a_bad_settings_file_is_named_not_the_book(
    demo_db: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    """The book is sound; the words must point at the settings, not say it cannot be opened."""
    bad = tmp_path / "config.toml"
    bad.write_text('desk_tz = "Mars/Base"\n', encoding="utf-8")
    monkeypatch.setenv("BLOTTER_CONFIG", str(bad))
    r = CliRunner().invoke(main, ["risk", "--db", str(demo_db)])
    assert r.exit_code == 1 and "settings:" in r.output and "Mars/Base" in r.output
    assert "cannot open" not in r.output


def test_share_counts_of_several_names_are_not_added_in_json_or_csv(demo_db: Path) -> None:
    """Δ sh, Γ 1% and vanna of the demo's total would add index units, shares and futures
    contracts: null in JSON and blank in CSV, as the table shows "—"; money still adds."""
    out = json.loads(
        CliRunner().invoke(main, ["risk", "--db", str(demo_db), "--at", AT, "--json"]).stdout
    )
    assert all(out["total"][k] is None for k in ("delta_shares", "gamma_1pct", "vanna_pt"))
    assert out["total"]["delta_cash"] == pytest.approx(
        sum(r["delta_cash"] for r in out["by_underlying"]), rel=1e-12
    )
    text = CliRunner().invoke(main, ["risk", "--db", str(demo_db), "--at", AT, "--csv"]).stdout
    rows = list(csv.DictReader(io.StringIO(text)))
    total_row = next(r for r in rows if r["underlying"] == "total")
    assert total_row["delta_shares"] == total_row["gamma_1pct"] == total_row["vanna_pt"] == ""
    assert float(total_row["delta_cash"]) == pytest.approx(out["total"]["delta_cash"], rel=1e-12)
