"""P&L explain between two mark sets: actual P&L of the positions held against the start's
greeks, term by term, with new trades, late bookings and corrections apart."""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field, replace
from datetime import date, datetime
from typing import Any, Literal, Protocol, TypeVar, runtime_checkable

import numpy as np

from blotter import calendar as cal
from blotter.book import Book
from blotter.market import Market
from blotter.risk import (
    BookValuation,
    FxRates,
    MissingMark,
    UnvaluedPosition,
    fx_rates,
    missing_marks,
    value_book,
)
from blotter.scenario.taylor import Sensitivities, second_order, taylor_terms


@dataclass(frozen=True)
class ExplainRow:
    """P&L of the positions held over the period (currency) against the start's greeks.

    ``actual`` = value at the end − value at the start of the positions held at the start;
    ``terms`` by ``TERM_NAMES``; ``explained`` their sum; ``unexplained`` = actual − explained;
    ``new_trades`` the P&L of trades dealt in the period (end value − trade price), shown apart;
    ``total`` = actual + new_trades. ``corrections`` is the part of ``actual`` that comes from
    positions the book did not show at the start: trades dealt before the start but booked in
    the period, and trades the start close held that were cancelled or amended in the period.
    """

    label: str
    actual: float
    terms: dict[str, float]
    explained: float
    unexplained: float
    new_trades: float
    total: float
    underlying: str | None = None
    corrections: float = 0.0
    currency: str | None = None  # None when the row spans several: its money is then NaN

    def as_dict(self) -> dict[str, Any]:
        """JSON form."""
        out: dict[str, Any] = {
            "currency": self.currency,
            "actual": self.actual,
            "terms": dict(self.terms),
            "explained": self.explained,
            "unexplained": self.unexplained,
            "new_trades": self.new_trades,
            "total": self.total,
            "corrections": self.corrections,
        }
        if self.underlying is not None:
            out = {"underlying": self.underlying, **out}
        return out


@runtime_checkable
class ExplainMarkSet(Protocol):
    """What explain reads of a mark set (``blotter.store.MarkSetInfo`` has it)."""

    @property
    def id(self) -> int: ...
    @property
    def kind(self) -> str: ...  # "close" or "intraday"
    @property
    def marked_at(self) -> datetime: ...
    @property
    def seq(self) -> int: ...  # its place in the store's own order of history
    @property
    def corrects(self) -> int | None: ...  # the close set this one corrects
    @property
    def superseded_by(self) -> int | None: ...  # the close set that corrects this one
    @property
    def business_date(self) -> date | None: ...  # the date a close closes


@runtime_checkable
class ExplainTrade(Protocol):
    """What explain reads of a trade (``blotter.store.TradeRecord`` has it)."""

    @property
    def trade_id(self) -> int: ...
    @property
    def contract_id(self) -> int: ...
    @property
    def trade_time(self) -> datetime: ...  # its deal time, aware UTC
    @property
    def seq(self) -> int: ...
    @property
    def cancel_seq(self) -> int | None: ...  # its cancel's place in the store's order


@runtime_checkable
class ExplainSource(Protocol):
    """Everything explain reads from a store: ``blotter.store.Store`` has these methods, and so
    may any stand-in that keeps books and marks elsewhere."""

    def mark_sets(self) -> Sequence[ExplainMarkSet]:
        """Every mark set, in the store's order."""
        ...

    def last_seq(self) -> int:
        """The newest place in the store's order of history."""
        ...

    def load_market(self, mark_set_id: int | None = None) -> Market:
        """The marks in force now, or exactly the set ``mark_set_id``."""
        ...

    def load_book(self, *, before_seq: int) -> Book:
        """Net positions of the trades written before ``before_seq``, as live at that place."""
        ...

    def new_trades(self, after_seq: int, before_seq: int | None = None) -> tuple[Book, np.ndarray]:
        """One book row per live trade written between the two places, with its price per unit."""
        ...

    def trades(self) -> Sequence[ExplainTrade]:
        """Every trade, with its deal time and places in the store's order."""
        ...


SetT = TypeVar("SetT", bound=ExplainMarkSet)


@dataclass(frozen=True, eq=False)
class Explain:
    """P&L explain between two mark sets: rows per underlying and the total."""

    from_set: ExplainMarkSet
    to_set: ExplainMarkSet | Literal["now"]
    from_time: np.datetime64
    to_time: np.datetime64
    by_underlying: list[ExplainRow]
    total: ExplainRow
    start: BookValuation
    end: BookValuation
    notes: tuple[str, ...] = ()
    late_trades: tuple[int, ...] = ()  # ids of trades dealt before the start, booked in the period
    corrected_trades: tuple[int, ...] = ()  # ids the start close held, cancelled in the period
    unvalued: tuple[UnvaluedPosition, ...] = ()  # left out: a mark missing at the start or end
    by_currency: tuple[ExplainRow, ...] = ()  # the total of each currency, labelled by its code
    # Value at the end of what is held at the end (held positions and new trades), per currency.
    end_values: dict[str, float] = field(default_factory=dict)


def _chain(s: SetT, by_id: Mapping[int, SetT], link: str) -> SetT:
    """Follow ``link`` ('corrects' or 'superseded_by') from the set ``s`` to the end of its
    chain of corrections."""
    seen = 0
    while (nxt := getattr(s, link)) is not None and nxt in by_id and seen < 1000:
        s = by_id[nxt]
        seen += 1
    return s


def closes_in_force(sets: Sequence[SetT]) -> list[SetT]:
    """The closes explain offers, oldest first, from ``sets`` (``store.mark_sets()``): one per
    business date, each the close itself or the correction in force for it, in the order of the
    closes they stand for (the last, for a date an upgraded book closed more than once)."""
    everything = {s.id: s for s in sets}

    def root(s: SetT) -> SetT:
        return _chain(s, everything, "corrects")

    by_day: dict[date | tuple[str, int], SetT] = {}
    for s in sorted(sets, key=lambda s: s.seq):
        if s.kind == "close" and s.superseded_by is None:
            by_day[root(s).business_date or ("set", root(s).id)] = s
    return sorted(by_day.values(), key=lambda s: (_instant(root(s).marked_at), root(s).seq))


def _pick_sets(
    store: ExplainSource, from_set: int | str | None, to_set: int | str | None
) -> tuple[
    ExplainMarkSet,
    ExplainMarkSet | Literal["now"],
    ExplainMarkSet,
    ExplainMarkSet | None,
    list[str],
]:
    """(start set, end set or "now", the close each stands for, notes) of an explain.

    A correction stands for the close it corrects (its root): the root's time is the period's
    boundary and the root's place in the store's order its cut of trades, the correction's marks
    its market. A corrected close named by id is replaced by the correction in force for it.
    Defaults: the last two of ``closes_in_force``; with only ``to_set`` given, the one before it.
    """
    sets = store.mark_sets()
    everything = {s.id: s for s in sets}
    notes: list[str] = []

    def root(s: ExplainMarkSet) -> ExplainMarkSet:
        return _chain(s, everything, "corrects")

    closes = closes_in_force(sets)

    def get(x: int | str, name: str) -> ExplainMarkSet:
        try:
            s = everything[int(x)]
        except (KeyError, ValueError):
            raise ValueError(f"no mark set {x!r} ({name})") from None
        fixed = _chain(s, everything, "superseded_by")
        if fixed is not s:
            notes.append(f"close set {s.id} was corrected: set {fixed.id} is used in its place")
        return fixed

    to: ExplainMarkSet | Literal["now"]
    if to_set is None and from_set is None:
        if len(closes) < 2:
            raise ValueError(
                f"explain needs two close mark sets; the book has {len(closes)} "
                "(give --to now to explain against the marks in force)"
            )
        frm, to = closes[-2], closes[-1]
    else:
        if to_set is None or (isinstance(to_set, str) and to_set.lower() in ("now", "live")):
            to = "now"
        else:
            to = get(to_set, "--to")
        if from_set is None:
            end_t = None if isinstance(to, str) else _instant(root(to).marked_at)
            before = [
                s
                for s in closes
                if s is not to and (end_t is None or _instant(root(s).marked_at) < end_t)
            ]
            if not before:
                raise ValueError("no close mark set before the end set (give --from)")
            frm = before[-1]
        else:
            frm = get(from_set, "--from")
    return frm, to, root(frm), None if isinstance(to, str) else root(to), notes


def _instant(x: datetime | str) -> np.datetime64:
    return cal.to_instant(x)


def explain(
    store: ExplainSource,
    from_set: int | str | None = None,
    to_set: int | str | None = None,
    at: np.datetime64 | None = None,
) -> Explain:
    """Explain the P&L between two mark sets (default: the last two closes; ``to_set`` "now" = the
    marks in force now) with the start's greeks, new trades' P&L split out.

    A close holds the trades written to the store before it, in the store's own order whatever
    the terminals' clocks said. The positions held over the period are the trades the start
    close holds, live as the store knows them at the end (a trade cancelled or amended in the
    period is held as it now stands, its replacement included), plus the trades written in the
    period but dealt by the start close's time (late bookings); the other trades written in the
    period are the new trades. ``corrections`` on each row says how much of ``actual`` those late
    bookings and corrections changed against the book as shown at the start. Held positions are
    valued at the start marks and time and at the end marks and time; the change is explained by
    ``taylor_terms`` of the start's greeks, where dσ and dr are each contract's own vol and rate
    change between the two markets and the carry term's db − dr is the change of b = r − q that
    the rate does not account for (a dividend yield or foreign rate mark change; futures options
    have b = 0). ``at`` is "now" for an end of "now" (default: the clock).
    """
    frm, to, start_close, end_close, notes = _pick_sets(store, from_set, to_set)
    t0 = _instant(start_close.marked_at)
    cut0 = start_close.seq
    end_id: int | None = None  # the written end set; None for the marks in force now
    if isinstance(to, str) or end_close is None:
        cut1 = store.last_seq() + 1
        m1 = store.load_market()
        t1 = max(cal.now() if at is None else at, _instant(m1.marks_as_of))
    else:
        end_id = int(to.id)
        cut1 = end_close.seq
        m1 = store.load_market(to.id)
        t1 = _instant(end_close.marked_at)
    if t1 < t0:
        raise ValueError(f"the end mark set is older than the start set {frm.id}")
    if cut1 < cut0:
        raise ValueError(f"the end mark set was written before the start set {frm.id}")
    m0 = store.load_market(frm.id)
    period = _period_trades(store, cut0, cut1, start_close.marked_at)
    known_start = store.load_book(before_seq=cut0)
    held = _net_books([(store.load_book(before_seq=cut1), 1.0), (period.new, -1.0)])
    end_name = "end (marks now)" if end_id is None else f"end (set {end_id})"
    sides = (
        (m0, t0, f"start (set {frm.id})", int(frm.id)),
        (m1, t1, end_name, end_id),
    )
    left_out: dict[tuple[int, tuple[MissingMark, ...]], UnvaluedPosition] = {}
    held = held.take(_valued_part(held, sides, left_out))
    start = value_book(held, m0, t0)
    end = value_book(held, m1, t1)
    dt = float(cal.year_fraction(t0, t1))
    ds = end.spot - start.spot
    opt = held.is_option & start.live
    dvol = np.where(opt, np.nan_to_num(end.vol - start.vol), 0.0)
    drate = np.where(opt, np.nan_to_num(end.rate - start.rate), 0.0)
    dcarry = np.where(opt, np.nan_to_num(end.carry - start.carry), 0.0)
    dcarry_other = dcarry - np.where(start.rate_moves_carry, drate, 0.0)
    terms = taylor_terms(Sensitivities.of(start), ds, dvol, dt, drate, dcarry_other)
    actual = _held_pnl(start, end)

    n_u = len(held.underlyings)
    sym = held.underlyings.symbols
    new_pnl_u = np.zeros(n_u)
    corr_u = np.zeros(n_u)
    # Late bookings and corrections: actual of the held positions less that of the book as the
    # store showed it at the start (positions added count with their P&L, removed ones against).
    diff = _net_books([(held, 1.0), (known_start, -1.0)])
    diff = diff.take(_valued_part(diff, sides, left_out))
    if len(diff):
        corr = _held_pnl(value_book(diff, m0, t0), value_book(diff, m1, t1))
        for j, s in enumerate(diff.underlyings.symbols):
            in_u = diff.underlying_idx == j
            if in_u.any():
                corr_u[sym.index(s)] += float(corr[in_u].sum())
    if period.late or period.corrected:
        notes.append(
            f"{len(period.late)} trade(s) dealt before the start were booked in the period and "
            f"{len(period.corrected)} cancelled or amended in it: the positions held are as known "
            "at the end; 'corrections' is how much that changed actual, and 'new trades' holds "
            "their P&L from the trade price to the start marks (a cancelled trade's taken back)"
        )
    kept = _valued_part(period.new, sides[1:], left_out)
    trades, trade_prices = period.new.take(kept), period.prices[kept]
    ccy_of = dict(zip(held.underlyings.symbols, held.underlyings.currencies, strict=True))
    # Trade P&L from the trade price: new trades to the end marks; late bookings to the start
    # marks (the rest is in actual); trades the start held and the period cancelled, taken back
    # from the start marks (their P&L to there was reported before the start).
    activity = [(trades, trade_prices, m1, t1, sides[1:], 1.0, "new trades")]
    activity.append((period.late_book, period.late_prices, m0, t0, sides[:1], 1.0, "late"))
    activity.append((period.gone_book, period.gone_prices, m0, t0, sides[:1], -1.0, "cancelled"))
    for part, part_prices, market, at, part_sides, sign, what in activity:
        ok = _valued_part(part, part_sides, left_out) if part is not trades else None
        if ok is not None:
            part, part_prices = part.take(ok), np.asarray(part_prices)[ok]
        if not len(part):
            continue
        pnl = sign * _trade_pnl(part, part_prices, market, at)
        ccy_of.update(zip(part.underlyings.symbols, part.underlyings.currencies, strict=True))
        for j, s in enumerate(part.underlyings.symbols):
            in_u = part.underlying_idx == j
            if not in_u.any():
                continue
            if s in sym:
                new_pnl_u[sym.index(s)] += float(pnl[in_u].sum())
            else:
                notes.append(
                    f"{what} in {s} (not held at the start): {float(pnl[in_u].sum()):.2f}"
                )
                new_pnl_u = np.append(new_pnl_u, float(pnl[in_u].sum()))
                corr_u = np.append(corr_u, 0.0)
                sym = sym + (s,)
    expired = held.is_option & start.live & ~end.live
    if expired.any():
        notes.append(
            f"{int(expired.sum())} option position(s) expired in the period: valued at "
            "intrinsic at the end, their estimate is not meaningful"
        )

    rows: list[ExplainRow] = []
    idx = held.underlying_idx
    for j, s in enumerate(sym):
        mask = idx == j if j < n_u else np.zeros(len(held), dtype=bool)
        if not mask.any() and new_pnl_u[j] == 0 and corr_u[j] == 0:
            continue
        rows.append(
            _explain_row(
                s,
                float(actual[mask].sum()),
                {k: float(v[mask].sum()) for k, v in terms.items()},
                float(new_pnl_u[j]),
                s,
                float(corr_u[j]),
                currency=ccy_of[s],
            )
        )
    held_ccy = np.asarray([ccy_of[s] for s in sym], dtype=str)
    pos_ccy = held_ccy[idx] if len(held) else np.zeros(0, dtype=str)
    by_ccy = tuple(
        _explain_row(
            c,
            float(actual[pos_ccy == c].sum()),
            {k: float(v[pos_ccy == c].sum()) for k, v in terms.items()},
            float(new_pnl_u[held_ccy == c].sum()),
            corrections=float(corr_u[held_ccy == c].sum()),
            currency=c,
        )
        for c in dict.fromkeys(r.currency for r in rows if r.currency)
    )
    if len(by_ccy) > 1:
        nan = float("nan")
        tot = _explain_row("total", nan, dict.fromkeys(terms, nan), nan, corrections=nan)
    else:
        tot = _explain_row(
            "total",
            float(actual.sum()),
            {k: float(v.sum()) for k, v in terms.items()},
            float(new_pnl_u.sum()),
            corrections=float(corr_u.sum()),
            currency=by_ccy[0].currency if by_ccy else None,
        )
    end_values = {
        c: float(end.value[pos_ccy == c].sum()) for c in (r.currency for r in by_ccy) if c
    }
    if len(trades):
        new_end = value_book(trades, m1, t1)
        for c, x in zip(new_end.position_currencies.tolist(), new_end.value.tolist(), strict=True):
            end_values[c] = end_values.get(c, 0.0) + x
    return Explain(
        from_set=frm,
        to_set=to,
        from_time=t0,
        to_time=t1,
        by_underlying=rows,
        total=tot,
        start=start,
        end=end,
        notes=tuple(notes),
        late_trades=period.late,
        corrected_trades=period.corrected,
        unvalued=tuple(left_out.values()),
        by_currency=by_ccy,
        end_values=end_values,
    )


@dataclass(frozen=True)
class ExplainInBase:
    """An explain in the base currency: each currency's P&L at the start rates, and the FX
    translation of what is held at the end.

    With X0, X1 the start and end rates (base per one unit of C) and V1 the end value in C:
    P&L in base = Σ X0·(P&L in C) + Σ (X1 − X0)·V1. ``at_start_rates`` is the first sum, term
    by term (label and currency the base); ``translation`` the second; ``pnl`` both. NaN where
    a rate is missing (``missing``, each mark named with the side that lacks it).
    """

    base: str
    at_start_rates: ExplainRow
    translation: float
    start_rates: FxRates
    end_rates: FxRates
    missing: tuple[tuple[str, MissingMark], ...]

    @property
    def pnl(self) -> float:
        """The period's P&L in the base currency: at the start rates plus translation."""
        return self.at_start_rates.total + self.translation


def explain_in_base(ex: Explain, base: str) -> ExplainInBase:
    """``ex`` in the base currency ``base``, at the FX spots of its start and end markets."""
    und = ex.end.book.underlyings
    currencies = [str(r.currency) for r in ex.by_currency]
    x0 = fx_rates(und, ex.start.market, base, currencies)
    x1 = fx_rates(und, ex.end.market, base, currencies)
    rows = ex.by_currency

    def at_x0(amount: Callable[[ExplainRow], float]) -> float:
        return math.fsum(x0.rate(str(r.currency)) * amount(r) for r in rows)

    terms = {
        k: math.fsum(x0.rate(str(r.currency)) * r.terms[k] for r in rows)
        for k in ex.total.terms
    }
    converted = _explain_row(
        f"total in {base}",
        at_x0(lambda r: r.actual),
        terms,
        at_x0(lambda r: r.new_trades),
        corrections=at_x0(lambda r: r.corrections),
        currency=base,
    )
    translation = math.fsum(
        (x1.rate(c) - x0.rate(c)) * v for c, v in ex.end_values.items() if c != base
    )
    missing = tuple(("start", m) for m in x0.missing_marks()) + tuple(
        ("end", m) for m in x1.missing_marks()
    )
    return ExplainInBase(base, converted, translation, x0, x1, missing)


def _valued_part(
    book: Book,
    sides: Sequence[tuple[Market, np.datetime64, str, int | None]],
    left_out: dict[tuple[int, tuple[MissingMark, ...]], UnvaluedPosition],
) -> np.ndarray:
    """Rows of ``book`` that every (market, time, name, written set id) side can value; the rest
    are added to ``left_out`` once per contract and set of missing marks, naming the sides that
    lack them and the written mark sets a correction must mend."""
    ok = np.ones(len(book), dtype=bool)
    for market, t, name, set_id in sides:
        unvalued, valued = missing_marks(book, market, t, where=name)
        ok &= valued
        mend = () if set_id is None else (set_id,)
        for u in unvalued:
            key = (u.contract_id, u.missing)
            seen = left_out.get(key)
            if seen is None:
                left_out[key] = replace(u, closes=mend)
            elif name not in seen.where:
                left_out[key] = replace(
                    seen, where=f"{seen.where} and {name}", closes=seen.closes + mend
                )
    return np.flatnonzero(ok)


def _held_pnl(start: BookValuation, end: BookValuation) -> np.ndarray:
    """P&L (n,) of the same positions between two valuations: options end value − start value,
    hedges units × Δprice (a futures hedge's value is zero; its P&L settles daily)."""
    return np.asarray(
        np.where(
            start.book.is_option, end.value - start.value, start.units * (end.spot - start.spot)
        )
    )


@dataclass(frozen=True, eq=False)
class _PeriodTrades:
    """Trades of an explain period: ``new`` one row per live trade dealt in the period (``prices``
    per unit, (n,)); ids of trades dealt before the start but booked in the period (``late``),
    and of trades the start close held that were cancelled or amended in it (``corrected``)."""

    new: Book
    prices: np.ndarray
    late: tuple[int, ...]
    corrected: tuple[int, ...]
    late_book: Book  # one row per late booking (dealt by the start close's time)
    late_prices: np.ndarray
    gone_book: Book  # one row per trade the start close held, cancelled in the period
    gone_prices: np.ndarray


def _period_trades(store: ExplainSource, cut0: int, cut1: int, t0: datetime) -> _PeriodTrades:
    """Split the trades written between the store's history rows ``cut0`` and ``cut1`` and live
    at ``cut1`` into those dealt after ``t0`` (new trades) and those dealt by it (late bookings,
    amend replacements); list the trades written before ``cut0`` and cancelled between the two.

    ``cut0``, ``cut1`` are places in the store's own order (a close holds what was written
    before it, whatever the clocks said); ``t0`` is the start close's own time (an aware UTC
    datetime at the store's precision), which a deal time is compared with.
    ``store.new_trades`` gives the per-trade rows in the store's order; ``store.trades`` gives
    each row's deal time, matched to them in the same order.
    """
    booked, prices = store.new_trades(cut0, cut1)
    records = store.trades()

    def live_at_end(r: ExplainTrade) -> bool:
        return r.cancel_seq is None or r.cancel_seq > cut1

    in_period = sorted(
        (r for r in records if cut0 < r.seq < cut1 and live_at_end(r)), key=lambda r: r.seq
    )
    ids = np.array([r.contract_id for r in in_period], dtype=np.int64)
    if ids.shape != booked.contract_ids.shape or (ids != booked.contract_ids).any():
        raise RuntimeError("the store's trade list and its new trades disagree; explain stopped")
    dealt_in = np.array([r.trade_time > t0 for r in in_period], dtype=bool)
    corrected = tuple(
        r.trade_id
        for r in records
        if r.seq < cut0 and r.cancel_seq is not None and cut0 < r.cancel_seq < cut1
    )
    rows = np.flatnonzero(dealt_in)
    late_rows = np.flatnonzero(~dealt_in)
    gone = [
        store.new_trades(r.seq - 1, r.seq + 1)
        for r in records
        if r.seq < cut0 and r.cancel_seq is not None and cut0 < r.cancel_seq < cut1
    ]
    gone_book = _concat_books([g[0] for g in gone], booked)
    return _PeriodTrades(
        new=_take_rows(booked, rows),
        prices=np.asarray(prices, dtype=np.float64)[rows],
        late=tuple(r.trade_id for r in in_period if r.trade_time <= t0),
        corrected=corrected,
        late_book=_take_rows(booked, late_rows),
        late_prices=np.asarray(prices, dtype=np.float64)[late_rows],
        gone_book=gone_book,
        gone_prices=np.concatenate([np.asarray(g[1], dtype=np.float64) for g in gone])
        if gone
        else np.zeros(0),
    )


def _concat_books(parts: Sequence[Book], empty_like: Book) -> Book:
    """The rows of ``parts`` one after another, on their common underlyings (an empty take of
    ``empty_like`` when there are none), each row kept as it is (no netting)."""
    if not parts:
        return _take_rows(empty_like, np.zeros(0, dtype=np.int64))
    out = parts[0]
    for b in parts[1:]:
        out = out.with_trials(b)
    return replace(out, is_trial=np.zeros(len(out), dtype=bool))


def _trade_pnl(trades: Book, prices: np.ndarray, market: Market, t: np.datetime64) -> np.ndarray:
    """Each trade's P&L (currency) from its price to its value on ``market`` at ``t``: value −
    price × units, or (spot − price) × units for a futures hedge (settled daily), (n,)."""
    tv = value_book(trades, market, t)
    tp = np.asarray(prices, dtype=np.float64)
    return np.asarray(
        np.where(tv.settles_daily, (tv.spot - tp) * tv.units, tv.value - tp * tv.units)
    )


_BOOK_ROW_FIELDS = (
    "contract_ids",
    "underlying_idx",
    "is_option",
    "is_call",
    "american",
    "strikes",
    "expiries",
    "multipliers",
    "quantities",
    "cash_settled",
    "is_trial",
    "expiry_dates",
)


def _take_rows(book: Book, rows: np.ndarray) -> Book:
    """Rows ``rows`` (index array) of ``book``, in that order."""
    return Book(
        name=book.name,
        underlyings=book.underlyings,
        reference_index=book.reference_index,
        labels=tuple(book.labels[int(i)] for i in rows),
        **{f: getattr(book, f)[rows] for f in _BOOK_ROW_FIELDS},
    )


def _net_books(parts: Sequence[tuple[Book, float]]) -> Book:
    """Net positions of the books' signed sum (Σ sign × quantity per contract id): one row per
    contract with a non-zero net, in order of first appearance. The books come from one store, so
    a contract id has the same terms in each; underlyings are matched by symbol, on the longest
    list (the store only adds underlyings)."""
    base = max((b for b, _ in parts), key=lambda b: len(b.underlyings))
    und = base.underlyings
    cols: dict[str, list[np.ndarray]] = {f: [] for f in _BOOK_ROW_FIELDS}
    labels: list[str] = []
    for book, sign in parts:
        remap = np.array([und.index_of(s) for s in book.underlyings.symbols], dtype=np.int64)
        for f in _BOOK_ROW_FIELDS:
            a = getattr(book, f)
            if f == "underlying_idx":
                a = remap[a] if len(a) else a
            elif f == "quantities":
                a = a * sign
            cols[f].append(a)
        labels.extend(book.labels)
    cat = {f: np.concatenate(v) for f, v in cols.items()}
    ids, first, inverse = np.unique(cat["contract_ids"], return_index=True, return_inverse=True)
    net = np.bincount(inverse.reshape(-1), weights=cat["quantities"], minlength=len(ids))
    keep = np.flatnonzero(np.abs(net) > 1e-9)
    order = np.argsort(first[keep], kind="stable")
    rows = first[keep][order]
    out = {f: cat[f][rows] for f in _BOOK_ROW_FIELDS}
    out["quantities"] = net[keep][order]
    return Book(
        name=base.name,
        underlyings=und,
        reference_index=base.reference_index,
        labels=tuple(labels[int(i)] for i in rows),
        **out,
    )


def _explain_row(
    label: str,
    actual: float,
    terms: dict[str, float],
    new: float,
    underlying: str | None = None,
    corrections: float = 0.0,
    currency: str | None = None,
) -> ExplainRow:
    explained = float(second_order(terms))
    return ExplainRow(
        label=label,
        actual=actual,
        terms=terms,
        explained=explained,
        unexplained=actual - explained,
        new_trades=new,
        total=actual + new,
        underlying=underlying,
        corrections=corrections,
        currency=currency,
    )
