"""Year fractions, exchange business days and the day roll.

Holiday facts are common practice (the NYSE is closed on Thanksgiving, on Christmas Day and on Good
Friday; when a holiday falls on a Saturday the exchange does not close the Friday before for New
Year's Day). ACT/365F is the definition: days between the dates over 365, whatever the year.
"""

from __future__ import annotations

from datetime import UTC, date, datetime

import numpy as np
import pytest

from blotter import calendar as cal


def test_act365f_counts_calendar_seconds_over_365_days() -> None:
    t0 = np.datetime64("2027-12-31T21:00:00", "s")
    # 2028 is a leap year: 366 days is 366/365 under ACT/365F.
    assert cal.year_fraction(t0, np.datetime64("2028-12-31T21:00:00", "s")) == pytest.approx(
        366 / 365, abs=1e-15
    )
    assert cal.year_fraction(t0, t0 + np.timedelta64(12 * 3600, "s")) == pytest.approx(
        0.5 / 365, abs=1e-15
    )
    assert cal.year_fraction(t0 + np.timedelta64(86400, "s"), t0) == pytest.approx(
        -1 / 365, abs=1e-15
    )


def test_year_fraction_broadcasts_and_maps_nat_to_nan() -> None:
    t0 = np.datetime64("2026-12-04T20:00:00", "s")
    exp = np.array(["2026-12-11T20:00:00", "NaT"], dtype="datetime64[s]")
    out = cal.year_fraction(t0, exp)
    assert out[0] == pytest.approx(7 / 365) and np.isnan(out[1])


def test_instants_read_naive_times_in_the_desk_zone() -> None:
    # 15:00 in New York in December is 20:00 UTC (EST, UTC-5); in July 19:00 UTC (EDT).
    assert cal.to_instant("2026-12-04T15:00") == np.datetime64("2026-12-04T20:00:00", "s")
    assert cal.to_instant("2026-07-02T15:00") == np.datetime64("2026-07-02T19:00:00", "s")
    assert cal.to_instant("2026-12-04T15:00Z") == np.datetime64("2026-12-04T15:00:00", "s")
    assert cal.to_instant(datetime(2026, 12, 4, 15, tzinfo=UTC)) == np.datetime64(
        "2026-12-04T15:00:00"
    )
    with pytest.raises(ValueError, match="ISO-8601"):
        cal.to_instant("next tuesday")


@pytest.mark.parametrize(
    ("day", "open_"),
    [
        ("2026-11-26", False),  # Thanksgiving
        ("2026-12-25", False),  # Christmas Day
        ("2026-04-03", False),  # Good Friday
        ("2026-12-05", False),  # Saturday
        ("2026-12-04", True),  # an ordinary Friday
        ("2026-11-27", True),  # the day after Thanksgiving trades (early close)
    ],
)
def test_nyse_business_days(day: str, open_: bool) -> None:
    assert bool(cal.is_business_day(np.datetime64(day), "NYSE")) is open_


@pytest.mark.parametrize(
    ("day", "why"),
    [
        ("2026-12-25", "Christmas Day, an exchange holiday"),
        ("2027-03-26", "Good Friday, an exchange holiday"),
        ("2027-01-18", "Martin Luther King Jr. Day, an exchange holiday"),
        ("2026-12-05", "a Saturday"),
        ("2026-12-04", ""),
    ],
)
def test_why_the_exchange_is_shut_on_a_day(day: str, why: str) -> None:
    assert cal.closed_because(date.fromisoformat(day), "NYSE") == why


def test_add_business_days_skips_weekends_and_holidays() -> None:
    d = cal.add_business_days(np.datetime64("2026-12-24"), 1, "NYSE")
    assert d == np.datetime64("2026-12-28")  # Christmas Friday, then the weekend
    assert cal.add_business_days(np.datetime64("2026-12-05"), 1, "NYSE") == np.datetime64(
        "2026-12-07"
    )
    assert cal.add_business_days(np.datetime64("2026-12-07"), -1, "NYSE") == np.datetime64(
        "2026-12-04"
    )


def test_unknown_exchange_is_refused_by_name() -> None:
    with pytest.raises(ValueError, match="NOPE"):
        cal.business_calendar("NOPE")


def test_friday_rolls_over_the_weekend_at_the_same_local_time() -> None:
    fri = cal.to_instant("2026-12-04T15:00")
    mon = cal.roll_business_days(fri, 1, "NYSE")
    assert mon == cal.to_instant("2026-12-07T15:00")
    assert cal.year_fraction(fri, mon) == pytest.approx(3 / 365)


def test_roll_before_good_friday_takes_four_days() -> None:
    thu = cal.to_instant("2026-04-02T15:00")
    assert cal.roll_business_days(thu, 1, "NYSE") == cal.to_instant("2026-04-06T15:00")


def test_roll_keeps_local_clock_time_across_daylight_saving() -> None:
    # US clocks go back on Sunday 2026-11-01: the Friday-to-Monday roll holds 72 h + 1 h.
    fri = cal.to_instant("2026-10-30T15:00")
    mon = cal.roll_business_days(fri, 1, "NYSE")
    assert (mon - fri) == np.timedelta64(73 * 3600, "s")


def test_calendar_day_roll_allows_fractions() -> None:
    t = np.datetime64("2026-12-04T20:00:00", "s")
    assert cal.roll_calendar_days(t, 0.5) == np.datetime64("2026-12-05T08:00:00", "s")
