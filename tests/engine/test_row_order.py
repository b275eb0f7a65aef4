"""American values do not depend on the order of the rows or on which rows share a vol: the
kernels value a boundary's rows by vol, reusing the boundary interpolated to a vol for every
row of that vol.

Reference: each row valued alone (its own boundary, no interpolation shared with any other
row), itself held to QuantLib's converged engine in ``test_american.py``.
"""

from __future__ import annotations

import numpy as np
import pytest

from blotter.engine import price_greeks
from blotter.engine.results import GREEK_NAMES


def _book(smile: bool) -> dict[str, np.ndarray]:
    """Two expiries of puts and calls on one name, strikes repeated with their smile vol (or
    one flat vol, so that every boundary's rows share it with the other boundaries' rows too),
    so many rows of a boundary share a vol exactly."""
    rng = np.random.default_rng(21)
    n = 120
    strikes = rng.choice(np.arange(80.0, 121.0, 5.0), n)
    k = np.log(strikes / 100.0)
    return {"is_call": rng.random(n) < 0.5, "spot": np.full(n, 100.0), "strike": strikes,
            "years": rng.choice([0.25, 0.75], n), "rate": np.full(n, 0.05),
            "carry": np.full(n, 0.02),
            "vol": 0.25 * (1.0 - 0.3 * k + 0.8 * k * k) if smile else np.full(n, 0.25)}


@pytest.mark.parametrize("smile", [True, False])
def test_shuffled_rows_give_the_same_values_to_the_bit(smile: bool) -> None:
    """The book valued in two row orders gives every output bit for bit."""
    book = _book(smile)
    perm = np.random.default_rng(3).permutation(book["spot"].size)
    a = price_greeks(**book, american=True)
    b = price_greeks(**{k: v[perm] for k, v in book.items()}, american=True)
    for name in GREEK_NAMES:
        assert np.array_equal(getattr(a, name)[perm], getattr(b, name)), name


@pytest.mark.parametrize("smile", [True, False])
def test_rows_sharing_a_vol_equal_rows_alone(smile: bool) -> None:
    """Each row equals itself valued alone: price within 1e-8 of the strike, vega within 1e-6
    of the strike (the interpolation in vol, as in ``test_american.py``)."""
    book = _book(smile)
    together = price_greeks(**book, american=True)
    for i in range(0, book["spot"].size, 7):
        alone = price_greeks(**{k: v[i] for k, v in book.items()}, american=True)
        assert abs(float(together.price[i]) - float(alone.price)) <= 1e-8 * book["strike"][i]
        assert abs(float(together.vega[i]) - float(alone.vega)) <= 1e-6 * book["strike"][i]
