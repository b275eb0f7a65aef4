"""Run as a script by ``test_fork.py`` with an empty numba cache: start the American warm-up (it
compiles for tens of seconds), value American rows on the NumPy mirror meanwhile, fork, value
them again in the child, and print the child's report (or TIMEOUT) before exiting at once."""

from __future__ import annotations

import os
import select
import time

import numpy as np

from blotter import engine

CHILD_TIMEOUT_S = 30.0
"""Time the child has to value the rows (well under a second on the mirror)."""


def main() -> None:
    """Print "warming True|False", then "child <max |difference|>" or "child TIMEOUT"."""
    kw = {"is_call": np.arange(200) % 2 == 0, "spot": np.linspace(80.0, 120.0, 200),
          "strike": 100.0, "years": 0.5, "rate": 0.05, "carry": 0.01, "vol": 0.3}
    engine.price(**kw)                   # European rows: the thread pool has live workers
    engine.warm_up(background=True)
    time.sleep(0.5)
    print("warming", not engine.kernels_ready(), flush=True)
    during = engine.price(**kw, american=True)
    read_end, write_end = os.pipe()
    pid = os.fork()
    if pid == 0:
        try:
            got = engine.price(**kw, american=True)
            os.write(write_end, f"{float(np.max(np.abs(got - during))):.3e}".encode())
        finally:
            os._exit(0)
    ready, _, _ = select.select([read_end], [], [], CHILD_TIMEOUT_S)
    print("child", os.read(read_end, 100).decode() if ready else "TIMEOUT", flush=True)
    if not ready:
        os.kill(pid, 9)
    os.waitpid(pid, 0)
    os._exit(0)                          # the warm-up thread is still compiling: drop it


if __name__ == "__main__":
    main()
