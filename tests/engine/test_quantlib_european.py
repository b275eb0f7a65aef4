"""European values and greeks against QuantLib's AnalyticEuropeanEngine on 2,000 random cases.

Reference: QuantLib 1.44 (test-only dependency), ``AnalyticEuropeanEngine`` on a
``BlackScholesMertonProcess`` with flat continuous curves, Actual/365 Fixed, T = days / 365.
Conventions mapped here: QuantLib's ``rho`` holds the dividend yield q fixed, so it equals our
``rho + carry_rho``; its ``dividendRho`` = ∂V/∂q = −``carry_rho``. Vanna comes from QuantLib's
``BlackCalculator.vanna``; volga from a central difference of QuantLib's vega, because 1.44's
``BlackCalculator.volga`` is off by √T (see /work/shared/REFERENCES.md, pitfalls).
Tolerance: 1e-10 relative or 1e-12 absolute, whichever is looser.
"""

from __future__ import annotations

import numpy as np
import pytest

from blotter.engine import price, price_greeks

ql = pytest.importorskip("QuantLib")

N_CASES = 2000
REL = 1e-10
ABS = 1e-12


def _cases() -> dict[str, np.ndarray]:
    rng = np.random.default_rng(20260412)
    n = N_CASES
    days = rng.integers(1, 3651, n)                       # one day to ten years
    spot = rng.uniform(10.0, 200.0, n)
    moneyness = np.exp(rng.uniform(np.log(0.3), np.log(3.0), n))   # S / K from 0.3 to 3
    return {
        "is_call": rng.random(n) < 0.5,
        "spot": spot,
        "strike": spot / moneyness,
        "days": days,
        "years": days / 365.0,
        "rate": rng.uniform(-0.02, 0.15, n),
        "carry": rng.uniform(-0.10, 0.15, n),
        "vol": np.exp(rng.uniform(np.log(0.01), np.log(3.0), n)),   # 1% to 300%
    }


def _quantlib(c: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    today = ql.Date(15, ql.January, 2026)
    ql.Settings.instance().evaluationDate = today
    dc = ql.Actual365Fixed()
    spot_q, r_q, q_q, v_q = (ql.SimpleQuote(0.0) for _ in range(4))
    r_ts = ql.YieldTermStructureHandle(ql.FlatForward(today, ql.QuoteHandle(r_q), dc,
                                                      ql.Continuous))
    q_ts = ql.YieldTermStructureHandle(ql.FlatForward(today, ql.QuoteHandle(q_q), dc,
                                                      ql.Continuous))
    v_ts = ql.BlackVolTermStructureHandle(
        ql.BlackConstantVol(today, ql.NullCalendar(), ql.QuoteHandle(v_q), dc))
    process = ql.BlackScholesMertonProcess(ql.QuoteHandle(spot_q), q_ts, r_ts, v_ts)
    engine = ql.AnalyticEuropeanEngine(process)
    names = ["price", "delta", "gamma", "vega", "theta", "rho_q_fixed", "dividend_rho", "vanna",
             "volga"]
    out = {k: np.empty(N_CASES) for k in names}
    for i in range(N_CASES):
        kind = ql.Option.Call if c["is_call"][i] else ql.Option.Put
        payoff = ql.PlainVanillaPayoff(kind, float(c["strike"][i]))
        option = ql.VanillaOption(payoff, ql.EuropeanExercise(today + int(c["days"][i])))
        option.setPricingEngine(engine)
        s, r, b, v, t = (float(c[k][i]) for k in ("spot", "rate", "carry", "vol", "years"))
        spot_q.setValue(s)
        r_q.setValue(r)
        q_q.setValue(r - b)
        v_q.setValue(v)
        out["price"][i] = option.NPV()
        out["delta"][i] = option.delta()
        out["gamma"][i] = option.gamma()
        out["vega"][i] = option.vega()
        out["theta"][i] = option.theta()
        out["rho_q_fixed"][i] = option.rho()
        out["dividend_rho"][i] = option.dividendRho()
        calc = ql.BlackCalculator(payoff, s * np.exp(b * t), v * np.sqrt(t), np.exp(-r * t))
        out["vanna"][i] = calc.vanna(s, t)
        h = 1e-3 * v
        vegas = []
        for vb in (v + 2 * h, v + h, v - h, v - 2 * h):
            v_q.setValue(vb)
            vegas.append(option.vega())
        out["volga"][i] = (-vegas[0] + 8 * vegas[1] - 8 * vegas[2] + vegas[3]) / (12.0 * h)
    return out


@pytest.fixture(scope="module")
def both() -> tuple[dict[str, np.ndarray], dict[str, np.ndarray], object]:
    c = _cases()
    ref = _quantlib(c)
    ours = price_greeks(c["is_call"], c["spot"], c["strike"], c["years"], c["rate"], c["carry"],
                        c["vol"])
    return c, ref, ours


def _close(got: np.ndarray, want: np.ndarray, rel: float = REL, abs_: float = ABS) -> np.ndarray:
    return np.abs(got - want) <= np.maximum(rel * np.abs(want), abs_)


OURS = {
    "price": lambda g: g.price,
    "delta": lambda g: g.delta,
    "gamma": lambda g: g.gamma,
    "vega": lambda g: g.vega,
    "theta": lambda g: g.theta,
    "rho_q_fixed": lambda g: g.rho + g.carry_rho,
    "dividend_rho": lambda g: -g.carry_rho,
    "vanna": lambda g: g.vanna,
}


@pytest.mark.parametrize("name", list(OURS))
def test_matches_quantlib(both: tuple[dict[str, np.ndarray], dict[str, np.ndarray], object],
                          name: str) -> None:
    """Source: QuantLib 1.44 AnalyticEuropeanEngine (BlackCalculator for vanna)."""
    c, ref, ours = both
    got = OURS[name](ours)
    ok = _close(got, ref[name])
    bad = np.flatnonzero(~ok)
    assert ok.all(), (name, bad[:5], got[bad[:5]], ref[name][bad[:5]])


def test_volga_matches_quantlib_vega_difference(
        both: tuple[dict[str, np.ndarray], dict[str, np.ndarray], object]) -> None:
    """Source: five-point central difference (step 1e-3 σ) of QuantLib 1.44 AnalyticEuropeanEngine
    vega.

    The difference carries a truncation error of order (1e-3 σ)⁴ ∂⁵V/∂σ⁵, which reaches 7e-8 of
    volga at 1% vols where d1·d2 is large, and a rounding error of order 1e-16 vega / (1e-3 σ);
    so the bound is 2e-7 relative, 1e-12 absolute, or 1e-10 × vega / σ.
    """
    c, ref, ours = both
    ok = _close(ours.volga, ref["volga"], rel=2e-7, abs_=ABS) | (
        np.abs(ours.volga - ref["volga"]) <= 1e-10 * np.abs(ref["vega"]) / c["vol"])
    bad = np.flatnonzero(~ok)
    assert ok.all(), (bad[:5], ours.volga[bad[:5]], ref["volga"][bad[:5]])


def test_price_only_path_matches_quantlib(
        both: tuple[dict[str, np.ndarray], dict[str, np.ndarray], object]) -> None:
    """Source: QuantLib 1.44 AnalyticEuropeanEngine; ``price`` is the scenario fast path."""
    c, ref, _ = both
    got = price(c["is_call"], c["spot"], c["strike"], c["years"], c["rate"], c["carry"], c["vol"])
    assert _close(got, ref["price"]).all()
