"""``blotter feed`` as a process: quotes from a pipe, a named pipe and a file, bad lines told on
stderr with their numbers, a writer killed mid-feed leaving whole batches and a sound book, and
``blotter demo-feed`` piped into it. Quotes are invented test data."""

from __future__ import annotations

import json
import os
import signal
import sqlite3
import subprocess
import sys
import threading
import time
from pathlib import Path

from blotter import store


def _blotter(db: Path, *args: str) -> list[str]:
    return [sys.executable, "-m", "blotter", "--db", str(db), *args]


def _spot(db: Path, symbol: str) -> float:
    st = store.open_store(db, read_only=True)
    try:
        return st.load_market().spots[symbol]
    finally:
        st.close()


def _feed_sets(db: Path) -> list[store.MarkSetInfo]:
    st = store.open_store(db, read_only=True)
    try:
        return [s for s in st.mark_sets("intraday") if s.source.startswith("file:")]
    finally:
        st.close()


def test_quotes_from_standard_input_with_bad_lines(demo_db: Path) -> None:
    lines = [
        '{"symbol": "DEMOA", "spot": 181.5}',
        '{"symbol": "GHOST", "spot": 10}',
        "this is not a quote",
        '{"symbol": "DEMOB", "spot": 63.25}',
        '{"symbol": "DEMOA", "spot": 182.0}',
    ]
    r = subprocess.run(
        _blotter(demo_db, "feed", "--throttle", "0", "--json"),
        input="\n".join(lines) + "\n",
        capture_output=True,
        text=True,
        timeout=120,
        check=False,
    )
    assert r.returncode == 1, r.stderr  # some lines were bad: said in the exit code
    assert "Traceback" not in r.stderr
    assert "line 2: unknown underlying GHOST; nothing written for it" in r.stderr
    assert "line 3: not JSON" in r.stderr
    report = json.loads(r.stdout)
    assert report["bad_lines"] == 2 and [b["line"] for b in report["bad"]] == [2, 3]
    assert report["quotes"] == 3
    assert _spot(demo_db, "DEMOA") == 182.0 and _spot(demo_db, "DEMOB") == 63.25
    assert all(s.source == "file:stdin" for s in _feed_sets(demo_db))


def test_a_csv_file_feed(demo_db: Path, tmp_path: Path) -> None:
    src = tmp_path / "quotes.csv"
    src.write_text("symbol,spot\nDEMOA,175.25\nDEMOB,61\n", encoding="utf-8")
    r = subprocess.run(
        _blotter(demo_db, "feed", str(src)), capture_output=True, text=True, timeout=120,
        check=False,
    )
    assert r.returncode == 0, r.stderr
    assert "2 quotes taken" in r.stderr
    assert _spot(demo_db, "DEMOA") == 175.25 and _spot(demo_db, "DEMOB") == 61.0
    assert {s.source for s in _feed_sets(demo_db)} == {f"file:{src}"}


def test_a_wrong_csv_header_writes_nothing(demo_db: Path, tmp_path: Path) -> None:
    src = tmp_path / "quotes.csv"
    src.write_text("sym,price\nDEMOA,175.25\n", encoding="utf-8")
    before = _spot(demo_db, "DEMOA")
    r = subprocess.run(
        _blotter(demo_db, "feed", str(src)), capture_output=True, text=True, timeout=120,
        check=False,
    )
    assert r.returncode == 1 and "header" in r.stderr and "Traceback" not in r.stderr
    assert _spot(demo_db, "DEMOA") == before and not _feed_sets(demo_db)


def test_a_named_pipe_is_read_as_quotes_arrive(demo_db: Path, tmp_path: Path) -> None:
    fifo = tmp_path / "quotes.pipe"
    os.mkfifo(fifo)
    proc = subprocess.Popen(
        _blotter(demo_db, "feed", "--throttle", "0", str(fifo)),
        stderr=subprocess.PIPE,
        text=True,
    )
    try:
        with open(fifo, "w", encoding="utf-8") as pipe:
            pipe.write('{"symbol": "DEMOA", "spot": 170.5}\n')
            pipe.flush()
            deadline = time.monotonic() + 60
            while time.monotonic() < deadline and not _feed_sets(demo_db):
                time.sleep(0.1)
            # written while the pipe is still open: the feed does not wait for its end
            assert _spot(demo_db, "DEMOA") == 170.5
        assert proc.wait(timeout=60) == 0
    finally:
        proc.kill()
        proc.wait()


def test_a_writer_killed_mid_feed_leaves_whole_batches(demo_db: Path) -> None:
    proc = subprocess.Popen(
        _blotter(demo_db, "feed", "--throttle", "0"),
        stdin=subprocess.PIPE,
        stderr=subprocess.DEVNULL,
        text=True,
    )
    assert proc.stdin is not None
    stop = threading.Event()

    def pump() -> None:
        i = 0
        try:
            while not stop.is_set():
                assert proc.stdin is not None
                proc.stdin.write(
                    f'{{"symbol": "DEMOA", "spot": {150 + i % 50}}}\n'
                    f'{{"symbol": "DEMOB", "spot": {50 + i % 20}}}\n'
                )
                proc.stdin.flush()
                i += 1
        except (BrokenPipeError, OSError):
            return

    writer = threading.Thread(target=pump, daemon=True)
    writer.start()
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline and len(_feed_sets(demo_db)) < 20:
        time.sleep(0.05)
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait(timeout=30)
    stop.set()
    writer.join(timeout=10)
    try:
        proc.stdin.close()  # its reader is gone: closing flushes into a broken pipe
    except BrokenPipeError:
        pass
    sets = _feed_sets(demo_db)
    assert len(sets) >= 20
    conn = sqlite3.connect(demo_db)
    try:
        assert conn.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
        for s in sets:  # each batch whole: its recorded count is the rows it holds, both names
            held = conn.execute(
                "SELECT count(*) FROM mark WHERE mark_set_id = ?", (s.id,)
            ).fetchone()[0]
            assert held == s.marks >= 1
    finally:
        conn.close()
    assert 150 <= _spot(demo_db, "DEMOA") < 200  # the book opens and values the feed's marks


def test_demo_feed_piped_into_feed_moves_the_spots(demo_db: Path) -> None:
    before = _spot(demo_db, "DEMOA")
    demo = subprocess.run(
        _blotter(demo_db, "demo-feed", "--count", "12", "--rate", "1000", "--seed", "7"),
        capture_output=True, text=True, timeout=120, check=True,
    )
    quotes = [json.loads(line) for line in demo.stdout.splitlines()]
    assert len(quotes) == 12 and {"symbol", "spot"} <= set(quotes[0])
    st = store.open_store(demo_db, read_only=True)
    try:
        names = st.load_underlyings()
    finally:
        st.close()
    ticks = dict(zip(names.symbols, names.ticks, strict=True))
    for q in quotes:  # each quote is on its underlying's tick
        steps = q["spot"] / ticks[q["symbol"]]
        assert abs(steps - round(steps)) < 1e-6, q
    fed = subprocess.run(
        _blotter(demo_db, "feed", "--throttle", "0"),
        input=demo.stdout, capture_output=True, text=True, timeout=120, check=False,
    )
    assert fed.returncode == 0, fed.stderr
    last_a = [q["spot"] for q in quotes if q["symbol"] == "DEMOA"][-1]
    assert _spot(demo_db, "DEMOA") == last_a != before


def test_the_feed_logs_bad_lines_and_its_end(demo_db: Path, tmp_path: Path) -> None:
    log = tmp_path / "feed.log"
    text = '{"symbol": "DEMOA", "spot": 181}\n{"symbol": "GHOST", "spot": 1}\n'
    r = subprocess.run(
        [sys.executable, "-m", "blotter", "--log-file", str(log), "--db", str(demo_db), "feed"],
        input=text, capture_output=True, text=True, timeout=120, check=False,
    )
    assert r.returncode == 1, r.stderr
    lines = log.read_text(encoding="utf-8").splitlines()
    assert len(lines) == 2, lines
    assert " WARNING blotter.feed: file:stdin line 2: unknown underlying GHOST" in lines[0]
    assert " INFO blotter.feed: file:stdin ended: 2 lines, 1 quotes, 1 marks written" in lines[1]
