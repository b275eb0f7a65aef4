"""Bjerksund–Stensland (2002) against a converged American reference, by region.

Reference: QuantLib 1.44 ``QdFpAmericanEngine`` with its high-precision scheme (test-only).
The bounds are the maxima measured on 400 cases per region (blotter/engine/ACCURACY.md); this
test re-measures 20 cases per region and also checks that BS2002, the value of one exercise
rule, never exceeds the reference and never falls below the European value.
"""

from __future__ import annotations

import numpy as np
import pytest

from tests.engine.american_reference import REGIONS, errors, region_cases

pytest.importorskip("QuantLib")

MAX_ABS_ERROR = {
    "near the money, T 0.05–1": 8.27e-02,
    "long-dated, T 2–10": 1.42e+00,
    "deep in the money": 1.52e+00,
    "out of the money": 9.85e-02,
    "near-zero carry, b within ±0.5%": 2.74e-01,
    "high vol, 60–150%": 2.44e+00,
}
"""Largest |BS2002 − QdFp| measured on 400 cases per region, currency units with K = 100."""


@pytest.mark.parametrize("region", list(REGIONS))
def test_bs2002_error_by_region(region: str) -> None:
    """Source: QuantLib 1.44 QdFpAmericanEngine, high-precision scheme."""
    c = region_cases(region, 20, seed=2000 + list(REGIONS).index(region))
    e = errors(c)
    assert np.all(e["ours"] <= e["ref"] + 1e-9)          # a lower bound
    assert np.all(e["ours"] >= e["euro"])                  # never below European
    assert np.max(np.abs(e["abs"])) <= MAX_ABS_ERROR[region]
