"""Properties of the what-if and the ladder on random moves (hypothesis).

The what-if's full revaluation goes through its own precomputed arrays; here it must equal a
plain second path, ``value_book`` on ``Market.shocked`` at the rolled time (flat surfaces and
curves, so re-reading vols and rates at the new time changes nothing), position by position.
"""

from __future__ import annotations

import numpy as np
import pytest
from books import T0, make_book, make_market, mixed_rows
from hypothesis import given, settings
from hypothesis import strategies as st

from blotter import calendar as cal
from blotter.risk import value_book
from blotter.scenario import apply_move, ladder, parse_move

BOOK = make_book(mixed_rows())
MARKET = make_market()
BASE = value_book(BOOK, MARKET, T0)

spot_pct = st.floats(-30, 30, allow_nan=False).map(lambda x: round(x, 2))
vol_pts = st.floats(-5, 10, allow_nan=False).map(lambda x: round(x, 2))
days = st.integers(0, 15)  # the STK 10-day option expires inside longer rolls
rate_bp = st.integers(-100, 100)


@settings(max_examples=40, deadline=None)
@given(spot_pct, vol_pts, days, rate_bp)
def test_full_revaluation_equals_valuing_the_shocked_market(
    s: float, v: float, d: int, r: int
) -> None:
    res = apply_move(BASE, parse_move(f"spot {s:+g}% vol {v:+g} days {d} rate {r:+d}bp"))
    shocked = MARKET.shocked(spot_pct={k: s for k in MARKET.spots}, vol_pts=v, rate_bp=r)
    after = value_book(BOOK, shocked, cal.roll_calendar_days(T0, d))
    direct = after.value - BASE.value
    direct = np.where(BASE.settles_daily, BASE.units * (after.spot - BASE.spot), direct)
    assert res.full == pytest.approx(direct, rel=1e-9, abs=1e-6)


@settings(max_examples=40, deadline=None)
@given(spot_pct, vol_pts, days, rate_bp)
def test_rows_add_up_and_errors_are_full_minus_estimate(s: float, v: float, d: int, r: int) -> None:
    res = apply_move(BASE, parse_move(f"spot {s:+g}% vol {v:+g} days {d} rate {r:+d}bp"))
    t = res.total
    assert t.full == pytest.approx(float(res.full.sum()), rel=1e-9, abs=1e-6)
    assert t.estimate_2 == pytest.approx(float(res.estimate_2.sum()), rel=1e-9, abs=1e-6)
    for name in res.terms:
        assert t.terms[name] == pytest.approx(float(res.terms[name].sum()), rel=1e-9, abs=1e-6)
    assert t.error_1 == t.full - t.estimate_1 and t.error_2 == t.full - t.estimate_2


@settings(max_examples=15, deadline=None)
@given(st.lists(spot_pct, min_size=1, max_size=4), st.lists(vol_pts, min_size=1, max_size=3), days)
def test_ladder_cells_are_what_ifs(sp: list[float], vp: list[float], d: int) -> None:
    lad = ladder(BASE, sp, vp, days=d)
    i, j = len(sp) - 1, len(vp) - 1
    res = apply_move(BASE, parse_move(f"spot {sp[i]:+g}% vol {vp[j]:+g} days {d}"))
    assert lad.full[i, j] == pytest.approx(res.total.full, rel=1e-9, abs=1e-6)
    assert lad.full[lad.worst] == lad.full.min()
