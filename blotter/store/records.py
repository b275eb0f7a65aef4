"""The records the store hands out and takes in: plain values, never cursors or row dicts.

Prices are per unit of underlying as quoted; vols, rates and dividend yields are decimals;
instants are aware UTC datetimes.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import date, datetime
from pathlib import Path
from typing import NamedTuple


@dataclass(frozen=True)
class MarkSetInfo:
    """One mark set: ``marked_at`` is a UTC datetime; ``corrects`` the close set it corrects."""

    id: int
    kind: str  # 'close' or 'intraday'
    marked_at: datetime
    who: str
    note: str
    corrects: int | None
    source: str = ""
    marks: int = 0  # number of mark points in the set
    superseded_by: int | None = None  # the close set that corrects this one, if any
    business_date: date | None = None  # the desk date a close set closes (None: intraday)
    seq: int = 0  # the set's place in the store's own order of history


@dataclass(frozen=True)
class TradeRecord:
    """One trade row with its contract and state. Price per unit of underlying; times UTC."""

    trade_id: int
    book: str
    contract_id: int
    contract: str  # label, e.g. "DEMOA 2027-03-19 105 C"
    symbol: str
    option_type: str  # 'C', 'P' or 'U' (the underlying itself)
    expiry: date | None
    strike: float | None
    american: bool
    multiplier: float
    cash_settled: bool
    quantity: int
    price: float
    trade_time: datetime
    booked_at: datetime
    who: str
    source: str
    note: str
    state: str  # 'live', 'cancelled' or 'amended'
    replaces: int | None = None
    replaced_by: int | None = None
    cancel_reason: str | None = None
    cancelled_at: datetime | None = None
    cancelled_by: str | None = None
    seq: int = 0  # the trade's place in the store's own order of history
    cancel_seq: int | None = None  # its cancel's place in that order, if cancelled


@dataclass(frozen=True)
class ContractRecord:
    """One contract: ``option_type`` 'C', 'P' or 'U'; ``cutoff_utc`` the expiry instant or None."""

    contract_id: int
    symbol: str
    option_type: str
    expiry: date | None
    strike: float | None
    cutoff_time: str | None  # local exchange time 'HH:MM'
    american: bool
    multiplier: float
    cash_settled: bool
    label: str
    cutoff_utc: datetime | None


@dataclass(frozen=True)
class MarkRecord:
    """One mark point as stored; ``value`` is a price for spot, else a decimal.

    ``marked_at`` is when its set was written, ``observed_at`` when the point's value was marked
    (a close's copy of a carried point keeps the time that point was last marked)."""

    mark_id: int
    mark_set_id: int
    set_kind: str
    marked_at: datetime
    who: str
    kind: str
    symbol: str | None
    currency: str | None
    expiry: date | None
    strike: float | None
    tenor_days: int | None
    value: float
    observed_at: datetime


@dataclass(frozen=True)
class ImportReport:
    """What an import wrote: ``first_id``..``last_id`` are trade ids, or the mark set id twice."""

    path: Path
    kind: str  # 'trades' or 'marks'
    rows: int
    import_id: int
    first_id: int
    last_id: int


class NewContract(NamedTuple):
    """Terms of a contract for ``Store.add_contracts``: an option on ``symbol`` (expiry, strike,
    call or put), or the underlying itself when all three are None; the style, multiplier and
    settlement left None take the underlying's defaults."""

    symbol: str
    expiry: date | str | None = None
    strike: float | None = None
    is_call: bool | None = None
    american: bool | None = None
    multiplier: float | None = None
    cash_settled: bool | None = None


class NewTrade(NamedTuple):
    """One trade for ``Store.add_trades``: ``quantity`` signed contracts of ``contract_id`` into
    ``book`` at ``price`` per unit of underlying.

    ``booked_at`` (when it was entered) is the store's clock when None, ``trade_time`` (when it
    was dealt) is ``booked_at`` when None and never later, ``who`` the store's user when None.
    ``replaces`` names the cancelled trade an amend replaces; ``trade_id`` is given only by a
    builder numbering its own tickets (the next free id when None).
    """

    book: str
    contract_id: int
    quantity: int
    price: float
    trade_time: datetime | str | None = None
    booked_at: datetime | None = None
    who: str | None = None
    source: str = "typed"
    note: str = ""
    replaces: int | None = None
    trade_id: int | None = None


class MarkPoint(NamedTuple):
    """One mark point for ``Store.add_mark_set``: ``spot`` (a price), ``vol`` (decimal, at an
    ``expiry`` and a ``strike``, None for ATM) or ``div_yield`` (decimal) of the underlying
    ``symbol``; or ``rate`` (decimal zero rate) of ``currency`` at ``tenor_days``."""

    kind: str
    value: float
    symbol: str | None = None
    currency: str | None = None
    expiry: date | str | None = None
    strike: float | None = None
    tenor_days: int | None = None


StoredPoint = tuple[str, int | None, str | None, str | None, float | None, int | None, float]
"""A mark point as the store holds it: (kind, underlying_id, currency, expiry, strike,
tenor_days, value), the underlying by its id."""


def contract_label(
    symbol: str, option_type: str, expiry: str | date | None, strike: float | None
) -> str:
    """Human label of a contract, e.g. ``DEMOA 2027-03-19 105 C``; the underlying alone for 'U'."""
    if option_type == "U":
        return symbol
    return f"{symbol} {expiry} {strike:.10g} {option_type}"
