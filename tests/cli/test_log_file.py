"""The log: ``--log-file`` or the ``log_file`` setting, one UTC-timed line per record, never on
the screen."""

from __future__ import annotations

import logging
import re
import subprocess
import sys
from pathlib import Path

import pytest
from cli_helpers import run

from blotter import logs
from blotter.store import StoreError, open_store

LINE = re.compile(
    r"^(\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d\.\d{3}Z) (INFO|WARNING|ERROR) (blotter(?:\.\w+)*): (.*)$"
)
"""A log line: UTC time to the millisecond, level, logger, message."""

BAD_TRADES = (
    "book,symbol,type,expiry,strike,quantity,price,trade_time\n"
    "equity-vol,DEMOA,C,2027-03-19,190,1,-2.5,2026-11-20T15:00:00Z\n"
)


def _lines(path: Path) -> list[re.Match[str]]:
    found = [LINE.match(line) for line in path.read_text().splitlines()]
    assert all(found), path.read_text()
    return [m for m in found if m]


def test_a_refused_import_writes_a_timestamped_warning(demo_db: Path, tmp_path: Path) -> None:
    bad = tmp_path / "bad.csv"
    bad.write_text(BAD_TRADES)
    log = tmp_path / "blotter.log"
    r = run("--log-file", str(log), "trade", "import", str(bad), "--db", str(demo_db), code=1)
    assert "bad.csv: nothing imported" in r.stderr
    (line,) = _lines(log)
    assert line[2] == "WARNING" and line[3] == logs.IMPORTS
    assert "trade import of bad.csv refused" in line[4] and "column 'price'" in line[4]
    # A second run appends; an import that works is recorded too.
    good = tmp_path / "good.csv"
    good.write_text(BAD_TRADES.replace("-2.5", "2.5"))
    run("--log-file", str(log), "trade", "import", str(good), "--db", str(demo_db))
    first, second = _lines(log)
    assert first[1] <= second[1]
    assert second[2] == "INFO" and "trade import" in second[4] and "1 rows written" in second[4]


def test_the_log_file_setting_is_read_and_the_flag_wins(
    demo_db: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    settings = tmp_path / "config.toml"
    from_setting, from_flag = tmp_path / "setting.log", tmp_path / "flag.log"
    settings.write_text(f'log_file = "{from_setting}"\n')
    monkeypatch.setenv("BLOTTER_CONFIG", str(settings))
    bad = tmp_path / "m.csv"
    bad.write_text("kind,symbol,value\nspot,DEMOA,x\n")
    run("mark", "import", str(bad), "--db", str(demo_db), code=1)
    (line,) = _lines(from_setting)
    assert line[2] == "WARNING" and "mark import of m.csv refused" in line[4]
    run("--log-file", str(from_flag), "mark", "import", str(bad), "--db", str(demo_db), code=1)
    assert len(_lines(from_flag)) == 1 and len(_lines(from_setting)) == 1


def test_an_unwritable_log_file_is_a_clear_error(tmp_path: Path) -> None:
    where = tmp_path / "no-such-folder" / "x.log"
    r = run("--log-file", str(where), "mark", "list", code=1)
    assert f"cannot write the log file {where}" in r.stderr and "Traceback" not in r.stderr


def test_a_store_error_is_logged_with_sqlite_s_code(tmp_path: Path) -> None:
    junk = tmp_path / "junk.db"
    junk.write_bytes(b"this is not an SQLite file" * 200)  # SQLite: SQLITE_NOTADB
    handler = logs.start_file_log(tmp_path / "store.log")
    try:
        with pytest.raises(StoreError):
            open_store(junk, read_only=True)
    finally:
        logs.stop_file_log(handler)
    lines = _lines(tmp_path / "store.log")
    assert lines and all(m[3] == logs.STORE and m[2] == "ERROR" for m in lines)
    assert "junk.db is not a blotter book" in lines[-1][4] and "SQLITE_NOTADB" in lines[-1][4]


def test_without_a_log_file_nothing_is_printed() -> None:
    # In a new process, as pytest's own log capture would hide Python's last-resort handler,
    # which prints a record no handler takes on stderr, over the app's screen.
    probe = (
        "import logging, blotter.store\n"
        f"logging.getLogger({logs.IMPORTS!r}).warning('a warning no one asked to see')\n"
        f"logging.getLogger({logs.FEED!r}).error('an error of the feed')\n"
        "print('done')\n"
    )
    r = subprocess.run(
        [sys.executable, "-c", probe], capture_output=True, text=True, timeout=60, check=True
    )
    assert (r.stdout, r.stderr) == ("done\n", "")


def test_the_file_log_is_the_only_handler_so_nothing_reaches_the_screen(tmp_path: Path) -> None:
    handler = logs.start_file_log(tmp_path / "app.log")
    try:
        for name in (logs.ROOT, logs.STORE, logs.IMPORTS, logs.FEED):
            logger: logging.Logger | None = logging.getLogger(name)
            while logger is not None:  # every handler a record of ``name`` can reach
                for h in logger.handlers:
                    stream = getattr(h, "stream", None)
                    assert stream not in (sys.stderr, sys.stdout, sys.__stderr__, sys.__stdout__)
                    assert not stream or not stream.isatty()
                logger = logger.parent if logger.propagate else None
    finally:
        logs.stop_file_log(handler)
    assert handler not in logging.getLogger(logs.ROOT).handlers
