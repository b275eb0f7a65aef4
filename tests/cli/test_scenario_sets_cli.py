"""``blotter whatif --set NAME`` and ``--sets`` on a fresh copy of the demo book.

A set's table is ``whatif`` of each move run alone, to the bit (the same JSON and CSV numbers);
its worst scenario is the one with the lowest full P&L, marked in words and a symbol; a bad set
is refused in words naming the file, the set and the move, and nothing is valued or printed.
``whatif`` itself is checked against QuantLib in tests/scenario and tests/desk.
"""

from __future__ import annotations

import csv
import io
import json
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import pytest
from cli_helpers import run
from test_currencies_cli import T0, _eur, _two_currency_book, _usd

from blotter import store

AT = "2026-11-30T16:45"
"""Valuation time of the checks (desk-local): a quarter hour after the demo's last close."""

SETS = """
[scenarios.crash]
"down 10, vol +8" = "spot -10% vol +8"
"down 20, vol +15" = "spot -20% vol +15"
"gap down, next day" = "spot -7% vol +5 bdays 1"
"rally, vol in" = "spot +5% vol -3 moneyness"
"DEMOA alone" = "DEMOA spot -12%"

[scenarios."a week"]
"time" = "days 7"
"""

HEADER_KEYS = {"as_of", "marks_as_of", "partial", "unvalued"}
"""Keys of every report's JSON that a set prints once, not per scenario."""


@pytest.fixture
def settings_file(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Path:
    """A settings file holding ``SETS``, in force for the test."""
    path = tmp_path / "config.toml"
    path.write_text(SETS, encoding="utf-8")
    monkeypatch.setenv("BLOTTER_CONFIG", str(path))
    return path


def as_json(*args: str) -> Any:
    return json.loads(run(*args).stdout)


def test_a_set_is_each_move_run_alone_to_the_bit(demo_db: Path, settings_file: Path) -> None:
    out = as_json("whatif", "--db", str(demo_db), "--at", AT, "--set", "crash", "--json")
    assert out["set"] == "crash" and out["source"] == str(settings_file)
    assert [s["name"] for s in out["scenarios"]] == [
        "down 10, vol +8",
        "down 20, vol +15",
        "gap down, next day",
        "rally, vol in",
        "DEMOA alone",
    ]
    table = list(
        csv.reader(
            io.StringIO(
                run("whatif", "--db", str(demo_db), "--at", AT, "--set", "crash", "--csv").stdout
            )
        )
    )
    for scenario in out["scenarios"]:
        alone = as_json("whatif", "--db", str(demo_db), "--at", AT, scenario["text"], "--json")
        assert {k: alone[k] for k in HEADER_KEYS} == {k: out[k] for k in HEADER_KEYS}
        assert {k: v for k, v in alone.items() if k not in HEADER_KEYS} == {
            k: v for k, v in scenario.items() if k not in ("name", "text", "worst")
        }
        alone_csv = list(
            csv.reader(
                io.StringIO(
                    run(
                        "whatif", "--db", str(demo_db), "--at", AT, scenario["text"], "--csv"
                    ).stdout
                )
            )
        )
        mine = [r[2:-1] for r in table[1:] if r[0] == scenario["name"]]
        assert table[0][2:-1] == alone_csv[0] and mine == alone_csv[1:]


def test_the_worst_is_the_lowest_full_pnl_in_words_and_a_symbol(
    demo_db: Path, settings_file: Path
) -> None:
    out = as_json("whatif", "--db", str(demo_db), "--at", AT, "--set", "crash", "--json")
    fulls = {s["name"]: s["total"]["full"] for s in out["scenarios"]}
    lowest = min(fulls, key=lambda name: fulls[name])
    assert out["worst"] == {"USD": lowest}
    assert [s["worst"] for s in out["scenarios"]] == [
        ["USD"] if s["name"] == lowest else [] for s in out["scenarios"]
    ]
    text = run("whatif", "--db", str(demo_db), "--at", AT, "--set", "crash").stdout
    marked = [ln for ln in text.splitlines() if ln.rstrip().endswith("▼ WORST")]
    assert len(marked) == 1 and marked[0].startswith(lowest)
    assert f"▼ WORST in USD: {lowest!r}" in text
    rows = list(
        csv.DictReader(
            io.StringIO(
                run("whatif", "--db", str(demo_db), "--at", AT, "--set", "crash", "--csv").stdout
            )
        )
    )
    assert [(r["scenario"], r["underlying"]) for r in rows if r["worst"] == "1"] == [
        (lowest, "total")
    ]


def test_the_sets_are_listed(settings_file: Path, tmp_path: Path) -> None:
    text = run("whatif", "--sets").stdout
    assert "crash" in text and "a week" in text and "spot -7% vol +5 bdays 1" in text
    listed = as_json("whatif", "--sets", "--json")["sets"]
    assert [(s["name"], len(s["moves"])) for s in listed] == [("crash", 5), ("a week", 1)]
    other = tmp_path / "other.toml"
    other.write_text('[scenarios.rates]\n"up 1%" = "rate +100bp"\n', encoding="utf-8")
    listed = as_json("whatif", "--file", str(other), "--json")["sets"]
    assert [s["name"] for s in listed] == ["rates"]
    assert listed[0]["moves"][0]["move"]["rate_bp"] == 100.0


@pytest.mark.parametrize(
    "text,words",
    [
        (
            '[scenarios.crash]\n"fine" = "spot -3%"\n"bad" = "spot -3% vol"\n',
            "scenario set 'crash', move 'bad'",
        ),
        ('[scenarios.crash]\n"elsewhere" = "NOPE spot -3%"\n', "move 'elsewhere'"),
        ("[scenarios.crash\n", "config.toml"),
    ],
)
def test_a_bad_set_is_refused_in_words_and_nothing_runs(
    demo_db: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch, text: str, words: str
) -> None:
    path = tmp_path / "config.toml"
    path.write_text(text, encoding="utf-8")
    monkeypatch.setenv("BLOTTER_CONFIG", str(path))
    before = demo_db.read_bytes()
    result = run("whatif", "--db", str(demo_db), "--at", AT, "--set", "crash", code=1)
    assert str(path) in result.stderr and words in result.stderr
    assert result.stdout == "" and demo_db.read_bytes() == before


def test_unknown_sets_and_files_and_mixed_arguments(
    demo_db: Path, settings_file: Path, tmp_path: Path
) -> None:
    result = run("whatif", "--db", str(demo_db), "--set", "crush", code=1)
    assert "no scenario set 'crush' (sets: 'crash', 'a week')" in result.stderr
    result = run("whatif", "--file", str(tmp_path / "none.toml"), "--sets", code=1)
    assert "none.toml: no such scenario file" in result.stderr
    result = run("whatif", "--db", str(demo_db), "spot -1%", "--set", "crash", code=2)
    assert "not both" in result.stderr
    assert "--set NAME" in run("whatif", "--db", str(demo_db), code=2).stderr


TWO_CCY_SETS = """
[scenarios.names]
"AAA down" = "AAA spot -10%"
"BBB down" = "BBB spot -10%"
"all up" = "spot +10%"
"""


def test_each_currency_has_its_own_worst(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """USD and EUR P&L never add: each currency's worst is its own lowest full P&L, checked
    against QuantLib's value of each option (``test_currencies_cli``)."""
    with store.use_clock(lambda: datetime(2026, 12, 1, 20, 30, tzinfo=UTC)):
        two_currencies = _two_currency_book(tmp_path)
    path = tmp_path / "config.toml"
    path.write_text(TWO_CCY_SETS, encoding="utf-8")
    monkeypatch.setenv("BLOTTER_CONFIG", str(path))
    args = ("whatif", "--db", two_currencies, "--at", T0, "--set", "names")
    out = as_json(*args, "--json")
    moved = {
        "AAA down": {"USD": _usd(90.0) - _usd(), "EUR": 0.0},
        "BBB down": {"USD": 0.0, "EUR": _eur(45.0) - _eur()},
        "all up": {"USD": _usd(110.0) - _usd(), "EUR": _eur(55.0) - _eur()},
    }
    for s in out["scenarios"]:
        got = {c: r["full"] for c, r in s["total"]["by_currency"].items()}
        assert got == pytest.approx(moved[s["name"]], rel=1e-7, abs=1e-6)
        assert s["total"]["full"] is None  # no sum across currencies
    assert out["worst"] == {"USD": "AAA down", "EUR": "BBB down"}
    text = run(*args).stdout
    marked = [ln.split() for ln in text.splitlines() if ln.rstrip().endswith("▼ WORST")]
    assert [(" ".join(w[:2]), w[5]) for w in marked] == [("AAA down", "USD"), ("BBB down", "EUR")]
    assert "ccy" in text.splitlines()[2] and "▼ WORST in EUR: 'BBB down'" in text
