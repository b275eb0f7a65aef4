"""Analytic identities and self-consistency: finite differences of the engine's own price,
put–call parity, call/put symmetry of gamma and vega, implied-vol round trips.

These need no outside source: each is a mathematical consequence of the model (generalized
Black–Scholes–Merton; the exercise-boundary integral equation for the American rows).
"""

from __future__ import annotations

import numpy as np
import pytest

from blotter.engine import IV_OK, implied_vol, price, price_greeks
from tests.engine.conftest import random_inputs


def _fd_greeks(kw: dict[str, np.ndarray], american: bool, rel: float) -> dict[str, np.ndarray]:
    """Central differences of ``price`` (mixed: four-point), steps ``rel`` × (S, 1, T) in spot,
    vol and years and ``rel`` / 10 in rate and carry."""
    def p(**bump: np.ndarray) -> np.ndarray:
        return price(**{**kw, **bump}, american=american)

    s, v, t, r, b = kw["spot"], kw["vol"], kw["years"], kw["rate"], kw["carry"]
    hs, hv, ht, hr = rel * s, rel, rel * t, rel / 10
    out = {
        "delta": (p(spot=s + hs) - p(spot=s - hs)) / (2 * hs),
        "gamma": (p(spot=s + hs) - 2 * p() + p(spot=s - hs)) / hs**2,
        "vega": (p(vol=v + hv) - p(vol=v - hv)) / (2 * hv),
        "volga": (p(vol=v + hv) - 2 * p() + p(vol=v - hv)) / hv**2,
        "theta": -(p(years=t + ht) - p(years=t - ht)) / (2 * ht),
        "rho": (p(rate=r + hr) - p(rate=r - hr)) / (2 * hr),
        "carry_rho": (p(carry=b + hr) - p(carry=b - hr)) / (2 * hr),
        "vanna": (p(spot=s + hs, vol=v + hv) - p(spot=s + hs, vol=v - hv)
                  - p(spot=s - hs, vol=v + hv) + p(spot=s - hs, vol=v - hv)) / (4 * hs * hv),
        "charm": -(p(spot=s + hs, years=t + ht) - p(spot=s + hs, years=t - ht)
                   - p(spot=s - hs, years=t + ht) + p(spot=s - hs, years=t - ht))
        / (4 * hs * ht),
    }
    return out


GREEKS = ["delta", "gamma", "vega", "volga", "theta", "rho", "carry_rho", "vanna", "charm"]


@pytest.mark.parametrize("name", GREEKS)
def test_european_greeks_match_differences_of_own_price(name: str) -> None:
    """Analytic greeks equal central differences of the closed-form price (steps 1e-4 relative).

    Bound: 2e-5 of the greek (or of 1e-3 of its largest size), above the differences' own
    truncation error (vega: step² ∂³V/∂σ³ / 6 reaches 1e-5) and rounding.
    """
    kw = random_inputs(400, seed=1)
    g = price_greeks(**kw)
    fd = _fd_greeks(kw, american=False, rel=1e-4)[name]
    got = getattr(g, name)
    scale = np.maximum(np.abs(fd), 1e-3 * np.max(np.abs(fd)))
    assert np.all(np.abs(got - fd) <= 2e-5 * scale), name


@pytest.mark.parametrize("name", GREEKS)
def test_american_greeks_match_coarser_differences(name: str) -> None:
    """American greeks (exact derivatives of the method) agree with central differences of the
    American price at 1e-3 steps, to the differences' own error."""
    kw = random_inputs(200, seed=2)
    g = price_greeks(**kw, american=True)
    fd = _fd_greeks(kw, american=True, rel=1e-3)[name]
    got = getattr(g, name)
    scale = np.maximum(np.abs(fd), 1e-2 * np.max(np.abs(fd)))
    assert np.all(np.abs(got - fd) <= 2e-3 * scale), name


def test_put_call_parity() -> None:
    """c − p = S e^{(b−r)T} − K e^{−rT} (generalized BSM), over the QuantLib test ranges."""
    kw = random_inputs(5000, seed=3, wide=True)
    args = {k: v for k, v in kw.items() if k != "is_call"}
    c = price(True, **args)
    p = price(False, **args)
    fwd = kw["spot"] * np.exp((kw["carry"] - kw["rate"]) * kw["years"]) - kw["strike"] * np.exp(
        -kw["rate"] * kw["years"])
    assert np.allclose(c - p, fwd, rtol=1e-12, atol=1e-11 * (kw["spot"] + kw["strike"]))


def test_call_and_put_share_gamma_vega_vanna_volga() -> None:
    """Parity is linear in S with no σ dependence, so the second-order and vol greeks agree."""
    kw = random_inputs(5000, seed=4, wide=True)
    args = {k: v for k, v in kw.items() if k != "is_call"}
    c = price_greeks(True, **args)
    p = price_greeks(False, **args)
    for name in ("gamma", "vega", "vanna", "volga"):
        a, b = getattr(c, name), getattr(p, name)
        assert np.allclose(a, b, rtol=1e-9, atol=1e-12), name
    # delta_c − delta_p = e^{(b−r)T};  charm_c − charm_p = −(b−r) e^{(b−r)T}
    cf = np.exp((kw["carry"] - kw["rate"]) * kw["years"])
    assert np.allclose(c.delta - p.delta, cf, rtol=1e-12, atol=1e-14)
    assert np.allclose(c.charm - p.charm, -(kw["carry"] - kw["rate"]) * cf, rtol=1e-8,
                       atol=1e-10)


def test_time_scaling_identity_holds_for_both_models() -> None:
    """V(T, r, b, σ) = V(λT, r/λ, b/λ, σ/√λ), so T ∂V/∂T = r rho + b carry_rho + (σ/2) vega."""
    kw = random_inputs(300, seed=5)
    intrinsic = np.maximum(np.where(kw["is_call"], 1.0, -1.0) * (kw["spot"] - kw["strike"]), 0.0)
    for american, rtol in ((False, 1e-9), (True, 1e-4)):
        g = price_greeks(**kw, american=american)
        lhs = -kw["years"] * g.theta
        rhs = kw["rate"] * g.rho + kw["carry"] * g.carry_rho + 0.5 * kw["vol"] * g.vega
        # American rows at or next to the exercise boundary have kinks there: left out.
        away = g.price - intrinsic > 1e-3 * kw["spot"]
        assert away.mean() > 0.8
        assert np.allclose(lhs[away], rhs[away], rtol=rtol, atol=rtol * 1e-2 * kw["spot"][away])


def test_implied_vol_round_trip_european() -> None:
    """Implied vols of the engine's own prices return the vol to 1e-10 where vega matters."""
    kw = random_inputs(20000, seed=6, wide=True)
    g = price_greeks(**kw)
    args = {k: v for k, v in kw.items() if k != "vol"}
    iv = implied_vol(g.price, **args)
    # "Not negligible": one vol point moves the price by at least 1e-5 of spot.
    meaningful = g.vega >= 1e-3 * kw["spot"]
    assert meaningful.mean() > 0.5
    assert np.all(iv.status[meaningful] == IV_OK)
    assert np.max(np.abs(iv.vol[meaningful] - kw["vol"][meaningful])) <= 1e-10


def test_implied_vol_round_trip_american() -> None:
    """American implied vols of the engine's American prices return the vol (1e-8)."""
    kw = random_inputs(300, seed=7)
    p = price(**kw, american=True)
    args = {k: v for k, v in kw.items() if k != "vol"}
    iv = implied_vol(p, **args, american=True)
    g = price_greeks(**kw, american=True)
    meaningful = g.vega > 1e-3 * kw["spot"]
    assert np.all(iv.status[meaningful] == IV_OK)
    assert np.max(np.abs(iv.vol[meaningful] - kw["vol"][meaningful])) <= 1e-8


def test_mixed_book_equals_separate_models() -> None:
    """A boolean ``american`` array picks the model per row, matching one-model calls."""
    kw = random_inputs(3000, seed=8)
    mask = np.random.default_rng(0).random(3000) < 0.3
    mixed = price_greeks(**kw, american=mask)
    euro = price_greeks(**kw)
    amer = price_greeks(**kw, american=True)
    # Vectorized exp and log may differ in the last bit between a chunk's body and its tail;
    # difference greeks divide that by products of steps (charm: 2e-4 S × 1e-4 T), hence 1e-6.
    for name in ("price", "delta", "gamma", "vega", "theta", "rho", "carry_rho", "vanna",
                 "volga", "charm"):
        want = np.where(mask, getattr(amer, name), getattr(euro, name))
        assert np.allclose(getattr(mixed, name), want, rtol=1e-6, atol=1e-6), name
    assert np.allclose(price(**kw, american=mask), np.where(mask, amer.price, euro.price),
                       rtol=1e-13, atol=1e-12)


def test_american_call_without_early_exercise_is_european() -> None:
    """With b >= r an American call is never exercised early (Merton 1973): equal to European."""
    kw = random_inputs(500, seed=9)
    kw["carry"] = kw["rate"] + np.abs(kw["carry"])
    kw["is_call"] = np.ones(500, bool)
    assert np.array_equal(price(**kw, american=True), price(**kw))


def test_american_put_with_zero_rate_is_european() -> None:
    """With r <= 0 and b <= r (q >= 0) an American put is never exercised early: European."""
    kw = random_inputs(500, seed=10)
    kw["rate"] = -np.abs(kw["rate"])
    kw["carry"] = kw["rate"] - np.abs(kw["carry"])
    kw["is_call"] = np.zeros(500, bool)
    assert np.array_equal(price(**kw, american=True), price(**kw))
