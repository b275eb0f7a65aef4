"""Delta hedges: the trade in a hedge instrument, in whole lots, that brings a delta to zero.

An underlying is hedged with a trade in the underlying itself (shares or units of a stock, index
or FX pair, contracts of a future); the whole book with its reference index, on the beta-weighted
delta (Σ Δ $ × β in index units). The quantity is rounded to whole lots, and what rounding leaves
is reported as the residual delta in units and in currency. The app's Book pane and
``blotter hedge`` both call ``underlying_hedge``/``book_hedge``; ``stage`` makes a hedge a trial.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from blotter import limits
from blotter.desk.entry import ContractTerms
from blotter.desk.trials import TrialTrade, trial_contract

if TYPE_CHECKING:
    from blotter.risk import BookValuation
    from blotter.store import ContractRecord, Store

LOT_PRACTICE: dict[str, tuple[float | None, str]] = {
    "stock": (100.0, "100 shares, a round lot of a US stock (common practice)"),
    "index": (1.0, "1 index unit (common practice)"),
    "fx": (1.0, "1 unit of the pair's base currency (common practice)"),
    "future": (None, "1 contract (common practice)"),
}
"""Lot size per kind of underlying, in units of it; None: one contract (its multiplier)."""

TRADE_UNITS = {"stock": "shares", "future": "contracts"}
"""What a trade in the underlying counts, by kind (other kinds: units)."""

ROUNDING = "to the nearest whole lot (half a lot away from zero)"
"""How a hedge quantity is rounded, in words."""


def signed(x: float, places: int = 1) -> str:
    """``x`` with its sign and thousands commas, ``+0.0`` for what rounds to zero."""
    if abs(x) < 0.5 * 10**-places:
        x = 0.0
    return f"{x:+,.{places}f}"


class HedgeRefused(ValueError):
    """A hedge that cannot be worked out, with the reason in words."""


@dataclass(frozen=True)
class Instrument:
    """A hedge instrument: an underlying traded itself, and its lot.

    ``units_per_contract`` is the multiplier of a trade in it (``store.hedge_multiplier``: 1 for a
    stock, index or FX unit, the contract multiplier for a future); ``lot_units`` is the lot in
    units of the underlying, a whole number of contracts.
    """

    symbol: str
    kind: str
    currency: str
    units_per_contract: float
    lot_units: float
    lot_words: str

    @property
    def contracts_per_lot(self) -> int:
        return int(round(self.lot_units / self.units_per_contract))


@dataclass(frozen=True)
class Hedge:
    """The delta hedge of one underlying, or of the book on its beta-weighted delta.

    ``delta_units`` is the delta to hedge in units of the instrument's underlying (for the book,
    beta-weighted index units); the trade is ``lots`` whole lots, ``quantity`` contracts to book
    (``units`` of the underlying); ``residual_units`` is the delta left after it, in the same units
    as ``delta_units``, and ``residual_cash`` that times the spot, in ``currency``.
    """

    target: str  # an underlying's symbol, or "book"
    instrument: Instrument
    spot: float
    delta_units: float
    lots: int
    quantity: int
    units: float
    residual_units: float
    residual_cash: float
    beta_weighted: bool = False
    instrument_beta: float = 1.0

    @property
    def currency(self) -> str:
        return self.instrument.currency

    @property
    def side(self) -> str:
        """``buy``, ``sell`` or ``none`` (delta within half a lot)."""
        return "buy" if self.quantity > 0 else "sell" if self.quantity < 0 else "none"

    def words(self) -> str:
        """The hedge in one line: ``sell 3 lots DEMOA (300 shares); after: Δ +12 units``."""
        ins = self.instrument
        what = TRADE_UNITS.get(ins.kind, "units")
        lot = "lot" if abs(self.lots) == 1 else "lots"
        beta = " β-weighted" if self.beta_weighted else ""
        if self.quantity == 0:
            head = f"no trade: Δ{beta} {signed(self.delta_units)} units is within half a lot"
        else:
            head = (
                f"{self.side} {abs(self.lots):,} {lot} {ins.symbol} "
                f"({abs(self.quantity):,} {what})"
            )
        return (
            f"{head}; after: Δ{beta} {signed(self.residual_units)} units, "
            f"{signed(self.residual_cash, 0)} {self.currency}"
        )

    def short_words(self) -> str:
        """The hedge in a short line: ``sell 800 DEMOA shares (8 lots) → Δ +45.8 sh, +8,280 USD``
        (Δ sh: units of the underlying, as the Book pane's column; the book's in index units)."""
        ins = self.instrument
        lots = f" ({abs(self.lots):,} lot{'' if abs(self.lots) == 1 else 's'})"
        if ins.lot_units == ins.units_per_contract:  # a lot is one: the count says it
            lots = ""
        what = TRADE_UNITS.get(ins.kind, "units")
        trade = (
            "none, within half a lot"
            if self.quantity == 0
            else f"{self.side} {abs(self.quantity):,} {ins.symbol} {what}{lots}"
        )
        left = f"Δ {signed(self.residual_units)} sh"
        if self.beta_weighted:
            left = f"βΔ {signed(self.residual_units)} units"
        return f"{trade} → {left}, {signed(self.residual_cash, 0)} {self.currency}"

    def as_dict(self) -> dict[str, Any]:
        """JSON form: every field by name, the lot in units and in contracts."""
        ins = self.instrument
        return {
            "target": self.target,
            "instrument": ins.symbol,
            "kind": ins.kind,
            "currency": ins.currency,
            "spot": self.spot,
            "beta_weighted": self.beta_weighted,
            "instrument_beta": self.instrument_beta,
            "delta_units": self.delta_units,
            "lot_units": ins.lot_units,
            "lot_contracts": ins.contracts_per_lot,
            "lot": ins.lot_words,
            "units_per_contract": ins.units_per_contract,
            "side": self.side,
            "lots": self.lots,
            "quantity": self.quantity,
            "units": self.units,
            "residual_units": self.residual_units,
            "residual_cash": self.residual_cash,
        }


@dataclass(frozen=True)
class Refusal:
    """A hedge that could not be worked out for ``target``, and why."""

    target: str
    words: str

    def as_dict(self) -> dict[str, Any]:
        return {"target": self.target, "refused": self.words}


def hedge_multiplier(record: Mapping[str, Any]) -> float:
    """Units per contract of a trade in the underlying ``record`` (``store.hedge_multiplier``)."""
    from blotter import store

    return store.hedge_multiplier(str(record["kind"]), float(record["multiplier"]))


def instrument(record: Mapping[str, Any], lot_units: float | None = None) -> Instrument:
    """The underlying of ``record`` (a ``store.underlying_records`` row) as a hedge instrument.

    ``lot_units`` overrides the lot of common practice (``LOT_PRACTICE``); it must be a whole
    number of contracts of the instrument, else ``HedgeRefused`` says so.
    """
    kind = str(record["kind"])
    symbol = str(record["symbol"])
    per_contract = hedge_multiplier(record)
    if lot_units is None:
        practice, words = LOT_PRACTICE[kind]
        lot = per_contract if practice is None else practice
        if kind == "future":
            words = f"1 contract of {per_contract:,g} units (common practice)"
    else:
        if not (math.isfinite(lot_units) and lot_units > 0):
            raise HedgeRefused(f"a lot must be a positive number of units, not {lot_units:g}")
        n = lot_units / per_contract
        if abs(n - round(n)) > 1e-9 * max(1.0, n) or round(n) < 1:
            raise HedgeRefused(
                f"a lot of {lot_units:,g} units is not a whole number of {symbol} contracts "
                f"({per_contract:,g} units each)"
            )
        lot = float(lot_units)
        words = f"{lot_units:,g} unit{'' if lot_units == 1 else 's'} (given)"
    return Instrument(symbol, kind, str(record["currency"]), per_contract, lot, words)


def _round_lots(units: float, lot: float) -> int:
    """Whole lots nearest to ``units`` (half a lot away from zero)."""
    n = math.floor(abs(units) / lot + 0.5)
    return int(math.copysign(n, units)) if n else 0


def _hedge(
    target: str,
    ins: Instrument,
    spot: float,
    delta_units: float,
    beta: float = 1.0,
    beta_weighted: bool = False,
) -> Hedge:
    """The trade in ``ins`` that brings ``delta_units`` (moved ``beta`` per unit traded) to
    zero, rounded to whole lots."""
    if not math.isfinite(delta_units):
        raise HedgeRefused(f"the delta of {target} is not a number")
    lots = _round_lots(-delta_units / beta, ins.lot_units)
    quantity = lots * ins.contracts_per_lot
    if abs(quantity) > limits.QUANTITY.high:
        raise HedgeRefused(
            f"the hedge of {target} is {abs(quantity):,} contracts, past the "
            f"{limits.QUANTITY.high:,.0f} a trade may hold"
        )
    units = quantity * ins.units_per_contract
    residual = delta_units + units * beta
    return Hedge(
        target, ins, spot, delta_units, lots, quantity, units, residual, residual * spot,
        beta_weighted, beta,
    )


def _no_spot(symbol: str) -> str:
    return f"{symbol} has no spot mark; log it with: blotter mark spot {symbol} PRICE"


def _unvalued_words(valuation: BookValuation, symbol: str | None) -> str | None:
    """Words for positions (of ``symbol``, or any) a missing mark left out, or None."""
    left = [u for u in valuation.unvalued if symbol is None or u.underlying == symbol]
    if not left:
        return None
    missing = sorted({m.words() for u in left for m in u.missing})
    return (
        f"{len(left)} position(s){' of ' + symbol if symbol else ''} not valued "
        f"({'; '.join(missing)}): a hedge of the rest would be wrong"
    )


def underlying_hedge(
    valuation: BookValuation,
    symbol: str,
    records: Mapping[str, Mapping[str, Any]],
    lot_units: float | None = None,
    rows: np.ndarray | None = None,
) -> Hedge:
    """The hedge of ``symbol``'s delta (or of the positions ``rows``, all of that underlying)
    with a trade in ``symbol`` itself; ``records`` are ``store.underlying_records`` by symbol.

    HedgeRefused in words when there is no such underlying, it has no spot, or some of its
    positions are not valued.
    """
    book = valuation.book
    if symbol not in book.underlyings.symbols or symbol not in records:
        raise HedgeRefused(f"{symbol} is not an underlying of this book")
    j = book.underlyings.index_of(symbol)
    of = np.flatnonzero(book.underlying_idx == j)
    if rows is not None:
        rows = np.asarray(rows, dtype=np.int64)
        if np.any(book.underlying_idx[rows] != j):
            raise HedgeRefused(f"the rows hold positions of other underlyings than {symbol}")
        of = rows
    words = _unvalued_words(valuation, symbol)
    if words is not None:
        raise HedgeRefused(words)
    spot = valuation.market.spots.get(symbol)
    if spot is None:
        raise HedgeRefused(_no_spot(symbol))
    delta = float(np.sum(valuation.delta_shares[of]))
    return _hedge(symbol, instrument(records[symbol], lot_units), float(spot), delta)


def rows_hedge(
    valuation: BookValuation,
    rows: np.ndarray,
    records: Mapping[str, Mapping[str, Any]],
    lot_units: float | None = None,
) -> Hedge:
    """The hedge of the positions ``rows`` (a group of the app's Book pane) when they are all of
    one underlying; HedgeRefused in words when they span several or are none."""
    idx = np.unique(valuation.book.underlying_idx[np.asarray(rows, dtype=np.int64)])
    if len(idx) != 1:
        raise HedgeRefused(
            "no single hedge: this row holds no positions"
            if not len(idx)
            else "no single hedge: this row spans several underlyings (the book's total row "
            "hedges the book, an underlying's row that underlying)"
        )
    symbol = valuation.book.underlyings.symbols[int(idx[0])]
    return underlying_hedge(valuation, symbol, records, lot_units, rows)


def book_hedge(
    valuation: BookValuation,
    records: Mapping[str, Mapping[str, Any]],
    lot_units: float | None = None,
) -> Hedge:
    """The hedge of the book's beta-weighted delta with its reference index.

    The beta-weighted delta is Σ Δ $ × β over every position, in units of the index
    (÷ the index's spot); a trade of u index units moves it by u × the index's own beta.
    HedgeRefused in words when the book has no reference index, the index has no spot mark,
    some position is in another currency than the index (there is no FX conversion), or some
    position is not valued.
    """
    book = valuation.book
    ref = book.reference_index
    if ref is None or ref not in records:
        raise HedgeRefused(
            "the book has no reference index, so there is no beta-weighted hedge "
            "(an underlying added with --reference is the index)"
        )
    spot = valuation.index_spot()
    if spot is None:
        raise HedgeRefused("the reference index " + _no_spot(ref))
    ccy = str(records[ref]["currency"])
    others = sorted(set(valuation.currencies) - {ccy})
    if others:
        raise HedgeRefused(
            f"positions in {', '.join(others)} are not in the reference index's currency {ccy}, "
            "and deltas are not converted between currencies"
        )
    words = _unvalued_words(valuation, None)
    if words is not None:
        raise HedgeRefused(words)
    beta = float(book.underlyings.betas[book.underlyings.index_of(ref)])
    if beta == 0.0:
        raise HedgeRefused(f"the reference index {ref} has a beta of 0: trading it hedges nothing")
    delta = float(np.sum(valuation.beta_delta_cash)) / spot
    return _hedge("book", instrument(records[ref], lot_units), spot, delta, beta, True)


def every_hedge(
    valuation: BookValuation,
    records: Mapping[str, Mapping[str, Any]],
    lot_units: float | None = None,
) -> list[Hedge | Refusal]:
    """The hedge of each underlying holding positions (book order), then of the book."""
    book = valuation.book
    held = np.unique(book.underlying_idx)
    symbols = [book.underlyings.symbols[int(j)] for j in held]
    for u in valuation.unvalued:
        if u.underlying not in symbols:
            symbols.append(u.underlying)
    out: list[Hedge | Refusal] = []
    for symbol in symbols:
        try:
            out.append(underlying_hedge(valuation, symbol, records, lot_units))
        except HedgeRefused as exc:
            out.append(Refusal(symbol, str(exc)))
    try:
        out.append(book_hedge(valuation, records, lot_units))
    except HedgeRefused as exc:
        out.append(Refusal("book", str(exc)))
    return out


@dataclass(frozen=True)
class Refs:
    """What a hedge needs from the file besides the valuation: each underlying's record
    (``store.underlying_records`` by symbol), for its kind, currency and multiplier."""

    underlyings: Mapping[str, Mapping[str, Any]]


def read_refs(st: Store) -> Refs:
    """The underlyings' records of ``st``."""
    return Refs({str(r["symbol"]): r for r in st.underlying_records()})


def stage_book(st: Store, symbol: str) -> str:
    """The book a staged hedge in ``symbol`` goes to: the file's only book, else the book of the
    newest live trade in ``symbol``, else of the newest live trade; HedgeRefused when none."""
    books = st.book_names()
    if len(books) == 1:
        return books[0]
    live = st.trades(live_only=True)
    for t in reversed(live):
        if t.symbol == symbol:
            return t.book
    if live:
        return live[-1].book
    raise HedgeRefused("the file holds no live trade, so no book to stage the hedge in")


def stage(
    hedge: Hedge, refs: Refs, trials: Sequence[TrialTrade]
) -> tuple[ContractRecord, int, float]:
    """The trial of ``hedge``: the contract (a trade in the underlying itself, at its default
    multiplier), the quantity in contracts and the price per unit (the spot in force).

    HedgeRefused when the hedge trades nothing.
    """
    if hedge.quantity == 0:
        raise HedgeRefused(
            f"nothing to stage: the delta of {hedge.target} is within half a lot "
            f"({hedge.instrument.lot_units:,g} units)"
        )
    terms = ContractTerms(hedge.instrument.symbol, None, None, None)
    try:
        contract = trial_contract(refs.underlyings, terms, trials)
    except ValueError as exc:
        raise HedgeRefused(str(exc)) from None
    return contract, hedge.quantity, hedge.spot
