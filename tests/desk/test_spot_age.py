"""How old each spot is, and when an intraday spot turns stale: the way a stopped feed shows.

Times are the invented XYZ book's (tests/desk/conftest.py): its last close is 16:00 New York on
2026-12-01 (``NOW``), so a spot marked after it is intraday.
"""

from __future__ import annotations

from datetime import timedelta
from pathlib import Path

import pytest

from blotter import store
from blotter.desk import session
from blotter.store import MarkPoint

from .conftest import NOW


@pytest.mark.parametrize(
    ("seconds", "words"),
    [(0, "0s"), (59.9, "59s"), (60, "1m"), (3599, "59m"), (3600, "1h"), (86_400 * 2.5, "2d"),
     (-3, "0s")],
)
def test_short_age(seconds: float, words: str) -> None:
    assert session.short_age(seconds) == words


def _spot_at(db: Path, price: float, minutes_after_close: float) -> None:
    with store.open_store(db) as st:
        st.add_mark_set(
            "intraday",
            [MarkPoint("spot", price, symbol="XYZ")],
            marked_at=NOW + timedelta(minutes=minutes_after_close),
        )


def test_an_intraday_spot_turns_stale_after_the_setting(xyz_db: Path) -> None:
    _spot_at(xyz_db, 101.0, 110)  # 17:50 New York, after the 16:00 close
    with store.open_store(xyz_db, read_only=True) as st:
        market = st.load_market()
    now = NOW + timedelta(hours=2)  # 18:00 New York: the spot is 10 minutes old
    (age,) = session.spot_ages(market, now, stale_s=300).values()
    assert age.seconds == pytest.approx(600) and age.stale and age.words() == "stale 10m"
    assert not session.spot_ages(market, now, stale_s=900)["XYZ"].stale
    assert not session.spot_ages(market, now, stale_s=0)["XYZ"].stale  # 0 = never
    assert session.stale_spot_words(session.spot_ages(market, now, 300)) == (
        "SPOT STALE: XYZ 10m"
    )


def test_a_spot_of_a_close_is_left_to_the_close_staleness(xyz_db: Path) -> None:
    """A spot carried by a close is as old as that close, whatever the setting: the marks'
    own staleness (``marks_age``) speaks for it."""
    _spot_at(xyz_db, 101.0, 30)
    with store.open_store(xyz_db) as st:
        st.commit_close(note="the day's close", marked_at=NOW + timedelta(minutes=40))
        market = st.load_market()
    ages = session.spot_ages(market, NOW + timedelta(hours=5), stale_s=60)
    assert ages["XYZ"].seconds == pytest.approx(4.5 * 3600) and not ages["XYZ"].stale
    assert session.stale_spot_words(ages) == ""


def test_the_store_gives_each_spot_its_own_observed_time(xyz_db: Path) -> None:
    _spot_at(xyz_db, 101.0, 5)
    with store.open_store(xyz_db, read_only=True) as st:
        market = st.load_market()
        (spot,) = [m for m in st.marks() if m.kind == "spot"]
    assert market.spots["XYZ"] == 101.0
    seen = market.spot_observed["XYZ"].astype(object)
    assert seen.replace(tzinfo=spot.marked_at.tzinfo) == spot.marked_at


def test_stale_spots_are_named_oldest_first_and_counted_past_three() -> None:
    ages = {s: session.SpotAge(sec, True) for s, sec in
            [("A", 400), ("B", 900), ("C", 700), ("D", 3000), ("E", 350)]}
    ages["F"] = session.SpotAge(10_000, False)
    assert session.stale_spot_words(ages) == "SPOT STALE: D 50m, B 15m, C 11m +2"
