"""The store's own checks of every value it writes, against ``blotter.limits``.

The command line, the app and the CSV parser check what people give before it reaches the
store; the store checks again on every write, so no caller can bypass a range. Each check
returns the value as stored or raises ``StoreError`` naming the field.
"""

from __future__ import annotations

import re
from datetime import date, datetime
from typing import Any

from blotter import limits
from blotter.scenario.grammar import MOVE_WORDS, SYMBOL_PATTERN
from blotter.store.errors import StoreError
from blotter.store.times import cutoff_utc, parse_date, timestamp_text

MARK_KINDS = ("spot", "vol", "rate", "div_yield")
"""Kinds of mark point; see ``schema.sql`` for what each holds."""

_CURRENCY = re.compile(r"[A-Z]{3}")


def within(bound: limits.Bound, value: Any, field: str | None = None) -> float:
    """``value`` checked against ``bound`` (``limits``); else a ``StoreError`` naming the field."""
    try:
        return bound.check(value, field)
    except limits.LimitError as exc:
        raise StoreError(str(exc)) from None


def check_id(value: Any, field: str) -> int:
    """A row id as an exact int of SQLite's 64-bit range; a ``StoreError`` naming ``field``."""
    try:
        return limits.ID.check_whole(value, field)
    except limits.LimitError as exc:
        raise StoreError(str(exc)) from None


def check_quantity(quantity: Any) -> int:
    """A trade quantity: a whole number of contracts (units for a hedge), never zero."""
    q = within(limits.QUANTITY, quantity)
    if q == 0:
        raise StoreError("quantity must not be zero")
    return int(q)


def check_price(price: Any) -> float:
    """A trade price per unit of underlying."""
    return within(limits.PRICE, price)


def check_strike(strike: Any) -> float:
    """A strike, rounded to the store's eight decimals."""
    return round(within(limits.LEVEL, strike, "strike"), 8)


def check_vol(vol: Any) -> float:
    """An implied vol, decimal."""
    return within(limits.VOL, vol)


def check_decimal(value: Any, what: str) -> float:
    """A rate or dividend yield, decimal; ``what`` names it."""
    return within(limits.RATE, value, what)


def check_currency(currency: Any) -> str:
    """An ISO 4217 currency code."""
    if not isinstance(currency, str) or not _CURRENCY.fullmatch(currency):
        raise StoreError(f"currency {currency!r} must be an ISO 4217 code like USD")
    return currency


def check_tenor(tenor_days: Any) -> int:
    """A rate tenor in calendar days."""
    return int(within(limits.TENOR, tenor_days))


def check_source(source: str) -> None:
    """Where a trade came from: typed, exercise, demo or file:NAME."""
    if source not in ("typed", "exercise", "demo") and not (
        source.startswith("file:") and len(source) > 5
    ):
        raise StoreError(f"source {source!r} must be typed, exercise, demo or file:NAME")


def check_symbol_length(symbol: str) -> None:
    """An underlying's symbol is text of 1 to 64 characters."""
    if not isinstance(symbol, str) or not symbol.strip() or len(symbol) > 64:
        raise StoreError(f"symbol {symbol!r} must be 1 to 64 characters")


def check_symbol_words(symbol: str) -> None:
    """An underlying's symbol: a letter, then letters, digits and . _ / -, and no what-if word."""
    if not SYMBOL_PATTERN.match(symbol) or symbol.lower() in MOVE_WORDS:
        raise StoreError(
            f"symbol {symbol!r}: a letter, then letters, digits and . _ / - (no spaces), and "
            f"not a word of the what-if ({', '.join(MOVE_WORDS)})"
        )


def check_book_name(name: str) -> None:
    """A book (desk account) name."""
    if not name or len(name) > 64:
        raise StoreError(f"book name {name!r} must be 1 to 64 characters")


def check_reason(reason: str, what: str) -> str:
    """The reason a cancel or amend gives, stripped; ``what`` names the action."""
    if not reason or not reason.strip():
        raise StoreError(f"{what} needs a reason")
    return reason.strip()


def contract_terms(
    expiry: date | str | None, strike: float | None, is_call: bool | None
) -> tuple[str, str | None, float | None]:
    """(option_type, expiry text, strike) from user terms; all None = the underlying itself."""
    if expiry is None and strike is None and is_call is None:
        return "U", None, None
    if expiry is None or strike is None or is_call is None:
        raise StoreError(
            "an option needs an expiry, a strike and call or put "
            "(leave all three out for the underlying itself)"
        )
    return (
        ("C" if is_call else "P"),
        parse_date(expiry, "expiry").isoformat(),
        check_strike(strike),
    )


def after_cutoff(t: datetime, expiry: str, cutoff: str, tz_name: str) -> str | None:
    """Why a trade dealt at ``t`` (aware) is too late for a contract expiring on ``expiry`` at
    local ``cutoff`` in ``tz_name``, or None when it was dealt at or before that instant."""
    end = cutoff_utc(expiry, cutoff, tz_name)
    if t <= end:
        return None
    return (
        f"the contract expired at {expiry} {cutoff} {tz_name} ({timestamp_text(end)}): the "
        f"trade time {timestamp_text(t)} is after the contract's cut-off"
    )


def check_mark_point(
    kind: str,
    has_underlying: bool,
    currency: str | None,
    expiry: date | str | None,
    strike: float | None,
    tenor_days: int | None,
    value: float,
) -> tuple[str | None, str | None, float | None, int | None, float]:
    """One mark point's (currency, expiry text, strike, tenor, value) as stored, checked for its
    ``kind``: spot, vol and div_yield name an underlying, rate a currency and tenor."""
    if kind not in MARK_KINDS:
        raise StoreError(f"mark kind {kind!r} is not one of {', '.join(MARK_KINDS)}")
    if kind == "rate":
        if has_underlying or expiry is not None or strike is not None:
            raise StoreError("a rate mark has a currency and a tenor, no symbol, expiry or strike")
        ccy, days = check_currency(currency), check_tenor(tenor_days)
        return ccy, None, None, days, check_decimal(value, "rate")
    if not has_underlying or currency is not None or tenor_days is not None:
        raise StoreError(f"a {kind} mark names an underlying, and no currency or tenor")
    if kind == "vol":
        vol = check_vol(value)
        if expiry is None:
            raise StoreError("a vol mark needs an expiry")
        e = parse_date(expiry, "expiry").isoformat()
        return None, e, None if strike is None else check_strike(strike), None, vol
    if expiry is not None or strike is not None:
        raise StoreError(f"a {kind} mark has no expiry or strike")
    if kind == "spot":
        return None, None, None, None, within(limits.LEVEL, value, "spot")
    return None, None, None, None, check_decimal(value, "dividend yield")
