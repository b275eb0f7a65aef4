"""Market data in: quotes read one per line, written as intraday marks, throttled and batched.

A line is a JSON object (``{"symbol": "XYZ", "spot": 101.25, "time": "...", "vols": [{"expiry":
"2027-03-19", "strike": 100, "vol": 0.25}]}``) or a row of a CSV whose first line is its header
(columns ``symbol`` and any of ``spot``, ``time``, ``expiry``, ``strike``, ``vol``). A bad line is
counted and reported with its line number, writes nothing, and never stops the feed.

Quotes wait in memory, the latest value of each point winning, and are written at most once per
``throttle_s``, every waiting point in one mark set: so each underlying is written at most once a
throttle, in one transaction per batch. A writer killed between batches loses only the quotes
still waiting.
"""

from __future__ import annotations

import csv
import json
import math
import queue
import threading
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass, field
from datetime import date, datetime
from typing import TYPE_CHECKING, Any, TextIO

from blotter.logs import FEED, logger
from blotter.store import MarkPoint, StoreError, check_mark_point, parse_time

if TYPE_CHECKING:
    from blotter.store import Store

def feed_source(name: str) -> str:
    """The ``source`` of the mark sets a feed from ``name`` (a path, or ``stdin``) writes, in
    the schema's form for marks read from a file (``file:<name>``)."""
    return f"file:{name}"
CSV_COLUMNS = ("symbol", "spot", "time", "expiry", "strike", "vol")
"""The columns a CSV feed may have; ``symbol`` is required, the rest optional."""
MAX_REPORTED = 20
"""Bad lines reported one by one; after that only counted."""


class FeedLineError(ValueError):
    """A line that is not a quote; the message says why in words."""


@dataclass(frozen=True)
class Quote:
    """One line's content: a spot and/or vol points (expiry, strike or None for ATM, decimal
    vol) of ``symbol``, observed at ``time`` (aware UTC) when the line said."""

    symbol: str
    spot: float | None = None
    vols: tuple[tuple[str, float | None, float], ...] = ()
    time: datetime | None = None

    def points(self) -> list[MarkPoint]:
        """The quote as mark points."""
        out = [] if self.spot is None else [MarkPoint("spot", self.spot, symbol=self.symbol)]
        out += [
            MarkPoint("vol", v, symbol=self.symbol, expiry=e, strike=k) for e, k, v in self.vols
        ]
        return out


@dataclass
class FeedReport:
    """What a feed did so far: lines read, quotes taken, points and batches written, bad lines
    (the first ``MAX_REPORTED`` with their line number and reason)."""

    lines: int = 0
    quotes: int = 0
    points_written: int = 0
    batches: int = 0
    bad: int = 0
    bad_lines: list[tuple[int, str]] = field(default_factory=list)

    def as_dict(self) -> dict[str, Any]:
        """The report as plain data (for ``--json``)."""
        return {
            "lines": self.lines,
            "quotes": self.quotes,
            "points_written": self.points_written,
            "batches": self.batches,
            "bad_lines": self.bad,
            "bad": [{"line": n, "reason": r} for n, r in self.bad_lines],
        }


def _number(value: Any, what: str) -> float:
    """A finite number from JSON or CSV text."""
    if isinstance(value, bool) or value is None:
        raise FeedLineError(f"{what} must be a number, got {value!r}")
    try:
        x = float(value)
    except (TypeError, ValueError):
        raise FeedLineError(f"{what} must be a number, got {value!r}") from None
    if not math.isfinite(x):
        raise FeedLineError(f"{what} must be a finite number, got {value!r}")
    return x


def _expiry(value: Any) -> str:
    """An ISO date (YYYY-MM-DD)."""
    try:
        return date.fromisoformat(str(value).strip()).isoformat()
    except ValueError:
        raise FeedLineError(f"expiry must be a date like 2027-03-19, got {value!r}") from None


def _time(value: Any) -> datetime | None:
    """The quote's time: ISO-8601 with Z or an offset, or absent."""
    if value is None or value == "":
        return None
    try:
        return parse_time(str(value))
    except StoreError as exc:
        raise FeedLineError(str(exc)) from None


def _symbol(value: Any) -> str:
    """A non-empty symbol (upper case as the store keeps them)."""
    if not isinstance(value, str) or not value.strip():
        raise FeedLineError(f"symbol must be a non-empty text, got {value!r}")
    return value.strip().upper()


def quote_from_json(text: str) -> Quote:
    """A quote from one JSON object line."""
    try:
        obj = json.loads(text)
    except json.JSONDecodeError as exc:
        raise FeedLineError(f"not JSON ({exc.msg} at column {exc.colno})") from None
    if not isinstance(obj, dict):
        raise FeedLineError("a JSON line must be an object with a symbol")
    unknown = set(obj) - {"symbol", "spot", "time", "vols"}
    if unknown:
        raise FeedLineError(f"unknown field(s) {', '.join(sorted(unknown))}")
    vols: list[tuple[str, float | None, float]] = []
    raw_vols = obj.get("vols", [])
    if not isinstance(raw_vols, list):
        raise FeedLineError("vols must be a list of {expiry, strike, vol}")
    for item in raw_vols:
        if not isinstance(item, dict) or "expiry" not in item or "vol" not in item:
            raise FeedLineError("each vol point needs an expiry and a vol (strike optional)")
        strike = item.get("strike")
        vols.append(
            (
                _expiry(item["expiry"]),
                None if strike is None else _number(strike, "strike"),
                _number(item["vol"], "vol"),
            )
        )
    spot = obj.get("spot")
    quote = Quote(
        _symbol(obj.get("symbol")),
        None if spot is None else _number(spot, "spot"),
        tuple(vols),
        _time(obj.get("time")),
    )
    if quote.spot is None and not quote.vols:
        raise FeedLineError("a quote needs a spot or a vol point")
    return quote


def quote_from_csv(row: dict[str, str]) -> Quote:
    """A quote from one CSV row (by header); an empty cell is an absent value."""
    cell = {k: (v or "").strip() for k, v in row.items() if k is not None}
    if None in row:
        raise FeedLineError("more cells than the header has columns")
    spot = _number(cell["spot"], "spot") if cell.get("spot") else None
    vols: tuple[tuple[str, float | None, float], ...] = ()
    if cell.get("vol") or cell.get("expiry") or cell.get("strike"):
        if not (cell.get("vol") and cell.get("expiry")):
            raise FeedLineError("a vol point needs both an expiry and a vol")
        strike = _number(cell["strike"], "strike") if cell.get("strike") else None
        vols = ((_expiry(cell["expiry"]), strike, _number(cell["vol"], "vol")),)
    if spot is None and not vols:
        raise FeedLineError("a quote needs a spot or a vol point")
    return Quote(_symbol(cell.get("symbol")), spot, vols, _time(cell.get("time")))


def parse_lines(lines: Iterable[str]) -> Iterator[tuple[int, Quote | FeedLineError]]:
    """(line number, quote or the reason it is not one) for each non-blank line; the format is
    CSV when the first non-blank line reads as its header (a comma, not a JSON opening), else
    JSON."""
    header: list[str] | None = None
    is_json: bool | None = None
    for number, raw in enumerate(lines, start=1):
        text = raw.strip()
        if not text:
            continue
        if is_json is None:
            # a first line with a comma that opens no JSON is a CSV header; anything else, JSON
            is_json = text[:1] in "{[" or ("," not in text and text.lower() != "symbol")
            if not is_json:
                header = [h.strip().lower() for h in next(csv.reader([text]))]
                missing = "symbol" not in header
                unknown = [h for h in header if h not in CSV_COLUMNS]
                if missing or unknown:
                    why = "no symbol column" if missing else f"unknown column(s) {unknown}"
                    raise FeedLineError(
                        f"line {number}: a CSV feed starts with a header of "
                        f"{', '.join(CSV_COLUMNS)} ({why})"
                    )
                continue
        try:
            if is_json:
                yield number, quote_from_json(text)
            else:
                assert header is not None
                row = next(csv.DictReader([text], fieldnames=header))
                yield number, quote_from_csv(row)
        except FeedLineError as exc:
            yield number, exc


_LOG = logger(FEED)

_Key = tuple[str, str, str | None, float | None]
"""A point's identity while it waits: (symbol, kind, expiry, strike)."""


class Feed:
    """Takes quotes, keeps the latest of each point, writes them all in one batch a throttle.

    ``clock`` gives monotonic seconds (``time.monotonic`` in use; tests pass their own);
    ``on_bad`` hears of each bad line as it is found."""

    def __init__(
        self,
        store: Store,
        throttle_s: float,
        clock: Callable[[], float],
        on_bad: Callable[[int, str], None] | None = None,
        name: str = "stdin",
    ) -> None:
        if not (math.isfinite(throttle_s) and throttle_s >= 0):
            raise ValueError(f"throttle must be a number of seconds >= 0, got {throttle_s!r}")
        self.store = store
        self.throttle_s = throttle_s
        self.clock = clock
        self.on_bad = on_bad
        self.source = feed_source(name)
        self.report = FeedReport()
        self._known = set(store.load_underlyings().symbols)
        self._known_version = store.data_version()
        self._pending: dict[_Key, tuple[int, MarkPoint]] = {}
        self._last_write = -math.inf

    def bad_line(self, number: int, reason: str) -> None:
        """Count a bad line and keep its reason (the first ``MAX_REPORTED``)."""
        self.report.bad += 1
        _LOG.warning("%s line %d: %s; nothing written for it", self.source, number, reason)
        if self.on_bad is not None:
            self.on_bad(number, reason)
        if len(self.report.bad_lines) < MAX_REPORTED:
            self.report.bad_lines.append((number, reason))

    def take(self, number: int, item: Quote | FeedLineError) -> None:
        """Take line ``number``'s quote (or count it bad); writes nothing by itself."""
        self.report.lines = max(self.report.lines, number)
        if isinstance(item, FeedLineError):
            self.bad_line(number, str(item))
            return
        if item.symbol not in self._known:
            # an underlying added since the feed started; read again only after a commit, so a
            # stream of an unknown symbol costs no read per line
            version = self.store.data_version()
            if version != self._known_version:
                self._known = set(self.store.load_underlyings().symbols)
                self._known_version = version
            if item.symbol not in self._known:
                self.bad_line(number, f"unknown underlying {item.symbol}")
                return
        points = item.points()
        try:
            for p in points:
                check_mark_point(p.kind, True, None, p.expiry, p.strike, None, p.value)
        except StoreError as exc:
            self.bad_line(number, str(exc))
            return
        self.report.quotes += 1
        for p in points:
            key = (item.symbol, p.kind, None if p.expiry is None else str(p.expiry), p.strike)
            self._pending[key] = (number, p)

    def due_in(self) -> float | None:
        """Seconds until the waiting points may be written; None when nothing waits."""
        if not self._pending:
            return None
        return max(0.0, self._last_write + self.throttle_s - self.clock())

    def flush(self, everything: bool = False) -> int:
        """Write every waiting point as one mark set when a throttle has passed since the last
        write (or at the end, ``everything``); returns the points written. A point the store
        refuses is reported with its line and dropped, and the rest are written."""
        now = self.clock()
        if not self._pending or (not everything and now - self._last_write < self.throttle_s):
            return 0
        due = list(self._pending.values())
        self._pending.clear()
        self._last_write = now
        return self._write(due)

    def _write(self, items: list[tuple[int, MarkPoint]]) -> int:
        """Write ``items`` as one set; when the store refuses the set, find the refused points
        (one set per underlying, then per point) so the good ones are still written. A refusal
        of the book itself (read-only, busy, not writable) stops the feed."""
        try:
            self.store.add_mark_set("intraday", [p for _, p in items], source=self.source)
        except StoreError as exc:
            if type(exc) is not StoreError:
                _LOG.error("%s: the book refused a write, the feed stops: %s", self.source, exc)
                raise
            if len(items) == 1:
                self.bad_line(items[0][0], str(exc))
                return 0
            by_symbol: dict[str | None, list[tuple[int, MarkPoint]]] = {}
            for item in items:
                by_symbol.setdefault(item[1].symbol, []).append(item)
            groups = list(by_symbol.values()) if len(by_symbol) > 1 else [[i] for i in items]
            return sum(self._write(g) for g in groups)
        self.report.batches += 1
        self.report.points_written += len(items)
        return len(items)


def run_feed(
    feed: Feed,
    source: TextIO,
    on_batch: Callable[[FeedReport], None] | None = None,
) -> FeedReport:
    """Read ``source`` to its end through ``feed``, writing batches as they fall due even while
    no line arrives (a reader thread fills a queue); the waiting points are written at the end.

    A CSV feed whose header is wrong stops at once (no line of it can be read)."""
    lines: queue.Queue[str | None] = queue.Queue(maxsize=10_000)

    def read() -> None:
        try:
            for line in source:
                lines.put(line)
        finally:
            lines.put(None)

    threading.Thread(target=read, name="blotter-feed-reader", daemon=True).start()

    def stream() -> Iterator[str]:
        while True:
            wait = feed.due_in()
            try:
                line = lines.get(timeout=wait) if wait is not None else lines.get()
            except queue.Empty:
                if feed.flush() and on_batch is not None:
                    on_batch(feed.report)
                continue
            if line is None:
                return
            yield line
            if feed.due_in() == 0.0 and feed.flush() and on_batch is not None:
                on_batch(feed.report)

    for number, item in parse_lines(stream()):
        feed.take(number, item)
    if feed.flush(everything=True) and on_batch is not None:
        on_batch(feed.report)
    rep = feed.report
    _LOG.info(
        "%s ended: %d lines, %d quotes, %d marks written in %d writes, %d bad lines",
        feed.source, rep.lines, rep.quotes, rep.points_written, rep.batches, rep.bad,
    )
    return rep
