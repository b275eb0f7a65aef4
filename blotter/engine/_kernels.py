"""State of the American method's compiled kernels: ready or not, a warm-up that compiles them
(or loads them from numba's cache) off the caller's thread, and which implementation a call
uses meanwhile.

The kernels are compiled on first use and cached on disk (``cache=True``), so only the first
run after an install compiles (tens of seconds of one core); loading them from the cache takes
a fraction of a second. While a warm-up started by ``american.warm_up`` is running, American
valuations use the NumPy mirror of the kernels (``_alo_np``, the same method and numbers, 10–50
times slower), so that an app opens at once; without a warm-up they compile, or load, on first
use.
"""

from __future__ import annotations

import os
import threading
from collections.abc import Callable

from blotter.engine import _alo, _premium

_ENTRY_POINTS = (_alo.prepare_rows, _alo.group_keys, _alo.solve_groups, _alo.value_groups,
                 _alo.edge_groups, _premium.table_points, _premium.table_cells)
_LOCK = threading.Lock()
_THREAD: threading.Thread | None = None
_WARMING_AT_FORK = False
"""Set just before a fork: a warm-up was compiling the kernels."""
_MIRROR_ONLY = False
"""True in a process forked while a warm-up was compiling: the compiling thread did not follow
it and numba's compiler lock stays held there, so a compile would never finish; valuations
there use the NumPy mirror unless the kernels were ready."""


def _before_fork() -> None:
    global _WARMING_AT_FORK
    thread = _THREAD
    _WARMING_AT_FORK = thread is not None and thread.is_alive() and not kernels_ready()


def _after_fork_in_child() -> None:
    global _LOCK, _MIRROR_ONLY
    _LOCK = threading.Lock()
    _MIRROR_ONLY = _MIRROR_ONLY or _WARMING_AT_FORK


os.register_at_fork(before=_before_fork, after_in_child=_after_fork_in_child)


def kernels_ready() -> bool:
    """True once every American kernel is compiled or loaded from the cache in this process."""
    return all(bool(k.signatures) for k in _ENTRY_POINTS)


def use_compiled() -> bool:
    """True when American valuations should call the compiled kernels: they are ready, or no
    warm-up is compiling them (a call then compiles or loads them itself) and this process
    was not forked while one was."""
    if kernels_ready():
        return True
    if _MIRROR_ONLY:
        return False
    thread = _THREAD
    return thread is None or not thread.is_alive()


def start_warm_up(exercise: Callable[[], None], background: bool) -> threading.Thread | None:
    """Run ``exercise`` (a valuation through every compiled entry point, which compiles or loads
    them): in a daemon thread that is returned (one per process; later calls return the same
    thread), or now when ``background`` is False."""
    global _THREAD
    if not background:
        exercise()
        return None
    with _LOCK:
        if _THREAD is None:
            _THREAD = threading.Thread(target=exercise, name="blotter-engine-warm-up",
                                       daemon=True)
            _THREAD.start()
        return _THREAD
