"""Book exposures in desk units: scaling, units, rho composition, hedges, beta and weighted vega.

Sources: J. C. Hull, Options, Futures, and Other Derivatives (9th ed. 2015), Ch. 19 running example
(S0 = 49, K = 50, r = 5%, σ = 20%, 20 weeks; 100,000 calls) — from memory, as listed in
/work/shared/REFERENCES.md (hull-greeks-49-50); QuantLib 1.44 AnalyticEuropeanEngine for the same
numbers at full precision; desk units of DESIGN.md (vega / 100, theta / 365, rho / 100, Γ × S / 100)
are common practice (PRACTICE.md §1).
"""

from __future__ import annotations

import math

import pytest
from books import RATE, SPOTS, T0, Row, hull_book, hull_market, make_book, make_market

from blotter.risk import (
    aggregate,
    beta_delta_index_units,
    total,
    value_book,
)


def _hull_valuation(qty: float = 1.0, mult: float = 1.0):
    return value_book(hull_book(qty, mult), hull_market(), T0)


def _ql_greeks(
    call: bool, s: float, k: float, t_days: float, r: float, q: float, vol: float
) -> dict[str, float]:
    import QuantLib as ql

    today = ql.Date(4, 12, 2026)
    ql.Settings.instance().evaluationDate = today
    dc = ql.Actual365Fixed()
    payoff = ql.PlainVanillaPayoff(ql.Option.Call if call else ql.Option.Put, k)
    opt = ql.VanillaOption(payoff, ql.EuropeanExercise(today + int(t_days)))
    proc = ql.BlackScholesMertonProcess(
        ql.QuoteHandle(ql.SimpleQuote(s)),
        ql.YieldTermStructureHandle(ql.FlatForward(today, q, dc)),
        ql.YieldTermStructureHandle(ql.FlatForward(today, r, dc)),
        ql.BlackVolTermStructureHandle(ql.BlackConstantVol(today, ql.NullCalendar(), vol, dc)),
    )
    opt.setPricingEngine(ql.AnalyticEuropeanEngine(proc))
    return {
        "price": opt.NPV(),
        "delta": opt.delta(),
        "gamma": opt.gamma(),
        "vega": opt.vega(),
        "theta": opt.theta(),
        "rho": opt.rho(),
        "div_rho": opt.dividendRho(),
    }


def test_hull_example_in_desk_units() -> None:
    """Hull Ch. 19 (from memory): Δ 0.522, Γ 0.066, vega 12.1 (0.121 per point), θ −4.31/yr
    (−0.0118 per calendar day), ρ 8.91 (0.0891 per 1%)."""
    v = _hull_valuation()
    assert v.value[0] == pytest.approx(2.40, abs=0.005)
    assert v.delta_shares[0] == pytest.approx(0.522, abs=0.0005)
    assert v.gamma_1pct[0] / (49.0 * 0.01) == pytest.approx(0.066, abs=0.0005)
    assert v.vega_pt[0] == pytest.approx(0.121, abs=0.0005)
    assert v.theta_day[0] == pytest.approx(-0.0118, abs=0.00005)
    assert v.rho_pct[0] == pytest.approx(0.0891, abs=0.00005)
    assert v.delta_cash[0] == pytest.approx(v.delta_shares[0] * 49.0)


def test_position_scaling_hull_100000_calls() -> None:
    """Hull's bank is short 100,000 calls: position delta about −52,200 shares (from memory)."""
    v = _hull_valuation(qty=-1000, mult=100)
    assert v.delta_shares[0] == pytest.approx(-52_200, abs=50)
    one = _hull_valuation()
    for name in ("value", "gamma_1pct", "vega_pt", "theta_day", "rho_pct", "vanna_pt", "volga_pt"):
        assert getattr(v, name)[0] == pytest.approx(-100_000 * getattr(one, name)[0], rel=1e-12)


def test_desk_units_match_quantlib_at_full_precision() -> None:
    book = make_book([Row("STK", 1, 125.0, 60, call=False, mult=1)])
    v = value_book(book, make_market(), T0)
    ql_g = _ql_greeks(False, SPOTS["STK"], 125.0, 60, RATE, 0.02, 0.35)
    assert v.value[0] == pytest.approx(ql_g["price"], rel=1e-9)
    assert v.delta_shares[0] == pytest.approx(ql_g["delta"], rel=1e-9)
    assert v.gamma_1pct[0] == pytest.approx(ql_g["gamma"] * SPOTS["STK"] / 100, rel=1e-9)
    assert v.vega_pt[0] == pytest.approx(ql_g["vega"] / 100, rel=1e-9)
    assert v.theta_day[0] == pytest.approx(ql_g["theta"] / 365, rel=1e-7)
    # Stock: carry b = r − q moves with r, so the desk rho is QuantLib's rho (q held fixed).
    assert v.rho_pct[0] == pytest.approx(ql_g["rho"] / 100, rel=1e-9)


def test_fx_rho_is_domestic_rate_rho_with_the_foreign_rate_fixed() -> None:
    book = make_book([Row("FXA", 1, 1.12, 40, call=True, mult=1)])
    v = value_book(book, make_market(), T0)
    ql_g = _ql_greeks(True, SPOTS["FXA"], 1.12, 40, RATE, 0.045, 0.10)
    assert v.value[0] == pytest.approx(ql_g["price"], rel=1e-9)
    assert v.rho_pct[0] == pytest.approx(ql_g["rho"] / 100, rel=1e-9)


def test_futures_option_rho_is_minus_t_times_value() -> None:
    """Black-76: with b = 0 the only rate effect is discounting, ∂V/∂r = −T·V (analytic)."""
    book = make_book([Row("FUT", 1, 75.0, 90, call=False, mult=1)])
    v = value_book(book, make_market(), T0)
    assert v.carry[0] == 0.0
    assert v.rho_pct[0] == pytest.approx(-(90 / 365) * v.value[0] / 100, rel=1e-9)
    ql_g = _ql_greeks(False, SPOTS["FUT"], 75.0, 90, RATE, RATE, 0.30)
    assert v.value[0] == pytest.approx(ql_g["price"], rel=1e-9)


def test_hedges_count_delta_one_and_nothing_else() -> None:
    book = make_book([Row("STK", 1500, mult=1), Row("FUT", 3, mult=1000)])
    v = value_book(book, make_market(), T0)
    assert v.delta_shares.tolist() == [1500.0, 3000.0]
    assert v.delta_cash.tolist() == [1500 * 120.0, 3000 * 80.0]
    for name in (
        "gamma_1pct",
        "vega_pt",
        "theta_day",
        "rho_pct",
        "vanna_pt",
        "volga_pt",
        "weighted_vega_pt",
    ):
        assert getattr(v, name).tolist() == [0.0, 0.0]
    assert v.value[0] == 1500 * 120.0
    assert v.value[1] == 0.0  # a future's value settles daily: zero after the mark
    assert v.settles_daily.tolist() == [False, True]


def test_beta_weighted_delta_worked_by_hand() -> None:
    """PRACTICE.md §3 (common practice): βΔ $ = Σ Δ $_i × β_i, and in index units
    Σ Δ sh_i × S_i × β_i / S_index. Hedges have Δ = 1 per unit, so the numbers are exact:

    STK 1,500 shares × 120 × β 1.5 = 270,000; IDX 2 units × 4,500 × β 1.0 = 9,000;
    FUT 3 × 1,000 × 80 × β 0.8 = 192,000; sum 471,000 $ = 471,000 / 4,500 = 104.667 IDX units.
    """
    book = make_book([Row("STK", 1500, mult=1), Row("IDX", 2, mult=1), Row("FUT", 3, mult=1000)])
    v = value_book(book, make_market(), T0)
    assert v.beta_delta_cash.tolist() == pytest.approx([270_000.0, 9_000.0, 192_000.0])
    assert total(v).beta_delta_cash == pytest.approx(471_000.0)
    assert beta_delta_index_units(v) == pytest.approx(104.666_666_7, rel=1e-9)


def test_beta_weighted_delta_of_options(mixed_book) -> None:
    v = value_book(mixed_book, make_market(), T0)
    betas = mixed_book.underlyings.betas[mixed_book.underlying_idx]
    assert v.beta_delta_cash == pytest.approx(v.delta_cash * betas)
    assert beta_delta_index_units(v) == pytest.approx(total(v).beta_delta_cash / SPOTS["IDX"])


def test_weighted_vega_worked_by_hand() -> None:
    """PRACTICE.md §3 (common practice): weighted vega = Σ vega_i × √(T_ref/T_i), T_ref 30 days,
    short expiries floored (here at 7 days). By hand: √(30/7) = 2.070197 for 3 and 7 days,
    √(30/30) = 1, √(30/120) = 0.5, √(30/365) = 0.286691."""
    days = (3, 7, 30, 120, 365)
    book = make_book([Row("IDX", 1, 4500, d) for d in days])
    v = value_book(book, make_market(), T0)
    by_hand = [2.070197, 2.070197, 1.0, 0.5, 0.286691]
    assert (v.weighted_vega_pt / v.vega_pt).tolist() == pytest.approx(by_hand, rel=1e-6)
    # A 30-day and a 120-day option: the book's weighted vega is v30 + v120 / 2.
    two = value_book(
        make_book([Row("IDX", 1, 4500, 30), Row("IDX", 1, 4500, 120)]), make_market(), T0
    )
    assert total(two).weighted_vega_pt == pytest.approx(
        float(two.vega_pt[0] + 0.5 * two.vega_pt[1]), rel=1e-12
    )


def test_vanna_and_volga_in_desk_units() -> None:
    """Haug 2007 ch. 2 (from memory): vanna = −e^{(b−r)T} n(d1) d2/σ, volga = vega·d1·d2/σ."""
    v = _hull_valuation()
    s, k, t, r, sig = 49.0, 50.0, float(v.years[0]), 0.05, 0.20  # T to the second
    d1 = (math.log(s / k) + (r + sig**2 / 2) * t) / (sig * math.sqrt(t))
    d2 = d1 - sig * math.sqrt(t)
    n1 = math.exp(-d1 * d1 / 2) / math.sqrt(2 * math.pi)
    vega = s * n1 * math.sqrt(t)
    assert v.vanna_pt[0] == pytest.approx(-n1 * d2 / sig / 100, rel=1e-9)
    assert v.volga_pt[0] == pytest.approx(vega * d1 * d2 / sig / 1e4, rel=1e-9)


def test_aggregation_by_underlying_and_expiry_adds_to_the_total(mixed_book) -> None:
    v = value_book(mixed_book, make_market(), T0)
    tot = total(v)
    for by in ("underlying", "expiry", "position"):
        rows = aggregate(v, by)
        for name in ("value", "delta_cash", "vega_pt", "theta_day", "rho_pct", "beta_delta_cash"):
            assert sum(getattr(r, name) for r in rows) == pytest.approx(
                getattr(tot, name), rel=1e-12
            )
    under = aggregate(v, "underlying")
    assert [r.underlying for r in under] == ["IDX", "STK", "FUT", "FXA"]
    assert [r.spot for r in under] == [4500.0, 120.0, 80.0, 1.10]
    assert sum(r.n_positions for r in under) == len(mixed_book)
    with pytest.raises(ValueError, match="by must be"):
        aggregate(v, "strike")  # type: ignore[arg-type]


def test_expiry_buckets() -> None:
    # T0 is Friday 2026-12-04 15:00 New York: the week ends Sunday 12-06.
    book = make_book(
        [Row("IDX", 1, 4500, d) for d in (2, 10, 30, 75, 370, 400, -1)] + [Row("STK", 10, mult=1)]
    )
    v = value_book(book, make_market(), T0)
    labels = [v.bucket_labels[c] for c in v.bucket_codes]
    assert labels == [
        "this week",
        "this month",
        "2027-01",
        "2027-02",
        "2027-12",
        "2028",
        "expired",
        "hedges",
    ]
    rows = aggregate(v, "expiry")
    assert [r.label for r in rows] == [
        "expired",
        "this week",
        "this month",
        "2027-01",
        "2027-02",
        "2027-12",
        "2028",
        "hedges",
    ]


def test_expired_option_is_worth_intrinsic_with_no_greeks() -> None:
    book = make_book([Row("STK", 2, 100.0, -1, call=True, mult=100)])
    v = value_book(book, make_market(), T0)
    assert v.value[0] == pytest.approx(2 * 100 * 20.0)
    assert v.delta_shares[0] == 0.0 and not v.live[0]
    assert v.notes


def test_vega_unit_and_bad_inputs(mixed_book) -> None:
    v = value_book(mixed_book, make_market(), T0, vega_unit="vol")
    assert v.vega_scale == 100.0
    with pytest.raises(ValueError, match="vega_unit"):
        value_book(mixed_book, make_market(), T0, vega_unit="bp")
    m = make_market()
    del m.spots["FUT"]
    partial = value_book(mixed_book, m, T0)  # FUT is left out and listed, not an error
    assert {u.underlying for u in partial.unvalued} == {"FUT"}
    assert "FUT" not in {partial.book.underlyings.symbols[i] for i in partial.book.underlying_idx}


def test_arrays_are_read_only(mixed_book) -> None:
    v = value_book(mixed_book, make_market(), T0)
    with pytest.raises(ValueError):
        v.delta_shares[0] = 1.0


def test_money_gamma_worked_by_hand_and_adds_across_names() -> None:
    """Dollar gamma, the change in Δ $ for a 1% rise in spot, Γ × S² / 100 per unit (PRACTICE.md
    §1, common practice), with Γ from QuantLib. Hull's bank (Ch. 19, from memory: Γ 0.066, short
    100,000 calls at S = 49): 100,000 × 0.0655 × 49² / 100 ≈ 15,727 in currency, negative.
    Two names of one currency add; their share gammas would not."""
    hull = _hull_valuation(qty=-1000, mult=100)
    assert hull.gamma_cash_1pct[0] == pytest.approx(-100_000 * 0.0655 * 49.0**2 / 100, rel=2e-3)
    book = make_book(
        [Row("STK", 10, 125.0, 60, call=False, mult=100), Row("IDX", -2, 4400.0, 30, mult=50)]
    )
    v = value_book(book, make_market(), T0)
    stk = _ql_greeks(False, SPOTS["STK"], 125.0, 60, RATE, 0.02, 0.35)["gamma"]
    idx = _ql_greeks(True, SPOTS["IDX"], 4400.0, 30, RATE, 0.015, 0.20)["gamma"]
    by_hand = [
        stk * 10 * 100 * SPOTS["STK"] ** 2 / 100,
        idx * -2 * 50 * SPOTS["IDX"] ** 2 / 100,
    ]
    assert v.gamma_cash_1pct.tolist() == pytest.approx(by_hand, rel=1e-8)
    assert total(v).gamma_cash_1pct == pytest.approx(sum(by_hand), rel=1e-8)
    assert aggregate(v)[0].gamma_cash_1pct == pytest.approx(by_hand[1], rel=1e-8)
