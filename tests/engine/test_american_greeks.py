"""American (Bjerksund–Stensland 2002) greeks: the exact first derivatives against fine central
differences of the engine's own price, the pieces they are built from, and immediate exercise.

These are mathematical consequences of the formula as implemented (no outside source needed,
like ``test_identities``); the model's own error against a converged American value is in
``test_american_accuracy``.
"""

from __future__ import annotations

import numpy as np
import pytest

from blotter.engine import american, price, price_greeks
from blotter.engine._bs2002_grad import bs2002_call_grad
from tests.engine.conftest import random_inputs


def _central(kw: dict[str, np.ndarray], field: str, step: np.ndarray | float) -> np.ndarray:
    up = price(**{**kw, field: kw[field] + step}, american=True)
    down = price(**{**kw, field: kw[field] - step}, american=True)
    out: np.ndarray = (up - down) / (2.0 * step)
    return out


FIRST_ORDER = [("delta", "spot"), ("vega", "vol"), ("rho", "rate"), ("carry_rho", "carry"),
               ("theta", "years")]


@pytest.mark.parametrize(("greek", "field"), FIRST_ORDER)
def test_first_order_greeks_match_fine_differences(greek: str, field: str) -> None:
    """delta, vega, theta, rho and carry rho are exact derivatives of the American price.

    Central differences at 1e-5 (relative for spot and years, absolute for vol, 1e-6 for rate
    and carry) have truncation and rounding errors near 1e-7 of the greek; rows within a step
    of a kink (the 2002 formula meeting the European floor or intrinsic) are left out.
    """
    kw = random_inputs(600, seed=11)
    g = price_greeks(**kw, american=True)
    step = {"spot": 1e-5 * kw["spot"], "vol": 1e-5, "rate": 1e-6, "carry": 1e-6,
            "years": 1e-5 * kw["years"]}[field]
    fd = _central(kw, field, step)
    if greek == "theta":
        fd = -fd
    got = getattr(g, greek)
    # A kink shows as disagreement between one-sided differences; keep rows without one.
    p0 = price(**kw, american=True)
    up = price(**{**kw, field: kw[field] + step}, american=True)
    down = price(**{**kw, field: kw[field] - step}, american=True)
    smooth = np.abs((up - p0) - (p0 - down)) <= 1e-3 * np.abs(up - down) + 1e-14
    assert smooth.mean() > 0.9
    scale = np.maximum(np.abs(fd), 1e-3 * np.max(np.abs(fd)))
    err = np.abs(got - fd)[smooth] / scale[smooth]
    assert np.max(err) <= 2e-6, (greek, np.max(err))


def test_call_form_gradient_matches_differences_and_value_is_the_price_formula() -> None:
    """``bs2002_call_grad`` returns ``bs2002_call``'s value to the bit and its gradient in
    (S, σ, T, r, b), for several spots per row sharing the per-row terms."""
    rng = np.random.default_rng(12)
    m = 400
    s = rng.uniform(0.6, 1.1, m)
    t = rng.uniform(0.02, 5.0, m)
    r = rng.uniform(0.0, 0.12, m)
    b = r - rng.uniform(0.005, 0.15, m)
    v = rng.uniform(0.05, 0.8, m)
    k = np.ones(m)
    spots = np.concatenate([s, 0.97 * s])
    val, grad = bs2002_call_grad(spots, k, t, r, b, v)
    tile = [np.tile(a, 2) for a in (k, t, r, b, v)]
    assert np.array_equal(val, american.bs2002_call(spots, *tile))
    base = [spots, tile[4], tile[1], tile[2], tile[3]]            # S, σ, T, r, b
    for d, rel in enumerate((1e-6, 1e-6, 1e-6, 1e-7, 1e-7)):
        h = rel * (base[d] if d in (0, 2) else 1.0)
        up, down = list(base), list(base)
        up[d] = base[d] + h
        down[d] = base[d] - h
        fu = american.bs2002_call(up[0], tile[0], up[2], up[3], up[4], up[1])
        fdn = american.bs2002_call(down[0], tile[0], down[2], down[3], down[4], down[1])
        fd = (fu - fdn) / (2.0 * h)
        scale = np.maximum(np.abs(fd), 1e-3 * np.max(np.abs(fd)))
        assert np.all(np.abs(grad[d] - fd) <= 1e-5 * scale), d


def test_second_order_greeks_match_differences_of_the_price() -> None:
    """gamma, vanna, charm (spot differences of exact first derivatives) and volga agree with
    three- and four-point differences of the price at the same steps (1e-4), to 1e-4 on rows
    away from kinks (the differences' own truncation error is near 1e-6 of the greek)."""
    kw = random_inputs(300, seed=13)
    g = price_greeks(**kw, american=True)
    s, v, t = kw["spot"], kw["vol"], kw["years"]
    hs, hv, ht = 1e-4 * s, 1e-4, 1e-4 * t

    def p(**bump: np.ndarray | float) -> np.ndarray:
        out: np.ndarray = price(**{**kw, **bump}, american=True)
        return out

    p0 = p()
    fd = {
        "gamma": (p(spot=s + hs) - 2 * p0 + p(spot=s - hs)) / hs**2,
        "volga": (p(vol=v + hv) - 2 * p0 + p(vol=v - hv)) / hv**2,
        "vanna": (p(spot=s + hs, vol=v + hv) - p(spot=s + hs, vol=v - hv)
                  - p(spot=s - hs, vol=v + hv) + p(spot=s - hs, vol=v - hv)) / (4 * hs * hv),
        "charm": -(p(spot=s + hs, years=t + ht) - p(spot=s + hs, years=t - ht)
                   - p(spot=s - hs, years=t + ht) + p(spot=s - hs, years=t - ht))
        / (4 * hs * ht),
    }
    intrinsic = np.maximum(np.where(kw["is_call"], 1.0, -1.0) * (s - kw["strike"]), 0.0)
    away = g.price - intrinsic > 2e-2 * s
    assert away.mean() > 0.7
    for name, ref in fd.items():
        got = getattr(g, name)
        scale = np.maximum(np.abs(ref), 1e-2 * np.max(np.abs(ref)))
        assert np.all(np.abs(got - ref)[away] <= 1e-4 * scale[away]), name


def test_immediate_exercise_rows_have_intrinsic_greeks() -> None:
    """Deep in-the-money puts with a high rate, and calls with a high dividend yield, are worth
    intrinsic: delta ±1, the other greeks 0."""
    is_call = np.array([False, False, True, True])
    spot = np.array([40.0, 30.0, 250.0, 300.0])
    g = price_greeks(is_call, spot, 100.0, 1.0, 0.10, np.array([0.10, 0.10, -0.20, -0.20]),
                     0.2, american=True)
    assert np.allclose(g.price, np.abs(spot - 100.0), rtol=1e-14)
    assert np.array_equal(g.delta, [-1.0, -1.0, 1.0, 1.0])
    for name in ("gamma", "vega", "theta", "rho", "carry_rho", "vanna", "volga", "charm"):
        assert np.all(np.abs(getattr(g, name)) <= 1e-9), name


def test_put_greeks_follow_from_the_call_form() -> None:
    """A put's delta comes from the call form's strike derivative (homogeneity); it must equal
    a fine difference of the put price for near-the-money puts that are not exercised."""
    spot = np.linspace(80.0, 120.0, 9)
    kw = {"is_call": False, "spot": spot, "strike": 100.0, "years": 0.75, "rate": 0.06,
          "carry": 0.02, "vol": 0.3}
    g = price_greeks(**kw, american=True)
    h = 1e-5 * spot
    fd = (price(**{**kw, "spot": spot + h}, american=True)
          - price(**{**kw, "spot": spot - h}, american=True)) / (2 * h)
    assert np.allclose(g.delta, fd, rtol=1e-6, atol=1e-9)
    assert np.all(g.delta < 0) and np.all(g.delta > -1)


@pytest.mark.parametrize(("region", "delta_tol", "vega_tol"), [
    ("near the money, T 0.05–1", 6e-3, 0.02),
    ("long-dated, T 2–10", 2.5e-2, 0.15),
])
def test_delta_and_vega_near_a_converged_american_reference(region: str, delta_tol: float,
                                                            vega_tol: float) -> None:
    """Delta and vega of BS2002 against central differences (1e-3 of S; 0.1 vol point) of
    QuantLib 1.44 QdFpAmericanEngine with its high-precision scheme, a converged American value.

    The gap is the 2002 approximation's own error in its slopes (measured on these 24 cases:
    near the money delta 2.9e-3, vega 0.8%; long-dated 1.2e-2 and 8.4%, vega relative to
    max(vega, 1)); the bounds leave about a factor two. Deep in the money the approximation's
    exercise boundary differs from the true one, so slopes there are not compared.
    """
    pytest.importorskip("QuantLib")
    from tests.engine.american_reference import qdfp_prices, region_cases

    c = region_cases(region, 24, seed=21)
    g = price_greeks(c["is_call"], c["spot"], c["strike"], c["years"], c["rate"], c["carry"],
                     c["vol"], american=True)
    hs, hv = 1e-3 * c["spot"], 1e-3
    d_ref = (qdfp_prices({**c, "spot": c["spot"] + hs})
             - qdfp_prices({**c, "spot": c["spot"] - hs})) / (2 * hs)
    v_ref = (qdfp_prices({**c, "vol": c["vol"] + hv})
             - qdfp_prices({**c, "vol": c["vol"] - hv})) / (2 * hv)
    assert np.max(np.abs(g.delta - d_ref)) <= delta_tol
    assert np.max(np.abs(g.vega - v_ref) / np.maximum(np.abs(v_ref), 1.0)) <= vega_tol
