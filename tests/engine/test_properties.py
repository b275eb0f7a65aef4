"""Property tests (hypothesis) over the engine's whole valid domain: finite outputs, no-arbitrage
bounds, monotone in vol, American >= European >= 0. The bounds are model-free (Merton 1973)."""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from blotter.engine import price, price_greeks

FIELDS = ("price", "delta", "gamma", "vega", "theta", "rho", "carry_rho", "vanna", "volga",
          "charm")

options = st.fixed_dictionaries({
    "is_call": st.booleans(),
    "spot": st.floats(1e-2, 1e4),
    "moneyness": st.floats(0.2, 5.0),
    "years": st.one_of(st.floats(-1.0, 30.0), st.sampled_from([0.0, 1e-9, 1.0 / 365.0])),
    "rate": st.floats(-0.05, 0.2),
    "carry": st.floats(-0.2, 0.2),
    "vol": st.one_of(st.floats(0.0, 3.0), st.sampled_from([0.0, 1e-6])),
})


def _args(o: dict[str, float]) -> dict[str, float]:
    return {"is_call": o["is_call"], "spot": o["spot"], "strike": o["spot"] / o["moneyness"],
            "years": o["years"], "rate": o["rate"], "carry": o["carry"], "vol": o["vol"]}


def _bounds(a: dict[str, float]) -> tuple[float, float]:
    """European no-arbitrage bounds (discounted forward intrinsic, discounted spot or strike)."""
    t = max(a["years"], 0.0)
    sf = a["spot"] * np.exp((a["carry"] - a["rate"]) * t)
    kd = a["strike"] * np.exp(-a["rate"] * t)
    if a["is_call"]:
        return max(sf - kd, 0.0), sf
    return max(kd - sf, 0.0), kd


@settings(max_examples=300, deadline=None)
@given(options)
def test_european_finite_and_within_bounds(o: dict[str, float]) -> None:
    a = _args(o)
    g = price_greeks(**a)
    for f in FIELDS:
        assert np.isfinite(getattr(g, f)), f
    lo, hi = _bounds(a)
    slack = 1e-10 * (a["spot"] + a["strike"])
    if a["years"] > 0:
        assert lo - slack <= g.price <= hi + slack
        assert g.gamma >= 0.0 and g.vega >= 0.0
        cf = np.exp((a["carry"] - a["rate"]) * a["years"]) * (1 + 1e-12)
        assert (0.0 <= g.delta <= cf) if a["is_call"] else (-cf <= g.delta <= 0.0)


@settings(max_examples=150, deadline=None)
@given(options)
def test_american_finite_and_not_below_european(o: dict[str, float]) -> None:
    a = _args(o)
    g = price_greeks(**a, american=True)
    for f in FIELDS:
        assert np.isfinite(getattr(g, f)), f
    euro = float(price(**a))
    intrinsic = max((a["spot"] - a["strike"]) * (1 if a["is_call"] else -1), 0.0)
    assert g.price >= euro
    assert g.price >= intrinsic
    t = max(a["years"], 0.0)
    # Worth at most the asset (call) or the strike (put) received now or at expiry.
    cap = max(a["spot"], a["spot"] * np.exp((a["carry"] - a["rate"]) * t)) if a["is_call"] \
        else max(a["strike"], a["strike"] * np.exp(-a["rate"] * t))
    assert g.price <= cap * (1 + 1e-12)


@settings(max_examples=200, deadline=None)
@given(options, st.floats(0.0, 3.0), st.booleans())
def test_monotone_in_vol(o: dict[str, float], other_vol: float, american: bool) -> None:
    a = _args(o)
    lo_v, hi_v = sorted((a["vol"], other_vol))
    p_lo = float(price(**{**a, "vol": lo_v}, american=american))
    p_hi = float(price(**{**a, "vol": hi_v}, american=american))
    assert p_hi >= p_lo - 1e-12 * (a["spot"] + a["strike"])
