"""A session: the book and marks read once, the trial trades layered on, valued at one instant.

``read`` takes the book, the marks in force and the file's data version from a store (or any
``BookSource``); ``value`` layers the trials and values it all at the valuation time
(``risk.value_book``). The app's load worker and the report commands both go through these two,
so a report and the app's Book pane value the same book alike. Also here: the calendar days of a
move's roll, how old the marks are, and the words for positions left out of a valuation.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta
from typing import TYPE_CHECKING, Protocol
from zoneinfo import ZoneInfo

import numpy as np

from blotter import calendar as cal
from blotter import risk
from blotter.desk.trials import TrialTrade, trial_book

if TYPE_CHECKING:
    from blotter.book import Book
    from blotter.engine import BoundaryCache
    from blotter.market import Market
    from blotter.scenario import Move


class BookSource(Protocol):
    """Where a session reads from: a ``store.Store`` (anything with these three reads)."""

    def load_book(self, book: str | None = None) -> Book: ...

    def load_market(self) -> Market: ...

    def data_version(self) -> int: ...


@dataclass(frozen=True, repr=False)
class Loaded:
    """The live book, the marks in force and the file's data version, as read together."""

    book: Book
    market: Market
    data_version: int

    def __repr__(self) -> str:  # short: the arrays inside are large
        return f"Loaded(positions={len(self.book)}, data_version={self.data_version})"


def read(source: BookSource, book: str | None = None) -> Loaded:
    """The book (``book`` alone, or every book when None), the marks in force and the data
    version of ``source``."""
    return Loaded(source.load_book(book), source.load_market(), int(source.data_version()))


@dataclass(frozen=True, repr=False)
class Session:
    """One valued load: the valuation (trials layered on) and where its inputs came from."""

    valuation: risk.BookValuation
    data_version: int
    valuation_time: datetime  # aware, UTC

    @property
    def book_name(self) -> str:
        return self.valuation.book.name

    @property
    def marks_as_of(self) -> datetime:
        """When the marks in force were marked, aware (UTC when the market left it naive)."""
        t = self.valuation.market.marks_as_of
        return t.replace(tzinfo=UTC) if t.tzinfo is None else t

    @property
    def mark_set_id(self) -> int | None:
        return self.valuation.market.mark_set_id

    @property
    def mark_kind(self) -> str:
        return self.valuation.market.mark_kind

    def __repr__(self) -> str:  # short: the arrays inside are large
        return f"Session(positions={len(self.valuation)}, data_version={self.data_version})"


def value(
    loaded: Loaded,
    at: datetime | np.datetime64,
    tz: ZoneInfo,
    *,
    trials: Sequence[TrialTrade] = (),
    vega_unit: str = "pt",
    boundaries: BoundaryCache | None = None,
) -> Session:
    """Value ``loaded`` with ``trials`` layered on at ``at`` in the desk zone ``tz``.

    ``at`` is an aware datetime (valued to the whole second) or a UTC ``datetime64``.
    ``boundaries`` are an earlier valuation's American boundaries, reused where the inputs
    are the same (they are keyed by exact inputs, so a mark that changed only misses).
    """
    t: np.datetime64
    if isinstance(at, datetime):
        t = np.datetime64(at.astimezone(UTC).replace(tzinfo=None), "s")
        when = at
    else:
        t, when = at, cal.to_datetime(at)
    book = trial_book(loaded.book, trials)
    valuation = risk.value_book(
        book, loaded.market, t, vega_unit=vega_unit, tz=tz, boundaries=boundaries
    )
    return Session(valuation, loaded.data_version, when)


def roll_days(valuation: risk.BookValuation, move: Move | None) -> float:
    """Calendar days of ``move``'s day roll from the valuation time (business days through
    ``scenario.roll_time``); 0 without a move."""
    if move is None:
        return 0.0
    if not move.bdays:
        return float(move.days)
    from blotter import scenario

    t0 = valuation.valuation_time
    t1 = scenario.roll_time(valuation, move)
    return float((t1 - t0) / np.timedelta64(1, "s")) / 86400.0


def age_words(age: timedelta) -> str:
    """How old something is, in words: ``"35 min"``, ``"3 h 10 min"``, ``"2 days 4 h"``."""
    seconds = int(age.total_seconds())
    if seconds < 0:
        return "dated after the valuation time:"
    minutes, _ = divmod(seconds, 60)
    hours, minutes = divmod(minutes, 60)
    days, hours = divmod(hours, 24)
    if days:
        return f"{days} day{'s' if days != 1 else ''} {hours} h"
    if hours:
        return f"{hours} h {minutes} min"
    return f"{minutes} min"


@dataclass(frozen=True)
class MarksAge:
    """How old the marks are, in words, and whether they predate the last business day's close."""

    words: str
    stale: bool
    last_close: datetime | None


def marks_age(
    marks_as_of: datetime, now: datetime, tz: ZoneInfo, calendar_name: str = "NYSE"
) -> MarksAge:
    """Age of the marks at ``now``; stale when older than the last business-day close."""
    age = now - marks_as_of
    local_now = now.astimezone(tz)
    day: np.datetime64 = np.datetime64(local_now.date(), "D")
    close_today = datetime.combine(local_now.date(), cal.DEFAULT_CUTOFF, tzinfo=tz)
    if not (bool(cal.is_business_day(day, calendar_name)) and local_now >= close_today):
        day = np.datetime64(str(cal.add_business_days(day, -1, calendar_name)), "D")
    last_close = datetime.combine(day.astype(object), cal.DEFAULT_CUTOFF, tzinfo=tz)
    stale = marks_as_of < last_close - timedelta(minutes=1)
    return MarksAge(words=age_words(age), stale=bool(stale), last_close=last_close)


def missing_by_name(unvalued: Sequence[risk.UnvaluedPosition], most: int = 8) -> str:
    """The marks the left-out positions lack, by symbol or currency: ``CCC: spot, vol; EUR: rate``
    (at most ``most`` names, then how many more)."""
    kinds: dict[str, list[str]] = {}
    for u in unvalued:
        for m in u.missing:
            seen = kinds.setdefault(m.name, [])
            if m.kind not in seen:
                seen.append(m.kind)
    parts = [f"{name}: {', '.join(k)}" for name, k in kinds.items()]
    more = f"; {len(parts) - most} more" if len(parts) > most else ""
    return "; ".join(parts[:most]) + more


def unvalued_count(unvalued: Sequence[risk.UnvaluedPosition]) -> int:
    """How many positions (contracts) a valuation left out."""
    return len({u.contract_id for u in unvalued})


def unvalued_words(unvalued: Sequence[risk.UnvaluedPosition]) -> str:
    """The positions a valuation left out, in a few words: ``2 positions not valued (CCC: spot,
    vol; EUR: rate)``; empty when there are none."""
    if not unvalued:
        return ""
    n = unvalued_count(unvalued)
    return f"{n} position{'' if n == 1 else 's'} not valued ({missing_by_name(unvalued)})"
