"""What-if moves: full revaluation against QuantLib, the Taylor terms, their error, the day roll.

Sources: QuantLib 1.44 AnalyticEuropeanEngine values each shocked position on its own (flat
curves, Actual365Fixed); J. C. Hull, Options, Futures, and Other Derivatives (9th ed. 2015) Ch. 19
running example (S0 = 49, K = 50, r = 5%, σ = 20%, 20 weeks) — from memory — for the greeks the
terms are built from; the term formulas (Δ·dS, ½Γ·dS², vega·dσ, ½volga·dσ², vanna·dS·dσ, θ·dt,
ρ·dr) are the Taylor expansion itself. Trade practice used as checks is marked common practice.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from books import (
    RATE,
    SPOTS,
    T0,
    UNDERLYINGS,
    Row,
    hull_book,
    hull_market,
    make_book,
    make_market,
    mixed_rows,
    ql_price,
)

from blotter import engine
from blotter.risk import value_book
from blotter.scenario import MoveError, apply_move, parse_move

VOLS = {"IDX": 0.20, "STK": 0.35, "FUT": 0.30, "FXA": 0.10}
DIVS = dict(zip(UNDERLYINGS.symbols, UNDERLYINGS.div_yields, strict=True))
BETAS = dict(zip(UNDERLYINGS.symbols, UNDERLYINGS.betas, strict=True))


def _ql_full(
    rows: list[Row],
    spots1: dict[str, float],
    vol_shift: dict[str, float],
    days_passed: int,
    dr: float,
) -> np.ndarray:
    """Each position's change valued by QuantLib on its own: shocked value − base value."""
    out = []
    for r in rows:
        units = r.qty * r.mult
        if r.strike is None:
            out.append(units * (spots1[r.sym] - SPOTS[r.sym]))
            continue
        kind = dict(zip(UNDERLYINGS.symbols, UNDERLYINGS.kinds, strict=True))[r.sym]
        div0 = RATE if kind == "future" else DIVS[r.sym]
        div1 = RATE + dr if kind == "future" else DIVS[r.sym]  # futures keep b = 0
        base = ql_price(r.call, SPOTS[r.sym], r.strike, r.days, RATE, div0, VOLS[r.sym])
        moved = ql_price(
            r.call,
            spots1[r.sym],
            r.strike,
            r.days - days_passed,
            RATE + dr,
            div1,
            VOLS[r.sym] + vol_shift.get(r.sym, 0.0),
        )
        out.append(units * (moved - base))
    return np.array(out)


CASES = [
    ("spot -3% vol +2 days 1", {s: -3.0 for s in SPOTS}, {s: 0.02 for s in SPOTS}, 1, 0.0),
    (
        "spot +5% beta vol -10% rate +25bp",
        {s: 5.0 * BETAS[s] for s in SPOTS},
        {s: -0.1 * VOLS[s] for s in SPOTS},
        0,
        0.0025,
    ),
    ("IDX spot -5% FUT vol +3 days 7", {"IDX": -5.0}, {"FUT": 0.03}, 7, 0.0),
    ("bdays 1 rate -50bp", {}, {}, 3, -0.005),  # Friday → Monday: 3 calendar days
    ("spot -8% days 12 vol +4", {s: -8.0 for s in SPOTS}, {s: 0.04 for s in SPOTS}, 12, 0.0),
    # One name moves, nothing else: only that name's options are repriced.
    ("STK spot -4%", {"STK": -4.0}, {}, 0, 0.0),
    ("FUT vol +3", {}, {"FUT": 0.03}, 0, 0.0),
]


@pytest.mark.parametrize(("text", "spot_pct", "vol_shift", "days", "dr"), CASES)
def test_full_revaluation_matches_quantlib_position_by_position(
    text: str, spot_pct: dict[str, float], vol_shift: dict[str, float], days: int, dr: float
) -> None:
    rows = mixed_rows()
    book = make_book(rows)
    v = value_book(book, make_market(), T0)
    res = apply_move(v, parse_move(text, book.underlyings.symbols))
    spots1 = {s: SPOTS[s] * (1 + spot_pct.get(s, 0.0) / 100) for s in SPOTS}
    expected = _ql_full(rows, spots1, vol_shift, days, dr)
    assert res.full == pytest.approx(expected, rel=1e-7, abs=1e-6)
    assert res.total.full == pytest.approx(float(expected.sum()), rel=1e-9, abs=1e-6)
    per_u = {r.underlying: r.full for r in res.by_underlying}
    for sym in SPOTS:
        mask = np.array([r.sym == sym for r in rows])
        assert per_u[sym] == pytest.approx(float(expected[mask].sum()), rel=1e-7, abs=1e-6)
    assert res.roll_years == pytest.approx(days / 365)


def test_expiring_option_settles_at_intrinsic_and_is_flagged() -> None:
    """The STK 10-day 125 call (short 20 × 100) expires inside a 12-day roll."""
    rows = mixed_rows()
    book = make_book(rows)
    v = value_book(book, make_market(), T0)
    res = apply_move(v, parse_move("STK spot +10% days 12", book.underlyings.symbols))
    i = next(j for j, r in enumerate(rows) if r.sym == "STK" and r.days == 10)
    assert res.through_expiry[i] and res.through_expiry.sum() == 1
    assert len(res.expiring) == 1
    e = res.expiring[0]
    assert e.index == i and e.spot_after == pytest.approx(132.0)
    assert e.intrinsic == pytest.approx(7.0) and e.settlement == pytest.approx(7.0 * -2000)
    assert e.in_the_money and not e.pin_risk
    # A short call assigned delivers the shares (common practice: physical settlement).
    assert e.delivered_units == -2000
    base_price = v.value[i] / -2000
    assert res.full[i] == pytest.approx((7.0 - base_price) * -2000)
    stk = next(r for r in res.by_underlying if r.underlying == "STK")
    assert stk.n_through_expiry == 1 and res.total.n_through_expiry == 1
    assert any("expire" in n for n in res.notes)


def test_pin_risk_near_the_strike() -> None:
    book = make_book(mixed_rows())
    v = value_book(book, make_market(), T0)
    res = apply_move(v, parse_move("STK spot +4% days 12"))  # 124.8 against the 125 strike
    (e,) = res.expiring
    assert e.pin_risk and not e.in_the_money and e.delivered_units == 0.0
    assert e.distance_pct == pytest.approx((124.8 / 125 - 1) * 100)


def test_cash_settled_expiry_delivers_nothing() -> None:
    book = make_book([Row("IDX", 3, 4400, 2, True, cash=True)])
    v = value_book(book, make_market(), T0)
    (e,) = apply_move(v, parse_move("days 3")).expiring
    assert e.in_the_money and e.cash_settled and e.delivered_units == 0.0
    assert e.settlement == pytest.approx(100.0 * 300)


def _bs(
    call: bool, s: float, k: float, t: float, r: float, q: float, sig: float
) -> dict[str, float]:
    """Closed-form Black–Scholes–Merton greeks (Hull Ch. 19 formulas), raw units."""
    st = math.sqrt(t)
    d1 = (math.log(s / k) + (r - q + sig * sig / 2) * t) / (sig * st)
    d2 = d1 - sig * st
    big_n = lambda x: 0.5 * math.erfc(-x / math.sqrt(2))  # noqa: E731
    n1 = math.exp(-d1 * d1 / 2) / math.sqrt(2 * math.pi)
    eq, er = math.exp(-q * t), math.exp(-r * t)
    assert call
    vega = s * eq * n1 * st
    return {
        "delta": eq * big_n(d1),
        "gamma": eq * n1 / (s * sig * st),
        "vega": vega,
        "theta": -s * eq * n1 * sig / (2 * st) - r * k * er * big_n(d2) + q * s * eq * big_n(d1),
        "rho": k * t * er * big_n(d2),
        "vanna": -eq * n1 * d2 / sig,
        "volga": vega * d1 * d2 / sig,
    }


def _hull():
    return value_book(hull_book(), hull_market(), T0)


def test_taylor_terms_for_one_option_match_hand_derived_values() -> None:
    v = _hull()
    t = float(v.years[0])
    g = _bs(True, 49.0, 50.0, t, 0.05, 0.0, 0.20)
    res = apply_move(v, parse_move("spot +1 vol +1 days 1 rate +100bp"))
    ds, dv, dt, dr = 1.0, 0.01, 1 / 365, 0.01
    expected = {
        "delta": g["delta"] * ds,
        "gamma": 0.5 * g["gamma"] * ds**2,
        "vega": g["vega"] * dv,
        "volga": 0.5 * g["volga"] * dv**2,
        "vanna": g["vanna"] * ds * dv,
        "theta": g["theta"] * dt,
        "rho": g["rho"] * dr,
    }
    for name, value in expected.items():
        assert res.total.terms[name] == pytest.approx(value, rel=1e-7), name
    # The same terms against Hull's printed greeks (from memory), at their printed precision.
    assert res.total.terms["delta"] == pytest.approx(0.522, abs=0.0005)
    assert res.total.terms["gamma"] == pytest.approx(0.5 * 0.066, abs=0.00025)
    assert res.total.terms["vega"] == pytest.approx(0.121, abs=0.0005)
    assert res.total.terms["theta"] == pytest.approx(-0.0118, abs=0.00005)
    assert res.total.terms["rho"] == pytest.approx(0.0891, abs=0.00005)
    first = sum(expected[k] for k in ("delta", "vega", "theta", "rho"))
    assert res.total.estimate_1 == pytest.approx(first, rel=1e-9)
    assert res.total.estimate_2 == pytest.approx(sum(expected.values()), rel=1e-9)
    assert res.total.error_2 == pytest.approx(res.total.full - res.total.estimate_2)
    assert res.total.error_1_pct == pytest.approx(100 * res.total.error_1 / abs(res.total.full))


def _slope(xs: list[float], ys: list[float]) -> float:
    return float(np.polyfit(np.log(xs), np.log(np.abs(ys)), 1)[0])


@pytest.mark.parametrize("kind", ["spot", "vol", "spot+vol"])
def test_error_shrinks_as_square_and_cube_of_the_move(kind: str) -> None:
    """First-order error is O(h²), second-order O(h³) (Taylor's theorem), for small moves."""
    book = make_book([Row("IDX", 1, 4500, 30, True, mult=1)])
    v = value_book(book, make_market(), T0)
    hs = [0.5, 0.25, 0.125, 0.0625]
    e1, e2 = [], []
    for h in hs:
        text = {"spot": f"spot +{h}%", "vol": f"vol +{h}", "spot+vol": f"spot -{h}% vol +{h}"}[kind]
        r = apply_move(v, parse_move(text)).total
        e1.append(r.error_1)
        e2.append(r.error_2)
    assert _slope(hs, e1) == pytest.approx(2.0, abs=0.15)
    assert _slope(hs, e2) == pytest.approx(3.0, abs=0.2)
    assert abs(e2[-1]) < abs(e1[-1])


def test_theta_error_shrinks_as_square_of_the_roll() -> None:
    book = make_book([Row("IDX", 1, 4500, 60, True, mult=1)])
    v = value_book(book, make_market(), T0)
    ds = [4.0, 2.0, 1.0, 0.5]
    errs = [apply_move(v, parse_move(f"days {d}")).total.error_1 for d in ds]
    assert _slope(ds, errs) == pytest.approx(2.0, abs=0.15)


def test_zero_move_changes_nothing(mixed_book) -> None:
    v = value_book(mixed_book, make_market(), T0)
    res = apply_move(v, parse_move("spot +0% vol +0"))
    assert np.all(res.full == 0.0) and res.total.estimate_2 == 0.0
    assert math.isnan(res.total.error_1_pct)


def test_a_one_name_move_leaves_the_other_names_untouched() -> None:
    """Rows of names the move does not reach keep their base price exactly (P&L 0.0, not a
    repricing's rounding); the moved name's American rows are repriced with the engine."""
    rows = [
        Row(
            r.sym,
            r.qty,
            r.strike,
            r.days,
            r.call,
            american=r.strike is not None and i % 2 == 0,
            mult=r.mult,
            cash=r.cash,
        )
        for i, r in enumerate(mixed_rows())
    ]
    book = make_book(rows)
    v = value_book(book, make_market(), T0)
    res = apply_move(v, parse_move("STK spot -4%"))
    stk = book.underlying_idx == book.underlyings.index_of("STK")
    assert np.all(res.full[~stk] == 0.0)
    opt = stk & book.is_option
    moved = engine.price(
        book.is_call[opt],
        v.spot[opt] * 0.96,
        book.strikes[opt],
        v.years[opt],
        v.rate[opt],
        v.carry[opt],
        v.vol[opt],
        american=book.american[opt],
    )
    expected = (np.asarray(moved) - v.greeks.price[opt]) * v.units[opt]
    assert res.full[opt] == pytest.approx(expected, rel=1e-12, abs=1e-9)
    assert book.american[opt].any() and (res.full[opt] != 0).all()


def test_hedges_move_exactly_with_spot(mixed_book) -> None:
    v = value_book(mixed_book, make_market(), T0)
    res = apply_move(v, parse_move("spot -3% vol +5 days 2"))
    hedge = ~mixed_book.is_option
    ds = (res.spot_after - v.spot)[hedge]
    assert res.full[hedge] == pytest.approx(v.units[hedge] * ds, rel=1e-15)
    assert res.terms["delta"][hedge] == pytest.approx(res.full[hedge], rel=1e-15)
    assert res.estimate_2[hedge] == pytest.approx(res.full[hedge], rel=1e-15)


def test_sticky_strike_prices_at_the_strikes_marked_vol() -> None:
    """Sticky strike (PRACTICE.md §3, common practice): after "spot -10% days 5" each option is
    worth QuantLib's price at the moved spot and 5 days less, at the vol marked for its strike.
    The STK smile is one slice, 0.40 at 100 and 0.30 at 140, linear between: by hand 0.375 at the
    110 strike and 0.3375 at 125 (sticky moneyness would read 125 × 120/108 = 138.9 instead)."""
    from blotter.market import VolSurface

    skew = VolSurface(
        expiries=np.array(["2027-06-17"] * 2, dtype="datetime64[D]"),
        strikes=np.array([100.0, 140.0]),
        vols=np.array([0.40, 0.30]),
    )
    market = make_market(surfaces={**make_market().surfaces, "STK": skew})
    rows = [Row("STK", 3, 125, 60, True), Row("STK", -2, 110, 60, False)]
    v = value_book(make_book(rows), market, T0)
    res = apply_move(v, parse_move("spot -10% days 5"))
    div = DIVS["STK"]
    expected = [
        r.qty
        * r.mult
        * (
            ql_price(r.call, 108.0, r.strike, 55, RATE, div, vol)
            - ql_price(r.call, 120.0, r.strike, 60, RATE, div, vol)
        )
        for r, vol in zip(rows, (0.3375, 0.375), strict=True)
    ]
    assert res.full == pytest.approx(expected, rel=1e-9)


def test_beta_relative_and_weighted_vol_moves(mixed_book) -> None:
    v = value_book(mixed_book, make_market(), T0)
    res = apply_move(v, parse_move("spot -3% beta"))
    betas = mixed_book.underlyings.betas[mixed_book.underlying_idx]
    assert res.spot_after == pytest.approx(v.spot * (1 - 0.03 * betas))
    opt = mixed_book.is_option
    res = apply_move(v, parse_move("vol -10%"))
    assert res.vol_after[opt] == pytest.approx(v.vol[opt] * 0.9)
    res = apply_move(v, parse_move("vol +2 weighted"))
    days = v.years[opt] * 365
    assert res.vol_after[opt] - v.vol[opt] == pytest.approx(
        0.02 * np.sqrt(30 / np.maximum(days, 7))
    )
    res = apply_move(v, parse_move("vol +1 IDX vol +3"))
    idx = mixed_book.underlying_idx == 0
    assert res.vol_after[opt & idx] - v.vol[opt & idx] == pytest.approx(0.03)
    assert res.vol_after[opt & ~idx] - v.vol[opt & ~idx] == pytest.approx(0.01)


def test_named_spot_part_overrides_the_general_one(mixed_book) -> None:
    v = value_book(mixed_book, make_market(), T0)
    res = apply_move(v, parse_move("spot -2% IDX spot =4400 STK spot +1.5"))
    s1 = dict(
        zip(mixed_book.underlyings.symbols, [4400.0, 121.5, 80 * 0.98, 1.10 * 0.98], strict=True)
    )
    expected = np.array([s1[mixed_book.underlyings.symbols[i]] for i in mixed_book.underlying_idx])
    assert res.spot_after == pytest.approx(expected)


def test_business_day_roll_from_friday_spans_the_weekend() -> None:
    """Common practice: a Friday's one-day theta holds three calendar days."""
    book = make_book([Row("IDX", 1, 4500, 30, True, mult=1)])
    v = value_book(book, make_market(), T0)
    res = apply_move(v, parse_move("bdays 1"))
    assert res.roll_years == pytest.approx(3 / 365)
    assert res.total.terms["theta"] == pytest.approx(v.theta_day[0] * 3, rel=1e-12)


def test_by_underlying_rows_add_to_the_total(mixed_book) -> None:
    v = value_book(mixed_book, make_market(), T0)
    res = apply_move(v, parse_move("spot -3% vol +2 days 1 rate +10bp"))
    for name in ("full", "estimate_1", "estimate_2", "error_1", "error_2"):
        assert sum(getattr(r, name) for r in res.by_underlying) == pytest.approx(
            getattr(res.total, name)
        )
    for term in res.total.terms:
        assert sum(r.terms[term] for r in res.by_underlying) == pytest.approx(res.total.terms[term])
    assert res.total.full == pytest.approx(float(res.full.sum()))


def test_moves_that_cannot_apply(mixed_book) -> None:
    v = value_book(mixed_book, make_market(), T0)
    with pytest.raises(MoveError, match="STK"):
        apply_move(v, parse_move("STK spot -200"))
    with pytest.raises(MoveError, match="NOPE"):
        apply_move(v, parse_move("NOPE spot -1%"))


def test_the_base_valuation_is_not_changed_by_a_move(mixed_book) -> None:
    v = value_book(mixed_book, make_market(), T0)
    before = v.value.copy(), v.vol.copy(), v.spot.copy()
    apply_move(v, parse_move("spot -30% vol +20 days 30"))
    assert np.array_equal(before[0], v.value) and np.array_equal(before[1], v.vol, equal_nan=True)
    assert np.array_equal(before[2], v.spot)


def _skew_market():
    from blotter.market import VolSurface

    skew = VolSurface(
        expiries=np.array(["2026-12-18"] * 3 + ["2027-02-05"] * 3, dtype="datetime64[D]"),
        strikes=np.array([100.0, 120.0, 140.0] * 2),
        vols=np.array([0.45, 0.35, 0.30, 0.40, 0.33, 0.29]),
    )
    return make_market(surfaces={**make_market().surfaces, "STK": skew})


def test_sticky_moneyness_reads_the_smile_at_the_moved_moneyness() -> None:
    """Under sticky moneyness an option keeps the vol of its K/S (Derman, "Regimes of
    Volatility", 1999): after STK −10% (120 → 108) the 125 strike is read at 125 × 120/108."""
    rows = [
        Row("STK", 10, 125.0, 14, False),
        Row("STK", -5, 110.0, 63, True),
        Row("IDX", 1, 4500, 30),
    ]
    book = make_book(rows)
    v = value_book(book, _skew_market(), T0)
    assert v.vol[0] == pytest.approx(0.35 + (0.30 - 0.35) * 5 / 20)  # linear in strike
    res = apply_move(v, parse_move("STK spot -10% moneyness"))
    k_eq = 125.0 * 120.0 / 108.0  # 138.89
    assert res.vol_after[0] == pytest.approx(0.35 + (0.30 - 0.35) * (k_eq - 120) / 20)
    assert res.vol_after[2] == v.vol[2]  # IDX did not move
    expected = 1000 * (
        ql_price(False, 108.0, 125.0, 14, RATE, 0.02, float(res.vol_after[0]))
        - ql_price(False, 120.0, 125.0, 14, RATE, 0.02, float(v.vol[0]))
    )
    assert res.full[0] == pytest.approx(expected, rel=1e-7)
    # The vega term carries the smile's vol change; the rows still add up.
    assert res.terms["vega"][0] == pytest.approx(
        v.greeks.vega[0] * 1000 * (res.vol_after[0] - v.vol[0])
    )
    assert res.total.terms["vega"] == pytest.approx(float(res.terms["vega"].sum()))
    sticky = apply_move(v, parse_move("STK spot -10%"))
    assert sticky.vol_after[0] == v.vol[0] and sticky.total.full != pytest.approx(res.total.full)


def test_sticky_moneyness_on_a_flat_smile_is_sticky_strike(mixed_book) -> None:
    v = value_book(mixed_book, make_market(), T0)
    a = apply_move(v, parse_move("spot -4% vol +1 moneyness"))
    b = apply_move(v, parse_move("spot -4% vol +1"))
    assert a.full == pytest.approx(b.full, rel=1e-12, abs=1e-9)
    assert a.total.estimate_2 == pytest.approx(b.total.estimate_2, rel=1e-12)
    assert a.move.as_dict()["vol_rule"] == "sticky moneyness"
