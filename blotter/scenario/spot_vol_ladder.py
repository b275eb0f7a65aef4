"""The spot × vol ladder: full revaluation P&L of every cell in one broadcast pass, chunked.

Each cell equals the what-if of the same move (the same vol floor, the same day roll), and the
Taylor estimate of each cell is set beside it. P&L in different currencies is never added:
``ladders`` gives one grid per currency.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from blotter import calendar as cal
from blotter import engine
from blotter.risk import BookValuation, intrinsic
from blotter.scenario.base import moved_vols, prepare, smile_vols
from blotter.scenario.grammar import MONEYNESS_RULE, STICKY_RULE, VOL_RULES
from blotter.scenario.taylor import TERM_NAMES, first_order, second_order, taylor_terms

DEFAULT_SPOT_PCTS = (-10.0, -5.0, -2.0, -1.0, 0.0, 1.0, 2.0, 5.0, 10.0)
"""Ladder rows: spot moves in % of every underlying's spot."""

DEFAULT_VOL_PTS = (-5.0, -2.0, 0.0, 2.0, 5.0)
"""Ladder columns: parallel vol moves in vol points."""

LADDER_CHUNK_CELLS = 1 << 17
"""Ladder memory bound: (scenarios × positions) cells priced per engine call (about 2,900
positions of a 9 × 5 ladder, some 20 MB of engine inputs and temporaries); chunks of this size
also keep the broadcast inputs in cache, which is faster than one large pass."""


@dataclass(frozen=True, eq=False)
class Ladder:
    """Spot × vol grid of the book's P&L (currency), full revaluation against the estimate.

    ``full``, ``estimate`` (second order), ``estimate_1`` and ``error`` = full − estimate have shape
    (n_spot, n_vol); row i is ``spot_pcts[i]`` (% of every spot), column j ``vol_pts[j]`` (vol
    points, parallel). ``worst`` is the (i, j) of the lowest full P&L. Vols are sticky strike.
    """

    spot_pcts: np.ndarray
    vol_pts: np.ndarray
    days: float
    full: np.ndarray
    estimate: np.ndarray
    estimate_1: np.ndarray
    error: np.ndarray
    worst: tuple[int, int]
    time_after: np.datetime64
    n_through_expiry: int
    rule: str = STICKY_RULE
    currency: str | None = None  # of every position in it (None for an empty book)


def ladders(
    valuation: BookValuation,
    spot_pcts: Sequence[float] = DEFAULT_SPOT_PCTS,
    vol_pts: Sequence[float] = DEFAULT_VOL_PTS,
    days: float = 0.0,
    chunk: int | None = None,
    rule: str = STICKY_RULE,
) -> list[Ladder]:
    """One ``ladder`` per currency of the book, in the order of its underlyings (one ladder for an
    empty or single-currency book): P&L in different currencies is never added."""
    if len(valuation.currencies) <= 1:
        return [ladder(valuation, spot_pcts, vol_pts, days, chunk, rule)]
    ccy = valuation.position_currencies
    return [
        ladder(valuation.take(np.flatnonzero(ccy == c)), spot_pcts, vol_pts, days, chunk, rule)
        for c in valuation.currencies
    ]


def ladder(
    valuation: BookValuation,
    spot_pcts: Sequence[float] = DEFAULT_SPOT_PCTS,
    vol_pts: Sequence[float] = DEFAULT_VOL_PTS,
    days: float = 0.0,
    chunk: int | None = None,
    rule: str = STICKY_RULE,
) -> Ladder:
    """Full revaluation P&L of every (spot %, vol pts) cell in one broadcast pass, chunked.

    Each cell moves every spot by the same % and every vol by the same points, after ``days``
    calendar days; options expiring inside the roll settle at intrinsic. Vols are sticky strike
    unless ``rule`` is ``MONEYNESS_RULE`` (each option then takes the marked vol at its moneyness
    on the moved spot, before the vol shift). ``chunk`` bounds positions per engine call (default
    ``LADDER_CHUNK_CELLS`` / cells). The estimate is the second-order Taylor sum from the base
    greeks (first order beside it). ValueError for a book of several currencies (``ladders``).
    """
    if len(valuation.currencies) > 1:
        raise ValueError(
            f"the book holds {', '.join(valuation.currencies)}: ladder each currency apart"
        )
    if rule not in VOL_RULES:
        raise ValueError(f"rule must be one of {', '.join(VOL_RULES)}, not {rule!r}")
    sp = np.asarray(spot_pcts, dtype=np.float64).ravel()
    vp = np.asarray(vol_pts, dtype=np.float64).ravel()
    if sp.size == 0 or vp.size == 0:
        raise ValueError("a ladder needs at least one spot move and one vol move")
    if np.any(sp <= -100):
        raise ValueError("a spot move must be above -100%")
    if days < 0:
        raise ValueError("days only move forward")
    v = valuation
    p = prepare(v)
    t1 = cal.roll_calendar_days(v.valuation_time, days) if days else v.valuation_time
    dt = float(cal.year_fraction(v.valuation_time, t1))
    n_s, n_v = sp.size, vp.size
    n_cells = n_s * n_v
    rel = sp / 100.0
    dvol = vp / 100.0

    # Hedges and options already past expiry: exact, vol-free, per spot row.
    full = np.zeros((n_s, n_v))
    h = p.hedge_idx
    if h.size:
        full += (rel * float(np.dot(p.units[h], v.spot[h])))[:, None]
    if p.dead_idx.size:
        d = p.dead_idx
        call, k, s = v.book.is_call[d], v.book.strikes[d], v.spot[d]
        intr0 = intrinsic(call, s, k)
        intr1 = intrinsic(call[None, :], s[None, :] * (1 + rel[:, None]), k[None, :])
        full += ((intr1 - intr0[None, :]) @ p.units[d])[:, None]

    li = p.live_idx
    m = li.size
    step = chunk or max(256, LADDER_CHUNK_CELLS // n_cells)
    years1 = p.years - dt
    n_through = int(np.count_nonzero(years1 <= 0))
    spot_l, rate_l, carry_l, vol_l, units_l = (
        v.spot[li],
        v.rate[li],
        v.carry[li],
        v.vol[li],
        p.units[li],
    )
    shock_s = (1.0 + rel)[:, None, None]
    shock_v = dvol[None, :, None]
    # Sticky moneyness: each option's vol first moves to the smile at its moneyness, per spot row.
    smile_shift: np.ndarray | None = None
    if rule == MONEYNESS_RULE and m:
        s0 = v.underlying_spots
        smile = np.stack([smile_vols(v, p, s0 * (1.0 + x)) for x in rel])  # (n_s, m)
        smile_shift = smile - vol_l[None, :]
    alive_am = p.american & (years1 > 0)
    if alive_am.any():
        # American rows: every cell from one premium table per exercise boundary
        ai = np.flatnonzero(alive_am)
        shift_a: np.ndarray = shock_v
        if smile_shift is not None:
            shift_a = smile_shift[:, ai][:, None, :] + shock_v
        vols_a = np.broadcast_to(
            moved_vols(vol_l[ai][None, None, :], shift_a),
            (1 if smile_shift is None else n_s, n_v, ai.size),
        )
        u_a = units_l[ai]
        sum_a, base_a = engine.american_cells(
            p.is_call[ai],
            spot_l[ai],
            p.strike[ai],
            years1[ai],
            rate_l[ai],
            carry_l[ai],
            vols_a,
            1.0 + rel,
            boundaries=v.boundaries,
            base_vols=vol_l[ai],
            weights=u_a,
        )
        # P&L without a roll against the tables' own base value, so that a cell moving
        # nothing is 0
        base_sum = float(base_a[0]) if dt == 0 else float(np.dot(p.base_price[ai], u_a))
        full += sum_a[0] - base_sum
    for a in range(0, m, step):
        b = min(a + step, m)
        sl = slice(a, b)
        t_c = years1[sl]
        u_c = units_l[sl]
        alive = t_c > 0
        if not alive.all():
            e = np.flatnonzero(~alive)
            k = p.strike[sl][e]
            s1 = spot_l[sl][e][None, :] * (1.0 + rel[:, None])
            intr = intrinsic(p.is_call[sl][e][None, :], s1, k[None, :])
            full += ((intr - p.base_price[sl][e][None, :]) @ u_c[e])[:, None]
        # European rows (the American ones are valued above)
        euro = alive & ~p.american[sl]
        if not euro.any():
            continue
        keep: np.ndarray | slice = slice(None) if euro.all() else np.flatnonzero(euro)
        shift = shock_v
        if smile_shift is not None:
            shift = smile_shift[:, sl][:, keep][:, None, :] + shock_v
        prices = engine.price(
            p.is_call[sl][keep][None, None, :],
            spot_l[sl][keep][None, None, :] * shock_s,
            p.strike[sl][keep][None, None, :],
            t_c[keep][None, None, :],
            rate_l[sl][keep][None, None, :],
            carry_l[sl][keep][None, None, :],
            moved_vols(vol_l[sl][keep][None, None, :], shift),
        )
        cells = np.asarray(prices, dtype=np.float64).reshape(n_cells, -1)
        full += ((cells @ u_c[keep]) - float(np.dot(p.base_price[sl][keep], u_c[keep]))).reshape(
            n_s, n_v
        )

    # Estimate: every position's Taylor terms in every cell, on the vol change the full
    # revaluation applied (floor included), summed over positions in chunks.
    n = len(v)
    smile_shift_n: np.ndarray | None = None
    if smile_shift is not None:
        smile_shift_n = np.zeros((n_s, 1, n))
        smile_shift_n[:, 0, li] = smile_shift
    sums: dict[str, np.ndarray] = {k: np.zeros((n_s, n_v)) for k in TERM_NAMES}
    spot_move = rel[:, None, None] * v.spot[None, None, :]  # (n_s, 1, n)
    for a in range(0, n, step):
        sl = slice(a, min(a + step, n))
        vol0 = p.vol0[sl]
        shift = shock_v if smile_shift_n is None else smile_shift_n[..., sl] + shock_v
        dv = np.where(v.live[sl], moved_vols(vol0, shift) - vol0, 0.0)
        cell_terms = taylor_terms(p.sens.take(sl), spot_move[..., sl], dv, dt, 0.0)
        for k, t in cell_terms.items():
            sums[k] += np.sum(t, axis=-1)
    est1 = np.asarray(first_order(sums))
    est2 = np.asarray(second_order(sums))
    worst = np.unravel_index(int(np.argmin(full)), full.shape)
    return Ladder(
        spot_pcts=sp,
        vol_pts=vp,
        days=float(days),
        full=full,
        estimate=est2,
        estimate_1=est1,
        error=full - est2,
        worst=(int(worst[0]), int(worst[1])),
        time_after=t1,
        n_through_expiry=n_through,
        rule=rule,
        currency=v.currencies[0] if v.currencies else None,
    )
