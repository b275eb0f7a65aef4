"""State of the American method's compiled kernels: ready or not, and a warm-up that compiles
them (or loads them from numba's cache) off the caller's thread.

The kernels are compiled on first use and cached on disk (``cache=True``), so only the first
run after an install compiles; ``warm_up`` lets an app start that work at launch and show a
note until ``kernels_ready`` turns true, instead of the first American valuation waiting.
"""

from __future__ import annotations

import threading

import numpy as np

from blotter.engine import _alo

_ENTRY_POINTS = (_alo.solve_groups, _alo.value_groups)
_LOCK = threading.Lock()
_THREAD: threading.Thread | None = None


def kernels_ready() -> bool:
    """True once every American kernel is compiled or loaded from the cache in this process."""
    return all(bool(k.signatures) for k in _ENTRY_POINTS)


def _exercise() -> None:
    """Value one American put and one call with greeks, which compiles every kernel."""
    from blotter.engine import american

    one = np.ones(2)
    american.evaluate(np.array([-1.0, 1.0]), 100.0 * one, 100.0 * one, 0.5 * one, 0.05 * one,
                      0.01 * one, 0.25 * one, greeks=True)


def warm_up(background: bool = True) -> threading.Thread | None:
    """Compile (or load) the American kernels: in a daemon thread that is returned (one per
    process; later calls return the same thread), or now when ``background`` is False."""
    global _THREAD
    if not background:
        _exercise()
        return None
    with _LOCK:
        if _THREAD is None:
            _THREAD = threading.Thread(target=_exercise, name="blotter-engine-warm-up",
                                       daemon=True)
            _THREAD.start()
        return _THREAD
