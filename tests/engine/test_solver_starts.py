"""Starts of the boundary solver's Newton iteration at a group's outer vol nodes
(``_alo.side_start`` and its NumPy mirror).

A start changes how many Newton steps a node takes, never the boundary it converges to (the
engine's prices are held to QuantLib's converged engine in ``test_american.py``). References:
two-point cubic Hermite interpolation reproduces every cubic exactly, its error carrying the
fourth derivative (from memory: Burden & Faires, Numerical Analysis, section 3.4, Hermite
interpolation); and a boundary solved by the engine itself, where the cubic start must sit
closer to the converged node than the linear one (error O(h⁴) against O(h²)).
"""

from __future__ import annotations

import numpy as np
import pytest

from blotter.engine import _alo, _alo_np
from blotter.engine import american as am


def _cubic_group() -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Vol nodes and node values L(x) = a + b x + c x² + d x³ in x = ln σ (each of 4 boundary
    nodes its own coefficients), with ∂L/∂σ = L'(x) / σ as the solver stores it."""
    rng = np.random.default_rng(8)
    lnsig = np.log(np.array([0.12, 0.17, 0.23, 0.31, 0.4]))
    coef = rng.normal(0.0, 0.3, (4, 4))
    x = lnsig[:, None]
    lnb = -1.0 + coef[0] + coef[1] * x + coef[2] * x**2 + coef[3] * x**3
    slope = coef[1] + 2.0 * coef[2] * x + 3.0 * coef[3] * x**2
    tan = np.zeros((lnsig.size, 4, 4))
    tan[:, 0] = slope / np.exp(lnsig)[:, None]
    return lnsig, lnb, tan


@pytest.mark.parametrize(("k", "src", "far"), [(0, 1, 2), (4, 3, 2), (3, 2, 0)])
def test_cubic_start_reproduces_a_cubic_in_ln_vol(k: int, src: int, far: int) -> None:
    """Extrapolated from two nodes' values and σ-derivatives, a cubic in ln σ is exact (to
    rounding) in the compiled kernel and in its mirror."""
    lnsig, lnb, tan = _cubic_group()
    out = np.empty(lnb.shape[1])
    _alo.side_start(lnsig, lnb, tan, k, src, far, 10.0, out)
    np.testing.assert_allclose(out, lnb[k], rtol=0, atol=1e-12)
    mirror = _alo_np.side_start(lnsig, lnb, tan, k, src, far, 10.0)
    np.testing.assert_allclose(mirror, out, rtol=0, atol=1e-14)


def test_linear_start_is_the_neighbour_moved_along_its_tangent() -> None:
    """Without a second node the start is L(src) + Δσ ∂L/∂σ(src), capped at ln X."""
    lnsig, lnb, tan = _cubic_group()
    out = np.empty(lnb.shape[1])
    _alo.side_start(lnsig, lnb, tan, 1, 2, -1, 10.0, out)
    want = lnb[2] + (lnsig[1] - lnsig[2]) * np.exp(lnsig[2]) * tan[2, 0]
    np.testing.assert_allclose(out, want, rtol=0, atol=1e-14)
    capped = np.empty(lnb.shape[1])
    _alo.side_start(lnsig, lnb, tan, 1, 2, -1, -2.0, capped)
    assert np.all(capped <= -2.0)
    np.testing.assert_allclose(capped, np.minimum(want, -2.0), rtol=0, atol=1e-14)


def test_cubic_start_is_nearer_the_solved_boundary_than_the_linear_one() -> None:
    """On a put boundary solved at 7 vol nodes (r 5%, q 2%, 1 year, σ 15%–45%), every outer
    node's cubic start from its two inner neighbours is closer to that node's converged ln B
    than its inner neighbour moved along its tangent."""
    lnv = np.log(np.array([0.15, 0.45]))
    one = np.ones(2)
    grp = am._boundaries(np.arange(2), np.array([0, 2]), one, 0.05 * one, 0.02 * one, lnv,
                         True, None, _alo)
    ns = int(grp.ns[0])
    assert ns >= 5 and grp.steps[0] > 0
    lnsig, lnb, tan = grp.lnsig[0, :ns], grp.lnb[0, :ns], grp.tan[0, :ns]
    lnx = _alo.exercise_level(0.05, 0.02)
    linear = np.empty(lnb.shape[1])
    cubic = np.empty(lnb.shape[1])
    for k, src, far in [(0, 1, 2), (1, 2, 3), (ns - 1, ns - 2, ns - 3), (ns - 2, ns - 3, ns - 4)]:
        _alo.side_start(lnsig, lnb, tan, k, src, -1, lnx, linear)
        _alo.side_start(lnsig, lnb, tan, k, src, far, lnx, cubic)
        e_lin = np.max(np.abs(linear - lnb[k]))
        e_cub = np.max(np.abs(cubic - lnb[k]))
        assert e_cub < 0.1 * e_lin, (k, e_cub, e_lin)
