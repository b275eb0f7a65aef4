"""Valuation time, expiry cut-offs, ACT/365F year fractions, business days and the day roll.

Instants are UTC ``numpy.datetime64[s]`` values (the store's expiries are the same); dates in the
desk's time zone decide business days. The desk's zone is a setting (``blotter.config``): callers
pass it in as ``tz``; nothing here reads the environment. Business days come from NumPy's busday
functions with the exchange holidays of the ``holidays`` package
(``holidays.financial_holidays("NYSE")`` and the other exchange calendars it ships), so there is
no hand-written holiday table here.
"""

from __future__ import annotations

from datetime import UTC, date, datetime, time, timedelta
from functools import lru_cache
from typing import cast
from zoneinfo import ZoneInfo

import numpy as np

from blotter import limits

DEFAULT_DESK_TZ = "America/New_York"
"""Desk time zone when the caller passes none (the default of the ``desk_tz`` setting)."""

DEFAULT_CALENDAR = "NYSE"
"""Exchange holiday calendar used when an underlying names none."""

DEFAULT_CUTOFF = time(16, 0)
"""Default expiry cut-off, local exchange time (US equity options stop trading at 16:00 ET)."""

DEFAULT_EXCHANGE_TZ = "America/New_York"
"""Zone of an exchange's cut-off when none is named (an underlying's default ``--zone``)."""

SECONDS_PER_YEAR = 365.0 * 86400.0
"""ACT/365F: a year is 365 days of 86 400 s, whatever the calendar year holds."""

_HOLIDAY_YEARS = range(1990, 2101)
"""Years whose exchange holidays are loaded into a business-day calendar."""


def desk_tz(name: str | None = None) -> ZoneInfo:
    """The zone ``name`` (the resolved ``desk_tz`` setting), else ``DEFAULT_DESK_TZ``."""
    return ZoneInfo(name or DEFAULT_DESK_TZ)


def to_instant(t: datetime | np.datetime64 | str, tz: ZoneInfo | None = None) -> np.datetime64:
    """One UTC instant as ``datetime64[s]``; naive datetimes and strings are local time in
    ``tz`` (the desk's zone; ``desk_tz()`` when None).

    Strings are ISO-8601 (``2026-12-01T15:30``, ``2026-12-01``, or with an offset / ``Z``).
    A time outside ``limits`` (1900 to 2200) is a ``ValueError`` saying so.
    """
    if isinstance(t, np.datetime64):
        return cast(np.datetime64, np.asarray(t).astype("datetime64[s]")[()])
    if isinstance(t, str):
        text = t.strip()
        if text.endswith(("Z", "z")):
            text = text[:-1] + "+00:00"
        try:
            t = datetime.fromisoformat(text)
        except ValueError:
            raise ValueError(f"not an ISO-8601 time: {t!r}") from None
    if isinstance(t, date) and not isinstance(t, datetime):
        t = datetime.combine(t, time(0, 0))
    limits.check_time(t)
    if t.tzinfo is None:
        t = t.replace(tzinfo=tz or desk_tz())
    utc = t.astimezone(UTC).replace(tzinfo=None)
    return np.datetime64(utc, "s")


def to_datetime(t: np.datetime64, tz: ZoneInfo | None = None) -> datetime:
    """An aware ``datetime`` for the UTC instant ``t``, in ``tz`` (UTC when None)."""
    seconds = int(np.asarray(t, dtype="datetime64[s]").astype(np.int64))
    out = datetime(1970, 1, 1, tzinfo=UTC) + timedelta(seconds=seconds)
    return out.astimezone(tz) if tz is not None else out


def iso(t: np.datetime64, tz: ZoneInfo | None = None) -> str:
    """ISO-8601 text of the instant ``t`` with its offset (UTC unless ``tz`` is given)."""
    return to_datetime(t, tz).isoformat()


def now() -> np.datetime64:
    """The current instant, UTC ``datetime64[s]``."""
    return to_instant(datetime.now(UTC))


def valuation_time(
    t: datetime | np.datetime64 | str | None = None, tz: ZoneInfo | None = None
) -> np.datetime64:
    """The valuation instant: ``t`` read as in ``to_instant`` (naive in ``tz``), or now when
    None."""
    return now() if t is None else to_instant(t, tz)


def year_fraction(t0: np.datetime64 | np.ndarray, t1: np.datetime64 | np.ndarray) -> np.ndarray:
    """ACT/365F year fraction from ``t0`` to ``t1`` on calendar time, float64, broadcast shapes.

    Negative when ``t1`` is before ``t0``; NaT gives NaN.
    """
    a = np.asarray(t0, dtype="datetime64[s]")
    b = np.asarray(t1, dtype="datetime64[s]")
    seconds = (b - a).astype("timedelta64[s]").astype(np.float64)
    seconds = np.where(np.isnat(a) | np.isnat(b), np.nan, seconds)
    return seconds / SECONDS_PER_YEAR


def local_date(t: np.datetime64, tz: ZoneInfo | None = None) -> np.datetime64:
    """The calendar date (``datetime64[D]``) of instant ``t`` in ``tz`` (``desk_tz()`` if None)."""
    return np.datetime64(to_datetime(t, tz or desk_tz()).date(), "D")


def local_dates(instants: np.ndarray, tz: ZoneInfo) -> np.ndarray:
    """The calendar dates (``datetime64[D]``, shape of ``instants``) of UTC instants in ``tz``;
    NaT stays NaT."""
    flat = np.asarray(instants, dtype="datetime64[s]").reshape(-1)
    uniq, inverse = np.unique(flat, return_inverse=True)
    days = np.array(
        [np.datetime64("NaT", "D") if np.isnat(u) else local_date(u, tz) for u in uniq],
        dtype="datetime64[D]",
    )
    return days[inverse.reshape(-1)].reshape(np.shape(instants))


@lru_cache(maxsize=32)
def business_calendar(name: str = DEFAULT_CALENDAR) -> np.busdaycalendar:
    """NumPy business-day calendar for an exchange: Monday–Friday less its holidays.

    ``name`` is a ``holidays.financial_holidays`` market code ("NYSE", "XNYS", "CME", "LSE", ...);
    ValueError naming it when the package does not know it.
    """
    import holidays

    try:
        days = holidays.financial_holidays(name, years=_HOLIDAY_YEARS)
    except (NotImplementedError, KeyError, AttributeError):
        raise ValueError(f"unknown exchange calendar {name!r}") from None
    dates = np.array(sorted(days), dtype="datetime64[D]")
    return np.busdaycalendar(weekmask="1111100", holidays=dates)


def is_business_day(
    d: np.datetime64 | np.ndarray | date, calendar: str = DEFAULT_CALENDAR
) -> np.ndarray:
    """True where the date ``d`` is a trading day of ``calendar``; shape of ``d``."""
    return np.is_busday(np.asarray(d, dtype="datetime64[D]"), busdaycal=business_calendar(calendar))


def closed_because(d: date, calendar: str = DEFAULT_CALENDAR) -> str:
    """Why ``calendar``'s exchange is shut on ``d`` ("a Saturday", "Good Friday, an exchange
    holiday"), or "" on a trading day."""
    if d.weekday() >= 5:
        return f"a {d:%A}"
    if bool(is_business_day(d, calendar)):
        return ""
    import holidays

    name = holidays.financial_holidays(calendar, years=d.year).get(d) or "a holiday"
    return f"{name}, an exchange holiday"


def add_business_days(
    d: np.datetime64 | np.ndarray | date, n: int | np.ndarray, calendar: str = DEFAULT_CALENDAR
) -> np.ndarray:
    """The date ``n`` trading days after ``d`` (before it for negative ``n``).

    A ``d`` that is not itself a trading day counts from the trading day before it, so one
    business day after a Saturday is the Monday.
    """
    days = np.asarray(d, dtype="datetime64[D]")
    return np.busday_offset(
        days,
        n,
        roll="backward" if np.all(np.asarray(n) >= 0) else "forward",
        busdaycal=business_calendar(calendar),
    )


def roll_calendar_days(t: np.datetime64, days: float) -> np.datetime64:
    """The instant ``days`` calendar days (24 h each, fractions allowed) after ``t``."""
    base = np.asarray(t, dtype="datetime64[s]")
    return cast(np.datetime64, (base + np.timedelta64(int(round(days * 86400.0)), "s"))[()])


def roll_business_days(
    t: np.datetime64, n: int, calendar: str = DEFAULT_CALENDAR, tz: ZoneInfo | None = None
) -> np.datetime64:
    """The instant at the same local time of day in ``tz`` (the desk's zone) ``n`` trading days
    after ``t``.

    A Friday afternoon rolled one business day lands on Monday afternoon (three calendar days);
    the local clock time is kept across a daylight-saving change.
    """
    zone = tz or desk_tz()
    local = to_datetime(t, zone)
    target = add_business_days(np.datetime64(local.date(), "D"), n, calendar)
    target_date = date.fromisoformat(str(target))
    rolled = datetime.combine(target_date, local.time().replace(tzinfo=None), tzinfo=zone)
    return to_instant(rolled)
