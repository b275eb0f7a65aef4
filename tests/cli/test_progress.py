"""Progress of long commands: a rich bar on a terminal, nothing at all when piped."""

from __future__ import annotations

import io
import os
import subprocess
import sys
from pathlib import Path

import pytest

from blotter.commands.progress import BarProgress, NoProgress, draws_progress, progress


class FakeTerminal(io.StringIO):
    """A text stream that says it is a terminal, as stderr does in a shell."""

    def isatty(self) -> bool:
        return True


def test_the_chooser_draws_only_on_a_terminal_that_is_not_dumb() -> None:
    assert draws_progress(FakeTerminal(), {"TERM": "xterm-256color"})
    assert not draws_progress(io.StringIO(), {"TERM": "xterm-256color"})
    assert not draws_progress(FakeTerminal(), {"TERM": "dumb"})
    closed = io.StringIO()
    closed.close()  # its isatty raises ValueError
    assert not draws_progress(closed, {"TERM": "xterm-256color"})


def test_a_terminal_gets_a_bar_and_a_pipe_gets_nothing(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("TERM", "xterm-256color")
    screen = FakeTerminal()
    with progress("importing trades.csv", 3000, stream=screen) as bar:
        assert isinstance(bar, BarProgress)
        bar.update(2000)
    assert "importing trades.csv" in screen.getvalue()
    pipe = io.StringIO()
    with progress("importing trades.csv", 3000, stream=pipe) as bar:
        assert isinstance(bar, NoProgress)
        bar.update(2000, "still importing")
    assert pipe.getvalue() == ""


def _blotter(*args: str) -> subprocess.CompletedProcess[str]:
    """``blotter ARGS`` with stdout and stderr piped, as in a script."""
    return subprocess.run(
        [sys.executable, "-m", "blotter", *args],
        capture_output=True, text=True, timeout=300, env=dict(os.environ, TERM="xterm"),
    )


def test_piped_commands_print_no_progress(demo_db: Path, tmp_path: Path) -> None:
    r = _blotter("demo", "--out", str(tmp_path / "d.db"), "--positions", "40")
    assert r.returncode == 0, r.stderr
    assert r.stderr == "" and r.stdout.startswith("wrote ")
    rows = "".join(
        f"equity-vol,DEMOA,C,2027-03-19,{100 + k},1,2.5,2026-11-20T15:00:00Z\n" for k in range(1500)
    )
    trades = tmp_path / "t.csv"
    trades.write_text("book,symbol,type,expiry,strike,quantity,price,trade_time\n" + rows)
    r = _blotter("trade", "import", str(trades), "--db", str(demo_db))
    assert r.returncode == 0, r.stderr
    assert r.stderr == "" and r.stdout.startswith("imported 1500 trades")


def test_a_demo_build_tells_each_step_in_order(tmp_path: Path) -> None:
    from blotter.store.demo import DEMO_STEPS, build_demo

    told: list[tuple[float, str | None]] = []
    build_demo(tmp_path / "d.db", positions=20, progress=lambda n, what: told.append((n, what)))
    assert told == list(enumerate(DEMO_STEPS))


def test_an_import_tells_rows_written(demo_db: Path, tmp_path: Path) -> None:
    from blotter.store import PROGRESS_EVERY, open_store

    rows = "".join(
        f"equity-vol,DEMOA,C,2027-03-19,{100 + k},1,2.5,2026-11-20T15:00:00Z\n"
        for k in range(2 * PROGRESS_EVERY + 5)
    )
    trades = tmp_path / "t.csv"
    trades.write_text("book,symbol,type,expiry,strike,quantity,price,trade_time\n" + rows)
    told: list[int] = []
    with open_store(demo_db) as store:
        store.import_trades_csv(trades, told.append)
    assert told == [PROGRESS_EVERY, 2 * PROGRESS_EVERY]
