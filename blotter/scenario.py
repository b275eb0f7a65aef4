"""What-if moves, the greeks' Taylor estimate against full revaluation, ladders and P&L explain.

A move is one line of text (``parse_move``), applied to a base ``BookValuation`` (``apply_move``):
every position is revalued on the shocked inputs with the engine, and the change is set beside
the Taylor estimate built from the base greeks, term by term, with the error of each order.

Grammar (keywords are case-insensitive, symbols are the book's own, parts combine in any order
and apply together)::

    spot -3%            every underlying's spot down 3%
    spot +2.5           every spot up 2.5 currency units
    IDX spot -5%        one underlying; a named part overrides an every-underlying part for it
    IDX spot =4480      one underlying's spot set to a level
    spot -3% beta       each underlying moves beta × 3% (an index-equivalent move)
    vol +2              every vol up 2 vol points (0.30 → 0.32)
    vol -10%            every vol times 0.9
    vol +2 weighted     each expiry's vol up 2 × √(T_ref/T) points (T floored at 7 days)
    IDX vol +3          one underlying's vols
    days 3              three calendar days pass (fractions allowed: days 0.5)
    bdays 1             to the next business day at the same time of day (Friday → Monday)
    rate +25bp          every rate up 25 basis points (rate +0.25% is the same)
    spot -3% vol +2 days 1
    spot -5% moneyness  vols sticky moneyness for this move (the default is sticky strike)

Vol is sticky strike by default: under a spot move each option keeps the vol of its strike and
expiry, and a day roll keeps each contract's vol (and its rate). With ``moneyness`` each option
instead takes the marked vol at its moneyness on the moved spot (strike K read at K × S / S').
Options that expire inside a roll settle at intrinsic value on the moved spot; they are listed as
expiring, flagged as pin risk when the moved spot is within ``PIN_BAND_PCT`` of the strike, and
their Taylor estimate is kept but flagged.
"""

from __future__ import annotations

import re
import weakref
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, replace
from functools import cached_property
from typing import Any

import numpy as np

from blotter import calendar as cal
from blotter import engine, limits
from blotter.book import MOVE_PARTS, SYMBOL_PATTERN, Book
from blotter.market import VOL_FLOOR, Market
from blotter.risk import (
    BookValuation,
    MissingMark,
    UnvaluedPosition,
    intrinsic,
    missing_marks,
    value_book,
)

TERM_NAMES = ("delta", "gamma", "vega", "volga", "vanna", "theta", "rho")
"""Taylor terms, in the order they are shown."""
EXPLAIN_TERMS = TERM_NAMES + ("carry",)
"""Explain's terms: the what-if's, and ``carry`` for a change of the cost of carry b that the rate
does not account for (a dividend yield mark, a foreign rate)."""

FIRST_ORDER = ("delta", "vega", "theta", "rho", "carry")
"""Terms of the first-order estimate (``carry`` in explain only)."""

SECOND_ORDER = ("gamma", "volga", "vanna")
"""Terms the second-order estimate adds to the first order."""

PIN_BAND_PCT = 1.0
"""An expiring option whose moved spot is within this % of its strike is flagged as pin risk."""

STICKY_RULE = "sticky strike"
"""The default rule for how vols follow spot: each strike keeps its vol."""

MONEYNESS_RULE = "sticky moneyness"
"""The other rule: each option takes the marked vol at its moneyness K/S after the spot move."""

VOL_RULES = (STICKY_RULE, MONEYNESS_RULE)
"""Rules a move or a ladder may use."""

DEFAULT_SPOT_PCTS = (-10.0, -5.0, -2.0, -1.0, 0.0, 1.0, 2.0, 5.0, 10.0)
"""Ladder rows: spot moves in % of every underlying's spot."""

DEFAULT_VOL_PTS = (-5.0, -2.0, 0.0, 2.0, 5.0)
"""Ladder columns: parallel vol moves in vol points."""

LADDER_CHUNK_CELLS = 1 << 17
"""Ladder memory bound: (scenarios × positions) cells priced per engine call (about 2,900
positions of a 9 × 5 ladder, some 20 MB of engine inputs and temporaries); chunks of this size
also keep the broadcast inputs in cache, which is faster than one large pass."""

EXAMPLES = (
    ("spot -3%", "every underlying's spot down 3%"),
    ("spot +2.5", "every spot up 2.5 currency units"),
    ("IDX spot -5%", "one underlying (any symbol of the book)"),
    ("IDX spot =4480", "one underlying's spot set to a level"),
    ("spot -3% beta", "each underlying moves beta × 3% (index-equivalent move)"),
    ("vol +2", "every vol up 2 vol points (0.30 → 0.32)"),
    ("vol -10%", "every vol times 0.9"),
    ("vol +2 weighted", "each expiry's vol up 2 × √(30d/T) points, T floored at 7 days"),
    ("IDX vol +3", "one underlying's vols up 3 points"),
    ("days 3", "three calendar days pass"),
    ("bdays 1", "to the next business day (a Friday rolls over the weekend)"),
    ("rate +25bp", "every rate up 25 basis points (rate +0.25% is the same)"),
    ("spot -3% vol +2 days 1", "parts combine and apply together"),
    ("spot -5% moneyness", "vols sticky moneyness for this move instead of sticky strike"),
)
"""Move examples with their meaning, for help screens."""


class MoveSyntaxError(ValueError):
    """A malformed move: ``message`` says what is wrong; ``start``/``end`` index the bad word."""

    def __init__(self, message: str, start: int, end: int, text: str = "") -> None:
        super().__init__(message)
        self.message = message
        self.start = start
        self.end = end
        self.text = text

    def pointer(self) -> str:
        """Two lines: the move text and a caret line under the offending word."""
        width = max(self.end - self.start, 1)
        return f"{self.text}\n{' ' * self.start}{'^' * width}"


@dataclass(frozen=True)
class SpotShift:
    """One spot part: ``unit`` "%" (relative), "abs" (currency units) or "level" (set to)."""

    symbol: str | None
    amount: float
    unit: str
    beta: bool = False


@dataclass(frozen=True)
class VolShift:
    """One vol part: ``unit`` "pts" (0.01 each) or "%" (relative); ``weighted`` by √(T_ref/T)."""

    symbol: str | None
    amount: float
    unit: str
    weighted: bool = False


@dataclass(frozen=True)
class Move:
    """A parsed what-if move; every part optional, all applied together."""

    text: str
    spot: tuple[SpotShift, ...] = ()
    vol: tuple[VolShift, ...] = ()
    days: float = 0.0
    bdays: int = 0
    rate_bp: float = 0.0
    vol_rule: str = STICKY_RULE

    @property
    def is_empty(self) -> bool:
        """True when the move changes nothing."""
        return not (self.spot or self.vol or self.days or self.bdays or self.rate_bp)

    def describe(self) -> str:
        """The move in canonical text, e.g. ``spot -3% vol +2 days 1``, each amount as typed (to 15
        significant digits, so -99.9999999% never reads as -100%)."""
        words: list[str] = []
        for s in self.spot:
            amt = (
                f"={s.amount:.15g}"
                if s.unit == "level"
                else f"{s.amount:+.15g}{'%' if s.unit == '%' else ''}"
            )
            words.append(
                " ".join(w for w in (s.symbol, "spot", amt, "beta" if s.beta else None) if w)
            )
        for v in self.vol:
            amt = f"{v.amount:+.15g}{'%' if v.unit == '%' else ''}"
            words.append(
                " ".join(w for w in (v.symbol, "vol", amt, "weighted" if v.weighted else None) if w)
            )
        if self.days:
            words.append(f"days {self.days:.15g}")
        if self.bdays:
            words.append(f"bdays {self.bdays}")
        if self.rate_bp:
            words.append(f"rate {self.rate_bp:+.15g}bp")
        if self.vol_rule == MONEYNESS_RULE:
            words.append("moneyness")
        return " ".join(words) or "no move"

    def as_dict(self) -> dict[str, Any]:
        """Plain-data form (JSON): text, spot and vol parts, days, bdays, rate_bp, vol rule."""
        return {
            "text": self.text,
            "spot": [
                {"underlying": s.symbol, "amount": s.amount, "unit": s.unit, "beta": s.beta}
                for s in self.spot
            ],
            "vol": [
                {"underlying": v.symbol, "amount": v.amount, "unit": v.unit, "weighted": v.weighted}
                for v in self.vol
            ],
            "days": self.days,
            "bdays": self.bdays,
            "rate_bp": self.rate_bp,
            "vol_rule": self.vol_rule,
        }


_NUMBER = re.compile(r"^(?P<sign>[+-])?(?P<num>\d+(?:\.\d*)?|\.\d+)(?P<unit>%|bp)?$", re.IGNORECASE)
_LEVEL = re.compile(r"^=(?P<num>\d+(?:\.\d*)?|\.\d+)$")
_SYMBOL = SYMBOL_PATTERN
_KEYWORDS = MOVE_PARTS


def _tokens(text: str) -> list[tuple[str, int, int]]:
    return [(m.group(), m.start(), m.end()) for m in re.finditer(r"\S+", text)]


def parse_move(text: str, symbols: Sequence[str] | None = None) -> Move:
    """Parse one move line (grammar in the module docstring).

    With ``symbols`` (the book's underlyings) a named part must name one of them; a unique
    case-insensitive match is accepted and spelled as the book spells it. Raises
    ``MoveSyntaxError`` pointing at the first offending word.
    """
    toks = _tokens(text)
    if not toks:
        raise MoveSyntaxError("empty move: type e.g. spot -3% vol +2 days 1", 0, 0, text)

    def fail(msg: str, k: int) -> MoveSyntaxError:
        if k >= len(toks):
            end = len(text.rstrip())
            return MoveSyntaxError(msg, end, end + 1, text)
        return MoveSyntaxError(msg, toks[k][1], toks[k][2], text)

    spots: dict[str | None, SpotShift] = {}
    vols: dict[str | None, VolShift] = {}
    days: float | None = None
    bdays: int | None = None
    rate: float | None = None
    rule = STICKY_RULE
    k = 0
    while k < len(toks):
        word = toks[k][0]
        low = word.lower()
        symbol: str | None = None
        if low in ("moneyness", "sticky-moneyness"):
            if rule == MONEYNESS_RULE:
                raise fail("'moneyness' given twice", k)
            rule = MONEYNESS_RULE
            k += 1
            continue
        if low not in _KEYWORDS:
            nxt = toks[k + 1][0].lower() if k + 1 < len(toks) else ""
            if low in ("beta", "weighted"):
                where = (
                    "a spot % move (spot -3% beta)"
                    if low == "beta"
                    else "a vol points move (vol +2 weighted)"
                )
                raise fail(f"'{word}' must follow {where}", k)
            elif nxt in ("spot", "vol") and _SYMBOL.match(word):
                symbol = _resolve_symbol(word, symbols, fail, k)
                k += 1
                low = nxt
            elif _NUMBER.match(word) or _LEVEL.match(word):
                raise fail(f"'{word}' needs a part before it: spot, vol, days, bdays or rate", k)
            elif nxt and (_NUMBER.match(nxt) or _LEVEL.match(nxt)):
                raise fail(f"unknown part '{word}': expected spot, vol, days, bdays or rate", k)
            else:
                raise fail(
                    f"unknown word '{word}': expected spot, vol, days, bdays, rate, "
                    "or an underlying before spot or vol",
                    k,
                )
        kw_at = k
        k += 1
        if k >= len(toks):
            raise fail(f"'{toks[kw_at][0]}' needs an amount, e.g. {_example(low)}", k)
        amount_word = toks[k][0]
        if low == "spot":
            if symbol in spots:
                raise fail(f"spot given twice for {symbol or 'every underlying'}", kw_at)
            lvl = _LEVEL.match(amount_word)
            if lvl:
                if symbol is None:
                    raise fail("a spot level (=4480) needs an underlying before 'spot'", k)
                level = _within(limits.LEVEL, float(lvl.group("num")), "spot level", fail, k)
                shift = SpotShift(symbol, level, "level")
                k += 1
            else:
                sign, num, unit = _amount(amount_word, fail, k, "spot", allow=("%", ""))
                bound = limits.MOVE_SPOT_PCT if unit == "%" else limits.MOVE_SPOT_ABS
                value = _within(bound, sign * num, "spot move", fail, k)
                k += 1
                beta = k < len(toks) and toks[k][0].lower() == "beta"
                if beta:
                    if unit != "%":
                        raise fail("'beta' needs a % spot move (spot -3% beta)", k)
                    if symbol is not None:
                        raise fail("'beta' applies to a move of every spot; drop the underlying", k)
                    k += 1
                shift = SpotShift(symbol, value, "%" if unit == "%" else "abs", beta)
            spots[symbol] = shift
        elif low == "vol":
            if symbol in vols:
                raise fail(f"vol given twice for {symbol or 'every underlying'}", kw_at)
            sign, num, unit = _amount(amount_word, fail, k, "vol", allow=("%", ""))
            bound = limits.MOVE_VOL_PCT if unit == "%" else limits.MOVE_VOL_PTS
            value = _within(bound, sign * num, "vol move", fail, k)
            k += 1
            weighted = k < len(toks) and toks[k][0].lower() == "weighted"
            if weighted:
                if unit == "%":
                    raise fail("'weighted' needs a vol move in points (vol +2 weighted)", k)
                k += 1
            vols[symbol] = VolShift(symbol, value, "%" if unit == "%" else "pts", weighted)
        elif low in ("days", "bdays"):
            if days is not None or bdays is not None:
                raise fail("one day roll per move: give days or bdays once", kw_at)
            m = _NUMBER.match(amount_word)
            if not m or m.group("unit"):
                raise fail(f"'{amount_word}' is not a number of days, e.g. {_example(low)}", k)
            value = float(m.group("num")) * (-1.0 if m.group("sign") == "-" else 1.0)
            if value < 0:
                raise fail("days only move forward", k)
            if low == "bdays":
                value = _within(limits.MOVE_BDAYS, value, "bdays", fail, k)
                if not value.is_integer():
                    raise fail("bdays needs a whole number of business days", k)
                bdays = int(value)
            else:
                days = _within(limits.MOVE_DAYS, value, "days", fail, k)
            k += 1
        else:  # rate
            if rate is not None:
                raise fail("rate given twice", kw_at)
            sign, num, unit = _amount(amount_word, fail, k, "rate", allow=("bp", "%"))
            rate = _within(
                limits.MOVE_RATE_BP, sign * num * (100.0 if unit == "%" else 1.0), "rate move",
                fail, k,
            )
            k += 1
    return Move(
        text=text,
        spot=tuple(spots.values()),
        vol=tuple(vols.values()),
        days=days or 0.0,
        bdays=bdays or 0,
        rate_bp=rate or 0.0,
        vol_rule=rule,
    )


def _example(keyword: str) -> str:
    return {
        "spot": "spot -3%",
        "vol": "vol +2",
        "days": "days 3",
        "bdays": "bdays 1",
        "rate": "rate +25bp",
    }[keyword]


def _amount(
    word: str, fail: Any, k: int, part: str, allow: tuple[str, ...]
) -> tuple[float, float, str]:
    """(sign, magnitude, unit) of a signed amount such as ``-3%``, ``+2.5`` or ``+25bp``."""
    m = _NUMBER.match(word)
    if not m:
        raise fail(f"'{word}' is not an amount for {part}, e.g. {_example(part)}", k)
    unit = (m.group("unit") or "").lower()
    if not m.group("sign"):
        raise fail(f"give a sign: {part} +{word} or {part} -{word}", k)
    if unit not in allow:
        if part == "rate":
            raise fail(f"give rate moves in bp or %: rate {m.group('sign')}{m.group('num')}bp", k)
        raise fail(
            f"'{unit}' is not a unit for {part}: use {m.group('sign')}{m.group('num')}% "
            f"or {m.group('sign')}{m.group('num')}",
            k,
        )
    return (-1.0 if m.group("sign") == "-" else 1.0), float(m.group("num")), unit


def _within(bound: limits.Bound, value: float, what: str, fail: Any, k: int) -> float:
    """``value`` when ``bound`` holds it, else the parser's error at word ``k`` naming the range."""
    if not bound.contains(value):
        raise fail(f"{what} must be {bound.describe(signed=what.endswith('move'))}", k)
    return value


def _resolve_symbol(word: str, symbols: Sequence[str] | None, fail: Any, k: int) -> str:
    if symbols is None or word in symbols:
        return word
    matches = [s for s in symbols if s.lower() == word.lower()]
    if len(matches) == 1:
        return matches[0]
    known = ", ".join(symbols) if len(symbols) <= 8 else ", ".join(symbols[:8]) + ", ..."
    raise fail(f"unknown underlying '{word}' (the book has {known})", k)


# ---------------------------------------------------------------------------------------------
# The Taylor estimate


@dataclass(frozen=True, eq=False)
class Sensitivities:
    """Greeks × units of positions or groups, any shapes that broadcast with the moves.

    Currency per unit of each move: ``delta`` per 1 of spot, ``gamma`` per (1 of spot)²,
    ``vega`` per 1.00 of vol, ``volga`` per (1.00 of vol)², ``vanna`` per (1 of spot × 1.00 of
    vol), ``theta`` per year, ``rho`` per 1.00 of rate (desk rho: with the carry where it moves
    with the rate), ``carry`` per 1.00 of carry b beyond the rate's share (engine carry rho).
    """

    delta: np.ndarray
    gamma: np.ndarray
    vega: np.ndarray
    volga: np.ndarray
    vanna: np.ndarray
    theta: np.ndarray
    rho: np.ndarray
    carry: np.ndarray

    @classmethod
    def of(cls, valuation: BookValuation) -> Sensitivities:
        """Per-position sensitivities (n,) of a valuation: its raw greeks × units."""
        g, u = valuation.greeks, valuation.units
        return cls(
            delta=g.delta * u,
            gamma=g.gamma * u,
            vega=g.vega * u,
            volga=g.volga * u,
            vanna=g.vanna * u,
            theta=g.theta * u,
            rho=valuation.rho_unit * u,
            carry=g.carry_rho * u,
        )

    def take(self, rows: np.ndarray | slice) -> Sensitivities:
        """The rows ``rows`` of every field."""
        return Sensitivities(**{k: v[rows] for k, v in self.__dict__.items()})

    def per_group(self, codes: np.ndarray, n_groups: int) -> Sensitivities:
        """Each field summed per group code 0..n_groups-1, shape (n_groups,)."""
        fields = self.__dict__.items()
        return Sensitivities(
            **{k: np.bincount(codes, weights=v, minlength=n_groups) for k, v in fields}
        )


def moved_vols(vols: np.ndarray, dvol: np.ndarray | float) -> np.ndarray:
    """Vols after the change ``dvol`` (decimal), floored at ``VOL_FLOOR`` (or at the vol itself
    when it is marked lower); broadcast shapes.

    The what-if and the ladder both reprice on these vols and give the Taylor estimate the
    change they make, so a floored vol counts in both the same way.
    """
    return np.asarray(np.maximum(vols + dvol, np.minimum(vols, VOL_FLOOR)))


def taylor_terms(
    sens: Sensitivities,
    ds: np.ndarray | float,
    dvol: np.ndarray | float,
    dt: float,
    dr: np.ndarray | float,
    dcarry: np.ndarray | float | None = None,
) -> dict[str, np.ndarray]:
    """The Taylor estimate term by term (currency), in ``TERM_NAMES`` order plus ``carry`` when
    ``dcarry`` is given; each term has the broadcast shape of its inputs.

    Δ·dS, ½Γ·dS², vega·dσ, ½volga·dσ², vanna·dS·dσ, θ·dt, ρ·dr and carry ρ·db: ``ds`` spot
    change (currency), ``dvol`` the vol change the full revaluation applied (after
    ``moved_vols``), ``dt`` years, ``dr`` rate change, ``dcarry`` the change of carry b beyond
    the rate's share (all decimal). Being linear in ``sens``, it applies to per-position
    sensitivities and to sums over positions that share the same moves alike.
    """
    terms = {
        "delta": sens.delta * ds,
        "gamma": 0.5 * sens.gamma * ds * ds,
        "vega": sens.vega * dvol,
        "volga": 0.5 * sens.volga * dvol * dvol,
        "vanna": sens.vanna * ds * dvol,
        "theta": sens.theta * dt,
        "rho": sens.rho * dr,
    }
    if dcarry is not None:
        terms["carry"] = sens.carry * dcarry
    return {k: np.asarray(v) for k, v in terms.items()}


def first_order(terms: Mapping[str, Any]) -> Any:
    """The first-order estimate: the sum of the ``FIRST_ORDER`` terms present in ``terms``."""
    return sum((terms[k] for k in FIRST_ORDER if k in terms), 0.0)


def second_order(terms: Mapping[str, Any]) -> Any:
    """The second-order estimate: the first order plus the ``SECOND_ORDER`` terms."""
    return first_order(terms) + sum((terms[k] for k in SECOND_ORDER), 0.0)


# ---------------------------------------------------------------------------------------------
# Applying a move


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
        """First-order estimate per position (n,): delta + vega + theta + rho terms."""
        return np.asarray(first_order(self.terms))

    @cached_property
    def estimate_2(self) -> np.ndarray:
        """Second-order estimate per position (n,): first order + gamma + volga + vanna terms."""
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


@dataclass(frozen=True, eq=False)
class _Prep:
    """Everything of a base valuation that no move changes, kept for the hot paths.

    Arrays named ``*_l`` and the unsuffixed live arrays hold the m live options only; ``sens``
    holds raw greeks × units per position (n,), ``sens_u`` their sums per underlying (n_u,).
    """

    live_idx: np.ndarray  # int64 (m,) option rows with years > 0
    all_live: bool  # every position is a live option (no gathers needed)
    is_call: np.ndarray  # (m,)
    strike: np.ndarray
    years: np.ndarray
    american: np.ndarray
    any_american: bool
    base_price: np.ndarray  # the valuation's price per unit at the base inputs (m,)
    spot_l: np.ndarray
    rate_l: np.ndarray
    carry_l: np.ndarray
    vol_l: np.ndarray
    weight_l: np.ndarray
    units_l: np.ndarray
    uidx_l: np.ndarray
    carry_moves: np.ndarray  # float (m,): 1 where carry moves with the rate
    dead_idx: np.ndarray
    hedge_idx: np.ndarray
    units: np.ndarray  # (n,)
    sens: Sensitivities  # raw greeks × units (n,)
    sens_u: Sensitivities  # the same summed per underlying (n_u,)
    vol0: np.ndarray  # (n,) the valuation's vol, 0 for hedges and options past expiry
    uidx: np.ndarray
    n_u: int
    present: np.ndarray  # bool (n_u,): underlying has positions
    calendar: str


_PREP: weakref.WeakKeyDictionary[BookValuation, _Prep] = weakref.WeakKeyDictionary()


def desk_calendar(valuation: BookValuation) -> str:
    """Holiday calendar of the day roll: the reference index's, else the most common in the book."""
    book = valuation.book
    und = book.underlyings
    ref = book.reference_index
    if ref is not None and ref in und.symbols:
        return und.calendars[und.index_of(ref)] or cal.DEFAULT_CALENDAR
    if len(book) == 0:
        return cal.DEFAULT_CALENDAR
    counts = np.bincount(book.underlying_idx, minlength=len(und))
    return und.calendars[int(np.argmax(counts))] or cal.DEFAULT_CALENDAR


def prepare(valuation: BookValuation) -> _Prep:
    """The move-independent arrays of ``valuation`` (computed once, cached per valuation)."""
    prep = _PREP.get(valuation)
    if prep is not None:
        return prep
    v, book, g = valuation, valuation.book, valuation.greeks
    n, n_u = len(book), len(book.underlyings)
    live_idx = np.flatnonzero(v.live)
    all_live = live_idx.size == n
    take = (lambda a: np.ascontiguousarray(a)) if all_live else (lambda a: a[live_idx])
    units = v.units
    am = take(book.american)
    spot_l, rate_l, carry_l, vol_l = take(v.spot), take(v.rate), take(v.carry), take(v.vol)
    # The valuation's per-unit prices are the engine's at these same inputs: no second pricing.
    base = np.ascontiguousarray(take(g.price), dtype=np.float64)
    uidx = book.underlying_idx
    sens = Sensitivities.of(v)
    w = v.vega_weight
    prep = _Prep(
        live_idx=live_idx,
        all_live=all_live,
        is_call=take(book.is_call),
        strike=take(book.strikes),
        years=take(v.years),
        american=am,
        any_american=bool(am.any()),
        base_price=base,
        spot_l=spot_l,
        rate_l=rate_l,
        carry_l=carry_l,
        vol_l=vol_l,
        weight_l=take(w),
        units_l=take(units),
        uidx_l=take(uidx),
        carry_moves=take(v.rate_moves_carry).astype(np.float64),
        dead_idx=np.flatnonzero(book.is_option & ~v.live),
        hedge_idx=np.flatnonzero(~book.is_option),
        units=units,
        sens=sens,
        sens_u=sens.per_group(uidx, n_u),
        vol0=np.where(v.live, np.nan_to_num(v.vol), 0.0),
        uidx=uidx,
        n_u=n_u,
        present=np.bincount(uidx, minlength=n_u) > 0,
        calendar=desk_calendar(valuation),
    )
    _PREP[valuation] = prep
    return prep


def roll_time(valuation: BookValuation, move: Move) -> np.datetime64:
    """The valuation instant after the move's day roll (calendar days, or business days at the
    same clock time in the desk's zone the valuation was made for)."""
    t = valuation.valuation_time
    if move.bdays:
        return cal.roll_business_days(t, move.bdays, prepare(valuation).calendar, valuation.tz)
    if move.days:
        return cal.roll_calendar_days(t, move.days)
    return t


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


def _dvol_live(p: _Prep, plan: _VolPlan) -> np.ndarray | float:
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


def _smile_vols(v: BookValuation, p: _Prep, spots_after_u: np.ndarray) -> np.ndarray:
    """Vols (m,) of the live options at their moneyness after the spot move (sticky moneyness):
    the marked vol at strike K × S / S', same expiry, read at the valuation time."""
    out = p.vol_l.copy()
    s0 = v.underlying_spots
    symbols = v.book.underlyings.symbols
    expiries = v.book.expiries[p.live_idx]
    dates = v.book.expiry_dates[p.live_idx]
    for j in np.flatnonzero(p.present & (spots_after_u != s0)):
        rows = np.flatnonzero(p.uidx_l == j)
        if rows.size:
            scaled = p.strike[rows] * (s0[j] / spots_after_u[j])
            out[rows] = v.market.vols_for(
                symbols[j], expiries[rows], scaled, v.valuation_time, expiry_dates=dates[rows]
            )
    return out


def _dvol_all(v: BookValuation, p: _Prep, plan: _VolPlan) -> np.ndarray:
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
    value on the moved spot; a hedge changes by units × Δspot. The estimate uses the base greeks:
    Δ·dS, ½Γ·dS², vega·dσ, ½volga·dσ², vanna·dS·dσ, θ·dt (the roll's year fraction), ρ·dr; the
    spot and vol moves are the same within an underlying, so its rows come from per-underlying
    sums of the greeks. MoveError when the move cannot apply (unknown symbol, spot at or below 0).
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
        smile = _smile_vols(v, p, v.underlying_spots + ds_u)
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
    am = p.american if p.any_american else False
    moving = _moving_rows(p, ds_u, vol1, dt, dr)
    if m and moving is None and not through_l.any():
        new_price = np.asarray(
            engine.price(
                p.is_call, s1, p.strike, t_after, r1, b1, vol1, american=am,
                boundaries=v.boundaries,
            )
        )
    elif m:
        # Rows whose inputs do not move keep their base price; the rest are repriced, and those
        # expiring inside the roll settle at intrinsic on the moved spot.
        new_price = p.base_price.copy()
        reprice = ~through_l if moving is None else moving & ~through_l
        a = np.flatnonzero(reprice)
        if a.size:
            new_price[a] = engine.price(
                p.is_call[a],
                np.broadcast_to(s1, (m,))[a],
                p.strike[a],
                np.broadcast_to(t_after, (m,))[a],
                np.broadcast_to(r1, (m,))[a],
                np.broadcast_to(b1, (m,))[a],
                np.broadcast_to(vol1, (m,))[a],
                american=p.american[a] if p.american[a].any() else False,
                boundaries=v.boundaries,
            )
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
    symbols = v.book.underlyings.symbols
    currencies = v.book.underlyings.currencies
    present = np.flatnonzero(p.present)
    by_u = [
        _row(
            symbols[j],
            float(full_u[j]),
            {t: float(res_terms[t][j]) for t in TERM_NAMES},
            int(n_through_u[j]),
            underlying=symbols[j],
            currency=currencies[j],
        )
        for j in present
    ]
    currency_u = np.where(p.present, np.asarray(currencies, dtype=str), "")
    total_row, by_ccy = _currency_rows(
        "total", currency_u, full_u, {t: res_terms[t] for t in TERM_NAMES}, n_through_u
    )

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
    notes: list[str] = []
    if through.any():
        expiring = _expiring(result, np.flatnonzero(through))
        object.__setattr__(result, "expiring", expiring)
        notes.append(
            f"{len(expiring)} option position(s) expire inside the roll: settled at intrinsic,"
            " their estimate is not meaningful"
        )
    if floored:
        notes.append(f"some vols floored at {VOL_FLOOR * 100:g} vol points")
    object.__setattr__(result, "notes", tuple(notes))
    return result


def _moving_rows(
    p: _Prep, ds_u: np.ndarray, vol1: np.ndarray, dt: float, dr: float
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


# ---------------------------------------------------------------------------------------------
# Ladder


@dataclass(frozen=True, eq=False)
class Ladder:
    """Spot × vol grid of the book's P&L (currency), full revaluation against the estimate.

    ``full``, ``estimate`` (second order), ``estimate_1`` and ``error`` = full − estimate have shape
    (n_spot, n_vol); row i is ``spot_pcts[i]`` (% of every spot), column j ``vol_pts[j]`` (vol
    points, parallel). ``worst`` is the (i, j) of the lowest full P&L. Vols are sticky strike.
    """

    spot_pcts: np.ndarray
    vol_pts: np.ndarray
    days: float
    full: np.ndarray
    estimate: np.ndarray
    estimate_1: np.ndarray
    error: np.ndarray
    worst: tuple[int, int]
    time_after: np.datetime64
    n_through_expiry: int
    rule: str = STICKY_RULE
    currency: str | None = None  # of every position in it (None for an empty book)


def ladders(
    valuation: BookValuation,
    spot_pcts: Sequence[float] = DEFAULT_SPOT_PCTS,
    vol_pts: Sequence[float] = DEFAULT_VOL_PTS,
    days: float = 0.0,
    chunk: int | None = None,
    rule: str = STICKY_RULE,
) -> list[Ladder]:
    """One ``ladder`` per currency of the book, in the order of its underlyings (one ladder for an
    empty or single-currency book): P&L in different currencies is never added."""
    if len(valuation.currencies) <= 1:
        return [ladder(valuation, spot_pcts, vol_pts, days, chunk, rule)]
    ccy = valuation.position_currencies
    return [
        ladder(valuation.take(np.flatnonzero(ccy == c)), spot_pcts, vol_pts, days, chunk, rule)
        for c in valuation.currencies
    ]


def ladder(
    valuation: BookValuation,
    spot_pcts: Sequence[float] = DEFAULT_SPOT_PCTS,
    vol_pts: Sequence[float] = DEFAULT_VOL_PTS,
    days: float = 0.0,
    chunk: int | None = None,
    rule: str = STICKY_RULE,
) -> Ladder:
    """Full revaluation P&L of every (spot %, vol pts) cell in one broadcast pass, chunked.

    Each cell moves every spot by the same % and every vol by the same points, after ``days``
    calendar days; options expiring inside the roll settle at intrinsic. Vols are sticky strike
    unless ``rule`` is ``MONEYNESS_RULE`` (each option then takes the marked vol at its moneyness
    on the moved spot, before the vol shift). ``chunk`` bounds positions per engine call (default
    ``LADDER_CHUNK_CELLS`` / cells). The estimate is the second-order Taylor sum from the base
    greeks (first order beside it). ValueError for a book of several currencies (``ladders``).
    """
    if len(valuation.currencies) > 1:
        raise ValueError(
            f"the book holds {', '.join(valuation.currencies)}: ladder each currency apart"
        )
    if rule not in VOL_RULES:
        raise ValueError(f"rule must be one of {', '.join(VOL_RULES)}, not {rule!r}")
    sp = np.asarray(spot_pcts, dtype=np.float64).ravel()
    vp = np.asarray(vol_pts, dtype=np.float64).ravel()
    if sp.size == 0 or vp.size == 0:
        raise ValueError("a ladder needs at least one spot move and one vol move")
    if np.any(sp <= -100):
        raise ValueError("a spot move must be above -100%")
    if days < 0:
        raise ValueError("days only move forward")
    v = valuation
    p = prepare(v)
    t1 = cal.roll_calendar_days(v.valuation_time, days) if days else v.valuation_time
    dt = float(cal.year_fraction(v.valuation_time, t1))
    n_s, n_v = sp.size, vp.size
    n_cells = n_s * n_v
    rel = sp / 100.0
    dvol = vp / 100.0

    # Hedges and options already past expiry: exact, vol-free, per spot row.
    full = np.zeros((n_s, n_v))
    h = p.hedge_idx
    if h.size:
        full += (rel * float(np.dot(p.units[h], v.spot[h])))[:, None]
    if p.dead_idx.size:
        d = p.dead_idx
        call, k, s = v.book.is_call[d], v.book.strikes[d], v.spot[d]
        intr0 = intrinsic(call, s, k)
        intr1 = intrinsic(call[None, :], s[None, :] * (1 + rel[:, None]), k[None, :])
        full += ((intr1 - intr0[None, :]) @ p.units[d])[:, None]

    li = p.live_idx
    m = li.size
    step = chunk or max(256, LADDER_CHUNK_CELLS // n_cells)
    years1 = p.years - dt
    n_through = int(np.count_nonzero(years1 <= 0))
    spot_l, rate_l, carry_l, vol_l, units_l = (
        v.spot[li],
        v.rate[li],
        v.carry[li],
        v.vol[li],
        p.units[li],
    )
    shock_s = (1.0 + rel)[:, None, None]
    shock_v = dvol[None, :, None]
    # Sticky moneyness: each option's vol first moves to the smile at its moneyness, per spot row.
    smile_shift: np.ndarray | None = None
    if rule == MONEYNESS_RULE and m:
        s0 = v.underlying_spots
        smile = np.stack([_smile_vols(v, p, s0 * (1.0 + x)) for x in rel])  # (n_s, m)
        smile_shift = smile - vol_l[None, :]
    if p.any_american and m:
        # One solve per exercise boundary for the whole grid, before the chunks ask for them.
        lo_shift = dvol.min() + (0.0 if smile_shift is None else smile_shift.min(axis=0))
        hi_shift = dvol.max() + (0.0 if smile_shift is None else smile_shift.max(axis=0))
        alive_am = p.american & (years1 > 0)
        v.boundaries.prepare(
            p.is_call[alive_am],
            years1[alive_am],
            rate_l[alive_am],
            carry_l[alive_am],
            moved_vols(vol_l, lo_shift)[alive_am],
            moved_vols(vol_l, hi_shift)[alive_am],
        )
    for a in range(0, m, step):
        b = min(a + step, m)
        sl = slice(a, b)
        t_c = years1[sl]
        u_c = units_l[sl]
        alive = t_c > 0
        if not alive.all():
            e = np.flatnonzero(~alive)
            k = p.strike[sl][e]
            s1 = spot_l[sl][e][None, :] * (1.0 + rel[:, None])
            intr = intrinsic(p.is_call[sl][e][None, :], s1, k[None, :])
            full += ((intr - p.base_price[sl][e][None, :]) @ u_c[e])[:, None]
            keep: np.ndarray | slice = np.flatnonzero(alive)
        else:
            keep = slice(None)
        am = p.american[sl][keep]
        shift = shock_v
        if smile_shift is not None:
            shift = smile_shift[:, sl][:, keep][:, None, :] + shock_v
        prices = engine.price(
            p.is_call[sl][keep][None, None, :],
            spot_l[sl][keep][None, None, :] * shock_s,
            p.strike[sl][keep][None, None, :],
            t_c[keep][None, None, :],
            rate_l[sl][keep][None, None, :],
            carry_l[sl][keep][None, None, :],
            moved_vols(vol_l[sl][keep][None, None, :], shift),
            american=am[None, None, :] if am.any() else False,
            boundaries=v.boundaries,
        )
        cells = np.asarray(prices, dtype=np.float64).reshape(n_cells, -1)
        full += ((cells @ u_c[keep]) - float(np.dot(p.base_price[sl][keep], u_c[keep]))).reshape(
            n_s, n_v
        )

    # Estimate: every position's Taylor terms in every cell, on the vol change the full
    # revaluation applied (floor included), summed over positions in chunks.
    n = len(v)
    smile_shift_n: np.ndarray | None = None
    if smile_shift is not None:
        smile_shift_n = np.zeros((n_s, 1, n))
        smile_shift_n[:, 0, li] = smile_shift
    sums: dict[str, np.ndarray] = {k: np.zeros((n_s, n_v)) for k in TERM_NAMES}
    spot_move = rel[:, None, None] * v.spot[None, None, :]  # (n_s, 1, n)
    for a in range(0, n, step):
        sl = slice(a, min(a + step, n))
        vol0 = p.vol0[sl]
        shift = shock_v if smile_shift_n is None else smile_shift_n[..., sl] + shock_v
        dv = np.where(v.live[sl], moved_vols(vol0, shift) - vol0, 0.0)
        cell_terms = taylor_terms(p.sens.take(sl), spot_move[..., sl], dv, dt, 0.0)
        for k, t in cell_terms.items():
            sums[k] += np.sum(t, axis=-1)
    est1 = np.asarray(first_order(sums))
    est2 = np.asarray(second_order(sums))
    worst = np.unravel_index(int(np.argmin(full)), full.shape)
    return Ladder(
        spot_pcts=sp,
        vol_pts=vp,
        days=float(days),
        full=full,
        estimate=est2,
        estimate_1=est1,
        error=full - est2,
        worst=(int(worst[0]), int(worst[1])),
        time_after=t1,
        n_through_expiry=n_through,
        rule=rule,
        currency=v.currencies[0] if v.currencies else None,
    )


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


# ---------------------------------------------------------------------------------------------
# P&L explain


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


@dataclass(frozen=True, eq=False)
class Explain:
    """P&L explain between two mark sets: rows per underlying and the total."""

    from_set: Any
    to_set: Any
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


def _chain(s: Any, by_id: dict[int, Any], link: str) -> Any:
    """Follow ``link`` ('corrects' or 'superseded_by') from the set ``s`` to the end of its
    chain of corrections."""
    seen = 0
    while getattr(s, link, None) is not None and getattr(s, link) in by_id and seen < 1000:
        s = by_id[getattr(s, link)]
        seen += 1
    return s


def closes_in_force(sets: Sequence[Any]) -> list[Any]:
    """The closes explain offers, oldest first, from ``sets`` (``store.mark_sets()``): one per
    business date, each the close itself or the correction in force for it, in the order of the
    closes they stand for (the last, for a date an upgraded book closed more than once)."""
    everything = {s.id: s for s in sets}

    def root(s: Any) -> Any:
        return _chain(s, everything, "corrects")

    by_day: dict[Any, Any] = {}
    for s in sorted(sets, key=lambda s: getattr(s, "seq", s.id)):
        if s.kind == "close" and getattr(s, "superseded_by", None) is None:
            by_day[getattr(root(s), "business_date", None) or ("set", root(s).id)] = s
    return sorted(
        by_day.values(), key=lambda s: (_instant(root(s).marked_at), getattr(root(s), "seq", 0))
    )


def _pick_sets(
    store: Any, from_set: int | str | None, to_set: int | str | None
) -> tuple[Any, Any, Any, Any, list[str]]:
    """(start set, end set or "now", the close each stands for, notes) of an explain.

    A correction stands for the close it corrects (its root): the root's time is the period's
    boundary and the root's place in the store's order its cut of trades, the correction's marks
    its market. A corrected close named by id is replaced by the correction in force for it.
    Defaults: the last two of ``closes_in_force``; with only ``to_set`` given, the one before it.
    """
    sets = store.mark_sets()
    everything = {s.id: s for s in sets}
    notes: list[str] = []

    def root(s: Any) -> Any:
        return _chain(s, everything, "corrects")

    closes = closes_in_force(sets)

    def get(x: int | str, name: str) -> Any:
        try:
            s = everything[int(x)]
        except (KeyError, ValueError):
            raise ValueError(f"no mark set {x!r} ({name})") from None
        fixed = _chain(s, everything, "superseded_by")
        if fixed is not s:
            notes.append(f"close set {s.id} was corrected: set {fixed.id} is used in its place")
        return fixed

    to: Any
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
            end_t = None if to == "now" else _instant(root(to).marked_at)
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
    return frm, to, root(frm), None if to == "now" else root(to), notes


def _instant(x: Any) -> np.datetime64:
    return cal.to_instant(x)


def explain(
    store: Any, from_set: int | str | None = None, to_set: int | str | None = None
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
    Δ·dS, ½Γ·dS², vega·dσ, ½volga·dσ², vanna·dS·dσ, θ·dt and
    ρ·dr, where dσ and dr are each contract's own vol and rate change between the two markets,
    and carry ρ·(db − dr) for stock, index and FX options (b = r − q: a dividend yield or foreign
    rate mark change; ρ already holds the rate's share of db); futures options have b = 0.
    """
    frm, to, start_close, end_close, notes = _pick_sets(store, from_set, to_set)
    t0 = _instant(start_close.marked_at)
    cut0 = start_close.seq
    if to == "now":
        cut1 = store.last_seq() + 1
        m1 = store.load_market()
        t1 = max(cal.now(), _instant(m1.marks_as_of))
    else:
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
    end_name = "end (marks now)" if to == "now" else f"end (set {to.id})"
    sides = (
        (m0, t0, f"start (set {frm.id})", int(frm.id)),
        (m1, t1, end_name, None if to == "now" else int(to.id)),
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
    )


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


def _period_trades(store: Any, cut0: int, cut1: int, t0: Any) -> _PeriodTrades:
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

    def live_at_end(r: Any) -> bool:
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
