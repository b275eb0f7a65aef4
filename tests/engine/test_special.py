"""The compiled kernels' exponential and normal CDF/density against NumPy and SciPy over their
whole range (the bounds are the measured errors stated in blotter/engine/ACCURACY.md, rounded
up)."""

from __future__ import annotations

import numpy as np
from numba import njit
from scipy.special import erfcx, ndtr

from blotter.engine._special import EXP_MAX, EXP_MIN, erfcx_series, fexp, ncdf, npdf


@njit(cache=False)
def _each(f: object, x: np.ndarray, out: np.ndarray) -> None:
    for i in range(x.size):
        out[i] = f(x[i])  # type: ignore[operator]


def _apply(f: object, x: np.ndarray) -> np.ndarray:
    """``f`` (a compiled scalar function) at every element of ``x``, in a compiled loop."""
    out = np.empty_like(x)
    _each(f, x, out)
    return out


def test_exp_within_one_ulp_of_numpy() -> None:
    """Source: NumPy's exp. Over [EXP_MIN, EXP_MAX], at most one unit in the last place."""
    x = np.linspace(EXP_MIN, EXP_MAX, 1_000_001)
    got = _apply(fexp, x)
    ref = np.exp(x)
    assert np.max(np.abs(got - ref) / np.spacing(ref)) <= 1.0


def test_exp_limits() -> None:
    """Below EXP_MIN the result is 0, above EXP_MAX +inf, and NaN stays NaN."""
    got = _apply(fexp, np.array([-1e9, EXP_MIN - 1.0, EXP_MAX + 1.0, 1e9, np.nan, 0.0]))
    assert np.array_equal(got[:4], [0.0, 0.0, np.inf, np.inf])
    assert np.isnan(got[4]) and got[5] == 1.0


def test_erfcx_series_matches_scipy() -> None:
    """Source: SciPy's erfcx. Relative error at most 2e-15 for z in [0, 1e8]."""
    z = np.concatenate([np.linspace(0.0, 30.0, 600_001), np.geomspace(30.0, 1e8, 10_000)])
    got = _apply(erfcx_series, z)
    ref = erfcx(z)
    assert np.max(np.abs(got - ref) / ref) <= 2e-15


def test_ncdf_matches_scipy() -> None:
    """Source: SciPy's ndtr. Absolute error at most 5e-16 everywhere; relative error at most
    2e-14 on [−8.5, 9] (where the kernels use it) and 3e-13 down to Φ = 1e-300 (where SciPy's
    own relative error is of the same order)."""
    x = np.linspace(-38.5, 9.0, 1_500_001)
    got = _apply(ncdf, x)
    ref = ndtr(x)
    assert np.max(np.abs(got - ref)) <= 5e-16
    live = ref > 1e-300
    rel = np.abs(got[live] - ref[live]) / ref[live]
    assert np.max(rel) <= 3e-13
    core = (x[live] >= -8.5)
    assert np.max(rel[core]) <= 2e-14
    ends = _apply(ncdf, np.array([-1e6, 1e6, np.nan]))
    assert ends[0] == 0.0 and ends[1] == 1.0 and np.isnan(ends[2])


def test_npdf_matches_numpy_formula() -> None:
    """Source: NumPy's exp in φ(x) = e^{−x²/2}/√(2π); relative error at most 5e-16 where
    φ > 1e-300."""
    x = np.linspace(-37.0, 37.0, 740_001)
    got = _apply(npdf, x)
    ref = np.exp(-0.5 * x * x) / np.sqrt(2.0 * np.pi)
    assert np.max(np.abs(got - ref) / ref) <= 5e-16
