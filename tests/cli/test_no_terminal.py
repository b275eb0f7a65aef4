"""``blotter`` with no command and no terminal refuses to start the app, in one line of words."""

from __future__ import annotations

import os
import pty
import select
import subprocess
import sys
from pathlib import Path

import pytest


def _drain(fd: int) -> bytes:
    """What is waiting on a pseudo-terminal's leader side."""
    out = b""
    while select.select([fd], [], [], 0.2)[0]:
        try:
            chunk = os.read(fd, 4096)
        except OSError:  # the follower side is closed and nothing is left
            break
        if not chunk:
            break
        out += chunk
    return out


@pytest.mark.parametrize("piped", ["stdin", "stdout", "stderr", "all"])
def test_bare_blotter_without_a_terminal_says_to_use_a_command(piped: str, demo_db: Path) -> None:
    # The sides not piped are a pseudo-terminal, so each side is checked on its own (Textual
    # draws on stderr, so a redirected stderr would receive the screen).
    leader, follower = pty.openpty()
    try:
        with open(os.devnull, "rb") as null_in:
            r = subprocess.run(
                [sys.executable, "-m", "blotter", "--db", str(demo_db)],
                stdin=null_in if piped in ("stdin", "all") else follower,
                stdout=subprocess.PIPE if piped in ("stdout", "all") else follower,
                stderr=subprocess.PIPE if piped in ("stderr", "all") else follower,
                timeout=60,
            )
        on_terminal = _drain(leader)
    finally:
        os.close(follower)
        os.close(leader)
    assert r.returncode == 1
    said = r.stderr if r.stderr is not None else on_terminal
    lines = said.decode().strip().splitlines()
    assert len(lines) == 1, lines
    assert "no terminal" in lines[0] and "blotter --help" in lines[0]
    if r.stdout is not None:
        assert r.stdout == b""  # no screen drawn into the pipe
