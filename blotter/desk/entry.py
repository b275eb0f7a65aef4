"""What a person types at the desk, read by one set of rules in the app and on the command line.

A vol is a decimal (``0.25``) or a percentage (``25%``), and a bare number above
``VOL_BARE_MAX`` is refused as ambiguous; a rate or a yield is a decimal (``0.04``) or a
percentage (``4%``). A price typed in a vol cell (``$12.35``) is solved for the option's implied
vol. Every parser raises ``ValueError`` with words for people and changes nothing; the store
checks each value again when it is written.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from datetime import date, datetime, time
from typing import TYPE_CHECKING, Any, Literal, NamedTuple
from zoneinfo import ZoneInfo

import numpy as np

from blotter import limits

if TYPE_CHECKING:
    from blotter.risk import BookValuation
    from blotter.store import ContractRecord, Store, TradeRecord

VOL_BARE_MAX = 3.0
"""A vol typed without ``%`` above this (300%) reads as a percentage typed without its sign."""


VOL_CONVENTION = "0.25 or 25%"
"""How a vol is typed, as a column header or a hint says it."""


def parse_vol(text: str) -> float:
    """A vol from ``0.25`` (decimal) or ``25%``; a bare number above 3 is refused as ambiguous.

    The range is checked here too, in percent (the unit the screens show a vol in).
    """
    t = text.strip()
    percent = t.endswith("%")
    try:
        v = float(t[:-1] if percent else t)
    except ValueError:
        v = math.nan
    if not math.isfinite(v):
        raise ValueError(f"{text!r} is not a vol: write {VOL_CONVENTION}")
    if percent:
        v /= 100.0
    elif v > VOL_BARE_MAX:
        raise ValueError(f"{text!r} looks like a percentage: write {t}% or {v / 100:g}")
    if not limits.VOL.contains(v):
        raise ValueError(
            f"a vol must be above 0% and at most {limits.VOL.high * 100:,.0f}%, "
            f"got {v * 100:,.4g}% ({text.strip()})"
        )
    return v


VOL_JUMP_PTS = 10.0
"""A typed vol more than this many vol points from the mark in force asks for a confirmation."""

VOL_LOW = 0.03
"""A typed vol under this (3%) asks for a confirmation: listed options rarely trade below it."""


def implausible_vol(old: float | None, new: float) -> str:
    """Why writing the vol ``new`` over ``old`` (the mark in force, None: none) wants a
    confirmation, in words; empty when it looks plausible (common practice, not a limit)."""
    why = []
    if old is not None and abs(new - old) * 100 > VOL_JUMP_PTS:
        why.append(
            f"{(new - old) * 100:+.2f} vol points from the mark in force {old * 100:.2f}% "
            f"(more than {VOL_JUMP_PTS:g})"
        )
    if new < VOL_LOW:
        why.append(f"under {VOL_LOW * 100:g}%")
    return f"{new * 100:.2f}% is " + " and ".join(why) if why else ""


def parse_decimal_or_percent(text: str, what: str) -> float:
    """A decimal (``0.04``) or a percentage (``4%``) of ``what`` (a rate, a dividend yield)."""
    t = text.strip()
    try:
        v = float(t[:-1]) / 100.0 if t.endswith("%") else float(t)
    except ValueError:
        v = math.nan
    if not math.isfinite(v):
        raise ValueError(f"{text!r} is not a {what}: write 0.04 or 4%")
    if not limits.RATE.contains(v):
        low, high = limits.RATE.low * 100, limits.RATE.high * 100
        raise ValueError(
            f"a {what} must be from {low:,.0f}% to {high:,.0f}%, got {v * 100:,.4g}% ({t})"
        )
    return v


SPOT_JUMP = 0.20
"""A typed spot more than this fraction (20%) from the spot in force asks for a confirmation."""


def implausible_spot(old: float | None, new: float) -> str:
    """Why the spot ``new`` over ``old`` wants a confirmation (a slipped digit), else empty."""
    if old is None or old <= 0 or not limits.LEVEL.contains(new):
        return ""  # no spot in force to compare with, or one the store refuses in its words
    if abs(new / old - 1.0) <= SPOT_JUMP:
        return ""
    return (
        f"{new:,.6g} is {(new / old - 1.0) * 100:+.1f}% from the spot in force {old:,.6g} "
        f"(more than {SPOT_JUMP * 100:g}%)"
    )


def mark_question(kind: str, old: float | None, new: float, solved: str = "") -> str:
    """What to ask before the typed mark ``new`` of ``kind`` replaces ``old`` (empty: nothing).

    A vol solved from a price (``solved``, ``solve_vol``'s words) is always shown beside the
    vol in force first; a typed vol or spot only when ``implausible_vol`` or
    ``implausible_spot`` finds it out of the way.
    """
    if kind == "spot":
        return implausible_spot(old, new)
    if kind != "vol":
        return ""
    odd = implausible_vol(old, new)
    if not solved:
        return odd
    beside = "no vol in force" if old is None else f"in force {old * 100:.2f}%"
    change = "" if old is None else f", {(new - old) * 100:+.2f} pt"
    far = old is not None and abs(new - old) * 100 > VOL_JUMP_PTS
    check = [f"more than {VOL_JUMP_PTS:g} pt away"] if far else []
    check += [f"under {VOL_LOW * 100:g}%"] if new < VOL_LOW else []
    return f"{solved} ({beside}{change})" + (f", {' and '.join(check)}" if check else "")


# -- mark cells ---------------------------------------------------------------------------------
MarkKind = Literal["spot", "vol", "div_yield", "rate"]
"""Kinds of mark point a person types."""


class TypedMark(NamedTuple):
    """A typed mark cell: ``value`` as stored, or the option ``price`` whose vol is wanted;
    ``is_call`` says which option a price is of (None: the out-of-the-money one)."""

    what: Literal["value", "price"]
    number: float
    is_call: bool | None = None


def mark_unit(kind: str, atm: bool = False) -> str:
    """What a number typed in a cell of ``kind`` means (``atm``: a vol without a strike)."""
    if kind == "spot":
        return "price in the underlying's currency"
    if kind == "vol" and atm:
        return "ATM vol 0.245 or 24.5%, or $12.40c / $12.40p to solve it"
    if kind == "vol":
        return "vol 0.245 or 24.5%, or $12.40c / $12.40p to solve it"
    return "0.041 or 4.1%"


def parse_mark(kind: str, text: str) -> TypedMark:
    """A typed cell of ``kind``: the value to store, or for ``$12.3`` in a vol cell the price.

    A spot is a price; a vol, a rate and a yield follow the module's rules (the command line's).
    """
    t = text.strip()
    if not t:
        raise ValueError("type a number")
    if t[0] == "$" and kind == "vol":
        price_text = t[1:].strip().replace(",", "")
        is_call: bool | None = None
        if price_text[-1:].lower() in ("c", "p"):
            is_call = price_text[-1].lower() == "c"
            price_text = price_text[:-1].strip()
        try:
            price = float(price_text)
        except ValueError:
            raise ValueError(
                f"{t[1:]!r} is not a price: write $12.40, $12.40c (a call) or $12.40p (a put)"
            ) from None
        return TypedMark("price", limits.PRICE.check(price), is_call)
    if kind == "vol":
        return TypedMark("value", parse_vol(t))
    if kind == "rate":
        return TypedMark("value", parse_decimal_or_percent(t, "rate"))
    if kind == "div_yield":
        return TypedMark("value", parse_decimal_or_percent(t, "dividend yield"))
    try:
        return TypedMark("value", float(t.replace(",", "").rstrip("%")))
    except ValueError:
        raise ValueError(f"{t!r} is not a number ({mark_unit(kind)})") from None


class SolvedVol(NamedTuple):
    """The implied vol of a typed option price (None when there is none), with words saying so."""

    vol: float | None
    words: str
    is_call: bool


def solve_vol(
    valuation: BookValuation,
    symbol: str,
    expiry: date | None,
    strike: float | None,
    price: float,
    is_call: bool | None = None,
) -> SolvedVol:
    """Implied vol of ``price`` for the option of ``symbol`` at ``expiry`` and ``strike``.

    Time, rate and carry come from a live position of the same underlying and expiry; the option
    is the call or put ``is_call`` says, else the out-of-the-money one at ``strike`` (None, the
    ATM point: the spot), valued by ``engine.implied_vol``.
    """
    from blotter import engine
    from blotter.engine.results import IV_STATUS

    book = valuation.book
    try:
        j = book.underlyings.index_of(symbol)
    except KeyError:
        return SolvedVol(None, f"{symbol} is not in the book", True)
    candidates = np.flatnonzero((book.underlying_idx == j) & book.is_option & valuation.live)
    rows = [int(i) for i in candidates if book.expiry_dates[i].astype(object) == expiry]
    if not rows:
        return SolvedVol(
            None, "no live position at this expiry to take time, rate and carry from", True
        )
    i = rows[0]
    spot = float(valuation.spot[i])
    k = spot if strike is None else float(strike)
    if is_call is None:
        is_call = k >= spot
    iv = engine.implied_vol(
        price,
        is_call,
        spot,
        k,
        float(valuation.years[i]),
        float(valuation.rate[i]),
        float(valuation.carry[i]),
        bool(book.american[i]),
    )
    status = int(np.asarray(iv.status).reshape(-1)[0])
    kind = "call" if is_call else "put"
    if status != 0:
        return SolvedVol(
            None, f"{kind} price {price:g} refused: {IV_STATUS.get(status, status)}", is_call
        )
    vol = float(np.asarray(iv.vol).reshape(-1)[0])
    return SolvedVol(vol, f"{kind} price {price:g} → implied vol {vol * 100:.2f}%", is_call)


def refuse_mark_point(
    st: Store,
    kind: str,
    now: datetime,
    *,
    symbol: str | None = None,
    currency: str | None = None,
    expiry: date | str | None = None,
) -> None:
    """``ValueError`` in words for a point no position can use, before anything is written: a
    vol of an expiry whose cut-off has passed, or that falls on a weekend or holiday of the
    underlying's calendar when no contract of the file expires then (one booked with --force,
    imported or copied in needs its vol), a rate of a currency that no underlying of the file
    is quoted in and no rate mark names yet (an FX pair's foreign rate is its dividend-yield
    mark, not a curve). Other mistakes (an unknown symbol, a malformed date) the store names."""
    from blotter import calendar as cal

    records = st.underlying_records()
    if kind == "rate":
        known = {r["currency"] for r in records}
        known |= {m.currency for m in st.marks() if m.kind == "rate" and m.currency}
        if currency not in known:
            raise ValueError(
                f"{currency} is not a currency of this file: its underlyings are quoted in "
                f"{', '.join(sorted(known)) or 'none yet'}"
            )
        return
    if kind != "vol" or expiry is None:
        return
    rec = next((r for r in records if r["symbol"] == symbol), None)
    try:
        day = expiry if isinstance(expiry, date) else date.fromisoformat(str(expiry).strip())
    except ValueError:
        return
    if rec is None:
        return
    zone = ZoneInfo(rec.get("time_zone") or cal.DEFAULT_EXCHANGE_TZ)
    cutoff = time.fromisoformat(rec.get("cutoff_time") or "16:00")
    cut = datetime.combine(day, cutoff, tzinfo=zone)
    if cut <= now:
        raise ValueError(
            f"{symbol} {day} has expired (its cut-off {cut:%Y-%m-%d %H:%M %Z} has passed)"
        )
    calendar_name = rec.get("calendar") or cal.DEFAULT_CALENDAR
    why = cal.closed_because(day, calendar_name)
    if why and not any(c.symbol == symbol and c.expiry == day for c in st.contracts()):
        raise ValueError(
            f"{day} is {why} on {symbol}'s {calendar_name} calendar: no option expires then"
        )


def mark_in_force(
    st: Store,
    kind: str,
    symbol: str,
    expiry: date | str | None = None,
    strike: float | None = None,
) -> float | None:
    """The ``kind`` mark in force of ``symbol`` (a vol: at ``expiry`` and ``strike``, None the
    ATM point), if any."""
    day = None if expiry is None else str(expiry).strip()
    for m in st.marks():
        if (
            m.kind == kind
            and m.symbol == symbol
            and (None if m.expiry is None else str(m.expiry)) == day
            and (m.strike is None if strike is None else m.strike == strike)
        ):
            return m.value
    return None


def write_mark(
    st: Store,
    kind: str,
    value: float,
    *,
    symbol: str | None = None,
    currency: str | None = None,
    expiry: date | None = None,
    strike: float | None = None,
    tenor_days: int | None = None,
    note: str = "typed in the app",
    now: datetime | None = None,
) -> int:
    """Log ``value`` as an intraday mark of ``kind`` at that point; the store checks it.

    ``refuse_mark_point`` runs first at ``now`` (the store's clock when None)."""
    refuse_mark_point(
        st, kind, now or st.now(), symbol=symbol, currency=currency, expiry=expiry
    )
    if kind == "spot":
        return st.log_spot(symbol or "", value, note=note)
    if kind == "vol":
        return st.log_vol(symbol or "", expiry or "", value, strike, note=note)
    if kind == "div_yield":
        return st.log_div_yield(symbol or "", value, note=note)
    return st.log_rate(currency or "", int(tenor_days or 0), value, note=note)


# -- trade tickets ------------------------------------------------------------------------------
@dataclass(frozen=True, repr=False)
class TradeSheet:
    """The file's trades, and what a typed trade is checked against: its contracts, book names,
    underlyings (``store.underlying_records`` by symbol, for a trial's contract defaults)."""

    trades: tuple[TradeRecord, ...]
    contracts: tuple[ContractRecord, ...]
    books: tuple[str, ...]
    symbols: tuple[str, ...]
    underlyings: Mapping[str, Mapping[str, Any]]

    def __repr__(self) -> str:
        return f"TradeSheet(trades={len(self.trades)}, contracts={len(self.contracts)})"


def read_trade_sheet(st: Store) -> TradeSheet:
    """Every trade of ``st`` with its contracts, book names and underlyings."""
    return TradeSheet(
        tuple(st.trades()),
        tuple(st.contracts()),
        tuple(st.book_names()),
        tuple(st.load_underlyings().symbols),
        {r["symbol"]: r for r in st.underlying_records()},
    )


@dataclass(frozen=True)
class ContractTerms:
    """A contract as typed; ``expiry`` None with strike None is the underlying itself."""

    symbol: str
    expiry: date | None
    strike: float | None
    is_call: bool | None

    def label(self) -> str:
        if self.expiry is None:
            return f"{self.symbol} (the underlying)"
        return f"{self.symbol} {self.expiry} {self.strike:g} {'C' if self.is_call else 'P'}"


def parse_terms(symbol: str, expiry: str, strike: str, call_put: str) -> ContractTerms:
    """Contract terms from typed fields; ValueError naming the field that is wrong."""
    sym = symbol.strip().upper()
    if not sym:
        raise ValueError("symbol: type the underlying's symbol")
    if not expiry.strip() and not strike.strip() and not call_put.strip():
        return ContractTerms(sym, None, None, None)
    try:
        day = date.fromisoformat(expiry.strip())
    except ValueError:
        raise ValueError(f"expiry: {expiry.strip()!r} is not an ISO date (2027-03-19)") from None
    limits.check_date(day, "expiry")
    try:
        k = float(strike.replace(",", ""))
    except ValueError:
        raise ValueError(f"strike: {strike.strip()!r} is not a number") from None
    limits.LEVEL.check(k, "strike")
    cp = call_put.strip().upper()[:1]
    if cp not in ("C", "P"):
        raise ValueError("call/put: type C or P")
    return ContractTerms(sym, day, k, cp == "C")


def find_contract(
    contracts: Sequence[ContractRecord], terms: ContractTerms
) -> ContractRecord | None:
    """The contract of ``contracts`` with ``terms``, or None when the store has none yet."""
    for c in contracts:
        if c.symbol != terms.symbol:
            continue
        if terms.expiry is None:
            if c.option_type == "U":
                return c
            continue
        if (
            c.option_type == ("C" if terms.is_call else "P")
            and c.expiry == terms.expiry
            and c.strike is not None
            and abs(c.strike - float(terms.strike or 0)) < 1e-9
        ):
            return c
    return None


def parse_quantity(text: str) -> int:
    """Signed whole contracts (shares for the underlying): + buys, - sells, never zero."""
    t = text.replace(",", "").strip()
    try:
        qty = int(t)
    except ValueError:
        raise ValueError(f"quantity: {t!r} is not a whole number") from None
    if qty == 0:
        raise ValueError("quantity: must not be zero (+ buys, - sells)")
    limits.QUANTITY.check(qty)
    return qty


def parse_price(text: str) -> float:
    """A trade price per unit, in the contract's currency."""
    t = text.replace(",", "").strip()
    try:
        price = float(t)
    except ValueError:
        raise ValueError(f"price: {t!r} is not a number") from None
    return limits.PRICE.check(price)


def parse_reason(text: str, what: str) -> str:
    """The reason ``what`` (``"a cancel"``, ``"an amend"``) needs, stripped; never empty."""
    reason = text.strip()
    if not reason:
        raise ValueError(f"reason: {what} needs a reason")
    return reason


@dataclass(frozen=True)
class NewTrade:
    """A trade to book: contract terms, book, signed quantity, price and a note."""

    terms: ContractTerms
    book: str
    quantity: int
    price: float
    note: str = ""


@dataclass(frozen=True)
class Amend:
    """An amend of a live trade: its new quantity and price, and why."""

    trade_id: int
    quantity: int
    price: float
    reason: str


@dataclass(frozen=True)
class Cancel:
    """A cancel of a live trade, and why."""

    trade_id: int
    reason: str


Ticket = NewTrade | Amend | Cancel
"""A change to the trades that a person typed, checked and ready to write."""


def parse_new_trade(fields: Mapping[str, str], symbols: Sequence[str]) -> NewTrade:
    """A trade from typed ``fields`` (book, symbol, expiry, strike, cp, qty, price, note).

    ``symbols`` are the file's underlyings (none known: any symbol passes here, the store checks).
    Fields are checked in the order quantity, price, contract, so the first wrong one is named.
    """
    qty = parse_quantity(fields.get("qty", ""))
    price = parse_price(fields.get("price", ""))
    terms = parse_terms(
        fields.get("symbol", ""), fields.get("expiry", ""), fields.get("strike", ""),
        fields.get("cp", ""),
    )
    if symbols and terms.symbol not in symbols:
        raise ValueError(f"symbol: {terms.symbol} is not an underlying of this file")
    book = fields.get("book", "").strip() or "main"
    return NewTrade(terms, book, qty, price, fields.get("note", ""))


FAR_PRICE_FRACTION = 0.5
"""A trade price off the model value by more than this fraction of it (50%) asks first..."""

FAR_PRICE_MIN = 0.05
"""...when it is also off by more than this, in price units: five ticks of 0.01, a common
option tick (common practice), so a cheap option's spread does not ask."""


def price_question(price: float, model: float | None, label: str) -> str:
    """Why booking ``label`` at ``price`` wants a confirmation, given the ``model`` value per
    unit from the marks in force (None: not valued, nothing to compare); empty when it is near.
    A slipped price (a future amended from 4,600 to 1.23) is the case it is for."""
    if model is None or not math.isfinite(model):
        return ""
    off = price - model
    if abs(off) <= FAR_PRICE_FRACTION * abs(model) or abs(off) <= FAR_PRICE_MIN:
        return ""
    return (
        f"price {price:,.6g} for {label} is {off:+,.6g} from its model value {model:,.6g} "
        f"on the marks in force (more than {FAR_PRICE_FRACTION * 100:g}% of it)"
    )


def expiry_question(terms: ContractTerms, underlyings: Mapping[str, Mapping[str, Any]]) -> str:
    """Why booking an option of ``terms`` wants a confirmation when its expiry falls on a day
    the underlying's exchange is shut (listed options expire on trading days, common practice;
    an OTC date may not); empty otherwise, or when the symbol or calendar is unknown."""
    from blotter import calendar as cal

    rec = underlyings.get(terms.symbol)
    if terms.expiry is None or rec is None:
        return ""
    name = rec.get("calendar") or cal.DEFAULT_CALENDAR
    try:
        why = cal.closed_because(terms.expiry, name)
    except ValueError:
        return ""  # an unknown calendar is the reference data's fault, said where it is set
    if not why:
        return ""
    return (
        f"expiry {terms.expiry} of {terms.label()} is {why} on {terms.symbol}'s {name} "
        "calendar, when no listed option expires"
    )


def write_ticket(st: Store, ticket: Ticket) -> str:
    """Write ``ticket`` through the store (each a new row) and say what was written."""
    if isinstance(ticket, Cancel):
        st.cancel_trade(ticket.trade_id, ticket.reason)
        return f"trade {ticket.trade_id} cancelled: {ticket.reason}"
    if isinstance(ticket, Amend):
        new_id = st.amend_trade(
            ticket.trade_id, reason=ticket.reason, quantity=ticket.quantity, price=ticket.price
        )
        return f"trade {ticket.trade_id} amended: now trade {new_id}"
    terms = ticket.terms
    new_id = st.add_trade(
        ticket.book,
        terms.symbol,
        ticket.quantity,
        ticket.price,
        terms.expiry,
        terms.strike,
        terms.is_call,
        note=ticket.note,
        source="typed",
    )
    return f"trade {new_id} booked: {terms.label()} ×{ticket.quantity:+d} at {ticket.price:g}"
