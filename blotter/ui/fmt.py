"""Fixed-width text for numbers: every sign written, thousands grouped, no colour needed.

Only formatting lives here; the numbers come from ``blotter.risk`` and ``blotter.scenario``.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

MISSING = "n/a"
"""Shown for a value that cannot be computed (NaN), so a blank never hides a problem."""

NOT_ADDITIVE = "—"
"""Shown where a sum would add what does not add: share counts of several underlyings, money of
several currencies (no FX conversion)."""


def money(value: float, width: int = 0) -> str:
    """Whole currency units, signed, thousands grouped; millions (``M``) beyond 10 digits."""
    if value is None or not math.isfinite(value):
        text = MISSING
    elif abs(value) >= 1e10:
        text = f"{value / 1e6:+,.0f}M"
    else:
        text = f"{value:+,.0f}"
        if text in ("+0", "-0"):
            text = "0"
    return text.rjust(width) if width else text


def number(value: float, decimals: int = 2, width: int = 0, signed: bool = False) -> str:
    """A plain number with ``decimals`` places (a sign when ``signed``)."""
    if value is None or not math.isfinite(value):
        text = MISSING
    else:
        text = f"{value:{'+' if signed else ''},.{decimals}f}"
    return text.rjust(width) if width else text


PCT_CAP = 999.0
"""Percentages beyond ± this show as ``>+999%``: a share of a near-zero change is no guide, and
the text must still fit its column."""


def pct(value: float, width: int = 0) -> str:
    """A signed percentage with one decimal, capped at ``PCT_CAP`` so it keeps its width."""
    if value is None or not math.isfinite(value):
        text = MISSING
    elif abs(value) > PCT_CAP:
        text = f">{'+' if value > 0 else '-'}{PCT_CAP:.0f}%"
    else:
        text = f"{value:+.1f}%"
    return text.rjust(width) if width else text


def spot_text(value: float) -> str:
    """A spot or price: two decimals, no sign."""
    return number(value, 2)


def fill_first_column(first: int, widths: Sequence[int], width: int) -> int:
    """Width of a first column of at least ``first`` so that it and the whole columns of
    ``widths`` that fit after it fill ``width`` exactly; ``first`` when they all fit.

    A number cut at a pane's edge (``-14`` of ``-14,338``) reads as another number, so the
    first column takes the slack; the columns past the edge stay one scroll away.
    """
    used = first
    for w in widths:
        if used + w > width:
            return first + max(0, width - used)
        used += w
    return first


SCALES: tuple[tuple[str, float], ...] = (("", 1.0), ("k", 1e3), ("m", 1e6), ("bn", 1e9))
"""Units a column of whole numbers may switch to, smallest first; the header names the unit."""

CELL_CAP = 11
"""Characters a whole-number cell may take before its column switches to a larger unit
(``-12,345,678`` fits; ``-129,714,687`` shows as ``-129,715`` under a ``k`` header)."""


def whole(value: float, factor: float = 1.0, signed: bool = True) -> str:
    """``value / factor`` rounded to whole units, thousands grouped (signed when ``signed``,
    ``0`` unsigned); ``MISSING`` when it is not a number. Never cut to a width."""
    if value is None or not math.isfinite(value):
        return MISSING
    text = f"{value / factor:{'+' if signed else ''},.0f}"
    return "0" if text in ("+0", "-0") else text


def column_scale(
    values: Sequence[float], cap: int = CELL_CAP, signed: bool = True
) -> tuple[str, float]:
    """The smallest unit of ``SCALES`` (name, factor) at which every value of a column is written
    in whole units within ``cap`` characters; the largest when none is small enough."""
    finite = [abs(v) for v in values if v is not None and math.isfinite(v)]
    biggest = max(finite, default=0.0)
    for name, factor in SCALES:
        if len(whole(-biggest if signed else biggest, factor, signed)) <= cap:
            return name, factor
    return SCALES[-1]


def scaled_header(header: str, unit: str) -> str:
    """A column header with the unit its cells are in (``Δ $ k``); ``header`` at unit 1."""
    return f"{header} {unit}" if unit else header


def column_width(header: str, cells: Sequence[str], minimum: int = 1) -> int:
    """The width that holds ``header`` and every cell whole."""
    return max([minimum, len(header), *(len(c) for c in cells)])
