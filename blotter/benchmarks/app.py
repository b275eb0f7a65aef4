"""``blotter bench`` cases for the app, measured through the app itself with Textual's Pilot.

- ``app keystroke→move pane``: from a key pressed in the what-if bar to the Move pane repainted
  with that keystroke's result (the app stamps each repaint in ``BlotterApp.timings``), on random
  10k and 100k books.
  Targets 50 ms and 150 ms. The time includes the bar's debounce.
- ``app start→first screen``: from launching a new Python process to the app's first full
  screen on the demo book (book drawn and the grid computed), imports included. Target 1.5 s.
- ``app resident memory``: peak resident set size of the 100k-book app after it has shown its
  book and moves, in MB (target 400 MB), in the note. Each keystroke case runs in a new Python
  process, so the peak is that app's alone, not the bench's earlier groups' (a process's peak
  RSS only grows).
- ``app commit close``: on the Marks screen, from the key that confirms the close to the screen
  saying the set was written (both stamped in ``BlotterApp.timings``), on a book with 200 mark
  points in force. Target 200 ms.
- ``app other process's mark visible``: from another process's committed spot mark to the
  running app (change check every ``watch_interval_s`` = 1 s) holding the new spot in
  its valued book. Target 1.5 s.
- ``app under a feed``: the app in a child process (headless, Textual's Pilot, 80×24, the real
  clock, default settings) on a demo-style book of 10,000 option positions, 90% American, while
  this process feeds 1,000 spot quotes a second across the book's underlyings through
  ``desk.feed`` (written once a second, its default throttle). Two rows: the app process's CPU
  (user + system time over wall time, in % of one core; target 25%) and the delay from each
  batch's commit to the Book pane repainted with it (median and max; target 1 s).
- ``app under a feed, 8 h of history``: the same, on a book that already holds ``FEED_HISTORY_H``
  hours of the feed's batches (one set a second of every underlying's spot, written in one
  transaction through the store's ``add_mark_set``), so what grows with the marks written is in
  the measure. Its CPU row also says what the minute roll costs: the app's CPU in the seconds
  after each new minute (every American boundary solved again at the new valuation instant)
  above the run's mean second.
"""

from __future__ import annotations

import asyncio
import json
import math
import queue
import resource
import subprocess
import sys
import tempfile
import threading
import time
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

import numpy as np

from blotter.benchmarks import Result, result_from

FIXED_NOW = datetime(2026, 12, 1, 15, 0, tzinfo=UTC)
"""Valuation time of the random books (a Tuesday, 10:00 in New York)."""

MOVES = tuple(f"spot {s:+d}% vol +{v}" for s in (-3, -2, -1, 1, 2, 3) for v in (1, 2, 3))
"""Lines typed into the bar; the timed keystroke is the last digit, so each gives a new move."""


def random_book(n: int, n_underlyings: int = 40, seed: int = 7) -> tuple[Any, Any]:
    """An invented book of ``n`` options on ``n_underlyings`` fictitious names, and its marks."""
    from blotter.book import Book, Underlyings
    from blotter.market import Market, RateCurve, VolSurface

    rng = np.random.default_rng(seed)
    symbols = tuple(f"RND{i:02d}" for i in range(n_underlyings))
    und = Underlyings(
        symbols=symbols,
        kinds=("stock",) * n_underlyings,
        currencies=("USD",) * n_underlyings,
        betas=rng.uniform(0.5, 1.5, n_underlyings),
        div_yields=rng.uniform(0, 0.03, n_underlyings),
        calendars=("NYSE",) * n_underlyings,
    )
    spots = rng.uniform(20, 500, n_underlyings)
    uidx = rng.integers(0, n_underlyings, n)
    expiry_days = np.array([7, 14, 30, 60, 90, 180, 365, 730])
    start = np.datetime64(FIXED_NOW.replace(tzinfo=None), "D")
    exp_dates = start + rng.choice(expiry_days, n).astype("timedelta64[D]")
    expiries = exp_dates.astype("datetime64[s]") + np.timedelta64(21, "h")
    strikes = np.round(spots[uidx] * rng.uniform(0.7, 1.3, n), 0)
    book = Book(
        name="RANDOM",
        underlyings=und,
        reference_index=None,
        contract_ids=np.arange(1, n + 1),
        labels=tuple(f"pos{i}" for i in range(n)),
        underlying_idx=uidx,
        is_option=np.ones(n, dtype=bool),
        is_call=rng.random(n) < 0.5,
        american=np.zeros(n, dtype=bool),
        strikes=strikes,
        expiries=expiries,
        multipliers=np.full(n, 100.0),
        quantities=rng.integers(-50, 51, n).astype(float) + 0.5,
    )
    surfaces = {}
    for i, sym in enumerate(symbols):
        dates = start + expiry_days.astype("timedelta64[D]")
        ks = spots[i] * np.array([0.7, 1.0, 1.3])
        e = np.repeat(dates, 3)
        k = np.tile(ks, len(dates))
        v = np.tile([0.32, 0.25, 0.22], len(dates))
        surfaces[sym] = VolSurface(e, k, v)
    market = Market(
        version=1,
        marks_as_of=FIXED_NOW - timedelta(hours=1),
        spots={s: float(spots[i]) for i, s in enumerate(symbols)},
        surfaces=surfaces,
        curves={"USD": RateCurve(np.array([1.0, 365.0, 3650.0]), np.array([0.04, 0.04, 0.04]))},
        mark_kind="intraday",
    )
    return book, market


KEYSTROKES = """
import asyncio, json, sys
from blotter.benchmarks.app import _keystrokes
seconds, rss = asyncio.run(_keystrokes(int(sys.argv[1]), int(sys.argv[2])))
print(json.dumps({"seconds": seconds.tolist(), "rss_mb": rss}))
"""
"""A new interpreter that times the keystroke case on an ``n``-position book and prints its
seconds and its own peak RSS in MB as JSON."""


def _keystrokes_alone(n: int, repeat: int) -> tuple[np.ndarray, float]:
    """``_keystrokes`` in a new Python process: its seconds and that process's peak RSS (MB)."""
    out = subprocess.run(
        [sys.executable, "-c", KEYSTROKES, str(n), str(repeat)],
        capture_output=True,
        text=True,
        check=True,
        timeout=600,
    )
    got = json.loads(out.stdout.strip().splitlines()[-1])
    return np.array(got["seconds"]), float(got["rss_mb"])


def _rss_mb() -> float:
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    return peak / (1024 * 1024) if sys.platform == "darwin" else peak / 1024


async def _keystrokes(n: int, repeat: int) -> tuple[np.ndarray, float]:
    from blotter.config import Settings
    from blotter.ui.app import BlotterApp
    from blotter.ui.timings import Timing
    from blotter.ui.widgets.whatif_bar import MoveInput

    book, market = random_book(n)
    app = BlotterApp(
        ":memory:",
        Settings(watch_interval_s=0),
        clock=lambda: FIXED_NOW,
        loader=lambda: (book, market, 0),
    )
    seconds: list[float] = []
    async with app.run_test(size=(120, 40)) as pilot:
        await _settle(app, pilot)
        bar = app.query_one(MoveInput)
        bar.focus()
        await pilot.pause()
        for k in range(repeat + 1):
            line = MOVES[k % len(MOVES)]
            bar.value = line[:-1]
            await _settle(app, pilot)
            before = app.timings.count(Timing.MOVE_PAINTED)
            t0 = time.perf_counter()
            await pilot.press(line[-1])
            while (painted := _painted_since(app, before)) is None:
                await pilot.pause()
                if time.perf_counter() - t0 > 30:
                    raise RuntimeError(f"no repaint for {line!r} within 30 s")
            if k:  # the first keystroke warms caches
                seconds.append(painted - t0)
            await _settle(app, pilot)
        rss = _rss_mb()
    return np.array(seconds), rss


def _painted_since(app: Any, before: int) -> float | None:
    """When the Move pane was repainted with the bar's latest edit, if it has been since the
    ``before``-th repaint."""
    from blotter.ui.timings import Timing

    last = app.timings.last(Timing.MOVE_PAINTED)
    if app.timings.count(Timing.MOVE_PAINTED) == before or last is None:
        return None
    return float(last.at) if last.tag == app.move_seq else None


async def _settle(app: Any, pilot: Any) -> None:
    for _ in range(50):
        await app.settle()
        await pilot.pause()
        if all(w.is_finished or w.group == "watch" for w in app.workers):
            return


async def _first_screen(db_path: str) -> float:
    """In this process: wall-clock seconds of the app's start on ``db_path`` to its first screen."""
    from blotter.config import Settings
    from blotter.ui.app import make_app
    from blotter.ui.timings import Timing
    from blotter.ui.widgets.grid_pane import GridPane

    t0 = time.perf_counter()
    app = make_app(db_path, Settings(watch_interval_s=0), clock=lambda: FIXED_NOW)
    async with app.run_test(size=(80, 24)) as pilot:
        while (first := app.timings.last(Timing.FIRST_PAINT)) is None or (
            app.query_one(GridPane).ladder is None
        ):
            await pilot.pause()
            if time.perf_counter() - t0 > 30:
                raise RuntimeError("the app did not show its first screen within 30 s")
        return max(first.at, time.perf_counter()) - t0


COLD_START = """
import asyncio, sys, time
from blotter.benchmarks.app import _first_screen
asyncio.run(_first_screen(sys.argv[1]))
print(time.time())
"""
"""A new interpreter that starts the app on a book, printing the wall clock at its first screen."""


def _cold_start(db_path: str) -> float:
    """Seconds from launching a new Python to the app's first full screen (imports included)."""
    t0 = time.time()
    out = subprocess.run(
        [sys.executable, "-c", COLD_START, db_path],
        capture_output=True,
        text=True,
        check=True,
        timeout=60,
    )
    return float(out.stdout.strip().splitlines()[-1]) - t0


def run(quick: bool) -> list[Result]:
    """Time the app's cases (see the module docstring)."""
    results: list[Result] = []
    repeat = 3 if quick else 9
    sizes = (2_000,) if quick else (10_000, 100_000)
    rss = 0.0
    for n in sizes:
        secs, rss = _keystrokes_alone(n, repeat)
        target = 50e-3 if n <= 10_000 else 150e-3
        results.append(
            result_from(
                "app keystroke→move pane",
                n,
                secs,
                target_ns=target * 1e9 / n,
                note=f"median {np.median(secs) * 1e3:.1f} ms per keystroke "
                f"(target {target * 1e3:.0f} ms)",
            )
        )
    if not quick:
        results.append(
            Result(
                case="app resident memory",
                positions=sizes[-1],
                ns_per_position=float("nan"),
                min=float("nan"),
                max=float("nan"),
                note=f"peak RSS {rss:.0f} MB with the {sizes[-1]:,}-position app (target 400 MB)",
            )
        )
    with tempfile.TemporaryDirectory() as tmp:
        db = Path(tmp) / "demo.db"
        _write_demo(db)
        starts = np.array([_cold_start(str(db)) for _ in range(2 if quick else 5)])
    results.append(
        result_from(
            "app start→first screen",
            1,
            starts,
            target_ns=1.5e9,
            note=f"median {np.median(starts):.2f} s from a new process to the book, Move pane "
            "and grid drawn, demo book (target 1.5 s)",
        )
    )
    results += _under_feed(quick)
    results += _under_feed(quick, 0.25 if quick else FEED_HISTORY_H)
    with tempfile.TemporaryDirectory() as tmp:
        db = Path(tmp) / "marks.db"
        _marks_book(db, 200)
        closes = asyncio.run(_commit_close(str(db), 3 if quick else 9))
        results.append(
            result_from(
                "app commit close",
                200,
                closes,
                target_ns=0.2e9 / 200,
                note=f"median {np.median(closes) * 1e3:.0f} ms from the confirming key to the "
                "close set written and said, 200 marks (target 200 ms)",
            )
        )
        seen = asyncio.run(_other_process(str(db), 3 if quick else 7))
        results.append(
            result_from(
                "app other process's mark visible",
                1,
                seen,
                target_ns=1.5e9,
                note=f"median {np.median(seen):.2f} s, max {seen.max():.2f} s from another "
                "process's commit to the app's book holding it, change check every 1 s "
                "(target 1.5 s)",
            )
        )
    return results


def _marks_book(path: Path, n_marks: int = 200) -> None:
    """A book of one invented underlying with ``n_marks`` mark points in force (spot, one rate,
    vols) and one option on it."""
    from blotter import store

    st = store.create_store(path)
    try:
        st.add_underlying("BENCHU", "stock", "USD", 100.0, description="invented for the bench")
        st.log_spot("BENCHU", 100.0)
        st.log_rate("USD", 365, 0.04)
        expiries = ("2027-01-15", "2027-03-19", "2027-06-17", "2027-12-17")
        n_vols = n_marks - 2
        for k in range(n_vols):
            st.log_vol("BENCHU", expiries[k % 4], 0.2 + 0.0005 * k, strike=60.0 + k // 4)
        st.add_trade("main", "BENCHU", 1, 5.0, expiries[0], 100.0, True, create_book=True)
    finally:
        st.close()


async def _commit_close(db_path: str, repeat: int) -> np.ndarray:
    """Seconds from the close-confirming key reaching the app to the Marks screen repainted
    saying the set was written (the screen stamps both)."""
    from blotter.config import Settings
    from blotter.ui.app import make_app
    from blotter.ui.screens.marks import CloseReviewScreen, MarksScreen
    from blotter.ui.timings import Timing

    app = make_app(db_path, Settings(watch_interval_s=0), clock=lambda: FIXED_NOW)
    async with app.run_test(size=(80, 24)) as pilot:
        await _settle(app, pilot)
        await pilot.press("m")
        await _settle(app, pilot)
        screen = app.screen
        assert isinstance(screen, MarksScreen)
        seconds = []
        for _ in range(repeat):
            await pilot.press("c")
            await _settle(app, pilot)
            assert isinstance(app.screen, CloseReviewScreen)
            before = app.timings.count(Timing.CLOSE_PAINTED)
            await pilot.press("y")
            t0 = time.perf_counter()
            while app.timings.count(Timing.CLOSE_PAINTED) == before:
                await pilot.pause(0.001)
                if time.perf_counter() - t0 > 30:
                    raise RuntimeError("the close was not written within 30 s")
            if "written" not in _said(screen):
                raise RuntimeError(f"the close failed: {_said(screen)}")
            key = app.timings.last(Timing.CLOSE_KEY)
            painted = app.timings.last(Timing.CLOSE_PAINTED)
            assert key is not None and painted is not None
            seconds.append(painted.at - key.at)
            await _settle(app, pilot)
    return np.array(seconds)


def _said(screen: Any) -> str:
    return str(screen.query_one(".desk-message").render())


OTHER_PROCESS = """
import sys, time
from blotter import store
st = store.open_store(sys.argv[1])
st.log_spot("BENCHU", float(sys.argv[2]))
print(time.time())
"""
"""Another process: commit a spot mark, print the wall clock just after the commit."""


async def _other_process(db_path: str, repeat: int) -> np.ndarray:
    """Seconds from another process's commit to the app's valued book holding the new spot."""
    from blotter.config import Settings
    from blotter.ui.app import make_app

    app = make_app(db_path, Settings(watch_interval_s=1.0), clock=lambda: FIXED_NOW)
    out = []
    async with app.run_test(size=(80, 24)) as pilot:
        await _settle(app, pilot)
        for k in range(repeat):
            spot = 101.0 + k
            proc = await asyncio.create_subprocess_exec(
                sys.executable,
                "-c",
                OTHER_PROCESS,
                db_path,
                str(spot),
                stdout=asyncio.subprocess.PIPE,
            )
            stdout, _ = await proc.communicate()
            committed = float(stdout.decode().strip().splitlines()[-1])
            while True:
                state = app.state
                if state is not None and float(state.valuation.underlying_spots[0]) == spot:
                    break
                await pilot.pause(0.01)
                if time.time() - committed > 30:
                    raise RuntimeError("the other process's mark did not show within 30 s")
            out.append(time.time() - committed)
            await _settle(app, pilot)
    return np.array(out)


def _write_demo(path: Path) -> None:
    """Write the demo book to ``path`` with the demo module's writer."""
    from blotter import demo

    demo.build_demo(path)


FEED_POSITIONS = 10_000
"""Option positions of the book the app holds under the feed."""

FEED_AMERICAN_SHARE = 0.9
"""Share of its options that are American."""

FEED_QUOTES_PER_S = 1_000
"""Spot quotes a second the feeder takes, round the book's underlyings."""

FEED_WARM_S = 5.0
"""Seconds the feed runs before the app's CPU is measured (so the measure is of a stream)."""

FEED_SECONDS = 60.0
"""Seconds over which the app's CPU and the commit-to-screen delays are measured: a minute, so
the once-a-minute work (the book valued at the next minute's instant, P&L today explained from
the close) is in every measure once."""

FEED_HISTORY_H = 8.0
"""Hours of feed history the sustained case's book holds before the measure."""

ROLL_WINDOW_S = 5
"""Seconds after each new minute counted as the minute roll's (its load, grid and panes)."""

FEED_TAIL_S = 3.0
"""Commits this close to the end of the measure are not timed (their repaint may come after)."""

FEED_CHILD = """
import asyncio, sys
from blotter.benchmarks.app import _feed_app
asyncio.run(_feed_app(sys.argv[1]))
"""
"""The app's process under the feed: prints ``ready``, then follows ``start``/``stop`` lines."""


def _cpu_s() -> float:
    """User + system CPU seconds of this process so far, every thread included."""
    use = resource.getrusage(resource.RUSAGE_SELF)
    return use.ru_utime + use.ru_stime


async def _feed_app(db_path: str) -> None:
    """The app on ``db_path`` under a feed, in this (child) process.

    Prints ``ready`` once the book, the grid and the compiled kernels are in; then a ``start``
    line on stdin takes a CPU reading, and ``stop`` another, printing one JSON line (CPU and
    wall seconds between them, each Book pane repaint as [newest mark id, wall clock], peak
    RSS in MB, [wall clock, CPU seconds so far] about once a second from ``ready`` on, so the
    feed's warm-up and measure hold at least one new minute with the seconds after it) before
    it exits."""
    from blotter import engine
    from blotter.config import Settings
    from blotter.ui.app import make_app
    from blotter.ui.timings import Timing
    from blotter.ui.widgets.grid_pane import GridPane

    commands: queue.Queue[str] = queue.Queue()

    def read() -> None:
        for line in sys.stdin:
            commands.put(line.strip())

    threading.Thread(target=read, daemon=True).start()
    offset = time.time() - time.perf_counter()
    app = make_app(db_path, Settings())
    async with app.run_test(size=(80, 24)) as pilot:
        t0 = time.perf_counter()
        while not (
            engine.kernels_ready()
            and app.timings.count(Timing.FIRST_PAINT)
            and app.query_one(GridPane).ladder is not None
        ):
            await asyncio.sleep(0.1)
            if time.perf_counter() - t0 > 300:
                raise RuntimeError("the app did not show its book within 300 s")
        await _settle(app, pilot)
        print("ready", flush=True)
        paints: list[tuple[int, float]] = []
        samples: list[tuple[float, float]] = []
        seen = app.timings.count(Timing.BOOK_PAINTED)
        start = (0.0, 0.0)
        while True:
            await asyncio.sleep(0.05)
            if not samples or time.time() - samples[-1][0] >= 1.0:
                samples.append((time.time(), _cpu_s()))
            if app.timings.count(Timing.BOOK_PAINTED) != seen:
                seen = app.timings.count(Timing.BOOK_PAINTED)
                last = app.timings.last(Timing.BOOK_PAINTED)
                assert last is not None
                paints.append((last.tag, last.at + offset))
            try:
                command = commands.get_nowait()
            except queue.Empty:
                continue
            if command == "start":
                start = (_cpu_s(), time.perf_counter())
                paints.clear()
            elif command == "stop":
                cpu, wall = _cpu_s() - start[0], time.perf_counter() - start[1]
                out = {
                    "cpu_s": cpu,
                    "wall_s": wall,
                    "paints": paints,
                    "rss_mb": _rss_mb(),
                    "samples": samples,
                }
                print(json.dumps(out), flush=True)
                return


def _feed_book(path: Path, n: int) -> list[tuple[str, float]]:
    """Write the demo-style book of ``n`` options to ``path``; its (symbol, spot) pairs."""
    from blotter import store
    from blotter.store.demo import build_demo

    build_demo(path, positions=n, american_share=FEED_AMERICAN_SHARE)
    st = store.open_store(path, read_only=True)
    try:
        return sorted(st.load_market().spots.items())
    finally:
        st.close()


def _feed_history(path: Path, spots: list[tuple[str, float]], hours: float) -> int:
    """Write ``hours`` of the feed's batches ending now into the book at ``path``: one intraday
    set a second holding a random-walk spot of every underlying, as ``desk.feed`` writes them at
    its default throttle, all in one transaction; returns the sets written."""
    from blotter import store
    from blotter.store import MarkPoint

    rng = np.random.default_rng(13)
    n = int(hours * 3600)
    first = datetime.now(UTC) - timedelta(seconds=n + 1)
    walk = np.array([spot for _, spot in spots])
    steps = np.exp(np.cumsum(5e-4 * rng.standard_normal((n, len(spots))), axis=0))
    st = store.open_store(path)
    try:
        with st.atomic():
            for i in range(n):
                points = [
                    MarkPoint("spot", float(f"{p:.6g}"), symbol=symbol)
                    for (symbol, _), p in zip(spots, walk * steps[i], strict=True)
                ]
                st.add_mark_set(
                    "intraday",
                    points,
                    source="file:feed-history",
                    marked_at=first + timedelta(seconds=i),
                    who="bench",
                )
        st.checkpoint()
    finally:
        st.close()
    return n


def _roll_cost(samples: list[tuple[float, float]]) -> tuple[float, int]:
    """The app's CPU seconds in the ``ROLL_WINDOW_S`` seconds after each new minute above the
    run's mean for as many seconds (median over the minutes in the run), and the minutes seen."""
    if len(samples) < 3:
        return math.nan, 0
    at = np.array([s[0] for s in samples])
    cpu = np.array([s[1] for s in samples])
    per_s = np.diff(cpu) / np.diff(at)
    mean = float((cpu[-1] - cpu[0]) / (at[-1] - at[0]))
    minutes = np.arange(math.ceil(at[0] / 60) * 60, at[-1] - ROLL_WINDOW_S, 60.0)
    excess = []
    for m in minutes:
        inside = (at[1:] > m) & (at[:-1] < m + ROLL_WINDOW_S)
        spent = float((per_s[inside] * np.diff(at)[inside]).sum())
        span = float(np.diff(at)[inside].sum())
        excess.append(spent - mean * span)
    return (float(np.median(excess)) if excess else math.nan), len(excess)


def _feeding(
    db_path: Path, spots: list[tuple[str, float]], child: subprocess.Popen[str], seconds: float
) -> list[tuple[int, float]]:
    """Feed ``FEED_QUOTES_PER_S`` quotes a second (a random walk of each spot) into
    ``db_path`` through ``desk.feed`` for ``FEED_WARM_S`` + ``seconds``, telling ``child`` to
    start measuring after the warm-up; returns each batch's (newest mark id, wall clock at its
    commit)."""
    from blotter import store
    from blotter.config import Settings
    from blotter.desk.feed import Feed, Quote

    rng = np.random.default_rng(11)
    symbols = [symbol for symbol, _ in spots]
    walk = [spot for _, spot in spots]
    st = store.open_store(db_path)
    commits: list[tuple[int, float]] = []
    assert child.stdin is not None
    try:
        feed = Feed(st, Settings().feed_throttle_s, time.monotonic, name="bench")
        t0 = time.monotonic()
        sent = 0
        started = False
        while (elapsed := time.monotonic() - t0) < FEED_WARM_S + seconds:
            while sent < int(elapsed * FEED_QUOTES_PER_S):
                k = sent % len(walk)
                walk[k] = float(f"{walk[k] * math.exp(5e-4 * rng.standard_normal()):.6g}")
                sent += 1
                feed.take(sent, Quote(symbols[k], walk[k]))
            if feed.flush():
                newest = st.connection.execute("SELECT max(mark_id) FROM mark").fetchone()[0]
                commits.append((int(newest), time.time()))
            if not started and elapsed >= FEED_WARM_S:
                child.stdin.write("start\n")
                child.stdin.flush()
                started = True
                commits.clear()
            time.sleep(0.002)
    finally:
        st.close()
    return commits


def _under_feed(quick: bool, history_h: float = 0.0) -> list[Result]:
    """The ``app under a feed`` rows, on a book holding ``history_h`` hours of feed history
    first (see the module docstring)."""
    n = 2_000 if quick else FEED_POSITIONS
    seconds = 8.0 if quick else FEED_SECONDS
    with tempfile.TemporaryDirectory() as tmp:
        db = Path(tmp) / "feed.db"
        spots = _feed_book(db, n)
        history_sets = _feed_history(db, spots, history_h) if history_h else 0
        child = subprocess.Popen(
            [sys.executable, "-c", FEED_CHILD, str(db)],
            stdin=subprocess.PIPE,
            stdout=subprocess.PIPE,
            text=True,
        )
        assert child.stdin is not None and child.stdout is not None
        try:
            if child.stdout.readline().strip() != "ready":
                raise RuntimeError("the app under the feed did not start")
            commits = _feeding(db, spots, child, seconds)
            ended = time.time()
            child.stdin.write("stop\n")
            child.stdin.flush()
            out = json.loads(child.stdout.readline())
            child.wait(timeout=60)
        finally:
            if child.poll() is None:
                child.kill()
    paints = sorted((int(tag), float(at)) for tag, at in out["paints"])
    delays = []
    for newest, committed in commits:
        if committed > ended - FEED_TAIL_S:
            continue
        shown = [at for tag, at in paints if tag >= newest and at >= committed]
        delays.append(min(shown) - committed if shown else math.inf)
    seen = np.array([d for d in delays if math.isfinite(d)])
    missed = len(delays) - len(seen)
    share = 100.0 * out["cpu_s"] / out["wall_s"]
    where = f"{n:,}-position book, {FEED_QUOTES_PER_S:,} quotes/s"
    name = "app under a feed"
    roll = ""
    if history_h:
        name += f", {history_h:g} h of history"
        where += f", {history_sets:,} feed sets written before"
        cost, minutes = _roll_cost(out["samples"])
        roll = (
            f"; minute roll {cost:.2f} CPU s above the mean in the {ROLL_WINDOW_S} s after a "
            f"new minute (median of {minutes}), {100 * cost / 60:.1f}% of a core a minute"
        )
    return [
        Result(
            case=f"{name}: CPU",
            positions=n,
            ns_per_position=float("nan"),
            min=float("nan"),
            max=float("nan"),
            note=f"{share:.0f}% of one core over {out['wall_s']:.0f} s ({where}; target 25%); "
            f"peak RSS {out['rss_mb']:.0f} MB" + roll,
        ),
        result_from(
            f"{name}: commit→book pane",
            1,
            seen if len(seen) else np.array([math.nan]),
            target_ns=1e9,
            note=f"median {np.median(seen):.2f} s, max {seen.max():.2f} s over {len(seen)} "
            f"batches ({where}; target 1 s)"
            + (f"; {missed} batches never shown" if missed else "")
            if len(seen)
            else f"no batch shown ({where})",
        ),
    ]
