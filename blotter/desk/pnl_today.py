"""P&L today: the change since the last close in force, new trades from their trade price.

It is the total of a P&L explain from the last close to the marks in force at the valuation
time (``scenario.explain``): the positions the close held, revalued, plus each trade written
since at its end value less its trade price. Trial trades are not in the store and not in it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from blotter.desk.books import OneBook


@dataclass(frozen=True)
class PnlToday:
    """P&L since the close ``close_id`` per underlying and per currency (each in its currency);
    ``words`` say why there is none when ``close_id`` is None."""

    close_id: int | None
    by_underlying: dict[str, float] = field(default_factory=dict)
    by_currency: dict[str, float] = field(default_factory=dict)
    currency_of: dict[str, str] = field(default_factory=dict)  # underlying -> currency
    words: str = ""

    def of(self, underlying: str) -> float:
        """P&L today of ``underlying`` (0 when it had no position and no trade; NaN with no
        close)."""
        if self.close_id is None:
            return math.nan
        return self.by_underlying.get(underlying, 0.0)

    def total(self, currency: str | None) -> float:
        """P&L today of one currency (NaN across several, or with no close)."""
        if self.close_id is None or currency is None:
            return math.nan
        return self.by_currency.get(currency, 0.0)


NO_CLOSE = PnlToday(None, words="no close yet: P&L today counts from the first close")


def pnl_today(store: Any, at: np.datetime64, book: str | None = None) -> PnlToday:
    """P&L today of ``store`` (``book`` alone when given) at the valuation time ``at``."""
    from blotter.scenario import explain
    from blotter.scenario.pnl_explain import closes_in_force

    closes = closes_in_force(store.mark_sets())
    if not closes:
        return NO_CLOSE
    last = closes[-1]
    source = store if book is None else OneBook(store, book)
    ex = explain(source, from_set=int(last.id), to_set="now", at=at)
    return PnlToday(
        close_id=int(last.id),
        by_underlying={r.label: float(r.total) for r in ex.by_underlying},
        by_currency={str(r.currency): float(r.total) for r in ex.by_currency}
        or ({str(ex.total.currency): float(ex.total.total)} if ex.total.currency else {}),
        currency_of={r.label: str(r.currency) for r in ex.by_underlying},
        words=f"since close set {last.id}",
    )
