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

import functools

import numpy as np
from scipy.special import ndtr

from blotter.engine.bivariate import GOLDEN, TERM_FLOOR, bvn_signed_sum, small_matmul

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
    """Standard normal density, with the exponent floored at ``TERM_FLOOR``."""
    y: np.ndarray = np.square(x)
    y *= -0.5
    np.maximum(y, TERM_FLOOR, out=y)
    np.exp(y, out=y)
    y *= _INV_SQRT_2PI
    return y


def bs2002_call_grad(s: np.ndarray, k: np.ndarray, t: np.ndarray, r: np.ndarray,
                     b: np.ndarray, v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Value (n·m,) and gradient (5, n·m) in (S, σ, T, r, b) of the 2002 call, domain as
    ``american.bs2002_call`` (b < r, β real), for n spots per row: ``s`` has shape (n·m,)
    (n copies of the m rows, one after another) and ``k, t, r, b, v`` shape (m,).

    Spot enters only through ln S, so the boundaries I1, I2, β and the other per-row terms
    (with their derivatives) are computed once per row and shared by the n spots. Values equal
    ``american.bs2002_call`` on the tiled inputs to the bit. Rows with S >= I2 (immediate
    exercise) have value S − K and gradient (1, 0, 0, 0, 0).
    """
    from blotter.engine.american import _M  # the shared matrices (american imports this module)
    a1_ext_t, a2_t, a3_t, rho_sign = _transposes()

    m = t.shape[0]
    n = s.shape[0] // m
    # Forward pass of the per-row quantities with their derivatives (same operations as
    # american.bs2002_call for the values).
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
    l1, l2 = _log(i1), _log(i2)
    lk = _const(np.log(k), m)
    half_v2 = v2 * 0.5
    mu = [B + (beta - 0.5) * v2, B + half_v2, B - half_v2]
    lam = [-R + beta * B + half_v2 * beta * (beta - 1.0), B - R, -R]

    def log_pos(x: _Fwd) -> _Fwd:
        ok = x.val > 1e-300
        safe = np.where(ok, x.val, 1.0)
        return _Fwd(np.log(np.maximum(x.val, 1e-300)), np.where(ok, x.grad / safe, 0.0))

    # Spot-free per-row quantities (values (Q, m), derivatives (Q, 4, m) in σ, T, r, b),
    # shared by the n spots; ``q`` names their rows.
    row = {"l1": l1, "l2": l2, "lk": lk, "mu0t1": mu[0] * t1, "mu1t1": mu[1] * t1,
           "mu2t1": mu[2] * t1, "mu0T": mu[0] * T, "mu1T": mu[1] * T, "mu2T": mu[2] * T,
           "bl1": beta * l1, "bl2": beta * l2, "vl1": bv * l1, "vl2": bv * l2,
           "lam0t1": lam[0] * t1, "lam1t1": lam[1] * t1, "lam2t1": lam[2] * t1,
           "lam0T": lam[0] * T, "lam1T": lam[1] * T, "lam2T": lam[2] * T,
           "lp2": log_pos(i2 - k), "lp1": log_pos(i1 - k), "beta": beta, "bv": bv,
           "vs1": vs1, "vst": vst, "i2": i2}
    q = {name: j for j, name in enumerate(row)}
    rv = np.array([x.val for x in row.values()])
    rg = np.array([x.grad[1:] for x in row.values()])
    rvn = np.concatenate((rv,) * n, axis=1) if n > 1 else rv
    mm = n * m
    x = s
    ls = np.log(x)
    beta_n, bv_n = rvn[q["beta"]], rvn[q["bv"]]
    vs1_n, vst_n = rvn[q["vs1"]], rvn[q["vst"]]
    sel1 = [q[c] for c in ("l1", "l2", "mu0t1", "mu1t1", "mu2t1")]
    sel2 = [q[c] for c in ("l1", "l2", "lk", "mu0T", "mu1T", "mu2T")]
    sel3a = [q[c] for c in ("l1", "l2", "lk")]
    sel3b = [q[c] for c in ("bl1", "bl2")]
    sel3c = [q[c] for c in ("vl1", "vl2", "lam0t1", "lam1t1", "lam2t1", "lam0T", "lam1T",
                            "lam2T", "lp2", "lp1")]
    b1 = np.empty((6, mm))
    b1[0] = ls
    b1[1:] = rvn[sel1]
    b2 = np.empty((7, mm))
    b2[0] = ls
    b2[1:] = rvn[sel2]
    b3 = np.empty((18, mm))
    b3[0] = ls
    b3[1:4] = rvn[sel3a]
    np.multiply(beta_n, ls, out=b3[4])
    b3[5:7] = rvn[sel3b]
    np.multiply(bv_n, ls, out=b3[7])
    b3[8:] = rvn[sel3c]
    # Values: as american.bs2002_call.
    args1 = small_matmul(_M["a1"], b1)
    args1 /= vs1_n
    args2 = small_matmul(_M["a2"], b2)
    args2 /= vst_n
    expo = small_matmul(_M["a3"], b3)
    n1 = ndtr(args1)
    n2 = ndtr(args2)
    h_rows = _M["h_rows"]
    g = np.empty((33, mm))
    g[:12] = n1[:12]
    g[12] = 1.0
    nh = n1[h_rows]
    np.multiply(nh, n2, out=g[13:])
    weights = np.clip(expo, TERM_FLOOR, 600.0)
    np.exp(weights, out=weights)                    # e^{L_j}
    signs = _M["signs"]
    sw = weights * signs[:, None]                   # ±e^{L_j}
    lbar = sw * g                                   # adjoint of L_j from the CDF parts
    value = np.einsum("j,jm->m", signs, weights * g, optimize=False)
    h = args1[h_rows]
    hk = h * args2
    hs = np.square(h)
    hs += np.square(args2)
    total, acc, dh, dk = bvn_signed_sum(hk, hs, expo[13:], signs[13:], rho_sign, h, args2)
    assert dh is not None and dk is not None
    value += total
    lbar[13:] += acc
    # Adjoints of the arguments: n(u) for the φ rows; n(h) N(k) and N(h) n(k) for the
    # bivariate rows (plus the quadrature's derivatives).
    p1 = _npdf(args1)
    p2 = _npdf(args2)
    sw_b = sw[13:]
    u1 = np.empty((38, mm))
    np.multiply(sw[:12], p1[:12], out=u1[:12])
    u1[12:18] = 0.0
    np.multiply(sw_b, p1[h_rows], out=u1[18:])
    u1[18:] *= n2
    u1[18:] += dh
    u2 = sw_b * nh
    u2 *= p2
    u2 += dk
    bar1 = small_matmul(a1_ext_t, u1)
    bar1 /= vs1_n
    bar_vs1 = np.einsum("jm,jm->m", u1[:18], args1, optimize=False)
    bar_vs1 += np.einsum("jm,jm->m", u1[18:], h, optimize=False)
    bar_vs1 /= -vs1_n
    bar2 = small_matmul(a2_t, u2)
    bar2 /= vst_n
    bar_vst = np.einsum("jm,jm->m", u2, args2, optimize=False)
    bar_vst /= -vst_n
    bar3 = small_matmul(a3_t, lbar)
    # Adjoints of the per-row quantities; ln S enters bases 0 of each map and β ln S, (b/σ²) ln S.
    barq = np.zeros((len(row), mm))
    barq[sel1] += bar1[1:]
    barq[sel2] += bar2[1:]
    barq[sel3a] += bar3[1:4]
    barq[sel3b] += bar3[5:7]
    barq[sel3c] += bar3[8:]
    barq[q["beta"]] += bar3[4] * ls
    barq[q["bv"]] += bar3[7] * ls
    barq[q["vs1"]] += bar_vs1
    barq[q["vst"]] += bar_vst
    grad = np.empty((5, mm))
    d_ls = bar1[0] + bar2[0]
    d_ls += bar3[0]
    d_ls += beta_n * bar3[4]
    d_ls += bv_n * bar3[7]
    np.divide(d_ls, x, out=grad[0])
    grad[1:] = np.einsum("qnm,qdm->dnm", barq.reshape(len(row), n, m), rg,
                         optimize=False).reshape(4, mm)
    i2_val = rvn[q["i2"]]
    k = np.concatenate((k,) * n) if n > 1 else k
    ex = s >= i2_val
    value = np.where(ex, s - k, value)
    if ex.any():
        grad[:, ex] = 0.0
        grad[0, ex] = 1.0
    return value, grad


@functools.cache
def _transposes() -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Transposed maps of ``american._matrices`` for the adjoints (built once), and the
    correlation sign of each bivariate row. The first maps the argument adjoints of the 18 t1
    arguments and of the 20 h arguments of the bivariate rows back to the 6 t1 bases."""
    from blotter.engine.american import _M, RHO_SIGN
    a1 = _M["a1"]
    return (np.ascontiguousarray(np.concatenate([a1, a1[_M["h_rows"]]]).T),
            np.ascontiguousarray(_M["a2"].T), np.ascontiguousarray(_M["a3"].T), RHO_SIGN)
