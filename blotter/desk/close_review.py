"""The marks in force beside the last close, the review of a close written now, and the close.

A mark point is a spot, a dividend yield, a vol (an expiry and a strike, or ATM) or a rate (a
currency and a tenor). The review sorts the points into changed since the last close, missing (a
position needs it and nobody marked it) and stale (unchanged for more than ``STALE_AFTER``);
``commit_close`` writes the marks in force as one close set, a correction of the day's close when
the day is closed already (a date closes once).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from datetime import date, datetime, timedelta
from typing import TYPE_CHECKING, Any
from zoneinfo import ZoneInfo

import numpy as np

from blotter.desk.entry import mark_unit
from blotter.desk.session import age_words

if TYPE_CHECKING:
    from blotter.book import Book
    from blotter.store import Store

MARK_KINDS = ("spot", "vol", "div_yield", "rate")
"""Kinds of mark point, in the order they are listed."""

STALE_AFTER = timedelta(days=1)
"""A mark in force unchanged for longer than this is listed as stale at the close."""


@dataclass(frozen=True)
class MarkPoint:
    """One mark point: the value in force, the last close's and when it was last marked.

    ``value`` and ``close_value`` are as stored (spot in currency, vol/rate/yield decimal); None
    when there is no such mark. ``observed_at`` is when the value in force was marked (a close
    that carried it keeps that time). ``needed`` is True when a position depends on a missing
    point.
    """

    key: str
    kind: str
    symbol: str | None
    currency: str | None
    expiry: date | None
    strike: float | None
    tenor_days: int | None
    value: float | None
    close_value: float | None
    observed_at: datetime | None
    needed: bool = False

    @property
    def label(self) -> str:
        """How the point reads on screen: ``DEMOA spot``, ``DEMOA 2027-03-19 190`` (a vol at that
        strike; ``ATM`` without one), ``USD rate 90d``."""
        if self.kind == "spot":
            return f"{self.symbol} spot"
        if self.kind == "div_yield":
            return f"{self.symbol} div yield"
        if self.kind == "rate":
            return f"{self.currency} rate {self.tenor_days}d"
        where = "ATM" if self.strike is None else f"{self.strike:g}"
        return f"{self.symbol} {self.expiry} {where}"

    def shown(self, value: float | None) -> str:
        """``value`` in the screen's unit: spot as a price, vol/rate/yield in %."""
        if value is None:
            return "missing"
        if self.kind == "spot":
            return _price(value)
        return f"{value * 100:.2f}%"

    def change(self) -> str:
        """In force − last close, in the screen's unit (vol in points, rate/yield in bp)."""
        if self.value is None or self.close_value is None:
            return ""
        d = self.value - self.close_value
        if self.kind == "spot":
            return _price(d, signed=True) if d else "0"
        if self.kind == "vol":
            return f"{d * 100:+.2f} pt" if d else "0"
        return f"{d * 1e4:+.1f} bp" if d else "0"

    def unit(self) -> str:
        """What a typed number means in this cell (``desk.entry.mark_unit``)."""
        return mark_unit(self.kind, atm=self.strike is None)


def _point_key(kind: str, symbol: Any, currency: Any, expiry: Any, strike: Any, tenor: Any) -> str:
    return f"{kind}|{symbol or ''}|{currency or ''}|{expiry or ''}|{strike or ''}|{tenor or ''}"


@dataclass(frozen=True)
class MarksView:
    """The mark points in force beside the last close, and what a close now would record."""

    points: tuple[MarkPoint, ...]
    last_close_id: int | None
    last_close_at: datetime | None
    data_version: int
    close_day: date | None = None  # the business date a close written now closes
    day_closed_by: int | None = None  # the close in force for that date: a close now corrects it


MISSING_CURVE_TENOR_DAYS = 365
"""Tenor (days) of the point offered for a currency with no rate curve: one point is a flat curve,
so any tenor serves; a year reads naturally."""


def marks_view(st: Store, book: Book | None) -> MarksView:
    """Mark points in force beside the last close, plus points the book needs but nobody marked.

    ``book`` (the live book) says which spots, expiries and currencies are needed. Vol points sort
    under their underlying, nearest expiry first.
    """
    in_force = st.marks()
    close_day, day_closed_by = st.todays_close()
    closes = [s for s in st.mark_sets(kind="close") if s.superseded_by is None]
    last = closes[-1] if closes else None
    at_close = st.marks(last.id) if last is not None else []

    def key_of(m: Any) -> str:
        return _point_key(m.kind, m.symbol, m.currency, m.expiry, m.strike, m.tenor_days)

    close_by_key = {key_of(m): m.value for m in at_close}
    points: dict[str, MarkPoint] = {}
    for m in in_force:
        if m.kind not in MARK_KINDS:
            continue
        k = key_of(m)
        points[k] = MarkPoint(
            k,
            m.kind,
            m.symbol,
            m.currency,
            m.expiry,
            m.strike,
            m.tenor_days,
            m.value,
            close_by_key.get(k),
            m.observed_at,
        )
    if book is not None and len(book):
        syms = book.underlyings.symbols
        for j in np.unique(book.underlying_idx):
            sym = syms[int(j)]
            k = _point_key("spot", sym, None, None, None, None)
            if k not in points:
                points[k] = MarkPoint(
                    k, "spot", sym, None, None, None, None, None, None, None, True
                )
            rows = np.flatnonzero((book.underlying_idx == j) & book.is_option)
            marked = {p.expiry for p in points.values() if p.kind == "vol" and p.symbol == sym}
            for day in np.unique(book.expiry_dates[rows]):
                d = day.astype(object)
                if d not in marked:
                    k = _point_key("vol", sym, None, d, None, None)
                    points[k] = MarkPoint(
                        k, "vol", sym, None, d, None, None, None, None, None, True
                    )
        # A currency whose options have no rate curve at all: one point to type it at.
        curves = {p.currency for p in points.values() if p.kind == "rate" and p.value is not None}
        ccys = book.underlyings.currencies
        for c in sorted({ccys[int(j)] for j in np.unique(book.underlying_idx[book.is_option])}):
            if c not in curves:
                k = _point_key("rate", None, c, None, None, MISSING_CURVE_TENOR_DAYS)
                points[k] = MarkPoint(
                    k, "rate", None, c, None, None, MISSING_CURVE_TENOR_DAYS, None, None, None,
                    True,
                )

    def order(p: MarkPoint) -> tuple[Any, ...]:
        if p.kind in ("spot", "vol", "div_yield"):
            sub = {"spot": 0, "div_yield": 1, "vol": 2}[p.kind]
            return (
                0,
                p.symbol or "",
                sub,
                str(p.expiry or ""),
                -1 if p.strike is None else p.strike,
            )
        return (1, p.currency or "", 0, "", p.tenor_days or 0)

    return MarksView(
        points=tuple(sorted(points.values(), key=order)),
        last_close_id=last.id if last else None,
        last_close_at=last.marked_at if last else None,
        data_version=int(st.data_version()),
        close_day=close_day,
        day_closed_by=day_closed_by,
    )


@dataclass(frozen=True)
class CloseReview:
    """What a close written now would record, against the last close."""

    changed: tuple[str, ...]  # "DEMOA spot 187.50 → 188.10 (+0.60)"
    missing: tuple[str, ...]  # points a position needs and nobody marked
    stale: tuple[str, ...]  # marks unchanged for more than STALE_AFTER, each with its own age
    n_points: int
    close_day: date | None = None  # the business date the close closes
    corrects: int | None = None  # the close of that date it corrects (a date closes once)


def close_review(view: MarksView, now: datetime, tz: ZoneInfo | None = None) -> CloseReview:
    """Sort the points of ``view`` into changed since the last close, missing and stale.

    A stale point is listed with its own mark time (in ``tz``, UTC when None) and age: a close
    carries a point without re-dating it.
    """
    changed, missing, stale = [], [], []
    n = 0
    for p in view.points:
        name = p.label if p.kind != "vol" else p.label.replace(" ", " vol ", 1)
        if p.value is None:
            if p.needed:
                missing.append(name)
            continue
        n += 1
        if p.close_value is None:
            changed.append(f"{name} new {p.shown(p.value)}")
        elif p.value != p.close_value:
            changed.append(f"{name} {p.shown(p.close_value)} → {p.shown(p.value)} ({p.change()})")
        if p.observed_at is not None and now - p.observed_at > STALE_AFTER:
            when = p.observed_at.astimezone(tz) if tz is not None else p.observed_at
            stale.append(
                f"{name} {p.shown(p.value)} marked {when:%m-%d %H:%M}, "
                f"{age_words(now - p.observed_at)} ago"
            )
    return CloseReview(
        tuple(changed), tuple(missing), tuple(stale), n, view.close_day, view.day_closed_by
    )


def _price(value: float, signed: bool = False) -> str:
    """A spot or its change with two decimals, thousands grouped (``n/a`` when not finite)."""
    if not math.isfinite(value):
        return "n/a"
    return f"{value:{'+' if signed else ''},.2f}"


@dataclass(frozen=True)
class ClosedSet:
    """A close set written: its id, the close it corrects (None for a first close), in words."""

    set_id: int
    corrects: int | None

    @property
    def words(self) -> str:
        fixes = f", correcting set {self.corrects}" if self.corrects is not None else ""
        return f"close set {self.set_id} written{fixes}"


def commit_close(st: Store, review: CloseReview, note: str = "close from the app") -> ClosedSet:
    """Write the marks in force as one close set, correcting the close ``review`` found for the
    day when there is one; the store refuses a date closed meanwhile, in words."""
    return ClosedSet(st.commit_close(note=note, corrects=review.corrects), review.corrects)
