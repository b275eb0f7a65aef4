"""``trade import -`` and ``mark import -`` read standard input, all rows or none as from a file."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

from blotter.store import open_store

TRADES = (
    "book,symbol,type,expiry,strike,quantity,price,trade_time\n"
    "equity-vol,DEMOA,C,2027-03-19,190,1,2.5,2026-11-20T15:00:00Z\n"
    "equity-vol,DEMOA,P,2027-03-19,170,-2,1.25,2026-11-20T15:01:00Z\n"
)


def blotter(*args: str, stdin: str) -> subprocess.CompletedProcess[str]:
    """The command line in a new process, ``stdin`` piped in (as a shell's ``cat f | blotter``)."""
    return subprocess.run(
        [sys.executable, "-m", "blotter", *args],
        input=stdin, capture_output=True, text=True, timeout=120, env=dict(os.environ),
    )


def _trade_count(db: Path) -> int:
    with open_store(db, read_only=True) as s:
        return len(s.trades())


def test_trade_import_reads_a_pipe(demo_db: Path) -> None:
    before = _trade_count(demo_db)
    r = blotter("trade", "import", "-", "--db", str(demo_db), "--json", stdin=TRADES)
    assert r.returncode == 0, r.stderr
    out = json.loads(r.stdout)
    assert out["rows"] == 2
    assert _trade_count(demo_db) == before + 2


def test_a_bad_line_on_stdin_is_refused_and_nothing_is_written(demo_db: Path) -> None:
    before = _trade_count(demo_db)
    bad = TRADES + "equity-vol,DEMOA,C,2027-03-19,190,1,-2.5,2026-11-20T15:00:00Z\n"
    r = blotter("trade", "import", "-", "--db", str(demo_db), stdin=bad)
    assert r.returncode == 1
    assert "stdin: nothing imported; 1 problem:" in r.stderr
    assert "line 4, column 'price'" in r.stderr
    assert "Traceback" not in r.stderr
    assert _trade_count(demo_db) == before


def test_mark_import_reads_a_pipe_and_refuses_a_bad_one(demo_db: Path) -> None:
    good = "kind,symbol,value\nspot,DEMOA,181.5\n"
    r = blotter("mark", "import", "-", "--db", str(demo_db), "--json", stdin=good)
    assert r.returncode == 0, r.stderr
    set_id = json.loads(r.stdout)["mark_set_id"]
    with open_store(demo_db, read_only=True) as s:
        assert s.load_market().spots["DEMOA"] == 181.5
        sets = len(s.mark_sets())
    bad = "kind,symbol,value\nspot,DEMOA,x\n"
    r = blotter("mark", "import", "-", "--db", str(demo_db), stdin=bad)
    assert r.returncode == 1 and "line 2" in r.stderr and "Traceback" not in r.stderr
    with open_store(demo_db, read_only=True) as s:
        assert len(s.mark_sets()) == sets and s.load_market().spots["DEMOA"] == 181.5
        assert set_id in {m.id for m in s.mark_sets()}
