"""The what-if grammar on arbitrary text, and every move it accepts applied to the demo book.

``parse_move`` may only ever raise its own ``MoveSyntaxError`` (never an ``OverflowError`` from a
309-digit amount, or anything else); a move it accepts applies to the demo book with finite
numbers, or is refused by ``apply_move``'s own ``MoveError`` in words (an absolute spot move
larger than a spot: the grammar cannot know the book's spots). Amounts at and just past each
bound of ``blotter.limits`` are tried on purpose.
"""

from __future__ import annotations

import math
from datetime import datetime, time, timedelta
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from blotter import calendar as cal
from blotter import limits
from blotter.demo import DEMO_AS_OF, DEMO_TZ
from blotter.risk import BookValuation, value_book
from blotter.scenario import MoveError, MoveSyntaxError, apply_move, parse_move
from blotter.scenario.grammar import MOVE_PARTS, MOVE_WORDS
from blotter.store import open_store

SYMBOLS = ("DEMOIX", "DEMOA", "DEMOB", "DEMOC", "DEMOFU")
"""The demo book's underlyings (invented)."""

HUGE = "1" + "0" * 309
"""A 310-digit amount: past float64, so it reads as infinity."""

EDGES = (
    "0", "1", "2.5", ".5", "99.99", "100", "1000", "1000.0001", "2520", "2521", "3660", "3661",
    "9999", "10000", "10000.5", "999999999999", "1000000000000", HUGE, HUGE + "0" * 50,
)
"""Amounts at and beyond the bounds of ``limits`` (the 1,000% spot and vol moves, 2,520 bdays,
3,660 days, ±10,000 bp, the 1e12 price level) and far past float64."""

SETTINGS = settings(
    max_examples=300,
    deadline=None,
    derandomize=True,
    suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow],
)
"""Fixed examples (no flaky runs), no deadline on a shared machine."""

_SMALL = st.decimals(min_value=0, max_value=50, places=2).map(str)
_LARGE = st.one_of(
    st.sampled_from(EDGES),
    st.integers(min_value=0, max_value=10**13).map(str),
    st.decimals(min_value=0, max_value=20000, places=3).map(str),
)
number = st.integers(0, 9).flatmap(lambda i: _SMALL if i < 6 else _LARGE)
"""Mostly everyday amounts, else ones at and past the bounds."""
sign = st.sampled_from(["+", "-", "+", "-", ""])
amount = st.builds(
    lambda sign, num, unit: sign + num + unit,
    st.sampled_from(["", "+", "-", "="]),
    number,
    st.sampled_from(["", "", "%", "bp", "BP", "x"]),
)
word = st.one_of(
    st.sampled_from(MOVE_WORDS + SYMBOLS + ("demoa", "IDX")),
    amount,
    st.text(max_size=5),
)


def _part(symbol: str, keyword: str, sign: str, num: str, pct: bool, extra: bool) -> str:
    """One part in the grammar's shape, with the unit and modifier its keyword takes."""
    if keyword in ("days", "bdays"):
        return f"{keyword} {num}"
    if keyword == "rate":
        return f"rate {sign}{num}{'%' if pct else 'bp'}"
    modifier = {"spot": "beta", "vol": "weighted"}[keyword] if extra else ""
    if symbol and keyword == "spot" and not pct and not extra:
        sign = "=" if sign == "" else sign
    words = (symbol, keyword, f"{sign}{num}{'%' if pct else ''}", modifier)
    return " ".join(w for w in words if w)


part = st.builds(
    _part,
    st.sampled_from(("",) * len(SYMBOLS) + SYMBOLS),
    st.sampled_from(MOVE_PARTS),
    st.sampled_from(["+", "-", ""]),
    number,
    st.booleans(),
    st.booleans(),
)
"""One part in the grammar's shape, so that many lines parse and reach ``apply_move``."""
move_text = st.one_of(
    st.lists(part, max_size=4, unique_by=lambda p: p.split()[-2]).map(" ".join),
    st.lists(st.one_of(part, word), max_size=5).map(" ".join),
)
"""Lines of well-shaped parts (most parse), and lines mixing them with any words."""


def _signed(x: float, unit: str = "") -> str:
    return f"{x:+.6g}{unit}" if abs(x) >= 1e-4 or x == 0 else f"{x:+.6f}{unit}"


_spot = st.one_of(
    st.floats(-99.99, 1000).map(lambda x: _signed(round(x, 2), "%")),
    st.sampled_from(["-99.99%", "+1000%", "+1000%"]),
    st.builds(lambda x, beta: _signed(round(x, 2), "%") + (" beta" if beta else ""),
              st.floats(-60, 60), st.booleans()),
    st.floats(-1e4, 1e4).map(lambda x: _signed(round(x, 2))),
)
_level = st.sampled_from(["=0.000001", "=0.01", "=1", "=250", "=99999999999", "=999999999999"])
_vol = st.one_of(
    st.floats(-1000, 1000).map(lambda x: _signed(round(x, 2))),
    st.builds(lambda x: _signed(round(x, 2)) + " weighted", st.floats(-1000, 1000)),
    st.floats(-99.99, 1000).map(lambda x: _signed(round(x, 2), "%")),
    st.sampled_from(["-1000", "+1000", "+1000 weighted", "-99.99%", "+1000%"]),
)
valid_move = st.builds(
    lambda spot, level, vol, roll, rate, rule: " ".join(
        w for w in (spot, level, vol, roll, rate, rule) if w
    ),
    st.one_of(st.just(""), _spot.map(lambda a: "spot " + a)),
    st.one_of(st.just(""), st.builds(lambda sym, lv: f"{sym} spot {lv}",
                                     st.sampled_from(SYMBOLS), _level)),
    st.one_of(st.just(""), _vol.map(lambda a: "vol " + a)),
    st.one_of(
        st.just(""),
        st.floats(0, 3660).map(lambda d: f"days {round(d, 3):g}"),
        st.integers(0, 2520).map(lambda n: f"bdays {n}"),
        st.sampled_from(["days 3660", "bdays 2520"]),
    ),
    st.one_of(st.just(""), st.integers(-10000, 10000).map(lambda b: f"rate {b:+d}bp"),
              st.sampled_from(["rate -10000bp", "rate +10000bp", "rate +100%"])),
    st.sampled_from(["", "", "moneyness"]),
)
"""Moves built inside every bound, extremes included: each must parse and apply."""


@pytest.fixture(scope="module")
def demo_valuation(demo_master: Path) -> BookValuation:
    """The demo book valued at 10:00 New York the business day after its last close."""
    st_ = open_store(demo_master, read_only=True)
    try:
        book, market = st_.load_book(), st_.load_market()
    finally:
        st_.close()
    when = datetime.combine(DEMO_AS_OF + timedelta(days=1), time(10, 0), tzinfo=DEMO_TZ)
    return value_book(book, market, cal.to_instant(when))


@SETTINGS
@given(st.text(max_size=60))
def test_any_text_parses_or_raises_the_parsers_own_error(text: str) -> None:
    try:
        parse_move(text, SYMBOLS)
    except MoveSyntaxError as err:
        assert err.message and 0 <= err.start <= err.end <= len(text) + 1


@SETTINGS
@given(move_text)
def test_an_accepted_move_applies_to_the_demo_book(
    demo_valuation: BookValuation, text: str
) -> None:
    try:
        move = parse_move(text, SYMBOLS)
    except MoveSyntaxError as err:
        assert err.message and 0 <= err.start <= err.end <= len(text) + 1
        return
    for part in move.spot:
        bound = {"%": limits.MOVE_SPOT_PCT, "abs": limits.MOVE_SPOT_ABS, "level": limits.LEVEL}
        assert bound[part.unit].contains(part.amount)
    assert limits.MOVE_DAYS.contains(move.days) and limits.MOVE_BDAYS.contains(move.bdays)
    assert limits.MOVE_RATE_BP.contains(move.rate_bp)
    try:
        result = apply_move(demo_valuation, move)
    except MoveError as err:
        assert "spot at or below zero" in str(err)
        assert any(s.unit == "abs" or s.beta for s in move.spot)
        return
    rows = [result.total, *result.by_underlying]
    for row in rows:
        assert math.isfinite(row.full) and math.isfinite(row.estimate_2), (text, row)
    assert np.isfinite(result.full).all()


@SETTINGS
@given(valid_move)
def test_every_move_inside_the_bounds_applies_with_finite_numbers(
    demo_valuation: BookValuation, text: str
) -> None:
    """Moves at the far ends of the bounds (spot +1,000%, vol ±1,000 points, rate ±100%, ten
    years' roll) still value the demo book with finite numbers and no warning."""
    if not text:
        return
    move = parse_move(text, SYMBOLS)
    try:
        result = apply_move(demo_valuation, move)
    except MoveError as err:
        assert "spot at or below zero" in str(err)
        return
    for row in (result.total, *result.by_underlying):
        assert math.isfinite(row.full) and math.isfinite(row.estimate_2), (text, row)


@pytest.mark.parametrize(
    ("text", "fragment"),
    [
        (f"bdays {HUGE}", "bdays must be from 0 to 2,520 business days"),
        ("bdays 99999999", "bdays must be from 0 to 2,520"),
        (f"spot +{HUGE}%", "spot move must be above -100% and at most +1,000%"),
        (f"spot -{HUGE}", "spot move must be above -1e+12"),
        (f"DEMOA spot ={HUGE}", "spot level must be from 1e-06"),
        (f"vol +{HUGE}", "vol move must be from -1,000 to +1,000 points"),
        (f"vol +{HUGE}%", "vol move must be above -100% and at most +1,000%"),
        (f"rate +{HUGE}bp", "rate move must be from -10,000bp to +10,000bp"),
        (f"days {HUGE}", "days must be from 0 to 3,660 days"),
    ],
)
def test_amounts_the_model_cannot_carry_are_refused_at_their_word(text: str, fragment: str) -> None:
    with pytest.raises(MoveSyntaxError) as info:
        parse_move(text, SYMBOLS)
    err = info.value
    assert fragment in err.message
    assert text[err.start : err.end] == text.split()[-1]
