"""Vectorized bivariate normal CDF at the one correlation Bjerksund–Stensland (2002) needs.

M(h, k; ρ) = P(X < h, Y < k) for standard normals with correlation ρ, by the Drezner–Wesolowsky
(1990) form as arranged by Genz (2004, Statistics and Computing 14, 251–260):

    M(h, k; ρ) = N(h) N(k) + (1/2π) ∫_0^{asin ρ} exp(−(h² − 2 h k sin θ + k²) / (2 cos² θ)) dθ

evaluated by Gauss–Legendre quadrature in θ. The 2002 approximation only uses ρ = ±√(t1/T) with
t1/T = (√5 − 1)/2, so the nodes, sin θ and 1/cos² θ are constants computed once here. With
``NODES`` = 6 the absolute error is below 7e-9 over h, k in [−8, 8] (tests check it against
SciPy's multivariate normal); in a BS2002 price that is below 4e-9 of the strike, far under the
approximation's own error (about 1e-3 of the strike, see ACCURACY.md).
"""

from __future__ import annotations

import math

import numpy as np
from scipy.special import ndtr

GOLDEN = (math.sqrt(5.0) - 1.0) / 2.0
"""t1 / T of the 2002 two-step boundary: t1 = ½(√5 − 1) T."""
RHO = math.sqrt(GOLDEN)
"""The correlation √(t1/T) ≈ 0.786 of the bivariate normals in the 2002 formula."""
EXP_FLOOR = -700.0
"""Exponents are raised to this before ``np.exp``: e^-700 is already negligible, and NumPy's exp
is about 20 times slower on arguments whose results underflow."""
TERM_FLOOR = -300.0
"""Floor on the exponents of the weighted sums of the 2002 formula (each term then is at least
e^-300 ≈ 5e-131 in units of the strike, so the error it adds is nil). Higher than
``EXP_FLOOR`` so that products of such terms in the derivatives stay normal floats: subnormal
results cost about a hundred times a normal multiply."""
NODES = 6
"""Gauss–Legendre nodes in θ: 6 give an absolute error below 7e-9 at |ρ| = RHO (8: 4e-11,
10: 3e-13); the quadrature is about a third of a BS2002 evaluation's time."""


def _rule(rho: float) -> tuple[np.ndarray, np.ndarray, np.ndarray, float]:
    x, w = np.polynomial.legendre.leggauss(NODES)
    asr = math.asin(rho)
    sn = np.sin(asr * (x + 1.0) / 2.0)
    inv_cos2 = 1.0 / (1.0 - sn * sn)
    return sn * inv_cos2, 0.5 * inv_cos2, np.log(w), asr / (4.0 * math.pi)


_RULES = {+1: _rule(RHO), -1: _rule(-RHO)}


def bvn_quadrature(h: np.ndarray, k: np.ndarray, sign: int) -> np.ndarray:
    """M(h, k; sign·RHO) − N(h) N(k), elementwise for arrays of one shape (any shape)."""
    a_coef, b_coef, log_w, scale = _RULES[sign]
    hk = h * k
    hs = np.square(h)
    hs += np.square(k)
    acc = np.zeros_like(hk)
    tmp = np.empty_like(hk)
    tmp2 = np.empty_like(hk)
    for i in range(NODES):
        # exp(sinθ hk / cos²θ − (h² + k²) / (2 cos²θ) + ln w_i)
        np.multiply(hk, a_coef[i], out=tmp)
        np.multiply(hs, b_coef[i], out=tmp2)
        tmp -= tmp2
        tmp += log_w[i]
        np.maximum(tmp, EXP_FLOOR, out=tmp)
        np.exp(tmp, out=tmp)
        acc += tmp
    acc *= scale
    out: np.ndarray = acc
    return out


def bvn_cdf(h: np.ndarray, k: np.ndarray, sign: int) -> np.ndarray:
    """M(h, k; sign·RHO) = P(X < h, Y < k), correlation ±RHO, for arrays of one shape."""
    out: np.ndarray = bvn_quadrature(h, k, sign) + ndtr(h) * ndtr(k)
    return out


def bvn_signed_sum(hk: np.ndarray, hs: np.ndarray, log_coef: np.ndarray, signs: np.ndarray,
                   rho_sign: np.ndarray, h: np.ndarray | None = None,
                   k: np.ndarray | None = None
                   ) -> tuple[np.ndarray, np.ndarray, np.ndarray | None, np.ndarray | None]:
    """Σ_j signs_j e^{log_coef_j} (M(h_j, k_j; ρ_j) − N(h_j) N(k_j)), ρ_j = rho_sign_j · RHO.

    ``hk`` = h·k and ``hs`` = h² + k², shape (J, m); ``log_coef`` (J, m); ``signs`` and
    ``rho_sign`` (±1) (J,). All rows go through one loop over the nodes (the two correlations
    share the nodes' 1/cos² θ and differ in the sign of sin θ). Returns (total (m,), terms
    (J, m), d/dh (J, m), d/dk (J, m)): ``terms`` are the signed rows of the sum (each also its
    own derivative in ``log_coef``); d/dh and d/dk, returned when ``h`` and ``k`` are given,
    are those rows' derivatives from the quadrature itself, d/dh e^{a hk − b hs} =
    (a k − 2 b h) e^{a hk − b hs}, so they need no further CDFs.
    """
    a_coef, b_coef, log_w, scale = _RULES[+1]
    col = rho_sign[:, None].astype(np.float64)
    hk_s = hk * col                                 # the sign of sin θ, exact
    shift = np.minimum(log_coef + math.log(abs(scale)), 600.0)
    acc = np.zeros(hk.shape)
    tmp = np.empty(hk.shape)
    tmp2 = np.empty(hk.shape)
    grad = h is not None and k is not None
    if grad:
        acc_a = np.zeros(hk.shape)
        acc_b = np.zeros(hk.shape)
    for i in range(NODES):
        np.multiply(hk_s, a_coef[i], out=tmp)
        np.multiply(hs, b_coef[i], out=tmp2)
        tmp -= tmp2
        tmp += shift
        np.maximum(tmp, TERM_FLOOR, out=tmp)
        np.exp(tmp, out=tmp)
        tmp *= math.exp(log_w[i])
        acc += tmp
        if grad:
            tmp *= a_coef[i]
            acc_a += tmp
            tmp *= b_coef[i] / a_coef[i]
            acc_b += tmp
    coef = rho_sign * signs                         # the sign of the θ range's end, asin ρ
    total: np.ndarray = np.einsum("j,jm->m", coef, acc, optimize=False)
    if not grad:
        return total, acc, None, None
    assert h is not None and k is not None
    c = coef[:, None]
    acc *= c
    acc_a *= c * col
    acc_b *= 2.0 * c
    # In place, into the loop's buffers: d/dh = k A − h B, d/dk = h A − k B.
    d_h = np.multiply(k, acc_a, out=tmp)
    d_h -= np.multiply(h, acc_b, out=tmp2)
    d_k = np.multiply(h, acc_a, out=acc_a)
    d_k -= np.multiply(k, acc_b, out=acc_b)
    return total, acc, d_h, d_k


_ONE_THREAD_MNK = 200_000
"""Largest m·n·k of one matrix product handed to BLAS: OpenBLAS runs products below 4 × 65,536
on the calling thread, and on this shared machine its own threads, started beside the engine's
workers, stall each other (measured much slower than one thread)."""


def small_matmul(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """a @ b for a small constant a (i, j) and b (j, m), in column blocks small enough that
    BLAS stays on the calling thread (``_ONE_THREAD_MNK``); about five times faster than the
    equivalent ``np.einsum`` loop."""
    rows, inner = a.shape
    m = b.shape[1]
    block = max(8, _ONE_THREAD_MNK // max(rows * inner, 1))
    if m <= block:
        out: np.ndarray = a @ b
        return out
    out = np.empty((rows, m))
    for j in range(0, m, block):
        np.matmul(a, b[:, j:j + block], out=out[:, j:j + block])
    return out
