"""``--xlsx FILE`` on every report: the CSV's table as a sheet, units in the headers, read back
with openpyxl."""

from __future__ import annotations

import csv
import io
import sys
from pathlib import Path

import openpyxl
import pytest
from cli_helpers import run

from blotter.commands.xlsx import INSTALL, UNITS, _cell, header

AT = ("--at", "2026-12-01T15:00:00Z")
"""One valuation time for the CSV and the workbook runs (the default, now, moves between them)."""

REPORTS = [
    (("risk", *AT), "risk by underlying"),
    (("risk", "--by", "expiry", *AT), "risk by expiry"),
    (("risk", "--by", "position", *AT), "risk by position"),
    (("whatif", *AT, "spot", "-3%", "vol", "+2"), "whatif"),
    (("grid", "--spot", "-5,0,5", "--vol", "-2,0,2", *AT), "grid"),
    (("explain",), "explain"),
]
"""Every report command (risk in each grouping) and the sheet its table becomes."""


def _number(text: str) -> float | None:
    try:
        return float(text)
    except ValueError:
        return None


@pytest.mark.parametrize(("args", "sheet"), REPORTS, ids=[s for _, s in REPORTS])
def test_every_report_writes_its_table_with_units(
    args: tuple[str, ...], sheet: str, demo_db: Path, tmp_path: Path
) -> None:
    db = ("--db", str(demo_db))
    table = list(csv.reader(io.StringIO(run(*args, *db, "--csv").stdout)))
    out = tmp_path / "report.xlsx"
    r = run(*args, *db, "--xlsx", str(out))
    assert r.stdout == "" and f"wrote {out}" in r.stderr
    book = openpyxl.load_workbook(out, read_only=True)
    assert book.sheetnames == [sheet]
    rows = list(book[sheet].iter_rows(values_only=True))
    head, body = rows[0], rows[1:]
    assert len(body) == len(table) - 1 > 0
    for k, (name, shown) in enumerate(zip(table[0], head, strict=True)):
        cells = [row[k] for row in table[1:]]
        filled = [c for c in cells if c]
        numbers = all(_number(c) is not None for c in filled) and filled
        if numbers and not name.endswith("_id"):  # every column of numbers says its unit
            assert shown.startswith(f"{name} (") and shown.endswith(")"), shown
        elif filled:  # words, flags and ids
            assert shown == name
        for text, cell in zip(cells, (row[k] for row in body), strict=True):
            if text == "":
                assert cell is None
            elif text in ("True", "False"):
                assert cell == (text == "True")
            elif numbers:
                # Unrounded as in the CSV; openpyxl writes 16 significant digits (Excel keeps 15).
                assert cell == pytest.approx(float(text), rel=1e-15, abs=0)
            else:
                assert str(cell) == text


def test_the_currency_is_named_in_money_headers(demo_db: Path, tmp_path: Path) -> None:
    out = tmp_path / "risk.xlsx"
    run("risk", "--db", str(demo_db), "--xlsx", str(out))
    head = next(openpyxl.load_workbook(out).active.iter_rows(values_only=True))
    assert "delta_cash (USD)" in head and "vega_pt (USD per vol pt)" in head
    assert "delta_shares (shares)" in head and "currency" in head
    assert header("value", {"USD", "EUR"}) == "value (the row's currency)"
    assert set(UNITS) >= {"spot", "full", "estimate_1", "error_2_pct", "spot_pct", "vol_pts"}


def test_xlsx_is_one_output_among_json_and_csv(demo_db: Path, tmp_path: Path) -> None:
    out = tmp_path / "r.xlsx"
    r = run("risk", "--db", str(demo_db), "--xlsx", str(out), "--json", code=2)
    assert "choose one of --json, --csv and --xlsx" in r.stderr and not out.exists()


def test_without_openpyxl_the_error_names_the_install_command(
    demo_db: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setitem(sys.modules, "openpyxl", None)  # import openpyxl now raises ImportError
    out = tmp_path / "r.xlsx"
    r = run("grid", "--db", str(demo_db), "--xlsx", str(out), code=1)
    assert INSTALL in r.stderr and "openpyxl" in r.stderr and "Traceback" not in r.stderr
    assert not out.exists()


def test_words_are_never_written_as_formulas() -> None:
    assert _cell("=HYPERLINK(\"x\")") == "'=HYPERLINK(\"x\")"
    assert _cell("-3.5") == "-3.5" and _cell(float("nan")) is None and _cell(2.5) == 2.5
