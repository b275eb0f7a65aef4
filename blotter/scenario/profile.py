"""Profiles: the book's P&L or total exposure along a line of spot moves or of days forward."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from blotter import calendar as cal
from blotter import engine
from blotter.risk import BookValuation, value_book
from blotter.scenario.base import prepare
from blotter.scenario.grammar import Move
from blotter.scenario.spot_vol_ladder import LADDER_CHUNK_CELLS, ladder
from blotter.scenario.whatif import apply_move

PROFILE_EXPOSURES = ("delta_cash", "gamma_1pct", "vega_pt", "theta_day")
"""Exposures ``greek_profile`` draws (``risk`` field names, desk units)."""

_GREEK_OF = {"delta_cash": "delta", "gamma_1pct": "gamma", "vega_pt": "vega",
             "theta_day": "theta"}
"""The engine's greek (``engine.american_cells`` output) behind each exposure."""


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
    shock = (1.0 + rel)[:, None]
    am = keep[p.american[keep]]
    if am.size:
        # American rows: every spot point from one premium table per exercise boundary
        # the exposure is a weighted sum of one greek: by units × spot (delta, gamma, times
        # the shock below) or by units
        per_spot = exposure in ("delta_cash", "gamma_1pct")
        wts = p.units_l[am] * (p.spot_l[am] if per_spot else 1.0)
        sums, _ = engine.american_cells(
            p.is_call[am],
            p.spot_l[am],
            p.strike[am],
            years1[am],
            p.rate_l[am],
            p.carry_l[am],
            p.vol_l[am][None, None, :],
            1.0 + rel,
            greeks=True,
            boundaries=v.boundaries,
            weights=wts,
            # the values at the unmoved spot are not drawn
            with_base=False,
            # delta is within the greeks' accuracy from the tables everywhere
            exact_near=exposure != "delta_cash",
            # the one greek drawn: only the premium tables it reads are built
            outputs=(_GREEK_OF[exposure],),
        )
        d, gm, vg, th = (sums[i, :, 0][:, None] for i in (1, 2, 3, 4))
        out += _exposure(exposure, d, gm, vg, th, (1.0 + rel)[:, None])[:, 0]
    keep = keep[~p.american[keep]]
    m = keep.size
    step = chunk or max(256, LADDER_CHUNK_CELLS // n_s)
    for a in range(0, m, step):
        rows = keep[a : a + step]
        s1 = p.spot_l[rows][None, :] * shock
        g = engine.price_greeks(
            p.is_call[rows][None, :],
            s1,
            p.strike[rows][None, :],
            years1[rows][None, :],
            p.rate_l[rows][None, :],
            p.carry_l[rows][None, :],
            p.vol_l[rows][None, :],
        )
        out += _exposure(exposure, g.delta, g.gamma, g.vega, g.theta, s1) @ p.units_l[rows]
    return out


def _exposure(exposure: str, delta: np.ndarray, gamma: np.ndarray, vega: np.ndarray,
              theta: np.ndarray, s1: np.ndarray) -> np.ndarray:
    """Per-unit ``exposure`` (desk units) from raw greeks at the moved spots ``s1``."""
    if exposure == "delta_cash":
        return np.asarray(delta * s1)
    if exposure == "gamma_1pct":
        return np.asarray(gamma * s1 * 0.01)
    if exposure == "vega_pt":
        return np.asarray(vega / 100.0)
    return np.asarray(theta / 365.0)


PROFILE_AXES = ("spot", "days")
"""What a profile runs along: every spot moved by the same %, or calendar days forward."""

PROFILE_MEASURES = ("pnl", *PROFILE_EXPOSURES)
"""What a profile draws: P&L (currency), or one of ``PROFILE_EXPOSURES`` (desk units)."""

DAY_STEPS = 30
"""A days-forward profile takes every day up to this many, then whole steps of about this many."""


@dataclass(frozen=True)
class ProfileCurve:
    """One curve of a profile: ``ys`` at each of the profile's ``xs``.

    ``days`` is the day roll a spot curve is drawn after (0 for today), None on the days axis;
    ``currency`` names the positions' currency when the book holds several (money of different
    currencies is never added, so each gets its own curves), else None; ``kind`` is ``"full"``
    (full revaluation) or, for P&L, ``"estimate"`` (the greeks' second-order Taylor estimate).
    """

    ys: tuple[float, ...]
    days: float | None
    currency: str | None
    kind: str = "full"


@dataclass(frozen=True)
class Profile:
    """A book's ``measure`` along ``axis``: spot moves in % of every spot, or calendar days.

    ``underlyings`` names the underlyings with positions (a Γ 1% curve over several adds share
    counts of different names)."""

    axis: str
    measure: str
    xs: tuple[float, ...]
    curves: tuple[ProfileCurve, ...]
    underlyings: tuple[str, ...]


def profile_curves(
    valuation: BookValuation,
    measure: str,
    axis: str,
    days: float,
    *,
    spot_pct: float,
    points: int,
    horizon_days: int,
    rows: np.ndarray | None = None,
) -> Profile:
    """Curves of the book (or of positions ``rows`` only): P&L or an exposure against spot or
    days forward.

    Against spot, ``points`` moves from −``spot_pct`` to +``spot_pct`` % of every spot, vols
    sticky strike, today and (when ``days``) after a roll of ``days`` calendar days; against
    days, 0..``horizon_days`` calendar days forward, nothing else moving. P&L comes from
    ``ladder`` and ``apply_move``, each full curve followed by its greeks' second-order estimate;
    exposures come from ``greek_profile``.
    """
    if measure not in PROFILE_MEASURES:
        raise ValueError(f"measure must be one of {', '.join(PROFILE_MEASURES)}, not {measure!r}")
    if axis not in PROFILE_AXES:
        raise ValueError(f"axis must be one of {', '.join(PROFILE_AXES)}, not {axis!r}")
    v = valuation
    if rows is not None:
        v = value_book(
            valuation.book.take(rows),
            valuation.market,
            valuation.valuation_time,
            tz=valuation.tz,
            boundaries=valuation.boundaries,
        )
    names = {v.book.underlyings.symbols[int(i)] for i in np.unique(v.book.underlying_idx)}
    parts: list[tuple[str | None, BookValuation]] = [(None, v)]
    if len(v.currencies) > 1:
        parts = [(c, v.take(np.flatnonzero(v.position_currencies == c))) for c in v.currencies]
    if axis == "spot":
        xs = np.linspace(-spot_pct, spot_pct, points)
    else:
        xs = np.arange(0, horizon_days + 1, max(1, horizon_days // DAY_STEPS), dtype=np.float64)
    rolls = [0.0] + ([float(days)] if days else [])
    curves: list[ProfileCurve] = []
    for ccy, vc in parts:
        if axis == "spot" and measure == "pnl":
            pcts = xs.tolist()
            for d in rolls:
                grid = ladder(vc, pcts, (0.0,), days=d)
                curves.append(ProfileCurve(tuple(grid.full[:, 0].tolist()), d, ccy))
                est = tuple(grid.estimate[:, 0].tolist())
                curves.append(ProfileCurve(est, d, ccy, "estimate"))
        elif axis == "spot":
            for d in rolls:
                curve = greek_profile(vc, measure, xs.tolist(), days=d)
                curves.append(ProfileCurve(tuple(float(x) for x in curve), d, ccy))
        elif measure == "pnl":
            totals = [
                apply_move(vc, Move(text=f"days {d:g}", days=float(d))).total if d else None
                for d in xs
            ]
            ys = tuple(float(t.full) if t else 0.0 for t in totals)
            curves.append(ProfileCurve(ys, None, ccy))
            est = tuple(float(t.estimate_2) if t else 0.0 for t in totals)
            curves.append(ProfileCurve(est, None, ccy, "estimate"))
        else:
            ys = tuple(float(greek_profile(vc, measure, (0.0,), days=float(d))[0]) for d in xs)
            curves.append(ProfileCurve(ys, None, ccy))
    return Profile(axis, measure, tuple(xs.tolist()), tuple(curves), tuple(sorted(names)))
