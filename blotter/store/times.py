"""Instants and dates as the store keeps them, and the store's clock.

Instants are UTC text with microseconds (``YYYY-MM-DDTHH:MM:SS.ffffffZ``), so text order is time
order; dates are ISO ``YYYY-MM-DD``. The clock a store reads for "now" (booking, cancel and mark
times, the business date of a close written now) is the system clock unless a ``clock`` is given
to ``open_store``/``create_store``, or a whole process sets one with ``use_clock``.
"""

from __future__ import annotations

import re
import threading
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from datetime import UTC, date, datetime, time
from zoneinfo import ZoneInfo

from blotter import limits
from blotter.store.errors import StoreError

Clock = Callable[[], datetime]
"""A clock: a function returning the current instant as an aware ``datetime``."""

EPOCH = datetime(1970, 1, 1, tzinfo=UTC)
"""The instant a book with no marks reports as its marks' time."""

_TS_FORMAT = "%Y-%m-%dT%H:%M:%S.%fZ"
_DATE = re.compile(r"\d{4}-\d{2}-\d{2}")


def system_clock() -> datetime:
    """The machine's clock, in UTC."""
    return datetime.now(UTC)


_clocks: list[Clock] = [system_clock]
"""The process's clock stack: ``use_clock`` pushes one for its block; the last one is in force."""

_clocks_lock = threading.Lock()


def now() -> datetime:
    """The current instant by the process's clock (``use_clock``; the system clock by default)."""
    return _clocks[-1]()


@contextmanager
def use_clock(clock: Clock) -> Iterator[None]:
    """Within the block, every store of this process without a ``clock`` of its own (in any
    thread) reads ``clock`` for the current instant.

    For tests and tools that fix the time of a whole run, such as commands run in one process;
    the previous clock is back when the block ends, and blocks nest.
    """
    with _clocks_lock:
        _clocks.append(clock)
    try:
        yield
    finally:
        with _clocks_lock:
            _clocks.remove(clock)


def timestamp_text(t: datetime) -> str:
    """The store's text for an instant (UTC, microseconds, Z); a naive time is refused."""
    if t.tzinfo is None:
        raise StoreError(f"time {t.isoformat()} has no time zone: give Z for UTC or an offset")
    return t.astimezone(UTC).strftime(_TS_FORMAT)


def from_timestamp(text: str) -> datetime:
    """The aware UTC instant of the store's text for it (``timestamp_text``)."""
    return datetime.strptime(text, _TS_FORMAT).replace(tzinfo=UTC)


def parse_time(value: datetime | str) -> datetime:
    """An aware UTC datetime from ISO-8601 text with ``Z`` or an offset (naive time refused)."""
    if isinstance(value, datetime):
        t = value
    else:
        text = value.strip()
        if text[-1:] in ("Z", "z"):
            text = text[:-1] + "+00:00"
        try:
            t = datetime.fromisoformat(text)
        except ValueError:
            raise StoreError(
                f"{value!r} is not an ISO-8601 time like 2026-12-01T15:30:00Z"
            ) from None
    if t.tzinfo is None:
        raise StoreError(f"time {value!s} has no time zone: add Z for UTC or an offset like -05:00")
    try:
        limits.check_time(t, "time")
    except limits.LimitError as exc:
        raise StoreError(str(exc)) from None
    return t.astimezone(UTC)


def parse_date(value: date | str, field: str = "date") -> date:
    """A date from ISO text ``YYYY-MM-DD``, within ``limits`` (``field`` names it if not)."""
    if isinstance(value, datetime):
        raise StoreError(f"expected a date, got the time {value.isoformat()}")
    if isinstance(value, date):
        d = value
    else:
        try:
            if not _DATE.fullmatch(value.strip()):
                raise ValueError
            d = date.fromisoformat(value.strip())
        except ValueError:
            raise StoreError(f"{value!r} is not an ISO date like 2027-03-19") from None
    try:
        return limits.check_date(d, field)
    except limits.LimitError as exc:
        raise StoreError(str(exc)) from None


def is_iso_date(text: str) -> bool:
    """Whether ``text`` is written as an ISO date ``YYYY-MM-DD`` (not whether it is a valid one)."""
    return _DATE.fullmatch(text) is not None


def business_date(t: datetime, tz: ZoneInfo) -> date:
    """The business date a close at instant ``t`` closes: its date in the desk's time zone ``tz``.

    A close at 16:30 New York on 2026-12-03 closes 2026-12-03, though it is 21:30 UTC.
    """
    return t.astimezone(tz).date()


def cutoff_utc(expiry: str, cutoff: str, tz_name: str) -> datetime:
    """The UTC instant of an expiry date's cut-off: local ``HH:MM`` ``cutoff`` in ``tz_name``."""
    hh, mm = (int(x) for x in cutoff.split(":"))
    local = datetime.combine(date.fromisoformat(expiry), time(hh, mm), tzinfo=ZoneInfo(tz_name))
    return local.astimezone(UTC)
