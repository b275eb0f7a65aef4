"""Fixtures shared by every test directory: a fresh copy of the demo book, and an empty book.

``demo_db`` is built once per test session by ``blotter.demo.build_demo`` (the same contents as
the shipped ``demo.db``; ``tests/store/test_store_demo.py`` checks that) and copied for each test,
so a test may write to its copy freely. ``tmp_book`` is an empty book (schema only).
"""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

from blotter.demo import build_demo
from blotter.store import FILE_MODE, create_store


@pytest.fixture(autouse=True)
def _no_user_settings(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """Every test starts from the default settings: no settings file, no desk zone variable."""
    monkeypatch.setenv("BLOTTER_CONFIG", str(tmp_path / "no-settings.toml"))
    for name in ("BLOTTER_TZ", "BLOTTER_DESK_TZ"):
        monkeypatch.delenv(name, raising=False)


@pytest.fixture(scope="session")
def demo_master(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The demo book built once for the session; never write to it (use ``demo_db``)."""
    path = tmp_path_factory.mktemp("demo-master") / "demo.db"
    build_demo(path)
    path.chmod(0o440)
    return path


@pytest.fixture
def demo_db(demo_master: Path, tmp_path: Path) -> Path:
    """Path of a fresh, writable copy of the demo book in this test's temporary directory."""
    path = tmp_path / "demo.db"
    shutil.copyfile(demo_master, path)
    path.chmod(FILE_MODE)
    return path


@pytest.fixture
def tmp_book(tmp_path: Path) -> Path:
    """Path of a new, empty book (schema applied, no underlyings, trades or marks)."""
    path = tmp_path / "book.db"
    create_store(path).close()
    return path
