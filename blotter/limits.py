"""The range of every value a user can give that the model carries: one place for all entry points.

The command line, the CSV imports, the app's forms and the what-if grammar check what they are
given against these bounds before anything is written or valued, so a value the arrays cannot
carry (a multiplier of 1e300 makes totals NaN, a strike below the store's eight decimals rounds
to zero, a year-1 time overflows the clock) is refused in words that name the field. Each bound
says why it is where it is; nothing here imports the rest of the package, so every layer can
use it.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from datetime import UTC, date, datetime
from typing import Any

UNDERLYING_KINDS = ("stock", "index", "future", "fx")
"""Kinds of underlying; the kind fixes the cost of carry (see ``risk``)."""


class LimitError(ValueError):
    """A value outside its field's range, or not a number; ``field`` names the field."""

    def __init__(self, field: str, message: str) -> None:
        super().__init__(message)
        self.field = field


def number_text(x: float) -> str:
    """A bound or value as people read it: ``10,000,000``, ``0.5``, ``1e-06``, ``1e+12``."""
    if isinstance(x, int):
        return f"{x:,}"
    if x == 0 or 1e-3 <= abs(x) < 1e9:
        return f"{x:,.10g}"
    return f"{x:g}"


def given_text(value: Any) -> str:
    """What the user typed, cut to a readable length (a 400-digit number shows its size)."""
    text = str(value).strip()
    if len(text) <= 24:
        return text
    return f"{text[:12]}… ({len(text)} characters)"


_WHOLE = re.compile(r"[+-]?[0-9]+")


@dataclass(frozen=True)
class Bound:
    """The range ``low`` to ``high`` of one field, in ``unit``; ``why`` is the reason for it.

    ``low_open``/``high_open`` leave the end itself out; ``whole`` asks for a whole number;
    ``hint`` follows the range in messages (how to write the value).
    """

    field: str
    low: float
    high: float
    unit: str
    why: str
    low_open: bool = False
    high_open: bool = False
    whole: bool = False
    hint: str = ""

    def _number(self, x: float, signed: bool) -> str:
        text = ("+" if signed and x > 0 else "") + number_text(x)
        return text + self.unit if self.unit in ("%", "bp") else text

    def describe(self, signed: bool = False) -> str:
        """The range in words, e.g. ``from 1e-06 to 10,000,000 units per contract``."""
        low, high = self._number(self.low, signed), self._number(self.high, signed)
        if self.low_open:
            text = f"above {low} and " + ("below " if self.high_open else "at most ") + high
        else:
            text = f"from {low} to " + ("below " if self.high_open else "") + high
        if self.unit not in ("", "%", "bp"):
            text += " " + self.unit
        return text + (f" ({self.hint})" if self.hint else "")

    def contains(self, x: float) -> bool:
        """True when ``x`` is inside the range (NaN never is)."""
        above = x > self.low if self.low_open else x >= self.low
        below = x < self.high if self.high_open else x <= self.high
        return bool(above and below)

    def check(self, value: Any, field: str | None = None, signed: bool = False) -> float:
        """``value`` (a number or its text) as a float inside the range, else ``LimitError``.

        ``field`` names the field in the message (default ``self.field``); ``signed`` writes
        the range with signs, as for a move.
        """
        name = field or self.field
        x = _as_float(value, name)
        if self.whole and math.isfinite(x) and not x.is_integer():
            raise LimitError(name, f"{name} must be a whole number, got {given_text(value)}")
        if not self.contains(x):
            raise LimitError(
                name,
                f"{name} must be {self.describe(signed)}, got {given_text(value)}",
            )
        return x

    def check_whole(self, value: Any, field: str | None = None) -> int:
        """``value`` as an exact int in the range (ids need all 63 bits), else ``LimitError``."""
        name = field or self.field
        if isinstance(value, bool):
            raise LimitError(name, f"{name} must be a whole number, got {value!r}")
        if isinstance(value, int):
            n = value
        elif isinstance(value, str) and _WHOLE.fullmatch(value.strip()):
            n = int(value.strip())
        else:
            x = _as_float(value, name)
            if not math.isfinite(x):
                raise LimitError(name, f"{name} must be {self.describe()}, got {given_text(value)}")
            if not x.is_integer():
                raise LimitError(name, f"{name} must be a whole number, got {given_text(value)}")
            n = int(x)
        if not self.contains(n):
            raise LimitError(name, f"{name} must be {self.describe()}, got {given_text(value)}")
        return n


def _as_float(value: Any, name: str) -> float:
    """A float of ``value`` with ±inf for numbers too large for one; NaN and other types refused."""
    if isinstance(value, bool) or value is None:
        raise LimitError(name, f"{name} {value!r} is not a number")
    try:
        x = float(value.strip() if isinstance(value, str) else value)
    except OverflowError:  # an int beyond float64: outside every range, with its sign
        x = math.inf if value > 0 else -math.inf
    except (TypeError, ValueError):
        raise LimitError(name, f"{name} {given_text(value)!r} is not a number") from None
    if math.isnan(x):
        raise LimitError(name, f"{name} must be a finite number, got {given_text(value)}")
    return x


# -- the book: contracts and trades --------------------------------------------------------------

QUANTITY = Bound(
    "quantity", -1e12, 1e12, "contracts or units",
    "a trillion contracts or shares is past any real ticket; with the multiplier and price "
    "bounds a position's value stays far inside what float64 carries",
    whole=True,
)
"""Signed quantity of one trade (zero is refused apart, as a trade of nothing)."""

MULTIPLIER = Bound(
    "multiplier", 1e-6, 1e7, "units per contract",
    "from a millionth of a unit (fractional contracts) to ten million units (the largest "
    "currency and commodity contracts); past it quantity × multiplier × price loses its total",
)
"""Units of underlying per contract."""

PRICE = Bound(
    "price", 0.0, 1e12, "per unit", "no instrument is quoted at a trillion per unit",
    high_open=True,
)
"""Trade price per unit of underlying (an option premium per share); zero is a real price."""

LEVEL = Bound(
    "spot", 1e-6, 1e12, "per unit",
    "prices and strikes are kept to eight decimals, so below a millionth they lose their "
    "digits; no instrument is quoted at a trillion per unit",
    high_open=True,
)
"""A spot price or a strike, per unit of underlying."""

VOL = Bound(
    "vol", 0.0, 10.0, "", "1,000% is past any quoted implied vol",
    low_open=True, hint="a decimal: 0.25 is 25%",
)
"""An implied vol mark, as a decimal."""

RATE = Bound(
    "rate", -1.0, 1.0, "",
    "±100% a year is past any interest rate or dividend yield a model should carry",
    hint="a decimal: 0.04 is 4%",
)
"""A zero rate, a dividend yield or a foreign rate, continuously compounded, as a decimal."""

TENOR = Bound(
    "tenor", 1, 36500, "days", "a rate curve point from one day to a hundred years", whole=True
)
"""Tenor of a zero-rate mark, in calendar days."""

TICK = Bound(
    "tick", 1e-8, 1000.0, "per unit",
    "the store keeps prices to eight decimals; a tick past a thousand per unit is a typo",
)
"""Price tick (precision) of an underlying, per unit."""

BETA = Bound("beta", -20.0, 20.0, "", "a beta past ±20 to the reference index is a typo")
"""Beta of an underlying to the book's reference index."""

ID = Bound("id", 1, 2**63 - 1, "", "SQLite row ids are 64-bit signed integers", whole=True)
"""Any row id: trade, mark set, contract."""

DEMO_POSITIONS = Bound(
    "positions", 0, 1_000_000, "option positions",
    "ten times the benchmark book; a larger one needs more memory than a desk machine spares",
    whole=True,
)
"""Option positions ``blotter demo`` may generate."""

# -- time ------------------------------------------------------------------------------------------

FIRST_INSTANT = datetime(1900, 1, 1, tzinfo=UTC)
"""Earliest time or date accepted: no listed option traded before it."""
END_INSTANT = datetime(2200, 1, 1, tzinfo=UTC)
"""Times and dates from here on are refused: nothing booked today expires this late."""


def check_time(t: datetime, field: str = "time") -> datetime:
    """``t`` when it lies in [1900-01-01, 2200-01-01) (aware: as UTC), else ``LimitError``.

    The year is checked before any conversion, so a year-1 time with an offset is refused in
    words instead of overflowing.
    """
    if not FIRST_INSTANT.year - 1 <= t.year <= END_INSTANT.year:
        raise LimitError(field, _time_words(field, t.isoformat()))
    utc = t.astimezone(UTC) if t.tzinfo is not None else t.replace(tzinfo=UTC)
    if not FIRST_INSTANT <= utc < END_INSTANT:
        raise LimitError(field, _time_words(field, t.isoformat()))
    return t


def check_date(d: date, field: str = "date") -> date:
    """``d`` when it lies in 1900-01-01 to 2199-12-31, else ``LimitError``."""
    if not FIRST_INSTANT.date() <= d < END_INSTANT.date():
        raise LimitError(field, _time_words(field, d.isoformat()))
    return d


def _time_words(field: str, given: str) -> str:
    return (
        f"{field} must be from {FIRST_INSTANT.date().isoformat()} to before "
        f"{END_INSTANT.date().isoformat()}, got {given}"
    )


# -- what-if moves ---------------------------------------------------------------------------------

MOVE_SPOT_PCT = Bound(
    "spot", -100.0, 1000.0, "%",
    "a spot cannot fall 100%; an eleven-fold rise is past any stress a desk runs",
    low_open=True,
)
"""A relative spot move, in percent."""

MOVE_SPOT_ABS = Bound(
    "spot", -1e12, 1e12, "", "as far as a price can be (see ``LEVEL``)",
    low_open=True, high_open=True,
)
"""An absolute spot move, in currency units per unit of underlying."""

MOVE_VOL_PTS = Bound(
    "vol", -1000.0, 1000.0, "points", "1,000 vol points is 10.00 of vol, the whole vol range"
)
"""A vol move in vol points (0.01 of vol each)."""

MOVE_VOL_PCT = Bound(
    "vol", -100.0, 1000.0, "%", "a vol cannot fall 100%; an eleven-fold rise is past any stress",
    low_open=True,
)
"""A relative vol move, in percent."""

MOVE_DAYS = Bound("days", 0.0, 3660.0, "days", "ten years of calendar time")
"""A calendar-day roll."""

MOVE_BDAYS = Bound("bdays", 0, 2520, "business days", "ten years of business days", whole=True)
"""A business-day roll."""

MOVE_RATE_BP = Bound("rate", -10000.0, 10000.0, "bp", "±100% a year, as for a rate mark")
"""A parallel rate move, in basis points."""
