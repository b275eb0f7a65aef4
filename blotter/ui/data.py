"""What the app's panes lay out, as plain objects: no Textual here, no formulas either.

Every number comes from ``blotter.risk``, ``blotter.scenario`` and the desk's use cases
(``blotter.desk``); this module picks rows out of their arrays, arranges them for the Book pane's
tree (underlying → expiry → position, or expiry bucket → underlying → position), sums risk's
additive desk-unit arrays over those rows, and writes a trade as the Trades screen's cells.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from datetime import datetime
from functools import cached_property
from typing import Any

import numpy as np

from blotter import calendar as cal
from blotter import risk
from blotter.desk.pnl_today import NO_CLOSE, PnlToday
from blotter.desk.session import Session, SpotAge
from blotter.printable import printable
from blotter.scenario.profile import profile_curves
from blotter.ticks import price_text, tick_decimals
from blotter.ui import fmt

BOOK_COLUMNS: tuple[tuple[str, str], ...] = (
    ("spot", "Spot"),
    ("delta_cash", "Δ $"),
    ("gamma_1pct", "Γ 1%"),
    ("gamma_cash_1pct", "Γ$ 1%"),
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

TABLE_COLUMNS: tuple[tuple[str, str], ...] = (
    BOOK_COLUMNS[0],
    ("spot_age", "age"),
    ("pnl_today", "P&L day"),
    *BOOK_COLUMNS[1:],
    ("qty", "qty"),
    ("mark", "mark"),
    ("vol", "vol %"),
    ("days", "days"),
)
"""The Book pane's columns: ``BOOK_COLUMNS`` with the spot's age (``desk.session.spot_ages``) and
P&L today (``desk.pnl_today``) after the spot,
on the total, currency and underlying rows; then, on position rows, the quantity (contracts),
the mark price (the model value per unit on the marks), the implied vol and days to expiry."""

POSITION_COLUMNS = ("qty", "mark", "vol", "days")
"""Columns only a position row fills (``BookRow.detail``)."""

COLUMN_INDEX = {k: i for i, (k, _) in enumerate(BOOK_COLUMNS)}
"""Where each of ``BOOK_COLUMNS`` is in ``BookRow.values``."""

SUM_FIELDS = tuple(k for k, _ in BOOK_COLUMNS if k != "spot")
"""Columns that add up over positions (risk's additive arrays)."""

SHARE_FIELDS = frozenset(risk.SHARE_FIELDS)
"""Columns in shares of one underlying: a row spanning several names shows them as "—"."""

MONEY_COLUMNS = frozenset(risk.MONEY_FIELDS) | {"pnl_today"}
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
    decimals: int = 2  # decimals of the spot (the underlying's tick, ``blotter.ticks``)
    pnl_today: float = math.nan  # since the last close; NaN where it is not worked out
    spot_age: float = math.nan  # seconds since the spot in force was observed (underlying rows)
    spot_stale: bool = False  # an intraday spot older than the setting (``spot_stale_s``)
    detail: tuple[float, ...] = ()  # a position's POSITION_COLUMNS values

    def value(self, column: str) -> float:
        """The row's number in ``column`` (a key of ``TABLE_COLUMNS``); NaN where it has none."""
        if column == "pnl_today":
            return self.pnl_today
        if column == "spot_age":
            return self.spot_age
        if column in POSITION_COLUMNS:
            i = POSITION_COLUMNS.index(column)
            return self.detail[i] if i < len(self.detail) else math.nan
        return self.values[COLUMN_INDEX[column]]


def _row_values(exposure: risk.ExposureRow, spot: float = math.nan) -> tuple[float, ...]:
    s = exposure.spot if exposure.spot is not None else spot
    return (float(s) if s is not None else math.nan,) + tuple(
        float(getattr(exposure, k)) for k in SUM_FIELDS
    )


def position_label(book: Any, i: int) -> str:
    """Short label of position ``i`` under its underlying and expiry: ``4500 C ×-10``."""
    qty = f"×{book.quantities[i]:+,g}"
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
        pnl: PnlToday = NO_CLOSE,
        base: str | None = None,
        spot_ages: Mapping[str, SpotAge] | None = None,
    ) -> None:
        self.valuation = valuation
        self.pnl = pnl
        self.spot_ages: Mapping[str, SpotAge] = spot_ages or {}
        self.base = base  # the book's base currency; None shows no base-currency rows
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
    def _detail(self, i: int) -> tuple[float, ...]:
        """Position ``i``'s quantity, mark price per unit (an option's model value, a hedge's
        spot), implied vol and calendar days to expiry (NaN for a hedge)."""
        v, book = self.valuation, self.book
        if not book.is_option[i]:
            return (float(book.quantities[i]), float(v.spot[i]), math.nan, math.nan)
        return (
            float(book.quantities[i]),
            float(v.greeks.price[i]),
            float(v.vol[i]),
            float(v.years[i]) * 365.0,
        )

    def _pnl_total(self, currency: str | None) -> float:
        """P&L today of the rows in ``currency``; NaN under trials (they are not in it)."""
        if np.asarray(self.book.is_trial).any():
            return math.nan
        return self.pnl.total(currency)

    def _decimals(self, underlying: int | None) -> int:
        """Decimals of the spot of underlying number ``underlying`` (its tick's)."""
        if underlying is None:
            return 2
        return tick_decimals(self.book.underlyings.ticks[underlying])

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
                decimals=self._decimals(int(book.underlying_idx[i])) + 2,
                detail=self._detail(int(i)),
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
            pnl_today=self._pnl_total(self._total.currency),
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
                pnl_today=self._pnl_total(r.currency),
            )
            for r in risk.currency_totals(self.valuation)
        ]

    @cached_property
    def _in_base(self) -> tuple[risk.FxRates, risk.FxDelta] | None:
        """The FX rates and FX delta in the base currency, when the book holds anything outside
        it (else None: a base row would repeat the total)."""
        if self.base is None:
            return None
        fx = risk.valuation_fx_rates(self.valuation, self.base)
        delta = risk.fx_delta(self.valuation, fx)
        if not (set(self.currencies) - {self.base} or delta.by_currency):
            return None
        return fx, delta

    def base_total(self) -> BookRow | None:
        """The book's total in the base currency at the marked FX spots (share counts "—"; money
        "—" when a pair has no spot), or None when nothing is outside the base."""
        found = self._in_base
        if found is None:
            return None
        fx = found[0]
        row = risk.base_total(self.valuation, fx)
        return BookRow(
            key="base",
            level=0,
            label=f"all in {fx.base}",
            values=_row_values(row),
            mixed=True,
            currency=fx.base,
            mixed_currency=bool(fx.missing),
        )

    def fx_delta_words(self) -> str:
        """The FX delta line under the Book pane ("" when nothing is outside the base)."""
        found = self._in_base
        if found is None:
            return ""
        fx, delta = found
        parts = [
            f"{c} {fmt.money(x) if math.isfinite(x) else fmt.NOT_ADDITIVE}"
            for c, x in delta.by_currency.items()
        ] or ["none"]
        missing = [m.words() for m in (*fx.missing_marks(), *delta.missing)]
        unread = [f"{u}: legs not read off its symbol" for u in delta.unread]
        line = f"FX delta, {fx.base} per +1% against {fx.base}: {' · '.join(parts)}"
        return " │ ".join([line, *dict.fromkeys(missing), *unread])

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

    def _age_of(self, symbol: str) -> dict[str, Any]:
        """``spot_age`` and ``spot_stale`` of an underlying row (nothing without a spot)."""
        age = self.spot_ages.get(symbol)
        return {} if age is None else {"spot_age": age.seconds, "spot_stale": age.stale}

    def top(self, group: str) -> Sequence[BookRow]:
        trials = bool(np.asarray(self.book.is_trial).any())
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
                    decimals=self._decimals(r.index),
                    pnl_today=self.pnl.of(r.label) if not trials else math.nan,
                    **self._age_of(r.label),
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
                        decimals=self._decimals(int(j)),
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
    read_at: datetime  # the clock when the load read the store (aware)
    books: tuple[str, ...] = ()  # every book of the file, for the book switch

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
    """Curves for the Reval pane: ``xs`` along the axis, one series per name, with units.

    ``kinds`` gives each series' kind (``"full"`` or ``"estimate"``) and whether it is drawn
    after the bar's day roll, ``legend`` its date and its name under that date (the chart's
    legend writes each date once); ``axis`` is ``"spot"`` or ``"days"``.
    """

    title: str
    x_label: str
    xs: tuple[float, ...]
    series: dict[str, tuple[float, ...]]
    y_label: str
    note: str = ""
    kinds: dict[str, tuple[str, bool]] = field(default_factory=dict)
    legend: dict[str, tuple[str, str]] = field(default_factory=dict)
    axis: str = "spot"


PROFILE_FIELDS = {
    "delta": ("delta_cash", "Δ $ (currency)"),
    "gamma": ("gamma_1pct", "Γ 1% (shares)"),
    "vega": ("vega_pt", "vega (per vol pt)"),
    "theta": ("theta_day", "θ day (per day)"),
}
"""Reval pane greeks: risk field and the axis label with its unit."""


def profile(
    valuation: risk.BookValuation,
    settings: Any,
    greek: str,
    axis: str,
    days: float,
    rows: np.ndarray | None = None,
    label: str = "book",
) -> ProfileData:
    """The Reval pane's title, axis labels and curve names around ``profile_curves`` (P&L or a
    greek of the book, or of ``rows`` only, against spot % or days forward); spot curves are
    named by the desk-local date they are valued on, with the roll in days beside a later one."""
    one = valuation.currencies[0] if len(valuation.currencies) == 1 else "each currency"
    y_label = f"P&L ({one})" if greek == "pnl" else PROFILE_FIELDS[greek][1]
    curves = profile_curves(
        valuation,
        "pnl" if greek == "pnl" else PROFILE_FIELDS[greek][0],
        axis,
        days,
        spot_pct=float(settings.profile_spot_pct),
        points=int(settings.profile_points),
        horizon_days=int(settings.profile_days),
        rows=rows,
    )
    t0 = valuation.valuation_time
    today = str(cal.local_date(t0, valuation.tz))
    later = f"{cal.local_date(cal.roll_calendar_days(t0, days), valuation.tz)} (+{days:g}d)"
    series: dict[str, tuple[float, ...]] = {}
    kinds: dict[str, tuple[str, bool]] = {}
    legend: dict[str, tuple[str, str]] = {}
    for curve in curves.curves:
        date = "" if curve.days is None else today if curve.days == 0 else later
        short = curve.kind if greek == "pnl" else y_label.split(" (")[0]
        short = " ".join(w for w in (short, curve.currency) if w)
        name = " ".join(w for w in (date, short) if w)
        series[name] = curve.ys
        kinds[name] = (curve.kind, bool(curve.days))
        legend[name] = (date, short)
    names = {"pnl": "P&L", "delta": "Δ $", "gamma": "Γ 1%", "vega": "vega", "theta": "θ day"}
    across = "across spot" if axis == "spot" else f"over days from {today}"
    title = f"Reval: {names[greek]} of {label} {across}"
    if greek == "pnl":
        title += " ─ full vs greeks' estimate"
    note = "sticky-strike vols" if axis == "spot" else "spot and vols held"
    if greek == "gamma" and len(curves.underlyings) > 1:
        note += "; Γ 1% adds share counts of different names"
    return ProfileData(
        title=title,
        x_label="spot move, % of every spot" if axis == "spot" else "calendar days forward",
        xs=curves.xs,
        series=series,
        y_label=y_label,
        note=note,
        kinds=kinds,
        legend=legend,
        axis=axis,
    )


# -- Trades screen ---------------------------------------------------------------------------
def trade_text(t: Any, tz: Any, decimals: int = 2) -> tuple[str, ...]:
    """A ``store.TradeRecord`` as the Trades screen's cells: id, time (desk-local month-day and
    clock), contract, quantity, price (to ``decimals``, more when it carries more), state, book,
    who, source; text typed by people or read from files with its control characters escaped
    (``blotter.printable``)."""
    return (
        str(t.trade_id),
        f"{t.trade_time.astimezone(tz):%m-%d %H:%M}",
        printable(t.contract),
        f"{t.quantity:+,d}",
        price_text(t.price, decimals),
        t.state,
        printable(t.book),
        printable(t.who),
        printable(t.source),
    )


def matches(cells: Sequence[str], query: str) -> bool:
    """Whether every word of ``query`` occurs in the row's cells (case-insensitive)."""
    text = " ".join(cells).lower()
    return all(w in text for w in query.lower().split())
