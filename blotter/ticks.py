"""Price precision: each kind's default tick size, the decimals of a tick, a price written to them.

A price (a spot, a trade price, a mark of spot) is shown to its underlying's tick, and to more
decimals when the price itself carries more, so no digit of a price is ever hidden. Nothing here
imports the rest of the package, so every layer can use it.
"""

from __future__ import annotations

import math

DEFAULT_TICKS = {"stock": 0.01, "index": 0.01, "future": 0.25, "fx": 0.00001}
"""Tick size per kind of underlying when its reference data names none (common practice: cents
for stocks and indices, a quarter point for index futures, a pip's tenth for FX)."""

MAX_DECIMALS = 8
"""The store keeps prices to eight decimals; no price is shown to more."""


def default_tick(kind: str) -> float:
    """The tick size of ``kind`` when none is given (0.01 for a kind not in ``DEFAULT_TICKS``)."""
    return DEFAULT_TICKS.get(kind, 0.01)


def tick_decimals(tick: float) -> int:
    """Decimals a price on this tick is written with: 0.01 → 2, 0.25 → 2, 0.00001 → 5, 5 → 0."""
    if not math.isfinite(tick) or tick <= 0:
        return 2
    for d in range(MAX_DECIMALS + 1):
        if abs(round(tick, d) - tick) <= 1e-9 * 10.0**-d:
            return d
    return MAX_DECIMALS


def price_decimals(value: float, decimals: int) -> int:
    """``decimals``, or more (up to ``MAX_DECIMALS``) when ``value`` has digits beyond them."""
    if not math.isfinite(value):
        return decimals
    d = max(0, min(decimals, MAX_DECIMALS))
    while d < MAX_DECIMALS and abs(round(value, d) - value) > 1e-9 * 10.0**-d * max(1, abs(value)):
        d += 1
    return d


def price_text(value: float | None, decimals: int = 2, signed: bool = False) -> str:
    """``value`` with thousands grouped, to ``decimals`` places or more when it carries more
    (``price_decimals``); ``n/a`` when it is not a number."""
    if value is None or not math.isfinite(value):
        return "n/a"
    d = price_decimals(value, decimals)
    return f"{value:{'+' if signed else ''},.{d}f}"


def on_tick(price: float, tick: float) -> float:
    """``price`` rounded to the nearest multiple of ``tick`` (at least one tick), written to the
    tick's decimals so no binary residue shows (100.07, not 100.07000000000001)."""
    if not math.isfinite(tick) or tick <= 0:
        raise ValueError(f"a tick must be a positive number, got {tick!r}")
    return round(max(1, round(price / tick)) * tick, tick_decimals(tick))
