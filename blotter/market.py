"""One mark set made usable: spots, vol surfaces, rate curves and dividend yields.

A ``Market`` is immutable: arrays are read-only, and a shock returns a new ``Market`` with a
higher ``version``. The store builds one with ``store.load_market``; the risk layer reads it.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import datetime

import numpy as np


def _frozen(a: np.ndarray) -> np.ndarray:
    a = np.ascontiguousarray(a)
    a.setflags(write=False)
    return a


@dataclass(frozen=True, eq=False)
class VolSurface:
    """Implied-vol points of one underlying: row j is (expiry j, strike j, vol j).

    ``expiries`` are dates (``datetime64[D]``); a NaN strike marks an at-the-money vol for that
    expiry, used flat across strikes when the expiry has no strike points. Vols are decimals.
    """

    expiries: np.ndarray   # datetime64[D] (m,)
    strikes: np.ndarray    # float64 (m,), NaN = ATM vol for the expiry
    vols: np.ndarray       # float64 (m,), annualised decimal

    def __post_init__(self) -> None:
        object.__setattr__(self, "expiries", _frozen(np.asarray(self.expiries, dtype="datetime64[D]")))
        object.__setattr__(self, "strikes", _frozen(np.asarray(self.strikes, dtype=np.float64)))
        object.__setattr__(self, "vols", _frozen(np.asarray(self.vols, dtype=np.float64)))
        m = self.expiries.shape
        if self.strikes.shape != m or self.vols.shape != m:
            raise ValueError("VolSurface arrays must have the same length")


@dataclass(frozen=True, eq=False)
class RateCurve:
    """Continuously compounded zero rates by tenor in calendar days, one currency."""

    tenor_days: np.ndarray  # float64 (k,), ascending
    zero_rates: np.ndarray  # float64 (k,), decimal, continuous compounding

    def __post_init__(self) -> None:
        days = np.asarray(self.tenor_days, dtype=np.float64)
        rates = np.asarray(self.zero_rates, dtype=np.float64)
        if days.shape != rates.shape or days.ndim != 1 or days.size == 0:
            raise ValueError("RateCurve needs matching, non-empty tenor and rate arrays")
        order = np.argsort(days, kind="stable")
        object.__setattr__(self, "tenor_days", _frozen(days[order]))
        object.__setattr__(self, "zero_rates", _frozen(rates[order]))


@dataclass(frozen=True, eq=False)
class Market:
    """The marks in force (or one recalled mark set), keyed by underlying symbol or currency.

    ``marks_as_of`` is the UTC instant of the newest mark used; ``mark_set_id`` the store's set id
    (None for a market assembled from the latest mark of each kind across sets).
    """

    version: int
    marks_as_of: datetime
    spots: dict[str, float]
    surfaces: dict[str, VolSurface]
    curves: dict[str, RateCurve]
    div_yields: dict[str, float] = field(default_factory=dict)  # overrides of Underlyings.div_yields
    mark_set_id: int | None = None
    mark_kind: str = "intraday"   # "close" or "intraday"
