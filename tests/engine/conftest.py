"""Shared inputs for the engine tests: seeded random books within the engine's stated domain."""

from __future__ import annotations

from collections.abc import Iterator

import numpy as np
import pytest


@pytest.fixture(autouse=True)
def _strict_floating_point() -> Iterator[None]:
    """Every engine test runs with overflow, division by zero and invalid operations raising."""
    with np.errstate(over="raise", divide="raise", invalid="raise"):
        yield


def random_inputs(n: int, seed: int, *, wide: bool = False) -> dict[str, np.ndarray]:
    """``n`` random options as engine keyword arguments (``wide`` spans the QuantLib ranges)."""
    rng = np.random.default_rng(seed)
    spot = rng.uniform(20.0, 200.0, n)
    if wide:
        moneyness = np.exp(rng.uniform(np.log(0.3), np.log(3.0), n))
        years = rng.uniform(1.0 / 365.0, 10.0, n)
        vol = np.exp(rng.uniform(np.log(0.01), np.log(3.0), n))
        rate = rng.uniform(-0.02, 0.15, n)
        carry = rng.uniform(-0.10, 0.15, n)
    else:
        moneyness = rng.uniform(0.7, 1.4, n)
        years = rng.uniform(0.05, 3.0, n)
        vol = rng.uniform(0.1, 0.6, n)
        rate = rng.uniform(0.0, 0.1, n)
        carry = rng.uniform(-0.05, 0.1, n)
    return {
        "is_call": rng.random(n) < 0.5,
        "spot": spot,
        "strike": spot / moneyness,
        "years": years,
        "rate": rate,
        "carry": carry,
        "vol": vol,
    }
