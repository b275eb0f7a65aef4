"""Edge cases (expiry, zero vol, extreme moneyness, negative rates, long expiries), input
checks and shapes."""

from __future__ import annotations

import warnings

import numpy as np
import pytest

from blotter.engine import (
    IV_ABOVE_UPPER_BOUND,
    IV_BELOW_INTRINSIC,
    IV_NO_TIME_VALUE,
    IV_OK,
    IV_STATUS,
    Greeks,
    implied_vol,
    price,
    price_greeks,
)

FIELDS = ("price", "delta", "gamma", "vega", "theta", "rho", "carry_rho", "vanna", "volga",
          "charm")


def _all_finite(g: Greeks) -> bool:
    return all(np.all(np.isfinite(getattr(g, f))) for f in FIELDS)


@pytest.mark.parametrize("american", [False, True])
def test_expired_is_intrinsic_with_zero_greeks(american: bool) -> None:
    """years <= 0: intrinsic value, delta ±1 strictly in the money else 0, other greeks 0."""
    spot = np.array([120.0, 80.0, 100.0, 120.0, 80.0, 100.0])
    calls = np.array([True, True, True, False, False, False])
    for years in (0.0, -0.5):
        g = price_greeks(calls, spot, 100.0, years, 0.05, 0.02, 0.3, american=american)
        assert np.array_equal(g.price, [20.0, 0.0, 0.0, 0.0, 20.0, 0.0])
        assert np.array_equal(g.delta, [1.0, 0.0, 0.0, 0.0, -1.0, 0.0])
        for f in FIELDS[2:]:
            assert np.array_equal(getattr(g, f), np.zeros(6)), f


@pytest.mark.parametrize("american", [False, True])
def test_extreme_inputs_are_finite_without_warnings(american: bool) -> None:
    """Zero and tiny vol, tiny and very long expiries, deep ITM/OTM, negative rates: finite."""
    grid = np.meshgrid(
        [True, False],
        [1e-3, 1.0, 100.0, 1e5],          # spot (strike 100)
        [1e-12, 1e-6, 1.0 / 365, 1.0, 50.0],  # years
        [-0.05, 0.0, 0.2],                 # rate
        [-0.3, 0.0, 0.3],                  # carry
        [0.0, 1e-8, 0.2, 5.0],             # vol
        indexing="ij",
    )
    c, s, t, r, b, v = (x.ravel() for x in grid)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        g = price_greeks(c, s, 100.0, t, r, b, v, american=american)
        p = price(c, s, 100.0, t, r, b, v, american=american)
    assert _all_finite(g)
    assert np.all(np.isfinite(p))
    assert np.all(g.price >= 0.0)


def test_zero_vol_is_discounted_forward_intrinsic() -> None:
    """σ = 0: V = max(ω (S e^{(b−r)T} − K e^{−rT}), 0) and delta ω e^{(b−r)T} or 0 (analytic)."""
    s = np.array([90.0, 110.0, 90.0, 110.0])
    calls = np.array([True, True, False, False])
    g = price_greeks(calls, s, 100.0, 1.0, 0.05, 0.01, 0.0)
    fwd = s * np.exp(-0.04) - 100.0 * np.exp(-0.05)
    w = np.where(calls, 1.0, -1.0)
    assert np.allclose(g.price, np.maximum(w * fwd, 0.0), rtol=1e-15, atol=1e-14)
    assert np.allclose(g.delta, np.where(w * fwd > 0, w * np.exp(-0.04), 0.0), atol=1e-15)
    # n(d1) is floored at e^-700 (NumPy's exp is slow on underflow), so "zero" is below 1e-250.
    assert np.all(np.abs(g.gamma) < 1e-250) and np.all(np.abs(g.vega) < 1e-250)


def test_broadcast_shapes() -> None:
    """Scenario ladders broadcast (n_scen, 1) against (1, n); scalars give 0-d arrays."""
    spots = 100.0 * np.array([0.9, 1.0, 1.1])[:, None]
    strikes = np.array([[90.0, 100.0, 110.0, 120.0]])
    p = price(True, spots, strikes, 0.5, 0.03, 0.01, 0.25)
    assert p.shape == (3, 4)
    one = price(True, 110.0, 120.0, 0.5, 0.03, 0.01, 0.25)
    assert one.shape == () and one == p[2, 3]
    g = price_greeks([True, False], spots, 100.0, 0.5, 0.03, 0.01, 0.25)
    assert g.delta.shape == (3, 2) and g.charm.dtype == np.float64
    pa = price(True, spots, strikes, 0.5, 0.03, 0.01, 0.25, american=True)
    assert pa.shape == (3, 4) and np.all(pa >= p - 1e-12)
    # Large 2-D input spanning many chunks agrees with row-by-row evaluation.
    big_s = np.linspace(50, 150, 3 * 7000).reshape(3, 7000)
    big = price(False, big_s, 100.0, 1.0, 0.02, 0.0, 0.3)
    rows = np.stack([price(False, big_s[i], 100.0, 1.0, 0.02, 0.0, 0.3) for i in range(3)])
    assert np.allclose(big, rows, rtol=1e-14, atol=1e-14)


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        ({"strike": np.array([100.0] * 17 + [-5.0, 3.0])}, "strike must be > 0: strike[17] = -5.0"),
        ({"spot": 0.0}, "spot must be > 0: spot = 0.0"),
        ({"vol": np.array([0.2, -0.1])}, "vol must be >= 0: vol[1] = -0.1"),
        ({"vol": np.array([0.2, np.nan])}, "vol must be >= 0: vol[1] = nan"),
        ({"years": np.array([[1.0, 2.0], [np.nan, 1.0]])},
         "years must be finite: years[1, 0] = nan"),
        ({"rate": np.inf}, "rate must be finite: rate = inf"),
        ({"carry": [0.0, np.nan]}, "carry must be finite: carry[1] = nan"),
        ({"spot": np.array([100.0, np.inf])}, "spot must be > 0: spot[1] = inf"),
    ],
)
def test_invalid_inputs_raise_one_clear_error(kwargs: dict[str, object], message: str) -> None:
    """Bad input names the field and its first bad index, and leaves the inputs unchanged."""
    base: dict[str, object] = {"is_call": True, "spot": 100.0, "strike": 100.0, "years": 1.0,
                               "rate": 0.05, "carry": 0.05, "vol": 0.2}
    base.update(kwargs)
    before = {k: np.array(v, copy=True) for k, v in base.items()}
    for fn in (price_greeks, price):
        with pytest.raises(ValueError) as err:
            fn(**base)  # type: ignore[arg-type]
        assert str(err.value) == message
    for k, v in base.items():
        assert np.array_equal(np.asarray(v), before[k], equal_nan=True)


def test_bad_shapes_and_flags_are_refused() -> None:
    """Non-broadcasting inputs and non-boolean flags raise ValueError."""
    with pytest.raises(ValueError, match="do not broadcast"):
        price(True, np.ones(3), np.ones(4), 1.0, 0.0, 0.0, 0.2)
    with pytest.raises(ValueError, match="is_call must be True or False: is_call\\[1\\] = 2"):
        price(np.array([1, 2]), 100.0, 100.0, 1.0, 0.0, 0.0, 0.2)
    with pytest.raises(ValueError, match="price must be finite"):
        implied_vol(np.nan, True, 100.0, 100.0, 1.0, 0.0, 0.0)


def test_implied_vol_statuses() -> None:
    """Each refusal reason is reported with a NaN vol; the names are in IV_STATUS."""
    # Call S=100, K=100, T=1, r=5%, b=5%: bounds (forward intrinsic ≈ 4.877, spot 100).
    prices = np.array([10.0, 1.0, 100.0, 150.0, 4.877057549928599, 5.0])
    years = np.array([1.0, 1.0, 1.0, 1.0, 1.0, 0.0])
    iv = implied_vol(prices, True, 100.0, 100.0, years, 0.05, 0.05)
    assert list(iv.status) == [IV_OK, IV_BELOW_INTRINSIC, IV_ABOVE_UPPER_BOUND,
                               IV_ABOVE_UPPER_BOUND, IV_NO_TIME_VALUE, IV_NO_TIME_VALUE]
    assert np.isfinite(iv.vol[0]) and np.all(np.isnan(iv.vol[1:]))
    assert IV_STATUS[IV_BELOW_INTRINSIC] == "below intrinsic"
    assert set(IV_STATUS.values()) == {"ok", "below intrinsic", "above upper bound",
                                       "no time value", "did not converge"}


def test_large_inputs_are_checked_inside_the_chunks() -> None:
    """Books large enough for in-chunk checks report the same first bad field and index."""
    n = 200_000
    spot = np.full(n, 100.0)
    strike = np.full(n, 100.0)
    strike[150_001] = -2.0
    for fn in (price_greeks, price):
        with pytest.raises(ValueError) as err:
            fn(True, spot, strike, 1.0, 0.05, 0.05, 0.2)
        assert str(err.value) == "strike must be > 0: strike[150001] = -2.0"
    spot[190_000] = np.nan          # an earlier field wins, as for small inputs
    with pytest.raises(ValueError) as err:
        price(True, spot, strike, 1.0, 0.05, 0.05, 0.2)
    assert str(err.value) == "spot must be > 0: spot[190000] = nan"
    vols = np.full((2, n // 2), 0.2)
    vols[1, 7] = -0.5
    with pytest.raises(ValueError) as err:
        price(True, 100.0, 100.0, 1.0, 0.05, 0.05, vols)
    assert str(err.value) == "vol must be >= 0: vol[1, 7] = -0.5"
    prices = np.full(n, 5.0)
    prices[-1] = np.inf
    with pytest.raises(ValueError, match=r"price must be finite: price\[199999\] = inf"):
        implied_vol(prices, True, 100.0, 100.0, 1.0, 0.05, 0.05)
