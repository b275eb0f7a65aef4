"""One mark set made usable: spots, vol surfaces, rate curves and dividend yields.

A ``Market`` is immutable: arrays are read-only, and a shock returns a new ``Market`` with a
higher ``version``. The store builds one with ``store.load_market``; the risk layer reads it.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from datetime import datetime

import numpy as np

from blotter.arrays import read_only
from blotter.calendar import SECONDS_PER_YEAR

VOL_FLOOR = 1e-4
"""Smallest vol a shock can leave (0.01 vol point), so a large negative vol move stays priceable."""


@dataclass(frozen=True, eq=False)
class VolSurface:
    """Implied-vol points of one underlying: row j is (expiry j, strike j, vol j).

    ``expiries`` are dates (``datetime64[D]``); a NaN strike marks an at-the-money vol for that
    expiry: alone, it is the vol at every strike; beside strike points, it is the point at
    ``atm_strike`` (the spot of the same marks, fixed when the surface is built, so it stays put
    under a what-if spot move like every strike point). Vols are decimals.
    """

    expiries: np.ndarray  # datetime64[D] (m,)
    strikes: np.ndarray  # float64 (m,), NaN = ATM vol for the expiry
    vols: np.ndarray  # float64 (m,), annualised decimal
    atm_strike: float = float("nan")  # where an ATM point sits among strike points

    def __post_init__(self) -> None:
        object.__setattr__(
            self, "expiries", read_only(np.asarray(self.expiries, dtype="datetime64[D]"))
        )
        object.__setattr__(self, "strikes", read_only(np.asarray(self.strikes, dtype=np.float64)))
        object.__setattr__(self, "vols", read_only(np.asarray(self.vols, dtype=np.float64)))
        object.__setattr__(self, "atm_strike", float(self.atm_strike))
        m = self.expiries.shape
        if self.strikes.shape != m or self.vols.shape != m:
            raise ValueError("VolSurface arrays must have the same length")
        if len(m) != 1:
            raise ValueError("VolSurface arrays must be one-dimensional")

    def slice_dates(self) -> np.ndarray:
        """The distinct expiry dates of the surface, ascending, ``datetime64[D]`` (k,)."""
        return np.unique(self.expiries)

    def slice_vols(self, slice_date: np.datetime64, strikes: np.ndarray) -> np.ndarray:
        """Vols of one expiry slice at ``strikes`` (n,): linear in strike, flat beyond the ends.

        A slice with no strike points uses its ATM (NaN-strike) vol at every strike; beside
        strike points the ATM vol is the point at ``atm_strike``, averaged with a strike point
        marked at that very strike. ValueError when an ATM point has no ``atm_strike`` to sit at.
        """
        strikes = np.asarray(strikes, dtype=np.float64)
        rows = self.expiries == slice_date
        ks, vs = self.strikes[rows], self.vols[rows]
        atm = np.isnan(ks)
        if atm.all():
            return np.full(strikes.shape, float(vs.mean()))
        if atm.any():
            if not np.isfinite(self.atm_strike):
                raise ValueError(
                    f"the ATM vol of {slice_date} has no spot to sit at among its strike vols"
                )
            ks = np.where(atm, self.atm_strike, ks)
        points, where = np.unique(ks, return_inverse=True)
        vols = np.bincount(where, weights=vs) / np.bincount(where)
        return np.asarray(np.interp(strikes, points, vols))

    def vols_at(
        self,
        expiry_days: np.ndarray,
        years: np.ndarray,
        strikes: np.ndarray,
        today: np.datetime64 | np.ndarray,
    ) -> np.ndarray:
        """Vols (n,) for options expiring on dates ``expiry_days`` in ``years`` at ``strikes``.

        Across expiries the surface is linear in total variance σ²T at equal strike (sticky strike:
        a strike keeps its vol whatever spot does). A slice's T is the option's own T moved by the
        calendar days between the two expiry dates, so an option on a slice's date gets that
        slice's vol exactly. Slices dated before ``today`` (the first date whose slice is live)
        are ignored; before the first live slice or after the last, the vol is flat (the end
        slice's vol at the strike).
        """
        expiry_days = np.asarray(expiry_days, dtype="datetime64[D]")
        years = np.asarray(years, dtype=np.float64)
        strikes = np.asarray(strikes, dtype=np.float64)
        n = strikes.shape[0]
        dates = self.slice_dates()
        dates = dates[dates >= today] if (dates >= today).any() else dates[-1:]
        if n == 0:
            return np.zeros(0)
        if dates.size == 0:
            raise ValueError("vol surface has no points")
        grid = np.stack([self.slice_vols(d, strikes) for d in dates])  # (k, n)
        if dates.size == 1:
            return np.array(grid[0])
        hi = np.clip(np.searchsorted(dates, expiry_days, side="left"), 1, dates.size - 1)
        lo = hi - 1
        cols = np.arange(n)
        d_opt = expiry_days.astype(np.int64)
        t_lo = years + (dates[lo].astype(np.int64) - d_opt) * (86400.0 / SECONDS_PER_YEAR)
        t_hi = years + (dates[hi].astype(np.int64) - d_opt) * (86400.0 / SECONDS_PER_YEAR)
        v_lo, v_hi = grid[lo, cols], grid[hi, cols]
        w_lo, w_hi = v_lo**2 * t_lo, v_hi**2 * t_hi
        span = np.where(t_hi > t_lo, t_hi - t_lo, 1.0)
        frac = np.clip((years - t_lo) / span, 0.0, 1.0)
        w = w_lo + (w_hi - w_lo) * frac
        with np.errstate(invalid="ignore", divide="ignore"):
            inner = np.sqrt(np.maximum(w, 0.0) / years)
        out = np.where(
            expiry_days <= dates[0],
            grid[0, cols],
            np.where(expiry_days >= dates[-1], grid[-1, cols], inner),
        )
        exact = dates[lo] == expiry_days
        out = np.where(exact, v_lo, out)
        out = np.where(dates[hi] == expiry_days, v_hi, out)
        return np.where(np.isfinite(out), out, v_lo)


@dataclass(frozen=True, eq=False)
class RateCurve:
    """Continuously compounded zero rates by tenor in calendar days, one currency."""

    tenor_days: np.ndarray  # float64 (k,), ascending
    zero_rates: np.ndarray  # float64 (k,), decimal, continuous compounding

    def __post_init__(self) -> None:
        days = np.asarray(self.tenor_days, dtype=np.float64)
        rates = np.asarray(self.zero_rates, dtype=np.float64)
        if days.shape != rates.shape or days.ndim != 1 or days.size == 0:
            raise ValueError("RateCurve needs matching, non-empty tenor and rate arrays")
        order = np.argsort(days, kind="stable")
        object.__setattr__(self, "tenor_days", read_only(days[order]))
        object.__setattr__(self, "zero_rates", read_only(rates[order]))

    def rate_at(self, years: np.ndarray | float) -> np.ndarray:
        """Zero rate (decimal, continuous) at ``years``: linear in tenor, flat beyond the ends."""
        return np.asarray(
            np.interp(np.asarray(years, dtype=np.float64) * 365.0, self.tenor_days, self.zero_rates)
        )

    def shifted(self, rate_bp: float) -> RateCurve:
        """A copy with every zero rate moved by ``rate_bp`` basis points (1 bp = 0.0001)."""
        return RateCurve(self.tenor_days, self.zero_rates + rate_bp * 1e-4)


@dataclass(frozen=True, eq=False)
class Market:
    """The marks in force (or one recalled mark set), keyed by underlying symbol or currency.

    ``marks_as_of`` is the UTC instant of the newest mark set used; ``mark_set_id`` the store's
    set id (None for a market assembled from the latest mark of each kind across sets).
    """

    version: int
    marks_as_of: datetime
    spots: dict[str, float]
    surfaces: dict[str, VolSurface]
    curves: dict[str, RateCurve]
    div_yields: dict[str, float] = field(
        default_factory=dict
    )  # overrides of Underlyings.div_yields
    mark_set_id: int | None = None
    mark_kind: str = "intraday"  # "close" or "intraday"
    # when each mark point used was observed (UTC datetime64[us], one per point), so how old
    # the marks are is read point by point
    observed_at: np.ndarray = field(default_factory=lambda: np.zeros(0, "datetime64[us]"))
    # when each spot in force was observed (UTC datetime64[us]), by symbol: a feed's age; and
    # the symbols whose spot in force is an intraday mark (typed, imported or fed), not a close's
    spot_observed: dict[str, np.datetime64] = field(default_factory=dict)
    spot_intraday: frozenset[str] = frozenset()

    def spot(self, symbol: str) -> float:
        """Spot (or futures price) of ``symbol``; KeyError naming it when there is no mark."""
        try:
            return float(self.spots[symbol])
        except KeyError:
            raise KeyError(f"no spot mark for {symbol!r}") from None

    @property
    def has_marks(self) -> bool:
        """False for a file where no spot, vol or rate has been logged yet (``marks_as_of`` is
        then a placeholder, not a time to show)."""
        return bool(self.spots or self.surfaces or self.curves)

    def curve(self, currency: str) -> RateCurve:
        """The rate curve of ``currency``; KeyError naming it when there is no curve."""
        try:
            return self.curves[currency]
        except KeyError:
            raise KeyError(f"no rate curve for {currency!r}") from None

    def vols_for(
        self,
        symbol: str,
        expiries: np.ndarray,
        strikes: np.ndarray,
        valuation_time: np.datetime64,
        *,
        expiry_dates: np.ndarray,
    ) -> np.ndarray:
        """Vols (n,) of ``symbol``'s options with cut-offs at UTC instants ``expiries`` and expiry
        dates ``expiry_dates`` (the exchange's own dates, which the marks are keyed by).

        Interpolation is ``VolSurface.vols_at``: total variance across expiries at equal strike,
        linear in strike within an expiry, flat beyond the ends. A slice counts while its cut-off
        is ahead; that is read off the options themselves (an option's date less its time to
        expiry is the valuation instant on the exchange's clock less the cut-off time of day, the
        same for every option of one underlying). KeyError when there is no surface.
        """
        try:
            surface = self.surfaces[symbol]
        except KeyError:
            raise KeyError(f"no vol surface for {symbol!r}") from None
        exp = np.asarray(expiries, dtype="datetime64[s]")
        dates = np.asarray(expiry_dates, dtype="datetime64[D]")
        if dates.shape != exp.shape:
            raise ValueError("expiry_dates must match expiries")
        if exp.size == 0:
            return np.zeros(0)
        t = np.asarray(valuation_time, dtype="datetime64[s]")
        years = (exp - t).astype(np.float64) / SECONDS_PER_YEAR
        days_left = years * (SECONDS_PER_YEAR / 86400.0)
        first_live = int(np.floor(np.max(dates.astype(np.int64) - days_left))) + 1
        return surface.vols_at(dates, years, strikes, np.datetime64(first_live, "D"))

    def shocked(
        self,
        *,
        spot_pct: dict[str, float] | None = None,
        spot_abs: dict[str, float] | None = None,
        vol_pts: float = 0.0,
        vol_rel_pct: float = 0.0,
        rate_bp: float = 0.0,
    ) -> Market:
        """A new market (``version`` + 1) with the given moves; this one is left unchanged.

        ``spot_pct`` / ``spot_abs`` move named spots by a percentage or by currency units;
        ``vol_pts`` adds vol points (0.01) to every surface point, ``vol_rel_pct`` scales them
        (−10 → × 0.9), floored at ``VOL_FLOOR``; ``rate_bp`` shifts every curve.
        """
        spots = dict(self.spots)
        for sym, pct in (spot_pct or {}).items():
            spots[sym] = self.spot(sym) * (1.0 + pct / 100.0)
        for sym, amount in (spot_abs or {}).items():
            spots[sym] = self.spot(sym) + amount
        bad = [s for s, v in spots.items() if not v > 0]
        if bad:
            raise ValueError(f"the move leaves a non-positive spot for {', '.join(bad)}")
        surfaces = self.surfaces
        if vol_pts or vol_rel_pct:
            surfaces = {
                sym: replace(
                    sf,
                    vols=np.maximum(
                        sf.vols * (1.0 + vol_rel_pct / 100.0) + vol_pts / 100.0, VOL_FLOOR
                    ),
                )
                for sym, sf in self.surfaces.items()
            }
        curves = self.curves
        if rate_bp:
            curves = {ccy: c.shifted(rate_bp) for ccy, c in self.curves.items()}
        return replace(
            self, version=self.version + 1, spots=spots, surfaces=surfaces, curves=curves
        )
