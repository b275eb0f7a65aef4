"""A what-if move applied to a base valuation: full revaluation beside the Taylor estimate.

Every position is revalued on the shocked inputs with the engine, and the change is set beside
the estimate built from the base greeks, term by term, with the error of each order. Options
that expire inside a roll settle at intrinsic value on the moved spot; they are listed as
expiring, flagged as pin risk when the moved spot is within ``PIN_BAND_PCT`` of the strike, and
their Taylor estimate is kept but flagged.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, replace
from functools import cached_property
from typing import Any

import numpy as np

from blotter import calendar as cal
from blotter import engine
from blotter.market import VOL_FLOOR
from blotter.risk import BookValuation, intrinsic
from blotter.scenario.base import Prepared, moved_vols, prepare, roll_time, smile_vols
from blotter.scenario.grammar import MONEYNESS_RULE, Move
from blotter.scenario.taylor import TERM_NAMES, first_order, second_order, taylor_terms

PIN_BAND_PCT = 1.0
"""An expiring option whose moved spot is within this % of its strike is flagged as pin risk."""

TABLE_ROWS_PER_BOUNDARY = 40
"""American rows per exercise boundary (estimated) from which the what-if takes them from the
grid's kept premium tables. Below it the quadrature, whose value does not depend on whether
the app's grid has run yet (a table cell differs from it by up to about 1e-7 of the strike);
the tables would be faster there too (3 against 11 ms at 1k positions, 7 against 15-23 ms at
10k), but those books take the quadrature well within the what-if's time."""


@dataclass(frozen=True)
class MoveRow:
    """Full revaluation change against the Taylor estimate for a group of positions (currency).

    ``error_n = full − estimate_n``; ``error_n_pct`` is that as % of |full| (NaN when full is 0).
    ``n_through_expiry`` counts positions that expire inside the roll, whose estimate means
    nothing; ``terms`` holds the estimate term by term (``TERM_NAMES``).
    """

    label: str
    full: float
    estimate_1: float
    estimate_2: float
    error_1: float
    error_2: float
    error_1_pct: float
    error_2_pct: float
    terms: dict[str, float]
    n_through_expiry: int = 0
    underlying: str | None = None
    currency: str | None = None  # None when the row spans several: its money is then NaN

    def as_dict(self) -> dict[str, Any]:
        """JSON form: currency, full, estimate_1, estimate_2, error_1, error_2, the % errors,
        terms."""
        out: dict[str, Any] = {
            "currency": self.currency,
            "full": self.full,
            "estimate_1": self.estimate_1,
            "estimate_2": self.estimate_2,
            "error_1": self.error_1,
            "error_2": self.error_2,
            "error_1_pct": self.error_1_pct,
            "error_2_pct": self.error_2_pct,
            "terms": dict(self.terms),
            "through_expiry": self.n_through_expiry,
        }
        if self.underlying is not None:
            out = {"underlying": self.underlying, **out}
        return out


@dataclass(frozen=True)
class ExpiringPosition:
    """An option that expires inside the move's day roll and settles at intrinsic on the moved spot.

    ``intrinsic`` per unit of underlying; ``settlement`` = intrinsic × quantity × multiplier;
    ``distance_pct`` = (moved spot / strike − 1) × 100; ``pin_risk`` when |distance| ≤ PIN_BAND_PCT;
    ``delivered_units`` the underlying units delivered on exercise or assignment of a physically
    settled in-the-money option (signed, + = received), 0 when cash-settled or out of the money.
    """

    label: str
    index: int
    underlying: str
    is_call: bool
    strike: float
    spot_after: float
    quantity: float
    multiplier: float
    intrinsic: float
    settlement: float
    distance_pct: float
    in_the_money: bool
    pin_risk: bool
    cash_settled: bool
    delivered_units: float
    full: float
    estimate_2: float

    def as_dict(self) -> dict[str, Any]:
        """JSON form of every field."""
        return dict(self.__dict__)


@dataclass(frozen=True, eq=False)
class _VolPlan:
    """A move's vol parts resolved per underlying: dσ_i = add + rel·σ_i + wadd·w_i (decimal)."""

    add_u: np.ndarray  # (n_u,) unweighted points / 100
    rel_u: np.ndarray  # (n_u,) relative change (−0.1 for −10%)
    wadd_u: np.ndarray  # (n_u,) weighted points / 100, times √(T_ref/T)

    @property
    def is_zero(self) -> bool:
        return not (self.add_u.any() or self.rel_u.any() or self.wadd_u.any())


@dataclass(frozen=True, eq=False)
class MoveResult:
    """A move applied to a base valuation: rows per underlying and in total, per-position arrays.

    Arrays (n,): ``full`` change (currency); ``through_expiry`` marks options expiring inside the
    roll (settled at intrinsic, estimate flagged). Computed on first use: ``terms`` by name,
    ``estimate_1``/``estimate_2``, moved inputs ``spot_after``/``vol_after``/``rate_after``/
    ``years_after``.
    """

    move: Move
    valuation: BookValuation
    time_after: np.datetime64
    roll_years: float
    total: MoveRow
    by_underlying: list[MoveRow]
    expiring: list[ExpiringPosition]
    full: np.ndarray
    through_expiry: np.ndarray
    notes: tuple[str, ...]
    spot_move_u: np.ndarray  # Δspot per underlying (n_u,), currency
    vol_plan: _VolPlan
    rate_move: float  # decimal
    dvol_applied: np.ndarray | None = None  # (n,) when not the plan's (moneyness, vol floor)
    by_currency: tuple[MoveRow, ...] = ()  # the total of each currency, labelled by its code

    @cached_property
    def dvol(self) -> np.ndarray:
        """Vol change per position (n,), decimal; 0 for hedges and options past expiry."""
        if self.dvol_applied is not None:
            return self.dvol_applied
        return _dvol_all(self.valuation, prepare(self.valuation), self.vol_plan)

    @cached_property
    def spot_after(self) -> np.ndarray:
        """Moved spot per position (n,)."""
        return np.asarray(
            self.valuation.spot + self.spot_move_u[self.valuation.book.underlying_idx]
        )

    @cached_property
    def vol_after(self) -> np.ndarray:
        """Moved vol per position (n,), NaN for hedges; sticky strike (each contract's own vol)."""
        return np.asarray(self.valuation.vol + self.dvol)

    @cached_property
    def rate_after(self) -> np.ndarray:
        """Moved rate per position (n,), decimal."""
        return self.valuation.rate + self.rate_move

    @cached_property
    def years_after(self) -> np.ndarray:
        """Years to expiry after the roll (n,), ≤ 0 for options expiring inside it."""
        return self.valuation.years - self.roll_years

    @cached_property
    def terms(self) -> dict[str, np.ndarray]:
        """The Taylor estimate term by term per position (n,), currency."""
        p = prepare(self.valuation)
        ds = self.spot_move_u[p.uidx]
        return taylor_terms(p.sens, ds, self.dvol, self.roll_years, self.rate_move)

    @cached_property
    def estimate_1(self) -> np.ndarray:
        """First-order estimate per position (n,): the sum of the ``FIRST_ORDER`` terms."""
        return np.asarray(first_order(self.terms))

    @cached_property
    def estimate_2(self) -> np.ndarray:
        """Second-order estimate per position (n,): first order + the ``SECOND_ORDER`` terms."""
        return np.asarray(second_order(self.terms))


class MoveError(ValueError):
    """A well-formed move that cannot apply to this book (unknown symbol, non-positive spot)."""


def _pct(err: float, full: float) -> float:
    return 100.0 * err / abs(full) if full != 0.0 else float("nan")


def _row(
    label: str,
    full: float,
    terms: dict[str, float],
    n_through: int = 0,
    underlying: str | None = None,
    currency: str | None = None,
) -> MoveRow:
    e1, e2 = float(first_order(terms)), float(second_order(terms))
    return MoveRow(
        label=label,
        full=full,
        estimate_1=e1,
        estimate_2=e2,
        error_1=full - e1,
        error_2=full - e2,
        error_1_pct=_pct(full - e1, full),
        error_2_pct=_pct(full - e2, full),
        terms=terms,
        n_through_expiry=n_through,
        underlying=underlying,
        currency=currency,
    )


def _currency_rows(
    label: str,
    currency_u: np.ndarray,
    full_u: np.ndarray,
    terms_u: dict[str, np.ndarray],
    n_through_u: np.ndarray,
) -> tuple[MoveRow, tuple[MoveRow, ...]]:
    """The total row and one row per currency from per-underlying sums (n_u,) of the underlyings
    ``currency_u`` names (codes, "" for those without positions); the total's money is NaN when
    there are several currencies."""
    codes = list(dict.fromkeys(c for c in currency_u.tolist() if c))
    per = tuple(
        _row(
            c,
            float(full_u[currency_u == c].sum()),
            {t: float(v[currency_u == c].sum()) for t, v in terms_u.items()},
            int(n_through_u[currency_u == c].sum()),
            currency=c,
        )
        for c in codes
    )
    n_through = int(n_through_u.sum())
    if len(per) == 1:
        return replace(per[0], label=label), per
    if not per:
        return _row(label, 0.0, dict.fromkeys(terms_u, 0.0), n_through), per
    nan = float("nan")
    return _row(label, nan, dict.fromkeys(terms_u, nan), n_through), per


def _spot_moves(valuation: BookValuation, move: Move) -> np.ndarray:
    """New spot per underlying (n_u,) after the move's spot parts."""
    und = valuation.book.underlyings
    s0 = valuation.underlying_spots
    s1 = s0.copy()
    general = next((s for s in move.spot if s.symbol is None), None)
    if general is not None:
        if general.unit == "%":
            pct = general.amount * (und.betas if general.beta else 1.0)
            s1 = s0 * (1.0 + pct / 100.0)
        else:
            s1 = s0 + general.amount
    for s in move.spot:
        if s.symbol is None:
            continue
        try:
            i = und.index_of(s.symbol)
        except KeyError:
            raise MoveError(f"unknown underlying {s.symbol!r}") from None
        s1[i] = (
            s0[i] * (1.0 + s.amount / 100.0)
            if s.unit == "%"
            else (s0[i] + s.amount if s.unit == "abs" else s.amount)
        )
    used = prepare(valuation).present
    bad = used & ~(s1 > 0)
    if bad.any():
        names = ", ".join(und.symbols[i] for i in np.flatnonzero(bad))
        raise MoveError(f"the move leaves a spot at or below zero for {names}")
    return s1


def _vol_plan(valuation: BookValuation, move: Move) -> _VolPlan:
    """The move's vol parts per underlying; a named part replaces the every-underlying part."""
    und = valuation.book.underlyings
    n_u = len(und)
    add, rel, wadd = np.zeros(n_u), np.zeros(n_u), np.zeros(n_u)
    ordered = sorted(move.vol, key=lambda part: part.symbol is not None)  # general first
    for part in ordered:
        if part.symbol is None:
            sel: slice | int = slice(None)
        else:
            try:
                sel = und.index_of(part.symbol)
            except KeyError:
                raise MoveError(f"unknown underlying {part.symbol!r}") from None
        add[sel], rel[sel], wadd[sel] = 0.0, 0.0, 0.0
        if part.unit == "%":
            rel[sel] = part.amount / 100.0
        elif part.weighted:
            wadd[sel] = part.amount / 100.0
        else:
            add[sel] = part.amount / 100.0
    return _VolPlan(add, rel, wadd)


def _dvol_live(p: Prepared, plan: _VolPlan) -> np.ndarray | float:
    """Vol change of the live options (m,) or a scalar when it is one parallel shift."""
    if plan.is_zero:
        return 0.0
    a, r, w = plan.add_u, plan.rel_u, plan.wadd_u
    if np.all(a == a[0]) and not r.any() and not w.any():
        return float(a[0])
    out = np.zeros(p.vol_l.size)
    if a.any():
        out += a[p.uidx_l]
    if r.any():
        out += r[p.uidx_l] * p.vol_l
    if w.any():
        out += w[p.uidx_l] * p.weight_l
    return out


def _dvol_all(v: BookValuation, p: Prepared, plan: _VolPlan) -> np.ndarray:
    out = np.zeros(len(v))
    d = _dvol_live(p, plan)
    if p.all_live:
        out += d
    else:
        out[p.live_idx] = d
    return out


def apply_move(valuation: BookValuation, move: Move) -> MoveResult:
    """Revalue the book under ``move`` and set the Taylor estimate beside the full change.

    Full revaluation: every live option is repriced with ``engine.price`` on the moved spot, vol
    (sticky strike), rate and time; an option that expires inside the roll is worth its intrinsic
    value on the moved spot; a hedge changes by units × Δspot. The estimate is ``taylor_terms`` of
    the base greeks (dt the roll's year fraction); the spot and vol moves are the same within an
    underlying, so its rows come from per-underlying sums of the greeks. MoveError when the move
    cannot apply (unknown symbol, spot at or below 0).
    """
    v = valuation
    p = prepare(v)
    n = len(v)
    t1 = roll_time(v, move)
    dt = float(cal.year_fraction(v.valuation_time, t1))
    ds_u = _spot_moves(v, move) - v.underlying_spots
    ds_u = np.where(p.present, ds_u, 0.0)
    dr = move.rate_bp * 1e-4
    plan = _vol_plan(v, move)

    # Full revaluation of the live options.
    s1 = p.spot_l + ds_u[p.uidx_l] if ds_u.any() else p.spot_l
    dvol = _dvol_live(p, plan)
    moneyness = move.vol_rule == MONEYNESS_RULE and bool(ds_u.any())
    if moneyness:
        smile = smile_vols(v, p, v.underlying_spots + ds_u)
        dvol = (
            smile * (1.0 + plan.rel_u[p.uidx_l])
            + plan.add_u[p.uidx_l]
            + plan.wadd_u[p.uidx_l] * p.weight_l
            - p.vol_l
        )
    vol1 = p.vol_l
    floored = False
    if not (isinstance(dvol, float) and dvol == 0.0):
        vol1 = moved_vols(p.vol_l, dvol)
        floored = bool(np.any(vol1 > p.vol_l + dvol))
    dvol_applied: np.ndarray | None = None
    if floored or moneyness:
        dvol_applied = np.zeros(n)
        dvol_applied[p.live_idx] = vol1 - p.vol_l
    t_after = p.years - dt if dt else p.years
    r1 = p.rate_l + dr if dr else p.rate_l
    b1 = p.carry_l + dr * p.carry_moves if dr else p.carry_l
    m = p.live_idx.size
    through_l = t_after <= 0 if dt else np.zeros(m, dtype=bool)
    moving = _moving_rows(p, ds_u, vol1, dt, dr)
    if m and moving is None and not through_l.any():
        new_price = _reprice(v, p, None, s1, t_after, r1, b1, vol1, not dr)
    elif m:
        # Rows whose inputs do not move keep their base price; the rest are repriced, and those
        # expiring inside the roll settle at intrinsic on the moved spot.
        new_price = p.base_price.copy()
        reprice = ~through_l if moving is None else moving & ~through_l
        a = np.flatnonzero(reprice)
        if a.size:
            new_price[a] = _reprice(v, p, a, s1, t_after, r1, b1, vol1, not dr)
        e = np.flatnonzero(through_l)
        if e.size:
            new_price[e] = intrinsic(p.is_call[e], np.broadcast_to(s1, (m,))[e], p.strike[e])
    else:
        new_price = np.zeros(0)
    full_l = (new_price - p.base_price) * p.units_l
    if p.all_live:
        full = full_l
        full_u = np.bincount(p.uidx, weights=full, minlength=p.n_u)
    else:
        full = ds_u[p.uidx] * p.units  # hedges: units × dS
        full[p.live_idx] = full_l
        if p.dead_idx.size:
            d = p.dead_idx
            call, k = v.book.is_call[d], v.book.strikes[d]
            s_new = v.spot[d] + ds_u[p.uidx[d]]
            full[d] = (intrinsic(call, s_new, k) - intrinsic(call, v.spot[d], k)) * p.units[d]
        full_u = np.bincount(p.uidx, weights=full, minlength=p.n_u)

    through = np.zeros(n, dtype=bool)
    if through_l.any():
        through[p.live_idx[through_l]] = True
        n_through_u = np.bincount(p.uidx[through], minlength=p.n_u)
    else:
        n_through_u = np.zeros(p.n_u, dtype=np.int64)

    # Taylor terms per underlying: from the greek sums when every option of an underlying has the
    # same vol change, else per position and summed.
    if dvol_applied is None and not (plan.rel_u.any() or plan.wadd_u.any()):
        res_terms = taylor_terms(p.sens_u, ds_u, plan.add_u, dt, dr)
    else:
        dv = dvol_applied if dvol_applied is not None else _dvol_all(v, p, plan)
        per_position = taylor_terms(p.sens, ds_u[p.uidx], dv, dt, dr)
        res_terms = {
            k: np.bincount(p.uidx, weights=np.broadcast_to(t, (n,)), minlength=p.n_u)
            for k, t in per_position.items()
        }
    by_u, total_row, by_ccy = _rows_from_sums(v, p.present, full_u, res_terms, n_through_u)

    result = MoveResult(
        move=move,
        valuation=v,
        time_after=t1,
        roll_years=dt,
        total=total_row,
        by_underlying=by_u,
        expiring=[],
        full=full,
        through_expiry=through,
        notes=(),
        spot_move_u=ds_u,
        vol_plan=plan,
        rate_move=dr,
        dvol_applied=dvol_applied,
        by_currency=by_ccy,
    )
    if through.any():
        object.__setattr__(result, "expiring", _expiring(result, np.flatnonzero(through)))
    object.__setattr__(result, "notes", _notes(len(result.expiring), floored))
    return result


FLOORED_NOTE = f"some vols floored at {VOL_FLOOR * 100:g} vol points"
"""A move's note when a vol fell to the floor (``market.VOL_FLOOR``)."""


def _notes(n_expiring: int, floored: bool) -> tuple[str, ...]:
    """A move's notes: options expiring inside the roll, vols floored."""
    notes: list[str] = []
    if n_expiring:
        notes.append(
            f"{n_expiring} option position(s) expire inside the roll: settled at intrinsic,"
            " their estimate is not meaningful"
        )
    if floored:
        notes.append(FLOORED_NOTE)
    return tuple(notes)


def _rows_from_sums(
    v: BookValuation,
    present: np.ndarray,
    full_u: np.ndarray,
    terms_u: dict[str, np.ndarray],
    n_through_u: np.ndarray,
) -> tuple[list[MoveRow], MoveRow, tuple[MoveRow, ...]]:
    """(rows of the ``present`` underlyings, the total, each currency's total) from sums per
    underlying (n_u,) of the full change, the Taylor terms and the options expiring."""
    symbols = v.book.underlyings.symbols
    currencies = v.book.underlyings.currencies
    by_u = [
        _row(
            symbols[j],
            float(full_u[j]),
            {t: float(terms_u[t][j]) for t in TERM_NAMES},
            int(n_through_u[j]),
            underlying=symbols[j],
            currency=currencies[j],
        )
        for j in np.flatnonzero(present)
    ]
    currency_u = np.where(present, np.asarray(currencies, dtype=str), "")
    total_row, by_ccy = _currency_rows(
        "total", currency_u, full_u, {t: terms_u[t] for t in TERM_NAMES}, n_through_u
    )
    return by_u, total_row, by_ccy


def joined_result(
    valuation: BookValuation,
    move: Move,
    parts: Sequence[MoveResult],
    rows: Sequence[np.ndarray],
) -> MoveResult:
    """``move`` on ``valuation`` put together from ``parts``, its results on the shards
    ``valuation.take(r)`` for each ``r`` of ``rows`` (every position in exactly one): the sums
    per underlying added, per-position arrays and expiring options put back at their rows.

    Every figure of a move is a sum over positions, so this is ``apply_move(valuation, move)``
    to rounding (the order of the additions)."""
    und = valuation.book.underlyings
    at = {symbol: j for j, symbol in enumerate(und.symbols)}
    n_u, n = len(und.symbols), len(valuation)
    present = np.zeros(n_u, dtype=bool)
    full_u, spot_move_u = np.zeros(n_u), np.zeros(n_u)
    terms_u = {t: np.zeros(n_u) for t in TERM_NAMES}
    n_through_u = np.zeros(n_u, dtype=np.int64)
    full, through = np.zeros(n), np.zeros(n, dtype=bool)
    applied = any(part.dvol_applied is not None for part in parts)
    dvol = np.zeros(n) if applied else None
    expiring: list[ExpiringPosition] = []
    for part, r in zip(parts, rows, strict=True):
        for row in part.by_underlying:
            j = at[str(row.underlying)]
            present[j] = True
            full_u[j] += row.full
            n_through_u[j] += row.n_through_expiry
            spot_move_u[j] = part.spot_move_u[j]
            for t in TERM_NAMES:
                terms_u[t][j] += row.terms[t]
        full[r], through[r] = part.full, part.through_expiry
        if dvol is not None:
            dvol[r] = part.dvol
        expiring += [replace(e, index=int(r[e.index])) for e in part.expiring]
    by_u, total_row, by_ccy = _rows_from_sums(valuation, present, full_u, terms_u, n_through_u)
    first = parts[0]
    return MoveResult(
        move=move,
        valuation=valuation,
        time_after=first.time_after,
        roll_years=first.roll_years,
        total=total_row,
        by_underlying=by_u,
        expiring=expiring,
        full=full,
        through_expiry=through,
        notes=_notes(len(expiring), any(FLOORED_NOTE in part.notes for part in parts)),
        spot_move_u=spot_move_u,
        vol_plan=_vol_plan(valuation, move),
        rate_move=first.rate_move,
        dvol_applied=dvol,
        by_currency=by_ccy,
    )


def _reprice(
    v: BookValuation,
    p: Prepared,
    rows: np.ndarray | None,
    s1: np.ndarray,
    t1: np.ndarray,
    r1: np.ndarray,
    b1: np.ndarray,
    vol1: np.ndarray,
    tables: bool,
) -> np.ndarray:
    """Prices per unit of the live ``rows`` (all when None) on the moved spot, time, rates and
    vols ((m,) or scalars): ``engine.price``, or with ``tables`` (the move keeps the rates)
    the American rows from the premium tables a grid of this valuation keeps where they are
    kept (``engine.american_cells``, one cell per row), the others by the engine's
    quadrature: building a table here would cost about three times that quadrature."""
    m = p.live_idx.size
    sel: np.ndarray | slice = slice(None) if rows is None else rows
    n = m if rows is None else rows.size
    s, t, r, b, vol = (np.broadcast_to(x, (m,))[sel] for x in (s1, t1, r1, b1, vol1))
    call, k = p.is_call[sel], p.strike[sel]
    am = p.american[sel]
    # no table kept (no grid ran): the quadrature directly, without the tables' row setup
    tables = tables and p.any_american and v.boundaries.has_tables()
    ai = np.flatnonzero(am) if tables else np.zeros(0, dtype=np.int64)
    if ai.size:
        # the tables' cost per exercise boundary (τ, rates) outweighs their saving per row
        # unless each boundary serves enough rows; boundaries are bounded by expiries ×
        # underlyings × (call, put)
        uidx = p.uidx_l[sel][ai]
        n_bounds = 2 * np.unique(t[ai]).size * int(np.count_nonzero(np.bincount(uidx)))
        if ai.size < TABLE_ROWS_PER_BOUNDARY * n_bounds:
            ai = ai[:0]
    if ai.size:
        cells, _ = engine.american_cells(
            call[ai],
            s[ai],
            k[ai],
            t[ai],
            r[ai],
            b[ai],
            vol[ai][None, None, :],
            np.ones(1),
            boundaries=v.boundaries,
            with_base=False,
            kept_only=True,
        )
        out = np.empty(n)
        out[ai] = cells[0, 0, 0]
        ei = np.flatnonzero(~am)
        if ei.size:
            out[ei] = engine.price(call[ei], s[ei], k[ei], t[ei], r[ei], b[ei], vol[ei])
        return out
    return np.asarray(
        engine.price(
            call, s, k, t, r, b, vol, american=am if am.any() else False,
            boundaries=v.boundaries,
        )
    )


def _moving_rows(
    p: Prepared, ds_u: np.ndarray, vol1: np.ndarray, dt: float, dr: float
) -> np.ndarray | None:
    """Live rows (bool (m,)) whose spot or vol the move changes, or None when every row moves
    (time passes or the rate moves, which reach every option)."""
    if dt or dr:
        return None
    moving = np.zeros(p.live_idx.size, dtype=bool)
    if ds_u.any():
        moving |= ds_u[p.uidx_l] != 0
    if vol1 is not p.vol_l:
        moving |= np.broadcast_to(vol1, moving.shape) != p.vol_l
    return None if moving.all() else moving


def _expiring(res: MoveResult, rows: np.ndarray) -> list[ExpiringPosition]:
    v = res.valuation
    book = v.book
    units_all = v.units
    est2 = res.estimate_2
    out = []
    for i in rows:
        i = int(i)
        call = bool(book.is_call[i])
        k = float(book.strikes[i])
        s = float(v.spot[i] + res.spot_move_u[book.underlying_idx[i]])
        value = float(intrinsic(call, s, k))
        units = float(units_all[i])
        dist = (s / k - 1.0) * 100.0
        itm = value > 0
        cash = bool(book.cash_settled[i])
        delivered = 0.0 if (cash or not itm) else (units if call else -units)
        out.append(
            ExpiringPosition(
                label=book.labels[i],
                index=i,
                underlying=book.underlyings.symbols[book.underlying_idx[i]],
                is_call=call,
                strike=k,
                spot_after=s,
                quantity=float(book.quantities[i]),
                multiplier=float(book.multipliers[i]),
                intrinsic=value,
                settlement=value * units,
                distance_pct=dist,
                in_the_money=itm,
                pin_risk=abs(dist) <= PIN_BAND_PCT,
                cash_settled=cash,
                delivered_units=delivered,
                full=float(res.full[i]),
                estimate_2=float(est2[i]),
            )
        )
    return out
