"""A private PostgreSQL server for the tests: made by ``initdb`` in a new temporary folder,
listening on a Unix socket there and on no TCP port, stopped and removed at the end.

The server runs as the ``postgres`` OS user when the tests run as root (``initdb`` refuses root),
else as the user running the tests. Authentication is ``trust`` on the private socket, so a test
connects as any role; what each role may do is still the server's privileges.
"""

from __future__ import annotations

import glob
import os
import pwd
import shutil
import signal
import subprocess
import tempfile
import time
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

START_TIMEOUT_S = 60.0
"""How long the server may take to accept connections on this shared machine."""

APP_ROLE = "desk_app"
"""A login role in ``blotter_writer``, as a trader's terminal would use."""

VIEWER_ROLE = "desk_viewer"
"""A login role in ``blotter_reader``, as a read-only viewer would use."""


def pg_bin_dir() -> Path | None:
    """The folder of ``initdb`` and ``postgres``: on ``PATH``, else the newest under
    /usr/lib/postgresql (Debian's packages); None when PostgreSQL is not installed."""
    found = shutil.which("initdb")
    if found and Path(found).with_name("postgres").exists():
        return Path(found).parent
    dirs = sorted(glob.glob("/usr/lib/postgresql/*/bin"), key=lambda d: int(d.split("/")[-2]))
    for d in reversed(dirs):
        if (Path(d) / "initdb").exists() and (Path(d) / "postgres").exists():
            return Path(d)
    return None


def why_absent() -> str | None:
    """Why the PostgreSQL tests cannot run here, or None when they can."""
    try:
        import psycopg  # noqa: F401
    except ImportError:
        return "psycopg is not installed (pip install -e '.[test]' installs it)"
    if pg_bin_dir() is None:
        return "PostgreSQL's server is not installed (apt-get install postgresql; .ci/run does)"
    if os.geteuid() == 0:
        try:
            pwd.getpwnam("postgres")
        except KeyError:
            return "running as root with no 'postgres' user to run the server as"
    return None


@dataclass
class PgServer:
    """A running private server: ``socket_dir`` is where its socket is."""

    socket_dir: Path
    _counter: list[int] = field(default_factory=lambda: [0])

    def url(self, database: str = "postgres", user: str = "postgres") -> str:
        """The URL of ``database`` on this server as ``user``, by its Unix socket."""
        return f"postgresql:///{database}?host={self.socket_dir}&user={user}"

    def admin(self) -> Any:
        """An autocommit connection as the superuser, to make databases and roles."""
        import psycopg

        return psycopg.connect(self.url(), autocommit=True)

    def new_database(self) -> str:
        """The name of a new, empty database (each test gets its own)."""
        self._counter[0] += 1
        name = f"book_{os.getpid()}_{self._counter[0]}"
        with self.admin() as conn:
            conn.execute(f'CREATE DATABASE "{name}" TEMPLATE template0 ENCODING UTF8')
        return name


def _as_server_user() -> dict[str, Any]:
    """``subprocess`` arguments that run a command as the server's OS user."""
    if os.geteuid() != 0:
        return {}
    pw = pwd.getpwnam("postgres")
    return {"user": pw.pw_uid, "group": pw.pw_gid, "extra_groups": []}


@contextmanager
def running_server() -> Iterator[PgServer]:
    """Start a private server, yield it, and stop and remove it however the block ends."""
    import psycopg

    bin_dir = pg_bin_dir()
    assert bin_dir is not None
    top = Path(tempfile.mkdtemp(prefix="blotter-pg-"))
    data, sock = top / "data", top / "sock"
    data.mkdir()
    sock.mkdir()
    run_as = _as_server_user()
    if run_as:
        for p in (top, data, sock):
            os.chown(p, run_as["user"], run_as["group"])
    proc: subprocess.Popen[bytes] | None = None
    try:
        subprocess.run(
            [str(bin_dir / "initdb"), "-D", str(data), "-U", "postgres", "-A", "trust",
             "-E", "UTF8", "--locale=C", "--no-sync"],
            check=True, capture_output=True, **run_as,
        )
        # fsync off: the tests kill clients, never the server, so its durability is not tested.
        # A short deadlock_timeout: the control test's colliding writers are found out quickly.
        proc = subprocess.Popen(
            [str(bin_dir / "postgres"), "-D", str(data), "-k", str(sock),
             "-c", "listen_addresses=", "-c", "fsync=off", "-c", "max_connections=60",
             "-c", "deadlock_timeout=100ms"],
            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, **run_as,
        )
        server = PgServer(sock)
        deadline = time.monotonic() + START_TIMEOUT_S
        while True:
            try:
                psycopg.connect(server.url(), connect_timeout=2).close()
                break
            except psycopg.OperationalError:
                if proc.poll() is not None or time.monotonic() > deadline:
                    err = proc.stderr.read().decode() if proc.stderr else ""
                    raise RuntimeError(f"the test PostgreSQL server did not start: {err}") from None
                time.sleep(0.1)
        with server.admin() as conn:
            conn.execute("CREATE ROLE blotter_writer NOLOGIN")
            conn.execute("CREATE ROLE blotter_reader NOLOGIN")
            conn.execute(f"CREATE ROLE {APP_ROLE} LOGIN IN ROLE blotter_writer")
            conn.execute(f"CREATE ROLE {VIEWER_ROLE} LOGIN IN ROLE blotter_reader")
        yield server
    finally:
        if proc is not None and proc.poll() is None:
            proc.send_signal(signal.SIGINT)  # PostgreSQL's fast shutdown
            try:
                proc.wait(timeout=30)
            except subprocess.TimeoutExpired:
                proc.kill()
                proc.wait()
        if proc is not None and proc.stderr is not None:
            proc.stderr.close()
        shutil.rmtree(top, ignore_errors=True)
