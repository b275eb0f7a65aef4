"""``blotter`` with no command: the flags reach the app's settings and ``run``; a bad file or a
bad settings file is a clear error before the screen is taken over."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import pytest
from click.testing import CliRunner

from blotter.cli import main


class FakeApp:
    def __init__(self, db_path: str, settings: Any) -> None:
        self.db_path, self.settings = db_path, settings
        self.mouse: bool | None = None

    def run(self, mouse: bool = True) -> None:
        self.mouse = mouse


@pytest.fixture
def built(monkeypatch: pytest.MonkeyPatch, tmp_path: Path) -> list[FakeApp]:
    apps: list[FakeApp] = []

    def fake_make_app(db_path: str, settings: Any) -> FakeApp:
        apps.append(FakeApp(db_path, settings))
        return apps[-1]

    monkeypatch.setattr("blotter.ui.app.make_app", fake_make_app)
    monkeypatch.setattr("blotter.commands.app.has_terminal", lambda: True)  # as in a shell
    monkeypatch.setenv("XDG_CONFIG_HOME", str(tmp_path))
    monkeypatch.delenv("BLOTTER_CONFIG", raising=False)
    return apps


def test_flags_reach_the_app(built: list[FakeApp], demo_db: Path) -> None:
    result = CliRunner().invoke(
        main, ["--db", str(demo_db), "--read-only", "--no-mouse"], catch_exceptions=False
    )
    assert result.exit_code == 0, result.output
    (app,) = built
    assert app.db_path == str(demo_db)
    assert app.settings.read_only and app.settings.no_mouse
    assert app.mouse is False


def test_mouse_on_by_default(built: list[FakeApp], demo_db: Path) -> None:
    CliRunner().invoke(main, ["--db", str(demo_db)], catch_exceptions=False)
    assert built[0].mouse is True and not built[0].settings.read_only


def test_missing_book_is_a_clear_error(built: list[FakeApp], tmp_path: Path) -> None:
    result = CliRunner().invoke(main, ["--db", str(tmp_path / "none.db")])
    assert result.exit_code != 0 and "no book at" in result.output
    assert not built


def test_bad_settings_file_is_a_clear_error(
    built: list[FakeApp], demo_db: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    bad = tmp_path / "bad.toml"
    bad.write_text('[keys]\nquit = "ctrl+q"\n', encoding="utf-8")
    monkeypatch.setenv("BLOTTER_CONFIG", str(bad))
    result = CliRunner().invoke(main, ["--db", str(demo_db)])
    assert result.exit_code != 0 and "settings:" in result.output and "ctrl+q" in result.output
    assert not built


def test_an_old_schema_book_is_upgraded_before_the_app_starts(
    built: list[FakeApp], tmp_path: Path
) -> None:
    """Without --read-only the file is migrated before the app's workers open it (they open it
    read-only, and a read-only open refuses an older schema); with it, a clear refusal."""
    import sqlite3

    from blotter.store import APPLICATION_ID, SCHEMA_VERSION, open_store

    old = tmp_path / "old.db"
    v1 = Path(__file__).parents[1] / "store" / "data" / "schema_v1.sql"
    conn = sqlite3.connect(old)
    conn.execute("PRAGMA journal_mode = WAL")
    conn.executescript(v1.read_text(encoding="utf-8"))  # a book of the first schema
    conn.execute(f"PRAGMA application_id = {APPLICATION_ID}")
    conn.execute("PRAGMA user_version = 1")
    conn.execute("INSERT INTO book (name) VALUES ('main')")
    conn.commit()
    conn.close()
    refused = CliRunner().invoke(main, ["--db", str(old), "--read-only"])
    assert refused.exit_code != 0 and "older schema (1)" in refused.output and not built
    result = CliRunner().invoke(main, ["--db", str(old)], catch_exceptions=False)
    assert result.exit_code == 0, result.output
    assert len(built) == 1
    with open_store(old, read_only=True) as s:
        assert s.schema_version() == SCHEMA_VERSION
