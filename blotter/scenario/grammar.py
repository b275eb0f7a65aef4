"""The what-if grammar: one line of text parsed into a ``Move`` (``parse_move``).

Keywords are case-insensitive, symbols are the book's own, and parts combine in any order and
apply together; ``EXAMPLES`` lists every form with its meaning. A malformed line raises
``MoveSyntaxError`` pointing at the offending word, and amounts are checked against
``blotter.limits``. Nothing here values anything: ``whatif`` and ``ladder`` apply moves.
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from blotter import limits

MOVE_PARTS = ("spot", "vol", "days", "bdays", "rate")
"""The parts of a move, each followed by its amount."""

RULE_WORDS = ("moneyness", "sticky-moneyness")
"""Words that make a move's vols sticky moneyness."""

QUALIFIERS = ("beta", "weighted")
"""Words after a part's amount: ``beta`` after a spot % move, ``weighted`` after vol points."""

MOVE_WORDS = (*MOVE_PARTS, *RULE_WORDS, *QUALIFIERS)
"""Every word of the grammar, which an underlying's symbol may not be."""

SYMBOL_PATTERN = re.compile(r"[A-Za-z][A-Za-z0-9._/-]*\Z")
"""What an underlying's symbol must look like to be typed in a move: one word, a letter, then
letters, digits and . _ / - (the store refuses a new symbol that does not match, or that is one
of ``MOVE_WORDS``)."""

STICKY_RULE = "sticky strike"
"""The default rule for how vols follow spot: each strike keeps its vol."""

MONEYNESS_RULE = "sticky moneyness"
"""The other rule: each option takes the marked vol at its moneyness K/S after the spot move."""

VOL_RULES = (STICKY_RULE, MONEYNESS_RULE)
"""Rules a move or a ladder may use."""


EXAMPLES = (
    ("spot -3%", "every underlying's spot down 3%"),
    ("spot +2.5", "every spot up 2.5 currency units"),
    ("DEMOA spot -5%", "one underlying (any symbol of the book)"),
    ("DEMOA spot =180", "one underlying's spot set to a level"),
    ("spot -3% beta", "each spot moves beta × 3% (index-equivalent move)"),
    ("vol +2", "every vol up 2 vol points (0.30 → 0.32)"),
    ("vol -10%", "every vol times 0.9"),
    ("vol +2 weighted", "each expiry's vol up 2 × √(30d/T) pts, T ≥ 7 days"),
    ("DEMOA vol +3", "one underlying's vols up 3 points"),
    ("days 3", "three calendar days pass"),
    ("bdays 1", "next business day, same clock time (Fri → Mon)"),
    ("rate +25bp", "every rate up 25 basis points (or rate +0.25%)"),
    ("spot -3% vol +2 days 1", "parts combine and apply together"),
    ("spot -5% moneyness", "vols sticky moneyness instead of sticky strike"),
)
"""Every form of a move with its meaning: the app's help, ``blotter whatif --help`` and the
README's list (a test keeps the README alike) all show these. ``DEMOA`` is a demo book name."""


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
        if low in RULE_WORDS:
            if rule == MONEYNESS_RULE:
                raise fail("'moneyness' given twice", k)
            rule = MONEYNESS_RULE
            k += 1
            continue
        if low not in MOVE_PARTS:
            nxt = toks[k + 1][0].lower() if k + 1 < len(toks) else ""
            if low in QUALIFIERS:
                where = (
                    "a spot % move (spot -3% beta)"
                    if low == "beta"
                    else "a vol points move (vol +2 weighted)"
                )
                raise fail(f"'{word}' must follow {where}", k)
            elif nxt in ("spot", "vol") and SYMBOL_PATTERN.match(word):
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
    """The first of ``EXAMPLES`` that starts with the part ``keyword``, for an error's hint."""
    return next(example for example, _ in EXAMPLES if example.split()[0] == keyword)


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
