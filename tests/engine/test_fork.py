"""The engine in a process forked after it has run: the child gets a pool of its own."""

from __future__ import annotations

import os
import select
import signal
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from blotter.engine import price

_ROWS = 200_000
"""Large enough that the engine splits the rows over its thread pool."""
_CHILD_TIMEOUT_S = 30.0
"""Time the child has to price the rows (a fraction of a second when it works)."""


def _book_value() -> float:
    """Sum of the prices of ``_ROWS`` at-the-money calls (one year, 5% rate, 20% vol)."""
    spots = np.linspace(50.0, 150.0, _ROWS)
    return float(price(True, spots, spots, 1.0, 0.05, 0.05, 0.2).sum())


@pytest.mark.skipif(not hasattr(os, "fork"), reason="needs os.fork")
def test_a_process_forked_after_the_engine_ran_prices_a_book() -> None:
    """The child prices a pooled book within the timeout and gets the parent's number."""
    want = _book_value()                 # the parent's pool now has live worker threads
    read_end, write_end = os.pipe()
    pid = os.fork()
    if pid == 0:                         # child: price again, report, exit without cleanup
        os.close(read_end)
        try:
            os.write(write_end, repr(_book_value()).encode())
        finally:
            os._exit(0)
    os.close(write_end)
    try:
        ready, _, _ = select.select([read_end], [], [], _CHILD_TIMEOUT_S)
        got = os.read(read_end, 100).decode() if ready else ""
    finally:
        os.close(read_end)
        if not got:
            os.kill(pid, signal.SIGKILL)
        os.waitpid(pid, 0)
    assert got, f"the forked child did not price the book within {_CHILD_TIMEOUT_S:.0f} s"
    assert float(got) == want


@pytest.mark.skipif(not hasattr(os, "fork"), reason="needs os.fork")
def test_a_process_forked_while_the_kernels_compile_values_american_rows(
    tmp_path: Path,
) -> None:
    """Forked while a warm-up compiles the kernels (empty numba cache), the child values
    American rows within the timeout (on the NumPy mirror: the compiling thread and numba's
    compiler lock it holds stay behind) and gets the parent's numbers."""
    env = {**os.environ, "NUMBA_CACHE_DIR": str(tmp_path / "numba")}
    done = subprocess.run([sys.executable, "-m", "tests.engine.fork_during_warm_up"],
                          capture_output=True, text=True, timeout=180, env=env,
                          cwd=Path(__file__).resolve().parents[2])
    lines = done.stdout.split("\n")
    assert "warming True" in lines, done.stdout + done.stderr
    child = [x for x in lines if x.startswith("child ")]
    assert child and child[0] != "child TIMEOUT", done.stdout + done.stderr
    assert float(child[0].split()[1]) == 0.0
