"""``blotter create --base-currency`` and ``blotter base-currency``: the base is written in the
file, a change is a new row (the latest in force), bad codes are refused and write nothing."""

from __future__ import annotations

import json
import sqlite3
from pathlib import Path

import pytest
from cli_helpers import run


def test_create_sets_the_base_and_a_change_is_recorded(tmp_path: Path) -> None:
    db = str(tmp_path / "b.db")
    made = json.loads(run("create", db, "--base-currency", "EUR", "--json").stdout)
    assert made["base_currency"] == "EUR"
    assert run("--db", db, "base-currency").stdout.strip() == "base currency EUR"
    assert "GBP from now on (was EUR)" in run("--db", db, "base-currency", "GBP").stdout
    assert "nothing recorded" in run("--db", db, "base-currency", "GBP").stdout
    out = json.loads(run("--db", db, "base-currency", "--json").stdout)
    assert out["base_currency"] == "GBP"
    assert [h["currency"] for h in out["history"]] == ["EUR", "GBP"]
    conn = sqlite3.connect(db)
    assert conn.execute("SELECT currency FROM base_currency ORDER BY base_id").fetchall() == [
        ("EUR",), ("GBP",)
    ]
    conn.close()


@pytest.mark.parametrize("bad", ["eur", "EURO", "E1R"])
def test_a_bad_code_is_refused_and_nothing_is_written(tmp_path: Path, bad: str) -> None:
    db = tmp_path / "b.db"
    refused = run("create", str(db), "--base-currency", bad, code=2)
    assert "three capital letters" in refused.output and not db.exists()
    run("create", str(db))
    refused = run("--db", str(db), "base-currency", bad, code=2)
    assert "three capital letters" in refused.output
    assert json.loads(run("--db", str(db), "base-currency", "--json").stdout)["history"] == [
        {"currency": "USD", "set_at": None, "who": None}
    ]


def test_read_only_refuses_a_change(tmp_path: Path) -> None:
    db = str(tmp_path / "b.db")
    run("create", db)
    refused = run("--read-only", "--db", db, "base-currency", "JPY", code=1)
    assert "nothing was written" in refused.output
    assert run("--read-only", "--db", db, "base-currency").stdout.strip() == "base currency USD"
