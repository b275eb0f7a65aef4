"""Array helpers shared by the data layers (book, market, risk); imports only NumPy."""

from __future__ import annotations

import numpy as np


def read_only(a: np.ndarray) -> np.ndarray:
    """``a`` as a contiguous array that refuses writes (a copy only when ``a`` is not contiguous).

    Books, markets and valuations hold their arrays this way, so a shared array cannot be changed
    behind a cached result."""
    a = np.ascontiguousarray(a)
    a.setflags(write=False)
    return a
