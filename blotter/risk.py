"""Value a book on a market and aggregate its exposures in desk units.

``value_book`` turns a ``Book`` and a ``Market`` into engine inputs (spot, years, rate, carry, vol
per position), calls the engine once, and keeps per-position arrays in desk units:

- ``delta_shares`` Δ × quantity × multiplier (shares of the underlying); stock and futures hedges
  count 1 per unit and carry no other greek;
- ``delta_cash`` Δ sh × spot (currency); ``beta_delta_cash`` Δ $ × the underlying's beta to the
  book's reference index;
- ``gamma_1pct`` change in Δ sh for a 1% rise in spot (Γ × S / 100); ``gamma_cash_1pct`` change
  in Δ $ for a 1% rise (Γ × S² / 100, currency), which adds across names of one currency;
- ``vega_pt`` P&L for +1 vol point (engine vega / 100); ``weighted_vega_pt`` vega_pt × √(T_ref/T)
  with T floored at ``WEIGHT_FLOOR_DAYS``;
- ``theta_day`` P&L for one calendar day (engine theta / 365);
- ``rho_pct`` P&L for +1 percentage point of rate. For stock, index and FX underlyings the carry
  b = r − q (or r − r_foreign) moves with the rate, so ρ = engine rho + carry_rho; for options on
  futures b = 0 whatever the rate, so ρ = engine rho alone;
- ``vanna_pt`` change in Δ sh for +1 vol point (engine vanna / 100); ``volga_pt`` change in
  vega_pt for +1 vol point (engine volga / 10 000).

The base valuation is computed once per (book, market, time) and reused by every what-if.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field, replace
from datetime import date
from functools import cached_property
from typing import Any, Literal
from zoneinfo import ZoneInfo

import numpy as np

from blotter import calendar as cal
from blotter import engine
from blotter.arrays import read_only
from blotter.book import Book, Underlyings
from blotter.engine.american import DOUBLE_BOUNDARY, NOT_CONVERGED
from blotter.market import Market

DEFAULT_T_REF_DAYS = 30.0
"""Reference tenor of term-weighted vega and weighted vol moves, calendar days."""

WEIGHT_FLOOR_DAYS = 7.0
"""Expiries shorter than this are weighted as if this long, so √(T_ref/T) stays bounded (≤ 2.07)."""

EXPOSURE_FIELDS = (
    "value",
    "delta_shares",
    "delta_cash",
    "gamma_1pct",
    "vega_pt",
    "theta_day",
    "rho_pct",
    "vanna_pt",
    "volga_pt",
    "beta_delta_cash",
    "weighted_vega_pt",
    "gamma_cash_1pct",
)
"""Additive per-position desk-unit arrays of a ``BookValuation``, in ``ExposureRow`` order."""

SHARE_FIELDS = ("delta_shares", "gamma_1pct", "vanna_pt")
"""Exposures in shares of one underlying: they add only within one name."""

MONEY_FIELDS = tuple(f for f in EXPOSURE_FIELDS if f not in SHARE_FIELDS)
"""Exposures in the instrument's currency: they add only within one currency (no FX here)."""

_PER_POSITION = (
    "spot",
    "years",
    "rate",
    "carry",
    "vol",
    *EXPOSURE_FIELDS,
    "units",
    "beta",
    "vega_weight",
    "rho_unit",
    "rate_moves_carry",
    "live",
    "settles_daily",
    "bucket_codes",
)
"""The (n,) arrays of a ``BookValuation``, which ``BookValuation.take`` slices."""

VEGA_UNITS = {"pt": 1.0, "vol": 100.0}
"""Vega display units: per vol point (0.01 of vol), or per 1.00 of vol."""

Grouping = Literal["underlying", "expiry", "position"]

EPOCH_ORDINAL = date(1970, 1, 1).toordinal()
"""Proleptic ordinal of day 0 of ``datetime64[D]``."""


MARK_COMMANDS = {
    "spot": "blotter mark spot {name} PRICE",
    "vol": "blotter mark vol {name} YYYY-MM-DD VOL",
    "rate": "blotter mark rate {name} DAYS RATE",
    "fx": "blotter underlying add {name} --kind fx --currency {quote}, "
    "then blotter mark spot {name} PRICE",
}
"""The command that logs each kind of mark, by ``MissingMark.kind``."""


@dataclass(frozen=True)
class MissingMark:
    """A mark a position needs and the market lacks: ``kind`` spot, vol or rate, of ``name`` (the
    underlying's symbol, or the currency for a rate); ``fx`` is the spot of an FX pair the book
    does not hold yet (``name`` the pair, base leg then quote leg)."""

    kind: str
    name: str

    @property
    def command(self) -> str:
        """The command that logs this mark, e.g. ``blotter mark spot XYZ PRICE``."""
        return MARK_COMMANDS[self.kind].format(name=self.name, quote=self.name[3:])

    def words(self) -> str:
        """The missing mark for people: ``no spot mark for XYZ``, ``no USD rate curve``."""
        if self.kind == "rate":
            return f"no {self.name} rate curve"
        if self.kind == "fx":
            return f"no spot mark for {self.name} (no such fx underlying yet)"
        return f"no {'spot mark' if self.kind == 'spot' else 'vol surface'} for {self.name}"


@dataclass(frozen=True)
class UnvaluedPosition:
    """A position left out of every value and total because its underlying lacks a mark it needs.

    ``where`` names the market that lacks it when a report uses more than one (explain's start and
    end), else it is empty.
    """

    label: str
    contract_id: int
    underlying: str
    currency: str
    is_trial: bool
    missing: tuple[MissingMark, ...]
    where: str = ""
    closes: tuple[int, ...] = ()  # written mark sets that lack the mark: a correction mends them

    def as_dict(self) -> dict[str, Any]:
        """JSON form: the contract, its underlying and currency, and each missing mark with the
        command that logs it."""
        out: dict[str, Any] = {
            "contract": self.label,
            "contract_id": self.contract_id,
            "underlying": self.underlying,
            "currency": self.currency,
            "is_trial": self.is_trial,
            "missing": [
                {"mark": m.kind, "of": m.name, "command": m.command} for m in self.missing
            ],
        }
        if self.where:
            out["where"] = self.where
        if self.closes:
            out["correct_closes"] = list(self.closes)
        return out


def missing_marks(
    book: Book, market: Market, valuation_time: np.datetime64, where: str = ""
) -> tuple[tuple[UnvaluedPosition, ...], np.ndarray]:
    """The positions ``market`` cannot value at ``valuation_time`` and a bool mask (n,) of those
    it can.

    Every position needs its underlying's spot; an option not yet expired also needs a vol surface
    for the underlying and a rate curve for its currency (an expired option is worth its intrinsic
    value, a hedge units × spot).
    """
    und = book.underlyings
    n = len(book)
    if not n:
        return (), np.ones(0, dtype=bool)
    has_spot = np.array([s in market.spots for s in und.symbols], dtype=bool)
    has_vol = np.array([s in market.surfaces for s in und.symbols], dtype=bool)
    has_rate = np.array([c in market.curves for c in und.currencies], dtype=bool)
    uidx = book.underlying_idx
    if has_spot.all() and has_vol.all() and has_rate.all():
        return (), np.ones(n, dtype=bool)
    years = np.where(book.is_option, cal.year_fraction(valuation_time, book.expiries), np.nan)
    live = book.is_option & (np.nan_to_num(years, nan=0.0) > 0)
    no_spot = ~has_spot[uidx]
    no_vol = live & ~has_vol[uidx]
    no_rate = live & ~has_rate[uidx]
    bad = no_spot | no_vol | no_rate
    out = []
    for i in np.flatnonzero(bad).tolist():
        j = int(uidx[i])
        sym, ccy = und.symbols[j], und.currencies[j]
        missing = [
            MissingMark(kind, name)
            for kind, name, lacks in (
                ("spot", sym, no_spot[i]),
                ("vol", sym, no_vol[i]),
                ("rate", ccy, no_rate[i]),
            )
            if lacks
        ]
        out.append(
            UnvaluedPosition(
                label=book.labels[i],
                contract_id=int(book.contract_ids[i]),
                underlying=sym,
                currency=ccy,
                is_trial=bool(book.is_trial[i]),
                missing=tuple(missing),
                where=where,
            )
        )
    return tuple(out), ~bad


@dataclass(frozen=True, eq=False)
class UnitGreeks:
    """Raw engine greeks per one unit of underlying, one row per position (n,).

    Engine units: vega and volga per 1.00 of vol, theta per year, rho per 1.00 of rate (carry b
    held fixed), carry_rho = dV/db, charm per year. Hedge rows hold price = spot, delta = 1, zeros
    elsewhere; rows of options already past expiry hold intrinsic value and zero greeks.
    """

    price: np.ndarray
    delta: np.ndarray
    gamma: np.ndarray
    vega: np.ndarray
    theta: np.ndarray
    rho: np.ndarray
    carry_rho: np.ndarray
    vanna: np.ndarray
    volga: np.ndarray
    charm: np.ndarray


@dataclass(frozen=True, eq=False)
class BookValuation:
    """A book valued on one market at one instant; per-position arrays have shape (n,).

    Inputs: ``spot`` (currency), ``years`` (ACT/365F to expiry, NaN for hedges), ``rate`` and
    ``carry`` (decimal, continuous; NaN for hedges), ``vol`` (decimal; NaN for hedges). Exposures in
    desk units as in the module docstring; ``value`` is quantity × multiplier × unit price (zero
    for a futures hedge, whose P&L settles daily). ``greeks`` holds the raw per-unit greeks used.
    ``book`` holds the valued positions only; ``unvalued`` lists those a missing mark left out.
    """

    book: Book
    market: Market
    valuation_time: np.datetime64
    spot: np.ndarray
    years: np.ndarray
    rate: np.ndarray
    carry: np.ndarray
    vol: np.ndarray
    value: np.ndarray
    delta_shares: np.ndarray
    delta_cash: np.ndarray
    gamma_1pct: np.ndarray
    vega_pt: np.ndarray
    theta_day: np.ndarray
    rho_pct: np.ndarray
    vanna_pt: np.ndarray
    volga_pt: np.ndarray
    beta_delta_cash: np.ndarray
    weighted_vega_pt: np.ndarray
    gamma_cash_1pct: np.ndarray
    greeks: UnitGreeks
    units: np.ndarray  # quantity × multiplier, units of underlying per position (n,)
    beta: np.ndarray  # beta of each position's underlying (n,)
    vega_weight: np.ndarray  # √(T_ref/max(T, floor)) (n,), 0 for hedges
    rho_unit: np.ndarray  # rho per unit per 1.00 of rate as composed for the desk (n,)
    rate_moves_carry: np.ndarray  # bool (n,): carry b moves one for one with the rate
    live: np.ndarray  # bool (n,): option with years > 0
    settles_daily: np.ndarray  # bool (n,): futures hedge, value 0, P&L = units × Δprice
    underlying_spots: np.ndarray  # spot per underlying (n_u,), NaN when unmarked and unused
    bucket_codes: np.ndarray  # int64 (n,) into ``bucket_labels``
    bucket_labels: tuple[str, ...]
    t_ref_days: float = DEFAULT_T_REF_DAYS
    vega_unit: str = "pt"
    notes: tuple[str, ...] = field(default=())
    unvalued: tuple[UnvaluedPosition, ...] = field(default=())
    tz: ZoneInfo = field(default_factory=cal.desk_tz)  # the desk's zone: buckets, day rolls
    # American exercise boundaries solved for this valuation, reused by every repricing of it
    # (what-ifs, ladders, profiles): a spot move or a day roll changes no boundary.
    boundaries: engine.BoundaryCache = field(
        default_factory=engine.BoundaryCache, repr=False, compare=False
    )

    def __len__(self) -> int:
        return len(self.book)

    @property
    def partial(self) -> bool:
        """True when some positions were left out for want of a mark (``unvalued``)."""
        return bool(self.unvalued)

    @property
    def vega_scale(self) -> float:
        """Multiply ``vega_pt`` by this to show vega in ``vega_unit``."""
        return VEGA_UNITS[self.vega_unit]

    def index_spot(self) -> float | None:
        """Spot of the book's reference index, or None when there is none or it is unmarked."""
        ref = self.book.reference_index
        if ref is None or ref not in self.market.spots:
            return None
        return float(self.market.spots[ref])

    @cached_property
    def currency_codes(self) -> tuple[np.ndarray, tuple[str, ...]]:
        """(int64 (n,) index of each position's currency into the names, the names): every
        currency of the book's underlyings, in their order."""
        names = tuple(dict.fromkeys(self.book.underlyings.currencies))
        per_u = np.array(
            [names.index(c) for c in self.book.underlyings.currencies], dtype=np.int64
        )
        return read_only(per_u[self.book.underlying_idx]), names

    @property
    def position_currencies(self) -> np.ndarray:
        """ISO code of each position's currency (its underlying's), str array (n,)."""
        codes, names = self.currency_codes
        return np.asarray(names, dtype=str)[codes] if len(self) else np.zeros(0, dtype=str)

    @cached_property
    def currencies(self) -> tuple[str, ...]:
        """The currencies of the valued positions, in the order of the book's underlyings."""
        return _present(*self.currency_codes)

    def take(self, rows: np.ndarray) -> BookValuation:
        """The positions ``rows`` (index array) as a valuation of their own: arrays sliced, nothing
        revalued, no notes or unvalued list carried over."""
        idx = np.asarray(rows, dtype=np.int64)
        sliced: dict[str, Any] = {n: read_only(getattr(self, n)[idx]) for n in _PER_POSITION}
        g = self.greeks
        greeks = UnitGreeks(
            **{name: read_only(getattr(g, name)[idx]) for name in UnitGreeks.__dataclass_fields__}
        )
        return replace(
            self, book=self.book.take(idx), greeks=greeks, notes=(), unvalued=(), **sliced
        )


@dataclass(frozen=True)
class ExposureRow:
    """Summed desk-unit exposures of a group of positions (one underlying, expiry bucket, position
    or the whole book). ``spot`` is set for an underlying or a position row, else None.

    Share-unit sums (delta_shares, gamma_1pct, vanna_pt) over several underlyings add share counts
    of different names; compare across underlyings with delta_cash or beta_delta_cash. Money is
    never added across currencies: a row spanning several has ``currency`` None and NaN money.
    """

    key: str
    label: str
    n_positions: int
    value: float
    delta_shares: float
    delta_cash: float
    gamma_1pct: float
    vega_pt: float
    theta_day: float
    rho_pct: float
    vanna_pt: float
    volga_pt: float
    beta_delta_cash: float
    weighted_vega_pt: float
    gamma_cash_1pct: float
    underlying: str | None = None
    spot: float | None = None
    index: int | None = None
    currency: str | None = None  # None when the rows span several: money fields are then NaN

    def exposures(self) -> dict[str, float]:
        """The exposure fields by name (``EXPOSURE_FIELDS`` less ``weighted_vega_pt`` first)."""
        return {name: getattr(self, name) for name in EXPOSURE_FIELDS}


def group_rows(codes: np.ndarray, n_groups: int) -> list[np.ndarray]:
    """Row indices (ascending) of each group code 0..n_groups-1, from one stable sort."""
    order = np.argsort(codes, kind="stable")
    bounds = np.concatenate([[0], np.cumsum(np.bincount(codes, minlength=n_groups))])
    return [order[bounds[j] : bounds[j + 1]] for j in range(n_groups)]


def _carry_and_rate(
    book: Book, market: Market, years: np.ndarray, groups: list[np.ndarray]
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Rate (n,), carry (n,) and the rate-moves-carry mask (n,) from curves, kinds and yields.

    Options take their currency's zero rate at their expiry, hedges the rate at tenor zero.
    """
    und = book.underlyings
    n = len(book)
    rate = np.full(n, np.nan)
    carry = np.full(n, np.nan)
    moves = np.zeros(n, dtype=bool)
    t = np.where(book.is_option, np.maximum(np.nan_to_num(years), 0.0), 0.0)
    for i, rows in enumerate(groups):
        if not rows.size:
            continue
        kind, sym = und.kinds[i], und.symbols[i]
        if und.currencies[i] not in market.curves:
            continue  # only hedges and expired options here (``missing_marks``): they need no rate
        rate[rows] = market.curve(und.currencies[i]).rate_at(t[rows])
        q = float(market.div_yields.get(sym, und.div_yields[i]))
        if kind == "future":
            carry[rows] = 0.0
        elif kind in ("stock", "index", "fx"):
            carry[rows] = rate[rows] - q
            moves[rows] = True
        else:
            raise ValueError(f"underlying {sym!r} has unknown kind {kind!r}")
    return rate, carry, moves


def expiry_buckets(
    expiries: np.ndarray,
    is_option: np.ndarray,
    valuation_time: np.datetime64,
    tz: ZoneInfo | None = None,
    expiry_dates: np.ndarray | None = None,
) -> tuple[np.ndarray, tuple[str, ...]]:
    """Expiry bucket of each position: codes (n,) into ordered labels.

    Buckets, by the expiry date as traded (``expiry_dates``; else the cut-off's date in ``tz``)
    against today in the desk's zone ``tz``: "expired" (cut-off instant passed), "this week" (to
    the coming Sunday), "this month" (rest of the calendar month), then each of the next 12
    months ("2027-01"), then each later calendar year ("2028"), and "hedges" for stock and
    futures positions.
    """
    zone = tz if tz is not None else cal.desk_tz()
    today = cal.to_datetime(valuation_time, zone).date()
    week_end = today.toordinal() + (6 - today.weekday())
    month0 = today.year * 12 + today.month - 1

    def key_of(d: date | None, expired: bool) -> tuple[tuple[int, int], str]:
        if d is None:
            return (9, 0), "hedges"
        if expired:
            return (0, 0), "expired"
        if d.toordinal() <= week_end:
            return (1, 0), "this week"
        m = d.year * 12 + d.month - 1
        if m == month0:
            return (2, 0), "this month"
        if m - month0 <= 12:
            return (3, m), f"{d.year:04d}-{d.month:02d}"
        return (4, d.year), f"{d.year:04d}"

    names: dict[tuple[int, int], str] = {}
    days = cal.local_dates(expiries, zone) if expiry_dates is None else expiry_dates
    # One int64 key per (cut-off, expiry date): the date is the cut-off's UTC date ± 1 day.
    at = np.asarray(expiries, "datetime64[s]").astype(np.int64)
    shift = np.asarray(days, "datetime64[D]").astype(np.int64) - np.floor_divide(at, 86400) + 1
    hedge = np.iinfo(np.int64).min  # one key for every hedge (NaT never equals NaT)
    uniq, inverse = np.unique(np.where(is_option, at * 4 + shift, hedge), return_inverse=True)
    now_s = int(np.asarray(valuation_time, "datetime64[s]").astype(np.int64))
    per_unique: list[tuple[int, int]] = []
    for key in uniq.tolist():
        if key == hedge:
            k, name = key_of(None, False)
        else:
            at_s = key // 4
            day = at_s // 86400 + key % 4 - 1
            k, name = key_of(date.fromordinal(EPOCH_ORDINAL + day), at_s <= now_s)
        names[k] = name
        per_unique.append(k)
    keys = sorted(set(per_unique))
    order = {k: i for i, k in enumerate(keys)}
    labels = [names[k] for k in keys]
    lookup = np.array([order[k] for k in per_unique], dtype=np.int64)
    codes = lookup[inverse.reshape(-1)] if len(expiries) else np.zeros(0, dtype=np.int64)
    return codes, tuple(labels)


def value_book(
    book: Book,
    market: Market,
    valuation_time: np.datetime64 | None = None,
    *,
    vega_unit: str = "pt",
    t_ref_days: float = DEFAULT_T_REF_DAYS,
    tz: ZoneInfo | None = None,
    boundaries: engine.BoundaryCache | None = None,
) -> BookValuation:
    """Value every position of ``book`` on ``market`` at ``valuation_time`` (UTC; None = now).

    Returns per-position arrays (n,) in desk units (see the module docstring); ``tz`` is the
    desk's zone (the ``desk_tz`` setting; ``calendar.desk_tz()`` when None), kept for expiry
    buckets and day rolls. Positions whose underlying lacks a mark they need
    (``missing_marks``) are left out and listed in ``unvalued``, so one unmarked name never
    blanks the rest of the book. ``boundaries`` shares solved American exercise boundaries with
    another valuation of the same book (e.g. a profile's shocked spots); a new cache otherwise.
    """
    if vega_unit not in VEGA_UNITS:
        raise ValueError(f"vega_unit must be one of {', '.join(VEGA_UNITS)}, not {vega_unit!r}")
    t = cal.valuation_time(valuation_time)
    unvalued, valued = missing_marks(book, market, t)
    if unvalued:
        book = book.take(np.flatnonzero(valued))
    zone = tz if tz is not None else cal.desk_tz()
    cache = boundaries if boundaries is not None else engine.BoundaryCache()
    und = book.underlyings
    n = len(book)
    uidx = book.underlying_idx
    opt = book.is_option

    groups = group_rows(uidx, len(und))
    u_spots = np.full(len(und), np.nan)
    for i, rows in enumerate(groups):
        if rows.size:
            u_spots[i] = market.spot(und.symbols[i])
    spot = u_spots[uidx] if n else np.zeros(0)

    years = np.where(opt, cal.year_fraction(t, book.expiries), np.nan) if n else np.zeros(0)
    live = opt & (np.nan_to_num(years, nan=0.0) > 0)
    rate, carry, moves = _carry_and_rate(book, market, years, groups)

    vol = np.full(n, np.nan)
    for i, rows in enumerate(groups):
        rows = rows[opt[rows]]
        if rows.size and und.symbols[i] in market.surfaces:  # else expired only: no vol needed
            vol[rows] = market.vols_for(
                und.symbols[i],
                book.expiries[rows],
                book.strikes[rows],
                t,
                expiry_dates=book.expiry_dates[rows],
            )

    g = {
        name: np.zeros(n)
        for name in (
            "price",
            "delta",
            "gamma",
            "vega",
            "theta",
            "rho",
            "carry_rho",
            "vanna",
            "volga",
            "charm",
        )
    }
    hedge = ~opt
    g["price"][hedge] = spot[hedge]
    g["delta"][hedge] = 1.0
    expired = opt & ~live
    if expired.any():
        g["price"][expired] = intrinsic(book.is_call[expired], spot[expired], book.strikes[expired])
    if live.any():
        res = engine.price_greeks(
            book.is_call[live],
            spot[live],
            book.strikes[live],
            years[live],
            rate[live],
            carry[live],
            vol[live],
            american=book.american[live],
            boundaries=cache,
        )
        for name in g:
            g[name][live] = np.asarray(getattr(res, name), dtype=np.float64)
    greeks = UnitGreeks(**{k: read_only(v) for k, v in g.items()})

    units = book.quantities * book.multipliers
    beta = und.betas[uidx] if n else np.zeros(0)
    is_future_hedge = (
        hedge & np.array([und.kinds[i] == "future" for i in range(len(und))], dtype=bool)[uidx]
        if n
        else np.zeros(0, dtype=bool)
    )
    floor_years = WEIGHT_FLOOR_DAYS / 365.0
    with np.errstate(invalid="ignore", divide="ignore"):
        weight = np.where(
            live, np.sqrt((t_ref_days / 365.0) / np.maximum(np.nan_to_num(years), floor_years)), 0.0
        )
    rho_unit = g["rho"] + np.where(moves, g["carry_rho"], 0.0)

    delta_shares = g["delta"] * units
    vega_pt = g["vega"] / 100.0 * units
    arrays = {
        "value": np.where(is_future_hedge, 0.0, g["price"] * units),
        "delta_shares": delta_shares,
        "delta_cash": delta_shares * spot,
        "gamma_1pct": g["gamma"] * spot * 0.01 * units,
        "vega_pt": vega_pt,
        "theta_day": g["theta"] / 365.0 * units,
        "rho_pct": rho_unit / 100.0 * units,
        "vanna_pt": g["vanna"] / 100.0 * units,
        "volga_pt": g["volga"] / 1e4 * units,
        "beta_delta_cash": delta_shares * spot * beta,
        "weighted_vega_pt": vega_pt * weight,
        # PRACTICE.md §1 (common practice): dollar gamma, the change in Δ $ for a 1% move.
        "gamma_cash_1pct": g["gamma"] * spot * spot * 0.01 * units,
    }
    codes, labels = expiry_buckets(book.expiries, opt, t, zone, book.expiry_dates)
    notes = _valuation_notes(book, live, years, rate, carry)
    return BookValuation(
        book=book,
        market=market,
        valuation_time=t,
        spot=read_only(spot),
        years=read_only(years),
        rate=read_only(rate),
        carry=read_only(carry),
        vol=read_only(vol),
        **{k: read_only(v) for k, v in arrays.items()},
        greeks=greeks,
        units=read_only(units),
        beta=read_only(beta),
        vega_weight=read_only(weight),
        rho_unit=read_only(rho_unit),
        rate_moves_carry=read_only(moves),
        live=read_only(live),
        settles_daily=read_only(is_future_hedge),
        underlying_spots=read_only(u_spots),
        bucket_codes=read_only(codes),
        bucket_labels=labels,
        t_ref_days=float(t_ref_days),
        vega_unit=vega_unit,
        notes=tuple(notes),
        unvalued=unvalued,
        tz=zone,
        boundaries=cache,
    )


def moved_underlyings(und: Underlyings, before: Market, after: Market) -> np.ndarray:
    """Bool (n_u,): the underlyings whose marks differ from ``before`` to ``after`` (spot, vol
    surface, dividend yield, or the rate curve of their currency); what a position is valued
    on comes from these alone (with the valuation time)."""
    out = np.zeros(len(und.symbols), dtype=bool)
    for i, (sym, ccy) in enumerate(zip(und.symbols, und.currencies, strict=True)):
        out[i] = (
            before.spots.get(sym) != after.spots.get(sym)
            or before.div_yields.get(sym) != after.div_yields.get(sym)
            or not _same_arrays(before.surfaces.get(sym), after.surfaces.get(sym))
            or not _same_arrays(before.curves.get(ccy), after.curves.get(ccy))
        )
    return out


def _same_arrays(a: object, b: object) -> bool:
    """Whether two surfaces or two curves (or two Nones) hold the same values, NaN equal to
    NaN (an ATM vol's strike; a surface's ``atm_strike``)."""
    if a is None or b is None:
        return a is b
    fields = a.__dataclass_fields__  # type: ignore[attr-defined]
    return type(a) is type(b) and all(
        np.array_equal(getattr(a, f), getattr(b, f), equal_nan=True) for f in fields
    )


def revalue(previous: BookValuation, market: Market) -> BookValuation:
    """``previous``'s book on ``market`` at ``previous``'s instant: the positions of the
    underlyings whose marks moved (``moved_underlyings``) are valued again, the others' rows
    kept, so it equals ``value_book`` of the book on ``market`` (on ``previous``'s boundaries).

    Under a feed that writes a few names a second this values only those names' positions.
    A valuation that leaves a position out for a missing mark (before or after) is done whole.
    """
    book, t = previous.book, previous.valuation_time

    def whole(rows: Book) -> BookValuation:
        return value_book(
            rows,
            market,
            t,
            vega_unit=previous.vega_unit,
            t_ref_days=previous.t_ref_days,
            tz=previous.tz,
            boundaries=previous.boundaries,
        )

    moved = moved_underlyings(book.underlyings, previous.market, market)
    rows = np.flatnonzero(moved[book.underlying_idx])
    if previous.unvalued or rows.size == len(book):
        return whole(book)
    sub = whole(book.take(rows))
    if sub.unvalued:
        return whole(book)

    def spliced(old: np.ndarray, new: np.ndarray) -> np.ndarray:
        out = np.array(old, copy=True)
        out[rows] = new
        return read_only(out)

    arrays: dict[str, Any] = {
        name: spliced(getattr(previous, name), getattr(sub, name))
        for name in _PER_POSITION
        if name != "bucket_codes"  # codes into ``bucket_labels``, which hang on time alone
    }
    greeks = UnitGreeks(
        **{
            name: spliced(getattr(previous.greeks, name), getattr(sub.greeks, name))
            for name in UnitGreeks.__dataclass_fields__
        }
    )
    notes = _valuation_notes(book, arrays["live"], arrays["years"], arrays["rate"], arrays["carry"])
    return replace(
        previous,
        market=market,
        greeks=greeks,
        underlying_spots=read_only(
            np.where(moved, sub.underlying_spots, previous.underlying_spots)
        ),
        notes=tuple(notes),
        **arrays,
    )


def _valuation_notes(
    book: Book, live: np.ndarray, years: np.ndarray, rate: np.ndarray, carry: np.ndarray
) -> list[str]:
    """A valuation's notes: options past expiry at intrinsic, American ones at a lower bound."""
    expired = book.is_option & ~live
    notes = []
    if expired.any():
        notes.append(f"{int(expired.sum())} option position(s) past expiry valued at intrinsic")
    return notes + _american_notes(book, live, years, rate, carry)


LOWER_BOUND_CODES = (DOUBLE_BOUNDARY, NOT_CONVERGED)
"""American status codes whose value is a lower bound, not the converged value."""

LOWER_BOUND_WORDS = "American position(s) at a lower bound"
"""Words in every valuation note about American positions valued at a lower bound."""


def _american_notes(
    book: Book, live: np.ndarray, years: np.ndarray, rate: np.ndarray, carry: np.ndarray
) -> list[str]:
    """Words for American positions the engine values at a lower bound (negative rates on both
    sides give two exercise boundaries), naming the positions, so no such value passes unsaid."""
    rows = np.flatnonzero(live & book.american)
    if not rows.size:
        return []
    codes = engine.american_status(book.is_call[rows], years[rows], rate[rows], carry[rows])
    out = []
    for code in LOWER_BOUND_CODES:
        hit = rows[codes == code]
        if hit.size:
            names = ", ".join(book.labels[i] for i in hit[:3].tolist())
            more = f" and {hit.size - 3} more" if hit.size > 3 else ""
            out.append(
                f"{hit.size} {LOWER_BOUND_WORDS} "
                f"({engine.AMERICAN_STATUS[code]}): {names}{more}"
            )
    return out


def intrinsic(
    is_call: np.ndarray | bool, spot: np.ndarray | float, strike: np.ndarray | float
) -> np.ndarray:
    """Intrinsic value per unit, broadcast shapes: max(S − K, 0) for calls, max(K − S, 0) for
    puts (currency per unit of underlying)."""
    return np.maximum(np.where(is_call, 1.0, -1.0) * (np.asarray(spot) - strike), 0.0)


def _sums(valuation: BookValuation, codes: np.ndarray, n_groups: int) -> dict[str, np.ndarray]:
    """Each exposure array summed per group code, (n_groups,) per field."""
    return {
        name: np.bincount(codes, weights=getattr(valuation, name), minlength=n_groups)
        for name in EXPOSURE_FIELDS
    }


def _present(codes: np.ndarray, names: tuple[str, ...]) -> tuple[str, ...]:
    """The names whose index appears in ``codes``, in the order of ``names``."""
    seen = np.bincount(codes, minlength=len(names)) > 0
    return tuple(n for n, there in zip(names, seen.tolist(), strict=True) if there)


def _exposure_row(
    key: str,
    label: str,
    n_positions: int,
    values: dict[str, float],
    underlying: str | None = None,
    spot: float | None = None,
    index: int | None = None,
    currencies: Sequence[str] = (),
) -> ExposureRow:
    """A row of ``values``; over more than one of ``currencies`` its money fields are NaN."""
    if len(set(currencies)) > 1:
        values = {**values, **dict.fromkeys(MONEY_FIELDS, float("nan"))}
    return ExposureRow(
        key=key,
        label=label,
        n_positions=n_positions,
        value=values["value"],
        delta_shares=values["delta_shares"],
        delta_cash=values["delta_cash"],
        gamma_1pct=values["gamma_1pct"],
        vega_pt=values["vega_pt"],
        theta_day=values["theta_day"],
        rho_pct=values["rho_pct"],
        vanna_pt=values["vanna_pt"],
        volga_pt=values["volga_pt"],
        beta_delta_cash=values["beta_delta_cash"],
        weighted_vega_pt=values["weighted_vega_pt"],
        gamma_cash_1pct=values["gamma_cash_1pct"],
        underlying=underlying,
        spot=spot,
        index=index,
        currency=currencies[0] if len(set(currencies)) == 1 else None,
    )


def aggregate(valuation: BookValuation, by: Grouping = "underlying") -> list[ExposureRow]:
    """Exposure rows grouped ``by`` underlying (book order, those with positions), expiry bucket
    (nearest first) or position (book order)."""
    book = valuation.book
    und = book.underlyings
    if by == "position":
        cols = {name: getattr(valuation, name).tolist() for name in EXPOSURE_FIELDS}
        ids = book.contract_ids.tolist()
        uidx = book.underlying_idx.tolist()
        spots = valuation.spot.tolist()
        return [
            _exposure_row(
                str(ids[i]),
                book.labels[i],
                1,
                {k: c[i] for k, c in cols.items()},
                underlying=und.symbols[uidx[i]],
                spot=spots[i],
                index=i,
                currencies=(und.currencies[uidx[i]],),
            )
            for i in range(len(book))
        ]
    if by == "underlying":
        codes, n_groups = book.underlying_idx, len(und)
        names = und.symbols
    elif by == "expiry":
        codes, n_groups = valuation.bucket_codes, len(valuation.bucket_labels)
        names = valuation.bucket_labels
    else:
        raise ValueError(f"by must be underlying, expiry or position, not {by!r}")
    sums = _sums(valuation, codes, n_groups)
    counts = np.bincount(codes, minlength=n_groups)
    ccy, ccy_names = valuation.currency_codes
    # Which currencies each group holds: one pass over (group, currency) pairs.
    held = np.bincount(codes * len(ccy_names) + ccy, minlength=n_groups * len(ccy_names)) > 0
    held = held.reshape(n_groups, len(ccy_names))
    rows = []
    for j in range(n_groups):
        if counts[j] == 0:
            continue
        values = {k: float(v[j]) for k, v in sums.items()}
        if by == "underlying":
            rows.append(
                _exposure_row(
                    names[j],
                    names[j],
                    int(counts[j]),
                    values,
                    underlying=names[j],
                    spot=float(valuation.underlying_spots[j]),
                    index=j,
                    currencies=(und.currencies[j],),
                )
            )
        else:
            in_bucket = tuple(c for c, there in zip(ccy_names, held[j], strict=True) if there)
            rows.append(
                _exposure_row(
                    names[j], names[j], int(counts[j]), values, index=j, currencies=in_bucket
                )
            )
    return rows


def total(
    valuation: BookValuation, rows: np.ndarray | None = None, label: str = "total"
) -> ExposureRow:
    """The exposures of the whole book, or of the positions ``rows`` (index array), in one row.

    With ``rows``, ``underlying`` is set when every position summed has the same underlying, so a
    caller can tell whether the share-unit sums (Δ sh, Γ 1%, vanna) mean anything. Over several
    currencies the money fields are NaN (``currency_totals`` gives each currency's).
    """
    if rows is None:
        values = {name: float(np.sum(getattr(valuation, name))) for name in EXPOSURE_FIELDS}
        return _exposure_row(
            label, label, len(valuation), values, currencies=valuation.currencies
        )
    rows = np.asarray(rows, dtype=np.int64)
    values = {name: float(np.sum(getattr(valuation, name)[rows])) for name in EXPOSURE_FIELDS}
    n = len(rows)
    names = np.unique(valuation.book.underlying_idx[rows])
    underlying = valuation.book.underlyings.symbols[int(names[0])] if len(names) == 1 else None
    ccy, ccy_names = valuation.currency_codes
    in_rows = _present(ccy[rows], ccy_names)
    return _exposure_row(label, label, n, values, underlying=underlying, currencies=in_rows)


def currency_totals(
    valuation: BookValuation, rows: np.ndarray | None = None, label: str = "total"
) -> list[ExposureRow]:
    """``total`` of each currency's positions (of ``rows``, or of the whole book), one row per
    currency in the order of the book's underlyings."""
    ccy, names = valuation.currency_codes
    picked = np.arange(len(valuation)) if rows is None else np.asarray(rows, dtype=np.int64)
    return [
        total(valuation, picked[ccy[picked] == k], label)
        for k in range(len(names))
        if (ccy[picked] == k).any()
    ]


def beta_delta_index_units(valuation: BookValuation) -> float | None:
    """Beta-weighted delta in units of the reference index (Σ Δ $ × β / S_index), or None; None
    too when a position's currency is not the index's (no FX conversion here)."""
    s_idx = valuation.index_spot()
    if s_idx is None:
        return None
    und = valuation.book.underlyings
    ref = valuation.book.reference_index
    if ref in und.symbols and set(valuation.currencies) - {und.currencies[und.index_of(ref)]}:
        return None
    return float(np.sum(valuation.beta_delta_cash)) / s_idx


FX_PCT = 1.0
"""The rise of a currency against the base that ``fx_delta`` is per, percent."""


@dataclass(frozen=True)
class FxRates:
    """Base-currency units per one unit of each currency, read off the marked FX spots.

    ``rates`` holds the currencies that convert (the base itself at 1.0); ``missing`` the others,
    each with the pair spot that would convert it.
    """

    base: str
    rates: dict[str, float]
    missing: dict[str, MissingMark]

    def rate(self, currency: str) -> float:
        """Base per one unit of ``currency``; NaN when its pair has no spot mark."""
        return self.rates.get(currency, float("nan"))

    def missing_marks(self, currencies: Sequence[str] | None = None) -> tuple[MissingMark, ...]:
        """The missing pair spots (of ``currencies`` only, when given), one per pair."""
        keep = self.missing if currencies is None else {
            c: m for c, m in self.missing.items() if c in currencies
        }
        return tuple(dict.fromkeys(keep.values()))


def fx_pair_legs(symbol: str, kind: str, currency: str) -> tuple[str, str] | None:
    """(base leg, quote leg) of an fx underlying whose symbol is two ISO codes with the quote leg
    its currency (``EURUSD`` in USD); None for any other underlying."""
    if kind != "fx" or len(symbol) != 6 or not symbol.isascii() or not symbol.isupper():
        return None
    if not symbol.isalpha() or symbol[3:] != currency:
        return None
    return symbol[:3], symbol[3:]


def fx_rates(
    underlyings: Underlyings, market: Market, base: str, currencies: Sequence[str]
) -> FxRates:
    """The rate of each of ``currencies`` to ``base`` on ``market``.

    A currency C converts by the spot of the fx pair CB (base per C: multiply) or BC (C per base:
    divide); a pair counts only as an underlying of kind fx whose quote leg is its currency. When
    neither is marked, the missing mark names the pair the book holds (CB first), else CB.
    """
    pairs = {
        (legs[0], legs[1]): sym
        for sym, kind, ccy in zip(
            underlyings.symbols, underlyings.kinds, underlyings.currencies, strict=True
        )
        if (legs := fx_pair_legs(sym, kind, ccy)) is not None
    }
    rates: dict[str, float] = {base: 1.0}
    missing: dict[str, MissingMark] = {}
    for c in dict.fromkeys(currencies):
        if c == base:
            continue
        direct, inverse = pairs.get((c, base)), pairs.get((base, c))
        if direct is not None and direct in market.spots:
            rates[c] = float(market.spots[direct])
        elif inverse is not None and inverse in market.spots:
            rates[c] = 1.0 / float(market.spots[inverse])
        elif direct is not None or inverse is not None:
            missing[c] = MissingMark("spot", str(direct or inverse))
        else:
            missing[c] = MissingMark("fx", f"{c}{base}")
    return FxRates(base, rates, missing)


def valuation_fx_rates(valuation: BookValuation, base: str) -> FxRates:
    """``fx_rates`` of the valuation's currencies on its own market (a pair's first leg needs no
    rate: its FX delta is in the pair's own currency)."""
    return fx_rates(valuation.book.underlyings, valuation.market, base, valuation.currencies)


def base_total(valuation: BookValuation, fx: FxRates, label: str = "total") -> ExposureRow:
    """The whole book's money exposures in the base currency ``fx.base``: each currency's total
    times its rate (``currency_totals``), summed; NaN when a currency lacks its rate, so a total
    is never wrong for want of a mark. Share-count fields are NaN (they never add across names)."""
    values = dict.fromkeys(EXPOSURE_FIELDS, float("nan"))
    per_ccy = currency_totals(valuation)
    for name in MONEY_FIELDS:
        values[name] = math.fsum(
            fx.rate(str(r.currency)) * getattr(r, name) for r in per_ccy
        )
    return _exposure_row(label, label, len(valuation), values, currencies=(fx.base,))


@dataclass(frozen=True)
class FxDelta:
    """Base-currency P&L for a ``FX_PCT`` rise of each foreign currency against the base.

    ``by_currency`` is in base-currency units, NaN where a rate it needs is missing (``missing``
    names the pair spots); ``unread`` lists fx underlyings whose legs cannot be read off their
    symbol, which leave every entry NaN.
    """

    base: str
    by_currency: dict[str, float]
    missing: tuple[MissingMark, ...]
    unread: tuple[str, ...] = ()


def _fx_pair_deltas(valuation: BookValuation) -> list[tuple[float, tuple[str, str]]]:
    """(Δ $ in the pair's quote currency, (base leg, quote leg)) of each fx underlying the
    valued positions hold whose legs read off its symbol."""
    und = valuation.book.underlyings
    cash = np.bincount(
        valuation.book.underlying_idx, weights=valuation.delta_cash, minlength=len(und)
    )
    held = np.bincount(valuation.book.underlying_idx, minlength=len(und)) > 0
    out = []
    for j in np.flatnonzero(held).tolist():
        legs = fx_pair_legs(und.symbols[j], und.kinds[j], und.currencies[j])
        if legs is not None:
            out.append((float(cash[j]), legs))
    return out


def fx_delta(valuation: BookValuation, fx: FxRates) -> FxDelta:
    """The book's FX delta in the base ``fx.base``, per ``FX_PCT`` rise of each currency F
    against the base (every other currency held fixed against the base).

    With X_C the base per C: translation adds 0.01 × V_C × X_C to C for the value V_C of the
    positions in C; a position on the pair F/Q (priced in Q, spot Q per F) adds
    +0.01 × Δ $ × X_Q to F (its spot rises 1%) and −0.01 × Δ $ × X_Q to Q (it falls 1%). The
    base's own entry is dropped: the base does not move against itself. Prices of stocks,
    indices and futures are held fixed in their own currency.
    """
    und = valuation.book.underlyings
    unread = tuple(
        sym
        for j, (sym, kind, ccy) in enumerate(
            zip(und.symbols, und.kinds, und.currencies, strict=True)
        )
        if kind == "fx"
        and fx_pair_legs(sym, kind, ccy) is None
        and bool((valuation.book.underlying_idx == j).any())
    )
    step = FX_PCT / 100.0
    out: dict[str, float] = {}
    for r in currency_totals(valuation):
        c = str(r.currency)
        out[c] = out.get(c, 0.0) + step * r.value * fx.rate(c)
    needs = set(out)
    for cash, (f, q) in _fx_pair_deltas(valuation):
        move = step * cash * fx.rate(q)
        out[f] = out.get(f, 0.0) + move
        out[q] = out.get(q, 0.0) - move
        needs.add(q)
    out.pop(fx.base, None)
    if unread:
        out = dict.fromkeys(out, float("nan"))
    return FxDelta(fx.base, out, fx.missing_marks(sorted(needs)), unread)
