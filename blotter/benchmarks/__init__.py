"""Benchmark cases for ``blotter bench``: each module in ``BENCH_MODULES`` has ``run(quick)``.

``run(quick: bool) -> list[Result]`` times its cases in this process and returns one ``Result``
per (case, size). ``quick`` shrinks sizes and repetitions for a smoke test. Times are medians over
repetitions in one run, because the machines are shared and noisy.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import asdict, dataclass
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    import numpy as np

BENCH_MODULES = ("engine", "store", "risk", "app", "cluster")
"""Modules of this package that provide cases, in this order when present."""

DEFAULT_MODULES = ("engine", "store", "risk", "app")
"""The groups a plain ``blotter bench`` runs; the others only when named with ``--only``."""


@dataclass(frozen=True)
class Result:
    """One timed case. Times in ns per position (or per unit named in ``unit``)."""

    case: str
    positions: int
    ns_per_position: float          # median
    min: float
    max: float
    reference: str | None = None    # what the ratio compares against, e.g. "QuantLib loop"
    ratio: float | None = None      # reference median / our median (> 1 means we are faster)
    target_ns: float | None = None  # the target, ns per position, when the issue sets one
    note: str = ""

    def as_dict(self) -> dict[str, Any]:
        return asdict(self)


def timed(fn: Callable[[], Any], repeat: int = 7, warmup: int = 1) -> np.ndarray:
    """Wall-clock seconds of ``repeat`` calls of ``fn`` after ``warmup`` untimed calls."""
    import numpy as np  # here, so the command line's help and completion never load NumPy

    for _ in range(warmup):
        fn()
    out = np.empty(repeat)
    for i in range(repeat):
        t0 = time.perf_counter_ns()
        fn()
        out[i] = (time.perf_counter_ns() - t0) * 1e-9
    return out


def result_from(case: str, positions: int, seconds: np.ndarray, **extra: Any) -> Result:
    """A ``Result`` whose ns-per-position figures are the median, min and max of ``seconds``."""
    import numpy as np

    per = seconds * 1e9 / max(positions, 1)
    return Result(case=case, positions=positions, ns_per_position=float(np.median(per)),
                  min=float(per.min()), max=float(per.max()), **extra)
