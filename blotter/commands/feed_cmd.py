"""``blotter feed`` (quotes in as intraday marks) and ``blotter demo-feed`` (an invented paced
feed of the book's own underlyings, to watch the demo move)."""

from __future__ import annotations

import json
import math
import os
import random
import sys
import time
from typing import TextIO

import click

from blotter.commands.common import (
    FINITE,
    FiniteRange,
    db_option,
    open_for_reading,
    print_json,
    shown,
)
from blotter.commands.store_cmds import _store
from blotter.config import MAX_WATCH_INTERVAL_S
from blotter.printable import printable
from blotter.ticks import on_tick


def _settings_throttle() -> float:
    """``feed_throttle_s`` from the settings, which are read (and a bad one refused, as a
    ClickException, before anything is read from the feed) whether or not --throttle is given."""
    from blotter.config import ConfigError, load_settings

    try:
        return load_settings().feed_throttle_s
    except ConfigError as exc:
        raise click.ClickException(f"settings: {exc}") from None


def _open_source(source: str) -> TextIO:
    """Standard input for ``-``, else the file or named pipe ``source`` (UTF-8; a byte that is
    not UTF-8 spoils only its own line)."""
    if source == "-":
        return sys.stdin
    try:
        return open(source, encoding="utf-8", errors="replace", newline="")  # noqa: SIM115
    except OSError as exc:
        raise click.ClickException(f"cannot read {source}: {exc.strerror}") from None


@click.command("feed")
@click.argument("source", default="-", metavar="[SOURCE]")
@click.option(
    "--throttle",
    type=FiniteRange(min=0, max=MAX_WATCH_INTERVAL_S),
    default=None,
    metavar="SECONDS",
    help="Write each underlying at most this often (default: feed_throttle_s, 1 s).",
)
@click.option("--json", "as_json", is_flag=True, help="Print the final report as JSON.")
@db_option
def feed(source: str, throttle: float | None, as_json: bool, db_path: str | None) -> None:
    """Read quotes from SOURCE (a file or named pipe; standard input when - or absent) and
    write them as intraday marks.

    One quote per line: JSON like {"symbol": "XYZ", "spot": 101.25, "time": "2026-12-03T15:00:00Z",
    "vols": [{"expiry": "2027-03-19", "strike": 100, "vol": 0.25}]}, or CSV whose first line is
    a header of symbol, spot, time, expiry, strike, vol (vol as a decimal, strike empty for
    ATM). A bad line is reported on stderr with its number, writes nothing and does not stop
    the feed; the exit code is 1 when any line was bad. Ctrl+C writes what waits, then stops.
    """
    from blotter.desk.feed import Feed, FeedLineError, FeedReport, run_feed

    configured = _settings_throttle()
    throttle_s = configured if throttle is None else throttle
    on_tty = sys.stderr.isatty()

    def said_bad(number: int, reason: str) -> None:
        click.echo(printable(f"line {number}: {reason}; nothing written for it"), err=True)

    def status(rep: FeedReport) -> None:
        if on_tty:
            click.echo(
                f"\rfeed: {rep.lines:,} lines, {rep.points_written:,} marks in "
                f"{rep.batches:,} writes, {rep.bad:,} bad",
                err=True,
                nl=False,
            )

    with _store(db_path) as store:
        stream = _open_source(source)
        runner = Feed(
            store, throttle_s, time.monotonic, on_bad=said_bad,
            name="stdin" if source == "-" else source,
        )
        try:
            report = run_feed(runner, stream, on_batch=status)
        except FeedLineError as exc:
            raise click.ClickException(str(exc)) from None
        except KeyboardInterrupt:
            runner.flush(everything=True)
            report = runner.report
        finally:
            if stream is not sys.stdin:
                stream.close()
    if on_tty:
        click.echo("", err=True)
    summary = (
        f"feed: {report.lines:,} lines read, {report.quotes:,} quotes taken, "
        f"{report.points_written:,} marks written in {report.batches:,} writes, "
        f"{report.bad:,} bad lines"
    )
    if as_json:
        print_json(report.as_dict())
    else:
        click.echo(summary, err=True)
    if report.bad:
        sys.exit(1)


@click.command("demo-feed")
@click.option("--rate", type=FINITE, default=5.0, show_default=True, metavar="PER_SECOND",
              help="Quotes printed per second.")
@click.option("--count", type=click.IntRange(min=1), default=None,
              help="Stop after this many quotes (default: until interrupted).")
@click.option("--move-bp", type=FINITE, default=5.0, show_default=True, metavar="BP",
              help="Typical size of one step of a spot, in basis points.")
@click.option("--seed", type=int, default=None, help="Seed of the random walk.")
@db_option
def demo_feed(
    rate: float, count: int | None, move_bp: float, seed: int | None, db_path: str | None
) -> None:
    """Print an invented, paced JSON feed of the book's spots (a random walk from the marks in
    force), to pipe into `blotter feed`: blotter demo-feed | blotter feed.

    Each quote is on its underlying's tick (the walk itself keeps full precision). The prices
    are made up for watching the app move; they are no market data.
    """
    from blotter.commands.common import resolve_db

    if not (0 < rate <= 10_000):
        raise click.BadParameter("must be above 0 and at most 10000", param_hint="--rate")
    if not (0 <= move_bp <= 1_000):
        raise click.BadParameter("must be 0 to 1000 basis points", param_hint="--move-bp")
    path, _explicit = resolve_db(db_path)
    store = open_for_reading(path)
    try:
        spots = dict(store.load_market().spots)
        names = store.load_underlyings()
    finally:
        store.close()
    ticks = dict(zip(names.symbols, names.ticks, strict=True))
    if not spots:
        raise click.ClickException(f"{shown(path)} has no spot marks to start a walk from")
    rng = random.Random(seed)
    symbols = sorted(spots)
    step = move_bp / 10_000.0
    pause = 1.0 / rate
    n = 0
    next_at = time.monotonic()
    try:
        while count is None or n < count:
            symbol = symbols[n % len(symbols)]
            spots[symbol] *= math.exp(step * rng.gauss(0.0, 1.0))
            line = {"symbol": symbol, "spot": on_tick(spots[symbol], ticks.get(symbol, 0.01))}
            sys.stdout.write(json.dumps(line) + "\n")
            sys.stdout.flush()
            n += 1
            next_at += pause
            time.sleep(max(0.0, next_at - time.monotonic()))
    except BrokenPipeError:
        # the reader went away: point stdout at nothing so the exit's flush cannot fail again
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
    except KeyboardInterrupt:
        pass


COMMANDS = [feed, demo_feed]
