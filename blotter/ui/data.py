"""What the app's workers compute, as plain objects: no Textual here, no formulas either.

Every number comes from ``blotter.risk`` and ``blotter.scenario``; this module picks rows out of
their arrays, arranges them for the Book pane's tree (underlying → expiry → position, or expiry
bucket → underlying → position) and sums risk's additive desk-unit arrays over those rows.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from datetime import datetime, timedelta
from typing import Any

import numpy as np

from blotter import calendar as cal
from blotter import risk
from blotter.book import Book
from blotter.ui import fmt

BOOK_COLUMNS: tuple[tuple[str, str], ...] = (
    ("spot", "Spot"),
    ("delta_cash", "Δ $"),
    ("gamma_1pct", "Γ 1%"),
    ("vega_pt", "vega pt"),
    ("theta_day", "θ day"),
    ("delta_shares", "Δ sh"),
    ("value", "Value"),
    ("rho_pct", "ρ 1%"),
    ("vanna_pt", "vanna pt"),
    ("volga_pt", "volga pt"),
    ("beta_delta_cash", "βΔ $"),
)
"""(risk field, header) of the Book pane in screen order; the units are on the help screen."""

SUM_FIELDS = tuple(k for k, _ in BOOK_COLUMNS if k != "spot")
"""Columns that add up over positions (risk's additive arrays)."""

MAX_CHILD_ROWS = 2000
"""Positions listed under one expanded row; the rest are summarised in one line."""


@dataclass(frozen=True)
class BookRow:
    """One row of the Book pane. ``values`` follow ``BOOK_COLUMNS``; NaN shows as n/a or blank."""

    key: str
    level: int  # 0 total, 1 group, 2 sub-group, 3 position
    label: str
    values: tuple[float, ...]
    expandable: bool = False
    alert: str = ""  # words for a breached limit; the row shows "!"
    position: int | None = None  # row index into the book for a position row


def _row_values(exposure: risk.ExposureRow, spot: float = math.nan) -> tuple[float, ...]:
    s = exposure.spot if exposure.spot is not None else spot
    return (float(s) if s is not None else math.nan,) + tuple(
        float(getattr(exposure, k)) for k in SUM_FIELDS
    )


def position_label(book: Any, i: int) -> str:
    """Short label of position ``i`` under its underlying and expiry: ``4500 C ×-10``."""
    qty = f"×{book.quantities[i]:+g}"
    if not book.is_option[i]:
        return f"hedge {qty}"
    return f"{book.strikes[i]:g} {'C' if book.is_call[i] else 'P'} {qty}"


def expiry_text(expiry: np.datetime64, tz: Any) -> str:
    """An expiry instant as the desk-local ISO date."""
    return cal.to_datetime(expiry, tz).date().isoformat()


class BookTree:
    """The Book pane's rows for one valuation; children are worked out when a row is expanded."""

    def __init__(
        self,
        valuation: risk.BookValuation,
        tz: Any,
        alert: Callable[[risk.ExposureRow], str] | None = None,
    ) -> None:
        self.valuation = valuation
        self.book = valuation.book
        self.tz = tz
        self._alert = alert or (lambda row: "")
        self._sums = {k: np.asarray(getattr(valuation, k)) for k in SUM_FIELDS}
        n = len(self.book)
        # Expiry day per position as desk-local dates (NaT for hedges), for sub-grouping.
        if n:
            local = np.array(
                [
                    cal.local_date(e, tz) if not np.isnat(e) else np.datetime64("NaT")
                    for e in np.unique(self.book.expiries)
                ],
                dtype="datetime64[D]",
            )
            uniq, inverse = np.unique(self.book.expiries, return_inverse=True)
            mapping = dict(zip(uniq.tolist(), local.tolist(), strict=True))
            self.expiry_days = np.array([mapping[u] for u in uniq.tolist()], dtype="datetime64[D]")[
                inverse.reshape(-1)
            ]
        else:
            self.expiry_days = np.zeros(0, dtype="datetime64[D]")
        self._total = risk.total(valuation)
        self._by_underlying = risk.aggregate(valuation, by="underlying")
        self._by_bucket = risk.aggregate(valuation, by="expiry")
        self._cache: dict[str, list[BookRow]] = {}

    # -- pieces ---------------------------------------------------------------------------------
    def _subtotal(self, rows: np.ndarray) -> tuple[float, ...]:
        """Risk's additive arrays summed over ``rows`` (an index array), in ``SUM_FIELDS`` order."""
        return tuple(float(self._sums[k][rows].sum()) for k in SUM_FIELDS)

    def _positions(self, parent: str, rows: np.ndarray, level: int) -> list[BookRow]:
        book = self.book
        order = rows[np.lexsort((book.strikes[rows], ~book.is_call[rows]))]
        out = [
            BookRow(
                key=f"p|{int(book.contract_ids[i])}|{i}",
                level=level,
                label=position_label(book, int(i)),
                values=(math.nan,) + tuple(float(self._sums[k][i]) for k in SUM_FIELDS),
                position=int(i),
            )
            for i in order[:MAX_CHILD_ROWS]
        ]
        if len(order) > MAX_CHILD_ROWS:
            rest = order[MAX_CHILD_ROWS:]
            out.append(
                BookRow(
                    key=f"{parent}|more",
                    level=level,
                    label=f"… {len(rest):,} more",
                    values=(math.nan,) + self._subtotal(rest),
                )
            )
        return out

    def _by_day(self, parent: str, rows: np.ndarray, level: int) -> list[BookRow]:
        days = self.expiry_days[rows]
        out: list[BookRow] = []
        hedges = rows[np.isnat(days)]
        for day in np.unique(days[~np.isnat(days)]):
            sel = rows[days == day]
            out.append(
                BookRow(
                    key=f"{parent}|d|{day}",
                    level=level,
                    label=str(day),
                    values=(math.nan,) + self._subtotal(sel),
                    expandable=True,
                )
            )
        if len(hedges):
            out.append(
                BookRow(
                    key=f"{parent}|d|hedge",
                    level=level,
                    label="hedges",
                    values=(math.nan,) + self._subtotal(hedges),
                    expandable=True,
                )
            )
        return out

    # -- BookSource ------------------------------------------------------------------------------
    def total(self) -> BookRow:
        return BookRow(
            key="total",
            level=0,
            label="total",
            values=_row_values(self._total),
            alert=self._alert(self._total),
        )

    def top(self, group: str) -> Sequence[BookRow]:
        if group == "underlying":
            return [
                BookRow(
                    key=f"u|{r.label}",
                    level=1,
                    label=r.label,
                    values=_row_values(r),
                    expandable=True,
                    alert=self._alert(r),
                )
                for r in self._by_underlying
            ]
        return [
            BookRow(
                key=f"b|{r.label}", level=1, label=r.label, values=_row_values(r), expandable=True
            )
            for r in self._by_bucket
        ]

    def rows_of(self, key: str) -> np.ndarray:
        """Book row indices under the tree row ``key`` (all rows for the total)."""
        book = self.book
        n = len(book)
        sel = np.ones(n, dtype=bool)
        parts = key.split("|")
        i = 0
        while i + 1 < len(parts):
            kind, name = parts[i], parts[i + 1]
            if kind == "u":
                sel &= book.underlying_idx == book.underlyings.index_of(name)
            elif kind == "b":
                sel &= self.valuation.bucket_codes == self.valuation.bucket_labels.index(name)
            elif kind == "d":
                sel &= (
                    np.isnat(self.expiry_days)
                    if name == "hedge"
                    else self.expiry_days == np.datetime64(name)
                )
            elif kind == "p":
                return np.array([int(parts[i + 2])])
            i += 2
        return np.flatnonzero(sel)

    def children(self, key: str) -> Sequence[BookRow]:
        if key in self._cache:
            return self._cache[key]
        rows = self.rows_of(key)
        parts = key.split("|")
        level = len(parts) // 2 + 1
        if parts[-2] == "u":  # underlying -> expiry days
            out = self._by_day(key, rows, level)
        elif parts[-2] == "b":  # bucket -> underlyings in it
            uidx = self.book.underlying_idx[rows]
            out = []
            for j in np.unique(uidx):
                sel = rows[uidx == j]
                sym = self.book.underlyings.symbols[int(j)]
                out.append(
                    BookRow(
                        key=f"{key}|u|{sym}",
                        level=level,
                        label=sym,
                        values=(float(self.valuation.underlying_spots[int(j)]),)
                        + self._subtotal(sel),
                        expandable=True,
                    )
                )
        else:  # expiry day, or underlying within a bucket
            out = self._positions(key, rows, level)
        self._cache[key] = out
        return out


@dataclass(frozen=True)
class MarksAge:
    """How old the marks are, in words, and whether they predate the last business day's close."""

    words: str
    stale: bool
    last_close: datetime | None


def marks_age(
    marks_as_of: datetime, now: datetime, tz: Any, calendar_name: str = "NYSE"
) -> MarksAge:
    """Age of the marks at ``now``; stale when older than the last business-day close."""
    age = now - marks_as_of
    local_now = now.astimezone(tz)
    day: np.datetime64 = np.datetime64(local_now.date(), "D")
    close_today = datetime.combine(local_now.date(), cal.DEFAULT_CUTOFF, tzinfo=tz)
    if not (bool(cal.is_business_day(day, calendar_name)) and local_now >= close_today):
        day = np.datetime64(str(cal.add_business_days(day, -1, calendar_name)), "D")
    last_close = datetime.combine(day.astype(object), cal.DEFAULT_CUTOFF, tzinfo=tz)
    stale = marks_as_of < last_close - timedelta(minutes=1)
    return MarksAge(words=fmt.age_words(age), stale=bool(stale), last_close=last_close)


@dataclass(repr=False)
class BookState:
    """One load of the book: what it is, where from, the base valuation and the pane's rows."""

    book_seq: int
    db_path: str
    read_only: bool
    book_name: str
    valuation: risk.BookValuation
    tree: BookTree
    data_version: int
    valuation_time: datetime
    marks_as_of: datetime
    mark_set_id: int | None
    mark_kind: str
    seconds: float = 0.0
    notes: tuple[str, ...] = field(default=())

    def __repr__(self) -> str:  # short: the arrays inside are large
        return (
            f"BookState(book_seq={self.book_seq}, db_path={self.db_path!r}, "
            f"positions={len(self.valuation)}, data_version={self.data_version})"
        )


@dataclass(frozen=True)
class ProfileData:
    """Curves for the Profile pane: ``xs`` along the axis, one series per name, with units."""

    title: str
    x_label: str
    xs: tuple[float, ...]
    series: dict[str, tuple[float, ...]]
    y_label: str
    note: str = ""


PROFILE_FIELDS = {
    "delta": ("delta_cash", "Δ $ (currency)"),
    "gamma": ("gamma_1pct", "Γ 1% (shares)"),
    "vega": ("vega_pt", "vega (per vol pt)"),
    "theta": ("theta_day", "θ day (per day)"),
}
"""Profile greeks: risk field and the axis label with its unit."""


def sub_book(book: Book, rows: np.ndarray) -> Book:
    """The positions ``rows`` of ``book`` as a book of their own (same underlyings)."""
    rows = np.asarray(rows, dtype=np.int64)
    return Book(
        name=book.name,
        underlyings=book.underlyings,
        reference_index=book.reference_index,
        contract_ids=book.contract_ids[rows],
        labels=tuple(book.labels[int(i)] for i in rows),
        underlying_idx=book.underlying_idx[rows],
        is_option=book.is_option[rows],
        is_call=book.is_call[rows],
        american=book.american[rows],
        strikes=book.strikes[rows],
        expiries=book.expiries[rows],
        multipliers=book.multipliers[rows],
        quantities=book.quantities[rows],
        cash_settled=book.cash_settled[rows],
        is_trial=book.is_trial[rows],
    )


def profile(
    valuation: risk.BookValuation,
    settings: Any,
    greek: str,
    axis: str,
    days: float,
    rows: np.ndarray | None = None,
    label: str = "book",
) -> ProfileData:
    """Curves of the book (or of ``rows`` only): P&L or a greek, against spot % or days forward.

    Against spot every underlying moves by the same %, vols sticky strike, today and after the
    bar's ``days`` roll; against days, calendar days 0..``settings.profile_days``, nothing else
    moving. P&L comes from ``scenario.ladder``/``apply_move``, greeks from ``risk.value_book``.
    """
    from blotter import scenario

    v = valuation
    if rows is not None:
        v = risk.value_book(
            sub_book(valuation.book, rows), valuation.market, valuation.valuation_time
        )
    t0 = v.valuation_time
    symbols = sorted({v.book.underlyings.symbols[int(i)] for i in np.unique(v.book.underlying_idx)})
    series: dict[str, tuple[float, ...]] = {}
    roll = f"after {days:g} day{'s' if days != 1 else ''}"
    if axis == "spot":
        half = float(settings.profile_spot_pct)
        xs = np.linspace(-half, half, int(settings.profile_points))
        x_label = "spot move, % of every spot"
        if greek == "pnl":
            pcts = xs.tolist()
            series["today"] = tuple(scenario.ladder(v, pcts, (0.0,), days=0.0).full[:, 0].tolist())
            if days:
                series[roll] = tuple(
                    scenario.ladder(v, pcts, (0.0,), days=days).full[:, 0].tolist()
                )
            y_label = "P&L (currency)"
        else:
            field_name, y_label = PROFILE_FIELDS[greek]
            times = [("today", t0)] + ([(roll, cal.roll_calendar_days(t0, days))] if days else [])
            for name, t in times:
                values = []
                for pct in xs:
                    market = (
                        v.market.shocked(spot_pct={s: float(pct) for s in symbols})
                        if pct
                        else v.market
                    )
                    values.append(
                        getattr(risk.total(risk.value_book(v.book, market, t)), field_name)
                    )
                series[name] = tuple(float(x) for x in values)
    else:
        n_days = int(settings.profile_days)
        xs = np.arange(0, n_days + 1, max(1, n_days // 30), dtype=np.float64)
        x_label = "calendar days forward"
        if greek == "pnl":
            y_label = "P&L (currency)"
            series["P&L"] = tuple(
                float(
                    scenario.apply_move(
                        v, scenario.Move(text=f"days {d:g}", days=float(d))
                    ).total.full
                )
                if d
                else 0.0
                for d in xs
            )
        else:
            field_name, y_label = PROFILE_FIELDS[greek]
            series[y_label.split(" (")[0]] = tuple(
                float(
                    getattr(
                        risk.total(
                            risk.value_book(v.book, v.market, cal.roll_calendar_days(t0, float(d)))
                        ),
                        field_name,
                    )
                )
                for d in xs
            )
    names = {"pnl": "P&L", "delta": "Δ $", "gamma": "Γ 1%", "vega": "vega", "theta": "θ day"}
    title = (
        f"Profile: {names[greek]} of {label} against {'spot' if axis == 'spot' else 'days forward'}"
    )
    note = "sticky-strike vols" if axis == "spot" else "spot and vols held"
    if greek == "gamma" and len(symbols) > 1:
        note += "; Γ 1% adds share counts of different names"
    return ProfileData(
        title=title,
        x_label=x_label,
        xs=tuple(xs.tolist()),
        series=series,
        y_label=y_label,
        note=note,
    )
