"""Profiles: the book's total exposure along a line of spot moves or days forward."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from blotter import calendar as cal
from blotter import engine
from blotter.risk import BookValuation
from blotter.scenario.base import prepare
from blotter.scenario.spot_vol_ladder import LADDER_CHUNK_CELLS

PROFILE_EXPOSURES = ("delta_cash", "gamma_1pct", "vega_pt", "theta_day")
"""Exposures ``greek_profile`` draws (``risk`` field names, desk units)."""


def greek_profile(
    valuation: BookValuation,
    exposure: str,
    spot_pcts: Sequence[float],
    days: float = 0.0,
    chunk: int | None = None,
) -> np.ndarray:
    """The book's total ``exposure`` (desk units) with every spot moved by each of ``spot_pcts``
    (%) after ``days`` calendar days, shape (n_spots,).

    One broadcast pass of the engine over (spot move, position), chunked like the ladder; vols
    and rates stay each contract's (sticky strike); options expiring inside the roll count 0
    (worth intrinsic, no greeks); hedges count delta 1 at the moved spot. American exercise
    boundaries come from the valuation's cache, so no spot point solves one again.
    """
    if exposure not in PROFILE_EXPOSURES:
        raise ValueError(f"exposure must be one of {', '.join(PROFILE_EXPOSURES)}")
    if days < 0:
        raise ValueError("days only move forward")
    v = valuation
    p = prepare(v)
    rel = np.asarray(spot_pcts, dtype=np.float64).ravel() / 100.0
    n_s = rel.size
    out = np.zeros(n_s)
    if exposure == "delta_cash" and p.hedge_idx.size:
        h = p.hedge_idx
        out += (1.0 + rel) * float(np.dot(p.units[h], v.spot[h]))
    t1 = cal.roll_calendar_days(v.valuation_time, days) if days else v.valuation_time
    years1 = p.years - float(cal.year_fraction(v.valuation_time, t1))
    keep = np.flatnonzero(years1 > 0)
    m = keep.size
    if not m:
        return out
    if p.any_american:
        am = keep[p.american[keep]]
        if am.size:
            v.boundaries.prepare(
                p.is_call[am], years1[am], p.rate_l[am], p.carry_l[am], p.vol_l[am], p.vol_l[am]
            )
    step = chunk or max(256, LADDER_CHUNK_CELLS // n_s)
    shock = (1.0 + rel)[:, None]
    for a in range(0, m, step):
        rows = keep[a : a + step]
        s1 = p.spot_l[rows][None, :] * shock
        am_rows = p.american[rows]
        g = engine.price_greeks(
            p.is_call[rows][None, :],
            s1,
            p.strike[rows][None, :],
            years1[rows][None, :],
            p.rate_l[rows][None, :],
            p.carry_l[rows][None, :],
            p.vol_l[rows][None, :],
            american=am_rows[None, :] if am_rows.any() else False,
            boundaries=v.boundaries,
        )
        units = p.units_l[rows]
        if exposure == "delta_cash":
            per = g.delta * s1
        elif exposure == "gamma_1pct":
            per = g.gamma * s1 * 0.01
        elif exposure == "vega_pt":
            per = g.vega / 100.0
        else:
            per = g.theta / 365.0
        out += per @ units
    return out
