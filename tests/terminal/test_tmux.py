"""The installed ``blotter`` in a real terminal: tmux at 80×24, keys by send-keys, the screen by
capture-pane, polled with a timeout (never a fixed sleep). Skipped where tmux is missing."""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import time
import uuid
from collections.abc import Callable, Iterator
from pathlib import Path

import pytest

pytestmark = [
    pytest.mark.terminal,
    pytest.mark.skipif(shutil.which("tmux") is None, reason="tmux is not installed"),
]

TIMEOUT_S = 20.0
"""How long to wait for the screen to show what a step expects."""


def _blotter() -> str:
    here = Path(sys.executable).with_name("blotter")
    found = str(here) if here.exists() else shutil.which("blotter")
    if not found:
        pytest.skip("the blotter command is not installed")
    return found


class Tmux:
    """One detached tmux session running the app."""

    def __init__(self, name: str) -> None:
        self.name = name
        self.socket = name  # a server of our own, so no one else's sessions are touched

    def tmux(self, *args: str, check: bool = True) -> subprocess.CompletedProcess[str]:
        return subprocess.run(
            ["tmux", "-L", self.socket, *args],
            capture_output=True,
            text=True,
            check=check,
            env={**os.environ, "TERM": "xterm"},
        )

    def send(self, *keys: str, literal: bool = False) -> None:
        self.tmux("send-keys", "-t", self.name, *(["-l"] if literal else []), *keys)

    def screen(self) -> str:
        return self.tmux("capture-pane", "-p", "-t", self.name, check=False).stdout

    def wait_for(self, check: Callable[[str], bool], what: str) -> str:
        deadline = time.monotonic() + TIMEOUT_S
        screen = ""
        while time.monotonic() < deadline:
            screen = self.screen()
            if check(screen):
                return screen
            time.sleep(0.1)
        self.send("F7")  # is the app still answering keys? (shown in the failure message)
        time.sleep(2.0)
        raise AssertionError(
            f"timed out waiting for {what}; the screen was:\n{screen}\n"
            f"and after F7:\n{self.screen()}"
        )

    def until_keys_arrive(self) -> None:
        """Press the group key until the app answers, so no keystroke is lost at start-up."""
        for _ in range(int(TIMEOUT_S)):
            self.send("g")
            try:
                deadline = time.monotonic() + 1.0
                while time.monotonic() < deadline:
                    if "Book by expiry bucket" in self.screen():
                        self.send("g")
                        self.wait_for(lambda s: "Book by underlying" in s, "the book regrouped")
                        return
                    time.sleep(0.1)
            except AssertionError:
                raise
        raise AssertionError("the app never answered a key")


@pytest.fixture(params=["screen-256color", "xterm", "xterm-16color"])
def session(request: pytest.FixtureRequest, demo_db: Path, tmp_path: Path) -> Iterator[Tmux]:
    name = f"blotter-test-{uuid.uuid4().hex[:8]}"
    env = {
        "TERM": request.param,
        "XDG_CONFIG_HOME": str(tmp_path),
        "BLOTTER_CONFIG": "",
        "NO_COLOR": "1" if request.param == "xterm" else "",
    }
    exports = " ".join(f"{k}={v!s}" for k, v in env.items() if v) + " "
    unset = (
        "unset NO_COLOR BLOTTER_CONFIG; " if request.param != "xterm" else "unset BLOTTER_CONFIG; "
    )
    command = f"{unset}env {exports}{_blotter()} --db {demo_db}; sleep 5"
    tmux = Tmux(name)
    tmux.tmux("new-session", "-d", "-s", name, "-x", "80", "-y", "24", command)
    try:
        yield tmux
    finally:
        tmux.tmux("kill-server", check=False)  # our own server only (-L)
        socket_dir = Path(os.environ.get("TMUX_TMPDIR") or "/tmp") / f"tmux-{os.getuid()}"
        (socket_dir / tmux.socket).unlink(missing_ok=True)


def test_app_in_tmux_80x24(session: Tmux) -> None:
    # The book shows at once; on a first start (a fresh install compiles the American kernels,
    # tens of seconds) the header leads with the compiling note, which pushes the file name past
    # 80 columns until the kernels are ready.
    screen = session.wait_for(lambda s: "Σ total" in s and "DEMOIX" in s, "the book")
    assert "Book by underlying" in screen
    assert "demo.db" in screen or "compiling pricing kernels" in screen
    assert all(len(line) <= 80 for line in screen.splitlines())
    session.until_keys_arrive()

    session.send("/")
    session.send("spot -3% vol +2 days 1", literal=True)
    screen = session.wait_for(
        lambda s: "✓ applied" in s
        and "Move: every spot -3.00%, vol +2.00 pts, 1 calendar day on" in s,
        "the move's result",
    )
    total = next(
        line for line in screen.splitlines() if line.lstrip().startswith("Σ total") and "%" in line
    )
    assert total.split()[2].startswith(("+", "-"))  # the full change carries its sign

    session.send(" nonsense", literal=True)
    session.wait_for(
        lambda s: "✗ unknown word 'nonsense'" in s and "last good line" in s, "the bad-line message"
    )

    session.send("F7")
    session.wait_for(lambda s: "─Grid " in s and ": full revaluation P&L" in s, "the grid")
    session.send("F1")
    session.wait_for(lambda s: "blotter help" in s and "what-if" in s, "the help screen")
    session.send("F1")
    session.wait_for(lambda s: "Σ total" in s, "the book again")
    session.send("F10")
    session.wait_for(lambda s: "Σ total" not in s, "the app to quit")


def test_close_flow_in_tmux_80x24(demo_db: Path, tmp_path: Path) -> None:
    """Type a spot mark on the Marks screen, review the close, write it; the file has the set."""
    from blotter import store

    name = f"blotter-close-{uuid.uuid4().hex[:8]}"
    command = (
        f"unset BLOTTER_CONFIG; env TERM=screen-256color XDG_CONFIG_HOME={tmp_path} "
        f"{_blotter()} --db {demo_db}; sleep 5"
    )
    session = Tmux(name)
    session.tmux("new-session", "-d", "-s", name, "-x", "80", "-y", "24", command)
    try:
        session.wait_for(lambda s: "Σ total" in s, "the book")
        session.until_keys_arrive()
        session.send("m")
        screen = session.wait_for(lambda s: "Marks: " in s and "DEMOA spot" in s, "the marks")
        assert all(len(line) <= 80 for line in screen.splitlines())
        session.send("183.25", literal=True)
        session.send("Enter")
        session.wait_for(lambda s: "✓ DEMOA spot marked 183.25" in s, "the typed mark written")
        session.send("c")
        screen = session.wait_for(lambda s: "Commit close:" in s, "the close review")
        assert "DEMOA spot 180.67 → 183.25" in screen
        session.send("y")
        session.wait_for(lambda s: "✓ close set" in s and "written" in s, "the close written")
        st = store.open_store(demo_db, read_only=True)
        try:
            last = st.mark_sets(kind="close")[-1]
            spot = next(
                m.value for m in st.marks(last.id) if m.kind == "spot" and m.symbol == "DEMOA"
            )
        finally:
            st.close()
        assert spot == 183.25
        session.send("q")
        session.wait_for(lambda s: "Σ total" in s and "Marks: " not in s, "the book again")
        session.send("F10")
        session.wait_for(lambda s: "Σ total" not in s, "the app to quit")
    finally:
        session.tmux("kill-server", check=False)  # our own server only (-L)
        socket_dir = Path(os.environ.get("TMUX_TMPDIR") or "/tmp") / f"tmux-{os.getuid()}"
        (socket_dir / session.socket).unlink(missing_ok=True)
