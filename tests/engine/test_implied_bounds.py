"""Implied vol at the no-arbitrage bounds: a price equal to a bound within floating-point
rounding has no time value; only a price clearly below the lower bound is "below intrinsic".

The bounds are model-free (European: max(S e^{(b−r)T} − K e^{−rT}, 0) for a call; an American
option adds its intrinsic value), so the same test holds for European and American prices.
"""

from __future__ import annotations

import numpy as np
import pytest

from blotter.engine import IV_BELOW_INTRINSIC, IV_NO_TIME_VALUE, IV_STATUS, implied_vol

ql = pytest.importorskip("QuantLib")


def _quantlib_bound(is_call: bool, spot: float, strike: float, years: float, rate: float,
                    carry: float) -> float:
    """QuantLib's Black value at zero standard deviation: the discounted forward intrinsic."""
    typ = ql.Option.Call if is_call else ql.Option.Put
    forward = spot * np.exp(carry * years)
    calc = ql.BlackCalculator(ql.PlainVanillaPayoff(typ, strike), forward, 0.0,
                              float(np.exp(-rate * years)))
    return float(calc.value())


def _deep_in_the_money_cases(n: int, seed: int) -> list[tuple[bool, float, float, float, float,
                                                               float]]:
    """Random options deep in the money on the forward (carry b = r, b = 0 as Black-76, b < r)."""
    rng = np.random.default_rng(seed)
    out = []
    for _ in range(n):
        is_call = bool(rng.random() < 0.5)
        spot = float(rng.uniform(20.0, 500.0))
        rate = float(rng.uniform(0.0, 0.08))
        carry = float(rng.choice([0.0, rate, rate - rng.uniform(0.0, 0.05)]))
        years = float(rng.uniform(0.02, 2.0))
        forward = spot * np.exp(carry * years)
        depth = float(rng.uniform(1.02, 2.0))
        strike = forward / depth if is_call else forward * depth
        out.append((is_call, spot, strike, years, rate, carry))
    return out


def test_quantlib_prices_at_the_european_bound_have_no_time_value() -> None:
    """Source: QuantLib 1.44 ``BlackCalculator`` with zero standard deviation, which prices a
    European option at the discounted forward intrinsic, the lower bound (Hull, Options,
    Futures, and Other Derivatives, chapter "Properties of Stock Options", from memory).
    Computed in another order, it differs from ours by a few units in the last place."""
    cases = _deep_in_the_money_cases(400, seed=10)
    prices = np.array([_quantlib_bound(*c) for c in cases])
    cols = [np.array(col) for col in zip(*cases, strict=True)]
    iv = implied_vol(prices, *cols)
    names = [IV_STATUS[int(s)] for s in iv.status]
    assert names == ["no time value"] * len(cases)
    # Well below the bound (one part in a million) is still refused as below intrinsic.
    iv_low = implied_vol(prices * (1.0 - 1e-6), *cols)
    assert np.all(iv_low.status == IV_BELOW_INTRINSIC)


@pytest.mark.parametrize(
    ("is_call", "spot", "strike", "rate", "carry"),
    [
        (False, 60.0, 100.0, 0.08, 0.08),   # deep in-the-money put, no dividend
        (True, 200.0, 100.0, 0.02, -0.08),  # deep in-the-money call, 10% dividend yield
    ],
)
def test_american_price_at_intrinsic_within_rounding_has_no_time_value(
    is_call: bool, spot: float, strike: float, rate: float, carry: float
) -> None:
    """Source: QuantLib 1.44 ``QdFpAmericanEngine`` values both options at exactly their
    intrinsic value (deep in the exercise region; the put is the analytic case of REFERENCES.md,
    S=60, K=100, T=1, r=8%: 40.0). A price a few parts in 1e13 under it (rounding of the
    price) has no time value; one part in a million under it is below intrinsic."""
    day = ql.Date(2, 1, 2026)
    ql.Settings.instance().evaluationDate = day
    dc = ql.Actual365Fixed()
    process = ql.BlackScholesMertonProcess(
        ql.QuoteHandle(ql.SimpleQuote(spot)),
        ql.YieldTermStructureHandle(ql.FlatForward(day, rate - carry, dc)),
        ql.YieldTermStructureHandle(ql.FlatForward(day, rate, dc)),
        ql.BlackVolTermStructureHandle(ql.BlackConstantVol(day, ql.NullCalendar(), 0.2, dc)),
    )
    typ = ql.Option.Call if is_call else ql.Option.Put
    option = ql.VanillaOption(ql.PlainVanillaPayoff(typ, strike),
                              ql.AmericanExercise(day, day + 365))
    option.setPricingEngine(ql.QdFpAmericanEngine(process))
    value = float(option.NPV())
    assert value == abs(spot - strike)
    for rel, want in ((0.0, IV_NO_TIME_VALUE), (-4e-13, IV_NO_TIME_VALUE),
                      (-1e-6, IV_BELOW_INTRINSIC)):
        iv = implied_vol(value * (1.0 + rel), is_call, spot, strike, 1.0, rate, carry,
                         american=True)
        assert int(iv.status) == want, (rel, IV_STATUS[int(iv.status)])
        assert np.isnan(iv.vol)
