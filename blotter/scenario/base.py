"""What every move starts from: the move-independent arrays of a base valuation (``prepare``),
the one vol floor (``moved_vols``), the day roll's instant and the smile at a moved moneyness.

Computed once per valuation and cached, so each what-if, ladder and profile only revalues the
shocked inputs.
"""

from __future__ import annotations

import weakref
from dataclasses import dataclass

import numpy as np

from blotter import calendar as cal
from blotter.market import VOL_FLOOR
from blotter.risk import BookValuation
from blotter.scenario.grammar import Move
from blotter.scenario.taylor import Sensitivities


def moved_vols(vols: np.ndarray, dvol: np.ndarray | float) -> np.ndarray:
    """Vols after the change ``dvol`` (decimal), floored at ``VOL_FLOOR`` (or at the vol itself
    when it is marked lower); broadcast shapes.

    The what-if and the ladder both reprice on these vols and give the Taylor estimate the
    change they make, so a floored vol counts in both the same way.
    """
    return np.asarray(np.maximum(vols + dvol, np.minimum(vols, VOL_FLOOR)))


@dataclass(frozen=True, eq=False)
class Prepared:
    """Everything of a base valuation that no move changes, kept for the hot paths.

    Arrays named ``*_l`` and the unsuffixed live arrays hold the m live options only; ``sens``
    holds raw greeks × units per position (n,), ``sens_u`` their sums per underlying (n_u,).
    """

    live_idx: np.ndarray  # int64 (m,) option rows with years > 0
    all_live: bool  # every position is a live option (no gathers needed)
    is_call: np.ndarray  # (m,)
    strike: np.ndarray
    years: np.ndarray
    american: np.ndarray
    any_american: bool
    base_price: np.ndarray  # the valuation's price per unit at the base inputs (m,)
    spot_l: np.ndarray
    rate_l: np.ndarray
    carry_l: np.ndarray
    vol_l: np.ndarray
    weight_l: np.ndarray
    units_l: np.ndarray
    uidx_l: np.ndarray
    carry_moves: np.ndarray  # float (m,): 1 where carry moves with the rate
    dead_idx: np.ndarray
    hedge_idx: np.ndarray
    units: np.ndarray  # (n,)
    sens: Sensitivities  # raw greeks × units (n,)
    sens_u: Sensitivities  # the same summed per underlying (n_u,)
    vol0: np.ndarray  # (n,) the valuation's vol, 0 for hedges and options past expiry
    uidx: np.ndarray
    n_u: int
    present: np.ndarray  # bool (n_u,): underlying has positions
    calendar: str


_PREP: weakref.WeakKeyDictionary[BookValuation, Prepared] = weakref.WeakKeyDictionary()


def desk_calendar(valuation: BookValuation) -> str:
    """Holiday calendar of the day roll: the reference index's, else the most common in the book."""
    book = valuation.book
    und = book.underlyings
    ref = book.reference_index
    if ref is not None and ref in und.symbols:
        return und.calendars[und.index_of(ref)] or cal.DEFAULT_CALENDAR
    if len(book) == 0:
        return cal.DEFAULT_CALENDAR
    counts = np.bincount(book.underlying_idx, minlength=len(und))
    return und.calendars[int(np.argmax(counts))] or cal.DEFAULT_CALENDAR


def prepare(valuation: BookValuation) -> Prepared:
    """The move-independent arrays of ``valuation`` (computed once, cached per valuation)."""
    prep = _PREP.get(valuation)
    if prep is not None:
        return prep
    v, book, g = valuation, valuation.book, valuation.greeks
    n, n_u = len(book), len(book.underlyings)
    live_idx = np.flatnonzero(v.live)
    all_live = live_idx.size == n
    take = (lambda a: np.ascontiguousarray(a)) if all_live else (lambda a: a[live_idx])
    units = v.units
    am = take(book.american)
    spot_l, rate_l, carry_l, vol_l = take(v.spot), take(v.rate), take(v.carry), take(v.vol)
    # The valuation's per-unit prices are the engine's at these same inputs: no second pricing.
    base = np.ascontiguousarray(take(g.price), dtype=np.float64)
    uidx = book.underlying_idx
    sens = Sensitivities.of(v)
    w = v.vega_weight
    prep = Prepared(
        live_idx=live_idx,
        all_live=all_live,
        is_call=take(book.is_call),
        strike=take(book.strikes),
        years=take(v.years),
        american=am,
        any_american=bool(am.any()),
        base_price=base,
        spot_l=spot_l,
        rate_l=rate_l,
        carry_l=carry_l,
        vol_l=vol_l,
        weight_l=take(w),
        units_l=take(units),
        uidx_l=take(uidx),
        carry_moves=take(v.rate_moves_carry).astype(np.float64),
        dead_idx=np.flatnonzero(book.is_option & ~v.live),
        hedge_idx=np.flatnonzero(~book.is_option),
        units=units,
        sens=sens,
        sens_u=sens.per_group(uidx, n_u),
        vol0=np.where(v.live, np.nan_to_num(v.vol), 0.0),
        uidx=uidx,
        n_u=n_u,
        present=np.bincount(uidx, minlength=n_u) > 0,
        calendar=desk_calendar(valuation),
    )
    _PREP[valuation] = prep
    return prep


def roll_time(valuation: BookValuation, move: Move) -> np.datetime64:
    """The valuation instant after the move's day roll (calendar days, or business days at the
    same clock time in the desk's zone the valuation was made for)."""
    t = valuation.valuation_time
    if move.bdays:
        return cal.roll_business_days(t, move.bdays, prepare(valuation).calendar, valuation.tz)
    if move.days:
        return cal.roll_calendar_days(t, move.days)
    return t


def smile_vols(v: BookValuation, p: Prepared, spots_after_u: np.ndarray) -> np.ndarray:
    """Vols (m,) of the live options at their moneyness after the spot move (sticky moneyness):
    the marked vol at strike K × S / S', same expiry, read at the valuation time."""
    out = p.vol_l.copy()
    s0 = v.underlying_spots
    symbols = v.book.underlyings.symbols
    expiries = v.book.expiries[p.live_idx]
    dates = v.book.expiry_dates[p.live_idx]
    for j in np.flatnonzero(p.present & (spots_after_u != s0)):
        rows = np.flatnonzero(p.uidx_l == j)
        if rows.size:
            scaled = p.strike[rows] * (s0[j] / spots_after_u[j])
            out[rows] = v.market.vols_for(
                symbols[j], expiries[rows], scaled, v.valuation_time, expiry_dates=dates[rows]
            )
    return out
