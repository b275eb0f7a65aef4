"""Evaluation of a kernel over cache-sized chunks of flat arrays, on a small thread pool.

NumPy and SciPy ufuncs release the GIL, so chunks run in parallel on the machine's cores; each
chunk's temporaries stay in cache instead of streaming whole-book temporaries through memory.
"""

from __future__ import annotations

import itertools
import os
import threading
from collections.abc import Callable, Sequence
from concurrent.futures import ThreadPoolExecutor

import numpy as np

CHUNK = 4096
"""Elements per chunk: 32 KiB per float64 array, so a kernel's temporaries fit in L2."""

_POOL: ThreadPoolExecutor | None = None
_POOL_LOCK = threading.Lock()
_WORKERS = max(1, min(os.cpu_count() or 1, 8))


def _pool() -> ThreadPoolExecutor:
    global _POOL
    with _POOL_LOCK:
        if _POOL is None:
            _POOL = ThreadPoolExecutor(max_workers=_WORKERS, thread_name_prefix="blotter-engine")
        return _POOL


Kernel = Callable[[Sequence[np.ndarray], Sequence[np.ndarray]], None]
"""A kernel reads chunk inputs (length-m arrays or 0-d scalars) and fills length-m outputs."""


def run_chunked(kernel: Kernel, size: int, inputs: Sequence[np.ndarray],
                outputs: Sequence[np.ndarray], chunk: int = CHUNK) -> None:
    """Call ``kernel`` on slices ``[i, i + chunk)`` of ``inputs`` and ``outputs`` (all flat).

    0-d inputs are passed whole to every chunk. Chunks run on the thread pool when there are
    more than two of them.
    """

    def one(start: int) -> None:
        stop = min(start + chunk, size)
        ins = [a if a.ndim == 0 else a[start:stop] for a in inputs]
        outs = [o[start:stop] for o in outputs]
        kernel(ins, outs)

    starts = range(0, size, chunk)
    if size <= 2 * chunk or _WORKERS == 1:
        for s in starts:
            one(s)
        return
    # Workers pull chunk numbers from a shared counter, so a core slowed by other load takes
    # fewer chunks instead of holding up the call.
    n_chunks = len(starts)
    counter = itertools.count()

    def run() -> None:
        while (k := next(counter)) < n_chunks:
            one(starts[k])

    futures = [_pool().submit(run) for _ in range(min(_WORKERS, n_chunks))]
    for f in futures:
        f.result()
