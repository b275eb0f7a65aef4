"""History through the commands: one close per business date and its correction, cancels of a
trade booked on a fast clock, and time options read at the store's precision (microseconds)."""

from __future__ import annotations

import json
from datetime import UTC, datetime, timedelta
from pathlib import Path
from zoneinfo import ZoneInfo

import pytest
from cli_helpers import run

import blotter.store as st


@pytest.fixture(autouse=True)
def _own_settings(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path / "xdg"))
    monkeypatch.delenv("BLOTTER_DB", raising=False)
    monkeypatch.setenv("BLOTTER_TZ", "America/New_York")


def test_a_second_close_of_the_day_is_refused_and_corrected_by_date(demo_db: Path) -> None:
    db = str(demo_db)
    first = json.loads(run("mark", "close", "--json", "--db", db).stdout)
    day = first["business_date"]
    today = st.business_date(datetime.now(UTC), ZoneInfo("America/New_York")).isoformat()
    assert day == today and first["corrects"] is None
    again = run("mark", "close", "--db", db, code=1)
    assert f"the close of {day} is already written" in again.stderr
    assert f"--corrects {first['mark_set_id']}" in again.stderr and "Traceback" not in again.output
    run("mark", "spot", "DEMOA", "181.5", "--db", db)
    fixed = json.loads(run("mark", "close", "--corrects", day, "--json", "--db", db).stdout)
    assert fixed["corrects"] == first["mark_set_id"] and fixed["business_date"] == day
    text = run("mark", "close", "--corrects", str(first["mark_set_id"]), "--db", db, code=1)
    assert f"already corrected by set {fixed['mark_set_id']}" in text.stderr
    sets = json.loads(run("mark", "list", "--sets", "--json", "--db", db).stdout)
    assert [s["business_date"] for s in sets if s["kind"] == "close"][-2:] == [day, day]
    explained = json.loads(run("explain", "--json", "--db", db).stdout)
    assert explained["to"]["id"] == fixed["mark_set_id"] and explained["to"]["corrects"] == (
        first["mark_set_id"]
    )
    assert explained["from"]["business_date"] == "2026-11-30"  # the demo's last close


def test_a_trade_booked_on_a_fast_clock_is_cancelled_from_the_command_line(
    demo_db: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    fast = st.open_store(demo_db, clock=lambda: datetime.now(UTC) + timedelta(hours=1))
    with fast as s:
        tid = s.add_trade("equity-vol", "DEMOA", 100, 180.0)
    monkeypatch.setenv("BLOTTER_TZ", "America/New_York")
    db = str(demo_db)
    amend = run("trade", "amend", str(tid), "--price", "181", "--reason", "px", "--db", db, code=1)
    assert "one of the two clocks is wrong" in amend.stderr
    out = run("trade", "cancel", str(tid), "--reason", "fat finger", "--db", str(demo_db))
    assert "Traceback" not in out.output
    rows = json.loads(run("trade", "list", "--all", "--json", "--db", str(demo_db)).stdout)
    assert next(r for r in rows if r["trade_id"] == tid)["state"] == "cancelled"


def test_time_options_without_a_zone_keep_fractions_of_a_second(demo_db: Path) -> None:
    """A trade dealt at 10:00:00.3 New York: --since/--until at 10:00:00.2 and 10:00:00.4 (desk
    time, no zone) put it on the right side of each."""
    db = str(demo_db)
    run(
        "trade", "add", "DEMOA", "--qty", "100", "--price", "180", "--book", "equity-vol",
        "--time", "2026-12-01T15:00:00.300Z", "--db", db,
    )  # fmt: skip

    def listed(*window: str) -> bool:
        rows = json.loads(run("trade", "list", *window, "--json", "--db", db).stdout)
        return any(r["trade_time"] == "2026-12-01T15:00:00.300000Z" for r in rows)

    assert listed("--since", "2026-12-01T10:00:00.2")
    assert not listed("--since", "2026-12-01T10:00:00.4")
    assert not listed("--until", "2026-12-01T10:00:00.2")
    assert listed("--until", "2026-12-01T10:00:00.4")


def test_a_close_is_dated_in_the_books_zone_whatever_the_settings(
    demo_db: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    """The demo book was made in New York time; a terminal whose settings file names another desk
    zone (Kiritimati, UTC+14, a day ahead of New York most of the day) still dates its close in
    the book's zone, as every other terminal does."""
    monkeypatch.delenv("BLOTTER_TZ", raising=False)
    monkeypatch.delenv("BLOTTER_DESK_TZ", raising=False)
    config = tmp_path / "config.toml"
    config.write_text('desk_tz = "Pacific/Kiritimati"\n')
    monkeypatch.setenv("BLOTTER_CONFIG", str(config))
    written = json.loads(run("mark", "close", "--json", "--db", str(demo_db)).stdout)
    book_zone = ZoneInfo("America/New_York")
    assert written["business_date"] == st.business_date(datetime.now(UTC), book_zone).isoformat()
