"""The invented demo book, now ``blotter.store.demo``; this name stays for one release."""

from __future__ import annotations

from blotter.store.demo import (
    DEMO_AS_OF,
    DEMO_CLOSE_TIME,
    DEMO_POSITIONS,
    DEMO_SEED,
    DEMO_TZ,
    DEMO_WHO,
    FICTITIOUS_NOTE,
    HISTORY_DAYS,
    RATE_TENORS_DAYS,
    RATES,
    SMILE_Z,
    UNDERLYINGS,
    build_demo,
    demo_close_times,
    demo_expiries,
    describe,
    fill_demo,
)

__all__ = [
    "DEMO_AS_OF",
    "DEMO_CLOSE_TIME",
    "DEMO_POSITIONS",
    "DEMO_SEED",
    "DEMO_TZ",
    "DEMO_WHO",
    "FICTITIOUS_NOTE",
    "HISTORY_DAYS",
    "RATES",
    "RATE_TENORS_DAYS",
    "SMILE_Z",
    "UNDERLYINGS",
    "build_demo",
    "demo_close_times",
    "demo_expiries",
    "describe",
    "fill_demo",
]
