"""History through the commands: time options read at the store's precision (microseconds)."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from cli_helpers import run


@pytest.fixture(autouse=True)
def _own_settings(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path / "xdg"))
    monkeypatch.delenv("BLOTTER_DB", raising=False)
    monkeypatch.setenv("BLOTTER_TZ", "America/New_York")


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
