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

CHUNK = 32768
"""Elements per chunk (256 KiB per float64 array). Smaller chunks keep temporaries in L1/L2 but
spend more time in Python holding the GIL; measured on the 2-core machine, two threads gain
only from about 16k elements per chunk up (European greeks: 4k, 88 ns; 32k, 42 ns)."""
MIN_SPLIT = 4096
"""Inputs of at least twice this many elements are split across the workers."""

_POOL: ThreadPoolExecutor | None = None
_POOL_LOCK = threading.Lock()
_WORKERS = max(1, min(os.cpu_count() or 1, 8))


def _pool() -> ThreadPoolExecutor:
    global _POOL
    with _POOL_LOCK:
        if _POOL is None:
            _POOL = ThreadPoolExecutor(max_workers=_WORKERS, thread_name_prefix="blotter-engine")
        return _POOL


def _forget_pool_in_child() -> None:
    """Drop the parent's pool and lock in a forked child, whose copy has no worker threads."""
    global _POOL, _POOL_LOCK
    _POOL = None
    _POOL_LOCK = threading.Lock()


os.register_at_fork(after_in_child=_forget_pool_in_child)


Kernel = Callable[[Sequence[np.ndarray], Sequence[np.ndarray]], None]
"""A kernel reads chunk inputs (length-m arrays or 0-d scalars) and fills length-m outputs."""


def run_chunked(kernel: Kernel, size: int, inputs: Sequence[np.ndarray],
                outputs: Sequence[np.ndarray], chunk: int = CHUNK,
                min_split: int = MIN_SPLIT,
                check: Callable[[int, int], bool] | None = None) -> bool:
    """Call ``kernel`` on slices ``[i, i + chunk)`` of ``inputs`` and ``outputs`` (all flat).

    0-d inputs are passed whole to every chunk. Chunks run on the thread pool when there are
    two or more of them; inputs of at least ``2 × min_split`` elements but fewer than one chunk
    per worker are cut into one chunk per worker, and larger ones into equal chunks whose number
    is a multiple of the workers. ``check(start, stop)``, when given, vets
    each chunk's inputs while they are in cache; a chunk that fails is skipped and the call
    returns False (True otherwise), so the caller can report the bad input.
    """
    failed: list[int] = []
    if size < chunk * _WORKERS and size >= 2 * min_split:
        chunk = max(min_split, -(-size // _WORKERS))
    elif size > chunk and _WORKERS > 1:
        # Equal chunks, as many as a multiple of the workers, so no core idles at the end.
        n_chunks = -(-size // chunk)
        n_chunks += -n_chunks % _WORKERS
        chunk = -(-size // n_chunks)

    def one(start: int) -> None:
        if failed:
            return
        stop = min(start + chunk, size)
        if check is not None and not check(start, stop):
            failed.append(start)
            return
        ins = [a if a.ndim == 0 else a[start:stop] for a in inputs]
        outs = [o[start:stop] for o in outputs]
        kernel(ins, outs)

    starts = range(0, size, chunk)
    if size <= chunk or _WORKERS == 1:
        for s in starts:
            one(s)
        return not failed
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
    return not failed
