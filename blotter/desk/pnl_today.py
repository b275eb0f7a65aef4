"""P&L today: the change since the last close in force, new trades from their trade price.

It is the total of a P&L explain from the last close to the marks in force at the valuation
time (``scenario.explain``): the positions the close held, revalued, plus each trade written
since at its end value less its trade price. Trial trades are not in the store and not in it.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from blotter.desk.books import OneBook

if TYPE_CHECKING:
    from blotter.book import Book
    from blotter.market import Market


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


class FromClose:
    """``source`` (a ``scenario.ExplainSource``) as P&L today's explain reads it, listing only
    the close sets of ``store`` (``Store.mark_sets("close")``, corrections included): it runs
    from a close to now, so no intraday set is either end, and a feed writes one a second."""

    def __init__(self, source: Any, store: Any) -> None:
        self._source = source
        self._store = store

    def mark_sets(self) -> Sequence[Any]:
        return self._store.mark_sets("close")  # type: ignore[no-any-return]

    def last_seq(self) -> int:
        return int(self._source.last_seq())

    def load_market(self, mark_set_id: int | None = None) -> Market:
        return self._source.load_market(mark_set_id)  # type: ignore[no-any-return]

    def load_book(self, *, before_seq: int) -> Book:
        return self._source.load_book(before_seq=before_seq)  # type: ignore[no-any-return]

    def new_trades(self, after_seq: int, before_seq: int | None = None) -> tuple[Book, np.ndarray]:
        return self._source.new_trades(after_seq, before_seq)  # type: ignore[no-any-return]

    def trades(self) -> Sequence[Any]:
        return self._source.trades()  # type: ignore[no-any-return]


NO_CLOSE = PnlToday(None, words="no close yet: P&L today counts from the first close")


def pnl_today(store: Any, at: np.datetime64, book: str | None = None) -> PnlToday:
    """P&L today of ``store`` (``book`` alone when given) at the valuation time ``at``."""
    from blotter.scenario import explain
    from blotter.scenario.pnl_explain import closes_in_force

    source = FromClose(store if book is None else OneBook(store, book), store)
    closes = closes_in_force(source.mark_sets())
    if not closes:
        return NO_CLOSE
    last = closes[-1]
    ex = explain(source, from_set=int(last.id), to_set="now", at=at)
    return PnlToday(
        close_id=int(last.id),
        by_underlying={r.label: float(r.total) for r in ex.by_underlying},
        by_currency={str(r.currency): float(r.total) for r in ex.by_currency}
        or ({str(ex.total.currency): float(ex.total.total)} if ex.total.currency else {}),
        currency_of={r.label: str(r.currency) for r in ex.by_underlying},
        words=f"since close set {last.id}",
    )


def marked_values(valuation: Any) -> dict[str, float]:
    """Per underlying, the value of the book's own positions (trials left out) plus units ×
    price of positions that settle daily (a future's value is zero, its P&L is units × ΔF):
    between two valuations of the same positions, its change is the P&L of that time."""
    v = valuation
    keep = ~np.asarray(v.book.is_trial, dtype=bool)
    amount = np.where(v.settles_daily, v.units * v.spot, v.value)
    sums = np.bincount(
        np.asarray(v.book.underlying_idx)[keep],
        weights=amount[keep],
        minlength=len(v.book.underlyings.symbols),
    )
    return {s: float(sums[i]) for i, s in enumerate(v.book.underlyings.symbols)}


def advanced(since: PnlToday, before: dict[str, float], after: dict[str, float]) -> PnlToday:
    """``since`` moved on by the change of ``marked_values`` from ``before`` to ``after``: the
    P&L today of a later valuation of the same positions (no trade, cancel or close between),
    without explaining again from the close (which costs a revaluation at the close)."""
    if since.close_id is None:
        return since
    by_underlying = dict(since.by_underlying)
    by_currency = dict(since.by_currency)
    for name, now in after.items():
        move = now - before.get(name, 0.0)
        if move == 0.0:
            continue
        by_underlying[name] = by_underlying.get(name, 0.0) + move
        ccy = since.currency_of.get(name)
        if ccy is not None:
            by_currency[ccy] = by_currency.get(ccy, 0.0) + move
    return PnlToday(since.close_id, by_underlying, by_currency, since.currency_of, since.words)
