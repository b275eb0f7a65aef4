"""What the app's workers compute, as plain objects: no Textual here, no formulas either.

Every number comes from ``blotter.risk`` and ``blotter.scenario``; this module picks rows out of
their arrays, arranges them for the Book pane's tree (underlying → expiry → position, or expiry
bucket → underlying → position) and sums risk's additive desk-unit arrays over those rows.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from datetime import date, datetime, timedelta
from typing import Any

import numpy as np

from blotter import risk
from blotter.book import Book
from blotter.desk.entry import mark_unit
from blotter.desk.session import Session, age_words
from blotter.printable import printable
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

SHARE_FIELDS = frozenset(risk.SHARE_FIELDS)
"""Columns in shares of one underlying: a row spanning several names shows them as "—"."""

MONEY_COLUMNS = frozenset(risk.MONEY_FIELDS)
"""Columns in currency: a row spanning several currencies shows them as "—"."""

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
    mixed: bool = False  # spans several underlyings: share-unit columns do not add
    trial: bool = False  # a trial position (not in the store)
    currency: str | None = None  # None when the row spans several currencies
    mixed_currency: bool = False  # spans several currencies: money columns do not add


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
        # Expiry day per position as traded (NaT for hedges), for sub-grouping.
        self.expiry_days = self.book.expiry_dates
        self._total = risk.total(valuation)
        self.currencies = valuation.currencies
        self._ccy, self._ccy_names = valuation.currency_codes
        self._by_underlying = risk.aggregate(valuation, by="underlying")
        self._by_bucket = risk.aggregate(valuation, by="expiry")
        self._cache: dict[str, list[BookRow]] = {}

    # -- pieces ---------------------------------------------------------------------------------
    def _subtotal(self, rows: np.ndarray) -> tuple[float, ...]:
        """``risk.total`` over ``rows`` (an index array), in ``SUM_FIELDS`` order."""
        row = risk.total(self.valuation, rows)
        return tuple(float(getattr(row, k)) for k in SUM_FIELDS)

    def _mixed(self, rows: np.ndarray) -> bool:
        """Whether ``rows`` hold positions of more than one underlying."""
        return len(np.unique(self.book.underlying_idx[rows])) > 1

    def _mixed_currency(self, rows: np.ndarray) -> bool:
        """Whether ``rows`` hold positions in more than one currency."""
        return len(np.unique(self._ccy[rows])) > 1

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
                trial=bool(book.is_trial[i]),
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
                    mixed=self._mixed(rest),
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
        trials = bool(np.asarray(self.book.is_trial).any())
        if self.valuation.partial:
            label = "valued + trials" if trials else "total of valued"
        else:
            label = "total + trials" if trials else "total"
        return BookRow(
            key="total",
            level=0,
            label=label,
            values=_row_values(self._total),
            alert=self._alert(self._total),
            mixed=self._mixed(np.arange(len(self.book))),
            currency=self._total.currency,
            mixed_currency=len(self.currencies) > 1,
        )

    def currency_totals(self) -> list[BookRow]:
        """One total row per currency when the book holds several (none otherwise)."""
        if len(self.currencies) <= 1:
            return []
        return [
            BookRow(
                key=f"c|{r.currency}",
                level=0,
                label=f"{r.currency} total",
                values=_row_values(r),
                alert=self._alert(r),
                mixed=r.underlying is None,
                currency=r.currency,
            )
            for r in risk.currency_totals(self.valuation)
        ]

    def total_without_trials(self) -> BookRow | None:
        """The total of the live positions only, when the book holds trial rows (else None)."""
        trial = np.asarray(self.book.is_trial, dtype=bool)
        if not trial.any():
            return None
        live = np.flatnonzero(~trial)
        return BookRow(
            key="total-live",
            level=0,
            label="live only",
            values=(math.nan,) + self._subtotal(live),
            mixed=self._mixed(live),
            mixed_currency=self._mixed_currency(live),
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
                    currency=r.currency,
                )
                for r in self._by_underlying
            ]
        codes = self.valuation.bucket_codes
        return [
            BookRow(
                key=f"b|{r.label}",
                level=1,
                label=r.label,
                values=_row_values(r),
                expandable=True,
                mixed=self._mixed(
                    np.flatnonzero(codes == self.valuation.bucket_labels.index(r.label))
                ),
                currency=r.currency,
                mixed_currency=r.currency is None,
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
            elif kind == "c":
                sel &= self._ccy == self._ccy_names.index(name)
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
                        currency=self.book.underlyings.currencies[int(j)],
                    )
                )
        else:  # expiry day, or underlying within a bucket
            out = self._positions(key, rows, level)
        self._cache[key] = out
        return out


@dataclass(repr=False)
class BookState:
    """One load of the book as the app shows it: the desk session and the Book pane's rows."""

    book_seq: int
    db_path: str
    read_only: bool
    session: Session
    tree: BookTree

    @property
    def valuation(self) -> risk.BookValuation:
        return self.session.valuation

    @property
    def data_version(self) -> int:
        return self.session.data_version

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
            valuation.book.take(rows),
            valuation.market,
            valuation.valuation_time,
            tz=valuation.tz,
            boundaries=valuation.boundaries,
        )
    symbols = sorted({v.book.underlyings.symbols[int(i)] for i in np.unique(v.book.underlying_idx)})
    series: dict[str, tuple[float, ...]] = {}
    roll = f"after {days:g} day{'s' if days != 1 else ''}"
    # Money of different currencies is never added: one curve per currency when there are several.
    parts = [("", v)]
    if len(v.currencies) > 1:
        parts = [
            (f" {c}", v.take(np.flatnonzero(v.position_currencies == c))) for c in v.currencies
        ]
    if axis == "spot":
        half = float(settings.profile_spot_pct)
        xs = np.linspace(-half, half, int(settings.profile_points))
        x_label = "spot move, % of every spot"
    else:
        n_days = int(settings.profile_days)
        xs = np.arange(0, n_days + 1, max(1, n_days // 30), dtype=np.float64)
        x_label = "calendar days forward"
    y_label = "P&L (currency)" if greek == "pnl" else PROFILE_FIELDS[greek][1]
    for suffix, vc in parts:
        if axis == "spot" and greek == "pnl":
            pcts = xs.tolist()
            series["today" + suffix] = tuple(
                scenario.ladder(vc, pcts, (0.0,), days=0.0).full[:, 0].tolist()
            )
            if days:
                series[roll + suffix] = tuple(
                    scenario.ladder(vc, pcts, (0.0,), days=days).full[:, 0].tolist()
                )
        elif axis == "spot":
            field_name = PROFILE_FIELDS[greek][0]
            for name, d in [("today", 0.0)] + ([(roll, float(days))] if days else []):
                curve = scenario.greek_profile(vc, field_name, xs.tolist(), days=d)
                series[name + suffix] = tuple(float(x) for x in curve)
        elif greek == "pnl":
            series["P&L" + suffix] = tuple(
                float(
                    scenario.apply_move(
                        vc, scenario.Move(text=f"days {d:g}", days=float(d))
                    ).total.full
                )
                if d
                else 0.0
                for d in xs
            )
        else:
            field_name = PROFILE_FIELDS[greek][0]
            series[y_label.split(" (")[0] + suffix] = tuple(
                float(scenario.greek_profile(vc, field_name, (0.0,), days=float(d))[0])
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


# -- Marks screen -----------------------------------------------------------------------------
MARK_KINDS = ("spot", "vol", "div_yield", "rate")
"""Kinds of mark point the Marks screen lists, in screen order."""

STALE_AFTER = timedelta(days=1)
"""A mark in force unchanged for longer than this is listed as stale at the close."""


@dataclass(frozen=True)
class MarkPoint:
    """One mark point: the value in force, the last close's and when it was last marked.

    ``value`` and ``close_value`` are as stored (spot in currency, vol/rate/yield decimal); None
    when there is no such mark. ``needed`` is True when a position depends on a missing point.
    """

    key: str
    kind: str
    symbol: str | None
    currency: str | None
    expiry: Any  # datetime.date | None
    strike: float | None
    tenor_days: int | None
    value: float | None
    close_value: float | None
    marked_at: datetime | None
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
            return fmt.number(value, 2)
        return f"{value * 100:.2f}%"

    def change(self) -> str:
        """In force − last close, in the screen's unit (vol in points, rate/yield in bp)."""
        if self.value is None or self.close_value is None:
            return ""
        d = self.value - self.close_value
        if self.kind == "spot":
            return fmt.number(d, 2, signed=True) if d else "0"
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
    """The Marks screen's rows and what a close now would record."""

    points: tuple[MarkPoint, ...]
    last_close_id: int | None
    last_close_at: datetime | None
    data_version: int
    close_day: date | None = None  # the business date a close written now closes
    day_closed_by: int | None = None  # the close in force for that date: a close now corrects it


MISSING_CURVE_TENOR_DAYS = 365
"""Tenor (days) of the point offered for a currency with no rate curve: one point is a flat curve,
so any tenor serves; a year reads naturally."""


def marks_view(st: Any, book: Book | None) -> MarksView:
    """Mark points in force beside the last close, plus points the book needs but nobody marked.

    ``st`` is a ``store.Store``; ``book`` (the live book) says which spots and expiries are
    needed. Vol points sort under their underlying, nearest expiry first.
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
            m.marked_at,
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
    stale: tuple[str, ...]  # marks unchanged for more than STALE_AFTER
    n_points: int
    close_day: date | None = None  # the business date the close closes
    corrects: int | None = None  # the close of that date it corrects (a date closes once)


def close_review(view: MarksView, now: datetime) -> CloseReview:
    """Sort the points of ``view`` into changed since the last close, missing and stale."""
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
        if p.marked_at is not None and now - p.marked_at > STALE_AFTER:
            stale.append(f"{name} marked {age_words(now - p.marked_at)} ago")
    return CloseReview(
        tuple(changed), tuple(missing), tuple(stale), n, view.close_day, view.day_closed_by
    )


# -- Trades screen and trial trades -----------------------------------------------------------
def trade_text(t: Any, tz: Any) -> tuple[str, ...]:
    """A ``store.TradeRecord`` as the Trades screen's cells: id, time (desk-local month-day and
    clock), contract, quantity, price, state, book, who, source; text typed by people or read
    from files with its control characters escaped (``blotter.printable``)."""
    return (
        str(t.trade_id),
        f"{t.trade_time.astimezone(tz):%m-%d %H:%M}",
        printable(t.contract),
        f"{t.quantity:+,d}",
        f"{t.price:,.4f}".rstrip("0").rstrip("."),
        t.state,
        printable(t.book),
        printable(t.who),
        printable(t.source),
    )


def matches(cells: Sequence[str], query: str) -> bool:
    """Whether every word of ``query`` occurs in the row's cells (case-insensitive)."""
    text = " ".join(cells).lower()
    return all(w in text for w in query.lower().split())
