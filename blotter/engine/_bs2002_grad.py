"""Bjerksund–Stensland (2002) call value with its exact first derivatives, vectorized.

The value is computed by the same operations as ``american.bs2002_call`` (bit-identical), and
the gradient in (S, σ, T, r, b) by reverse accumulation through the formula's three linear
maps (``american._matrices``): every argument and exponent is a fixed combination of per-row
bases, so the adjoints of the ~70 terms fold into adjoints of 31 bases, whose derivatives are
carried forward (``_Fwd``). The bivariate terms are differentiated as evaluated: the
derivative of N(h) N(k) + Q(h, k) with Q the Gauss–Legendre sum, which needs only two more
node sums and no further normal CDFs.
"""

from __future__ import annotations

import numpy as np
from scipy.special import ndtr

from blotter.engine.bivariate import GOLDEN, bvn_weighted_sum_grad

N_DIR = 5
"""Directions of the gradient, in order: S, σ, T, r, b (call form)."""
_INV_SQRT_2PI = 0.3989422804014327


class _Fwd:
    """A per-row value (m,) with its derivatives (N_DIR, m) in the directions ``N_DIR``."""

    __slots__ = ("val", "grad")

    def __init__(self, val: np.ndarray, grad: np.ndarray) -> None:
        self.val = val
        self.grad = grad

    def __add__(self, o: _Fwd | float | np.ndarray) -> _Fwd:
        if isinstance(o, _Fwd):
            return _Fwd(self.val + o.val, self.grad + o.grad)
        return _Fwd(self.val + o, self.grad)

    __radd__ = __add__

    def __sub__(self, o: _Fwd | float | np.ndarray) -> _Fwd:
        if isinstance(o, _Fwd):
            return _Fwd(self.val - o.val, self.grad - o.grad)
        return _Fwd(self.val - o, self.grad)

    def __rsub__(self, o: float | np.ndarray) -> _Fwd:
        return _Fwd(o - self.val, -self.grad)

    def __neg__(self) -> _Fwd:
        return _Fwd(-self.val, -self.grad)

    def __mul__(self, o: _Fwd | float | np.ndarray) -> _Fwd:
        if isinstance(o, _Fwd):
            return _Fwd(self.val * o.val, self.grad * o.val + o.grad * self.val)
        return _Fwd(self.val * o, self.grad * o)

    __rmul__ = __mul__

    def __truediv__(self, o: _Fwd | float | np.ndarray) -> _Fwd:
        if isinstance(o, _Fwd):
            q = self.val / o.val
            return _Fwd(q, (self.grad - o.grad * q) / o.val)
        return _Fwd(self.val / o, self.grad / o)


def _where(cond: np.ndarray, a: _Fwd, b: _Fwd) -> _Fwd:
    return _Fwd(np.where(cond, a.val, b.val), np.where(cond, a.grad, b.grad))


def _log(x: _Fwd) -> _Fwd:
    return _Fwd(np.log(x.val), x.grad / x.val)


def _sqrt(x: _Fwd) -> _Fwd:
    r = np.sqrt(x.val)
    return _Fwd(r, x.grad * (0.5 / r))


def _unit(val: np.ndarray, d: int, m: int) -> _Fwd:
    g = np.zeros((N_DIR, m))
    g[d] = 1.0
    return _Fwd(val, g)


def _const(val: np.ndarray, m: int) -> _Fwd:
    return _Fwd(val, np.zeros((N_DIR, m)))


def _npdf(x: np.ndarray) -> np.ndarray:
    y = np.square(x)
    y *= -0.5
    np.maximum(y, -700.0, out=y)
    np.exp(y, out=y)
    y *= _INV_SQRT_2PI
    return y


def bs2002_call_grad(s: np.ndarray, k: np.ndarray, t: np.ndarray, r: np.ndarray,
                     b: np.ndarray, v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Value (m,) and gradient (5, m) in (S, σ, T, r, b) of the 2002 call, domain as
    ``american.bs2002_call`` (arrays of one shape (m,), b < r, β real).

    Rows with S >= I2 (immediate exercise) have value S − K and gradient (1, 0, 0, 0, 0).
    """
    from blotter.engine.american import _M  # the shared matrices (american imports this module)

    m = s.shape[0]
    # Forward pass of the per-row quantities with their derivatives (same operations as
    # american.bs2002_call for the values).
    S = _unit(s, 0, m)
    V = _unit(v, 1, m)
    T = _unit(t, 2, m)
    R = _unit(r, 3, m)
    B = _unit(b, 4, m)
    v2 = V * V
    t1 = T * GOLDEN
    vs1 = V * _sqrt(t1)
    vst = V * _sqrt(T)
    bv = B / v2
    disc = (bv - 0.5) * (bv - 0.5) + R * 2.0 / v2
    beta = (0.5 - bv) + _sqrt(disc)
    b_inf = beta / (beta - 1.0) * k
    ratio = R / (R - B) * k
    kk = _const(k, m)
    b_0 = _where(k >= ratio.val, kk, ratio)
    gap_raw = b_inf - b_0
    floor = 1e-12 * k
    gap = _where(gap_raw.val >= floor, gap_raw, _const(floor, m))
    scale = kk * k / (gap * b_0)

    def boundary(tt: _Fwd, vs: _Fwd) -> _Fwd:
        x = -(B * tt + vs * 2.0) * scale
        x = _where(x.val < 0.0, x, _const(np.zeros(m), m))
        e = np.expm1(x.val)
        return b_0 - _Fwd(gap.val * e, gap.grad * e + x.grad * (gap.val * (e + 1.0)))

    i1 = boundary(t1, vs1)
    i2 = boundary(T, vst)
    ls, l1, l2 = _log(S), _log(i1), _log(i2)
    lk = _const(np.log(k), m)
    half_v2 = v2 * 0.5
    mu = [B + (beta - 0.5) * v2, B + half_v2, B - half_v2]
    lam = [-R + beta * B + half_v2 * beta * (beta - 1.0), B - R, -R]
    logs3 = [ls, l1, l2]

    def log_pos(x: _Fwd) -> _Fwd:
        ok = x.val > 1e-300
        safe = np.where(ok, x.val, 1.0)
        return _Fwd(np.log(np.maximum(x.val, 1e-300)), np.where(ok, x.grad / safe, 0.0))

    basis1 = [ls, l1, l2] + [u * t1 for u in mu]
    basis2 = [ls, l1, l2, lk] + [u * T for u in mu]
    basis3 = (logs3 + [lk] + [beta * x for x in logs3] + [bv * x for x in logs3]
              + [u * t1 for u in lam] + [u * T for u in lam]
              + [log_pos(i2 - k), log_pos(i1 - k)])
    b1 = np.array([x.val for x in basis1])
    b2 = np.array([x.val for x in basis2])
    b3 = np.array([x.val for x in basis3])
    # Values: as american.bs2002_call.
    args1 = np.einsum("ij,jm->im", _M["a1"], b1, optimize=False)
    args1 /= vs1.val
    args2 = np.einsum("ij,jm->im", _M["a2"], b2, optimize=False)
    args2 /= vst.val
    expo = np.einsum("ij,jm->im", _M["a3"], b3, optimize=False)
    n1 = ndtr(args1)
    n2 = ndtr(args2)
    h_rows = _M["h_rows"]
    g = np.empty((33, m))
    g[:12] = n1[:12]
    g[12] = 1.0
    nh = n1[h_rows]
    np.multiply(nh, n2, out=g[13:])
    weights = np.clip(expo, -700.0, 600.0)
    np.exp(weights, out=weights)                    # e^{L_j}
    signs = _M["signs"]
    sw = weights * signs[:, None]                   # ±e^{L_j}
    terms = sw * g                                  # adjoint of L_j from the CDF parts
    value = np.einsum("j,jm->m", signs, weights * g, optimize=False)
    h = args1[h_rows]
    kq = args2
    hk = h * kq
    hs = np.square(h)
    hs += np.square(kq)
    pos, neg = _POS, _NEG
    lbar = terms
    dh = np.empty((20, m))
    dk = np.empty((20, m))
    for rows, sign in ((pos, +1), (neg, -1)):
        total, acc, qh, qk = bvn_weighted_sum_grad(hk[rows], hs[rows], h[rows], kq[rows],
                                                   expo[13:][rows], signs[13:][rows], sign)
        value += total
        lbar[13 + rows] += acc
        dh[rows] = qh
        dk[rows] = qk
    # Adjoints of the arguments: n(u) for the φ rows; n(h) N(k) and N(h) n(k) for the
    # bivariate rows (plus the quadrature's derivatives).
    p1 = _npdf(args1)
    p2 = _npdf(args2)
    sw_b = sw[13:]
    u1 = np.empty((38, m))
    u1[:12] = sw[:12] * p1[:12]
    u1[12:18] = 0.0
    u1[18:] = sw_b * p1[h_rows] * n2 + dh
    u2 = sw_b * nh * p2 + dk
    x1 = np.concatenate([args1, h])
    a1_ext_t = np.concatenate([_M["a1"], _M["a1"][h_rows]]).T
    bar1 = np.einsum("ij,jm->im", a1_ext_t, u1, optimize=False) / vs1.val
    bar_vs1 = -np.einsum("jm,jm->m", u1, x1, optimize=False) / vs1.val
    bar2 = np.einsum("ij,jm->im", _M["a2"].T, u2, optimize=False) / vst.val
    bar_vst = -np.einsum("jm,jm->m", u2, args2, optimize=False) / vst.val
    bar3 = np.einsum("ij,jm->im", _M["a3"].T, lbar, optimize=False)
    grad = np.einsum("cm,cdm->dm", bar1, np.array([x.grad for x in basis1]), optimize=False)
    grad += np.einsum("cm,cdm->dm", bar2, np.array([x.grad for x in basis2]), optimize=False)
    grad += np.einsum("cm,cdm->dm", bar3, np.array([x.grad for x in basis3]), optimize=False)
    grad += bar_vs1 * vs1.grad
    grad += bar_vst * vst.grad
    ex = s >= i2.val
    value = np.where(ex, s - k, value)
    if ex.any():
        grad[:, ex] = 0.0
        grad[0, ex] = 1.0
    return value, grad


_POS = np.arange(20)[np.arange(20) % 4 < 2]
_NEG = np.arange(20)[np.arange(20) % 4 >= 2]
