"""Fixtures shared by every test directory: a fresh copy of the demo book, and an empty book.

``demo_db`` is built once per test session by ``blotter.store.demo.build_demo`` (the same
contents as the shipped ``demo.db``; ``tests/store/test_store_demo.py`` checks that) and copied
for each test, so a test may write to its copy freely. ``tmp_book`` is an empty book (schema only).
``as_other_user`` runs ``blotter`` where file permissions apply (see its docstring). ``pg_server``
is a private PostgreSQL server for the session and ``pg_url`` a new database on it.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import tempfile
from collections.abc import Callable, Iterator
from pathlib import Path

import pytest
from pg_server import PgServer, running_server, why_absent

from blotter.store import FILE_MODE, create_store
from blotter.store.demo import build_demo


@pytest.fixture(autouse=True)
def _no_user_settings(
    monkeypatch: pytest.MonkeyPatch, tmp_path_factory: pytest.TempPathFactory
) -> None:
    """Every test starts from the default settings: no settings file, no desk zone variable, no
    ``BLOTTER_READ_ONLY`` of the user running the tests (the commands read the read-only
    setting as the app does), and a data folder of its own (the app keeps its what-if history
    there)."""
    monkeypatch.setenv("XDG_CONFIG_HOME", str(tmp_path_factory.getbasetemp() / "no-settings"))
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path_factory.mktemp("data-home")))
    for name in ("BLOTTER_CONFIG", "BLOTTER_TZ", "BLOTTER_DESK_TZ", "BLOTTER_READ_ONLY"):
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



OTHER_UID = 65534
"""The user ``as_other_user`` becomes when the tests run as root (``nobody`` on Debian)."""

RunAs = Callable[..., "subprocess.CompletedProcess[str]"]


@pytest.fixture
def shared_dir() -> Iterator[Path]:
    """A new folder in the system's temporary folder that every user may enter (mode 0o755),
    since pytest's own temporary folders are private to the user running the tests."""
    path = Path(tempfile.mkdtemp(prefix="blotter-perm-"))
    path.chmod(0o755)
    yield path
    for p in [path, *path.rglob("*")]:
        if p.is_dir() and not p.is_symlink():
            p.chmod(0o755)
    shutil.rmtree(path)


@pytest.fixture
def as_other_user(shared_dir: Path) -> RunAs:
    """Run ``python ARGS`` (e.g. ``-m blotter ...``) in a new process under a user whom file
    permissions bind.

    Root's permission bits never stop it, so as root the command runs as ``nobody`` (through
    util-linux ``setpriv``); as any other user it runs as that user, whom the bits do bind. The
    test is skipped when neither is possible. HOME and the XDG folders point into
    ``shared_dir``, so no settings file or demo copy of the user's is read or written.
    """
    prefix: list[str] = []
    if os.geteuid() == 0:
        setpriv = shutil.which("setpriv")
        if setpriv is None:
            pytest.skip("running as root and setpriv is not installed")
        prefix = [setpriv, f"--reuid={OTHER_UID}", f"--regid={OTHER_UID}", "--clear-groups"]
        # The probe runs where the command will run (not in the checkout, whose ``blotter/``
        # folder the current directory would put on the path): the other user must reach the
        # installed package itself, e.g. a virtual environment inside a private folder it cannot.
        probe = subprocess.run(
            [*prefix, sys.executable, "-c", "import blotter"],
            cwd=shared_dir,
            capture_output=True,
            check=False,
        )
        if probe.returncode != 0:
            pytest.skip(f"uid {OTHER_UID} cannot import blotter from {sys.executable}")
    home = shared_dir / "home"
    home.mkdir(mode=0o777)
    home.chmod(0o777)
    env = {k: v for k, v in os.environ.items() if not k.startswith("BLOTTER_")}
    env |= {"HOME": str(home), "XDG_CONFIG_HOME": str(home), "XDG_DATA_HOME": str(home)}

    def run(*args: str, timeout: float = 60) -> subprocess.CompletedProcess[str]:
        return subprocess.run(
            [*prefix, sys.executable, *args],
            capture_output=True,
            text=True,
            env=env,
            cwd=shared_dir,
            timeout=timeout,
            check=False,
        )

    return run


@pytest.fixture(scope="session")
def pg_server() -> Iterator[PgServer]:
    """A private PostgreSQL server for the session (``tests/pg_server.py``), on a Unix socket in
    a temporary folder; skipped, saying why, where PostgreSQL or psycopg is absent."""
    why = why_absent()
    if why is not None:
        pytest.skip(why)
    with running_server() as server:
        yield server


@pytest.fixture
def pg_url(pg_server: PgServer) -> str:
    """The URL of a new, empty database on the session's server, as its superuser."""
    return pg_server.url(pg_server.new_database())
