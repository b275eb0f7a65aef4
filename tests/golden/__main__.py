"""Record the reports of the shipped demo book at a fixed valuation time, or compare with a record.

A refactoring must leave every figure and every row as it was: record before (``python -m
tests.golden record DIR``), change, then ``python -m tests.golden compare DIR``, which prints a
unified diff of each report that moved and exits 1 if any did. The reports: ``risk --by
position``, ``whatif``, ``grid``, ``explain`` (JSON), ``trade list --all --csv`` and ``mark list
--csv``, all run by the installed ``blotter`` on a copy of ``demo.db``.
"""

from __future__ import annotations

import difflib
import os
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

AT = "2026-12-01T15:00:00Z"
"""The valuation time of every report (the day after the demo's last close)."""

REPORTS: dict[str, list[str]] = {
    "risk_position.json": ["risk", "--by", "position", "--at", AT, "--json"],
    "risk_expiry.json": ["risk", "--by", "expiry", "--at", AT, "--json"],
    "whatif.json": ["whatif", "spot -3% vol +2 days 3", "--at", AT, "--json"],
    "whatif_moneyness.json": ["whatif", "DEMOA spot -5% moneyness bdays 1", "--at", AT, "--json"],
    "grid.json": ["grid", "--days", "1", "--at", AT, "--json"],
    "explain.json": ["explain", "--json"],
    "trades.csv": ["trade", "list", "--all", "--csv"],
    "marks.csv": ["mark", "list", "--csv"],
}
"""Report file name -> the command's arguments."""

DEMO = Path(__file__).resolve().parents[2] / "demo.db"


def record(out: Path) -> dict[str, str]:
    """Run every report on a copy of the demo book; write each to ``out`` and return them."""
    out.mkdir(parents=True, exist_ok=True)
    texts: dict[str, str] = {}
    with tempfile.TemporaryDirectory() as tmp:
        book = Path(tmp) / "demo.db"
        shutil.copy(DEMO, book)
        env = {**os.environ, "BLOTTER_DB": str(book), "BLOTTER_TZ": "America/New_York",
               "BLOTTER_CONFIG": str(Path(tmp) / "none.toml"), "XDG_DATA_HOME": tmp}
        for name, args in REPORTS.items():
            done = subprocess.run(["blotter", *args], capture_output=True, text=True, env=env,
                                  check=False)
            texts[name] = f"exit {done.returncode}\n{done.stdout}"
            (out / name).write_text(texts[name], encoding="utf-8")
    return texts


def compare(before: Path) -> int:
    """Diff the reports now against those recorded in ``before``; 1 when any moved."""
    with tempfile.TemporaryDirectory() as tmp:
        now = record(Path(tmp))
    moved = 0
    for name, text in now.items():
        old = (before / name).read_text(encoding="utf-8")
        if old != text:
            moved += 1
            sys.stdout.writelines(difflib.unified_diff(
                old.splitlines(True), text.splitlines(True), f"before/{name}", f"now/{name}", n=1))
    print(f"{len(now) - moved} of {len(now)} reports unchanged")
    return 1 if moved else 0


if __name__ == "__main__":
    if len(sys.argv) != 3 or sys.argv[1] not in ("record", "compare"):
        sys.exit("usage: python -m tests.golden record|compare DIR")
    if sys.argv[1] == "record":
        record(Path(sys.argv[2]))
    else:
        sys.exit(compare(Path(sys.argv[2])))
