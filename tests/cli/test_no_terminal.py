"""``blotter`` with no command and no terminal refuses to start the app, in one line of words."""

from __future__ import annotations

import os
import pty
import subprocess
import sys
from pathlib import Path

import pytest


@pytest.mark.parametrize("piped", ["stdin", "stdout", "both"])
def test_bare_blotter_without_a_terminal_says_to_use_a_command(piped: str, demo_db: Path) -> None:
    # The side that is not piped is a pseudo-terminal, so each side is checked on its own.
    leader, follower = pty.openpty()
    try:
        with open(os.devnull, "rb") as null_in:
            r = subprocess.run(
                [sys.executable, "-m", "blotter", "--db", str(demo_db)],
                stdin=null_in if piped in ("stdin", "both") else follower,
                stdout=subprocess.PIPE if piped in ("stdout", "both") else follower,
                stderr=subprocess.PIPE, timeout=60,
            )
    finally:
        os.close(follower)
        os.close(leader)
    assert r.returncode == 1
    lines = r.stderr.decode().strip().splitlines()
    assert len(lines) == 1, lines
    assert "no terminal" in lines[0] and "blotter --help" in lines[0]
    if r.stdout is not None:
        assert r.stdout == b""  # no screen drawn into the pipe
