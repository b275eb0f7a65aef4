"""Generalized Black–Scholes–Merton with cost of carry b: closed-form value and analytic greeks.

One formula covers stocks with a dividend yield q (b = r − q), futures (b = 0, Black-76) and FX
(b = r − r_foreign). With ω = +1 for a call and −1 for a put:

    d1 = (ln(S/K) + (b + σ²/2) T) / (σ√T),  d2 = d1 − σ√T
    V  = ω [S e^{(b−r)T} N(ω d1) − K e^{−rT} N(ω d2)]

Kernels work on one chunk of flat arrays (see ``_chunks``). Below ``YEARS_FLOOR`` years and below
``VOL_SQRT_T_FLOOR`` of σ√T the formulas are evaluated at the floor, which keeps d1, d2 and every
greek finite (the floors move a price by less than 1e-9 of spot). Rows with years <= 0 are
expired: intrinsic value, delta 0 or ±1 (±1 only strictly in the money), other greeks 0.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from scipy.special import ndtr

from blotter.engine._validate import omega

YEARS_FLOOR = 1e-20
"""Years to expiry below which a live option is evaluated at this time (about 3e-13 s)."""
VOL_SQRT_T_FLOOR = 1e-30
"""Smallest σ√T used in d1 and d2, so zero vol gives the limit values without dividing by 0."""
EXP_FLOOR = -700.0
"""Floor on exponents of e^{−d1²/2}: e^-700 is negligible next to any greek it scales."""
_INV_SQRT_2PI = 0.3989422804014327


def expired_fill(w: np.ndarray, s: np.ndarray, k: np.ndarray, t: np.ndarray,
                 outs: Sequence[np.ndarray]) -> None:
    """Overwrite rows with t <= 0 by intrinsic value, delta 0 or ±1 and zero other greeks.

    ``outs`` is (price,) or the ten greek buffers; inputs are chunk arrays or 0-d scalars.
    """
    dead = np.asarray(t <= 0.0)
    if not dead.any():
        return
    shape = outs[0].shape
    dead = np.broadcast_to(dead, shape)
    payoff = np.broadcast_to(w * (s - k), shape)
    np.copyto(outs[0], np.maximum(payoff, 0.0), where=dead)
    if len(outs) > 1:
        itm = np.broadcast_to(np.where(payoff > 0.0, w, 0.0), shape)
        np.copyto(outs[1], itm, where=dead)
        for o in outs[2:]:
            np.copyto(o, 0.0, where=dead)


def _d1_d2(s: np.ndarray, k: np.ndarray, te: np.ndarray, b: np.ndarray,
           vs: np.ndarray, m: int) -> tuple[np.ndarray, np.ndarray]:
    """d1 and d2 of length m, given the floored σ√T ``vs``."""
    d1 = np.divide(s, k, out=np.empty(m))
    np.log(d1, out=d1)
    d1 += np.multiply(b, te, out=np.empty(m))
    d1 /= vs
    half = np.multiply(vs, 0.5, out=np.empty(m))
    d1 += half
    d2 = np.subtract(d1, vs, out=half)
    return d1, d2


def greeks_kernel(ins: Sequence[np.ndarray], outs: Sequence[np.ndarray]) -> None:
    """Fill price and nine greeks (``results.GREEK_NAMES`` order) for one chunk.

    ``ins`` = (is_call or ω, S, K, T, r, b, σ), each length m or 0-d; ``outs`` = ten length-m
    buffers.
    """
    w, s, k, t, r, b, vol = ins
    w = omega(w)
    price, delta, gamma, vega, theta, rho, crho, vanna, volga, charm = outs
    m = price.shape[0]
    te = np.maximum(t, YEARS_FLOOR, out=np.empty(m))
    neg_te = np.negative(te, out=np.empty(m))
    sqrt_t = np.sqrt(te)
    vs = np.multiply(vol, sqrt_t, out=np.empty(m))
    np.maximum(vs, VOL_SQRT_T_FLOOR, out=vs)
    rb = np.subtract(r, b)
    cf = np.multiply(rb, neg_te, out=np.empty(m))
    np.exp(cf, out=cf)                                           # e^{(b−r)T}
    kd = np.multiply(r, neg_te, out=np.empty(m))
    np.exp(kd, out=kd)
    kd *= k                                                      # K e^{−rT}
    d1, d2 = _d1_d2(s, k, te, b, vs, m)
    a = np.multiply(w, d1, out=np.empty(m))
    ndtr(a, out=a)
    a *= cf
    a *= w                                                       # ω e^{(b−r)T} N(ω d1) = delta
    np.copyto(delta, a)
    a *= s                                                       # ω S e^{(b−r)T} N(ω d1)
    bb = np.multiply(w, d2, out=np.empty(m))
    ndtr(bb, out=bb)
    bb *= kd
    bb *= w                                                      # ω K e^{−rT} N(ω d2)
    np.subtract(a, bb, out=price)
    np.maximum(price, 0.0, out=price)                            # rounding can leave −1e-17
    cpdf = np.square(d1, out=np.empty(m))
    cpdf *= -0.5
    np.maximum(cpdf, EXP_FLOOR, out=cpdf)       # NumPy's exp is slow where results underflow
    np.exp(cpdf, out=cpdf)
    cpdf *= _INV_SQRT_2PI
    cpdf *= cf                                                   # e^{(b−r)T} n(d1)
    np.divide(cpdf, vs, out=gamma)
    gamma /= s
    np.multiply(cpdf, s, out=vega)
    vega *= sqrt_t
    # theta = −vega σ / (2T) + (r−b) ω S e^{(b−r)T} N(ω d1) − r ω K e^{−rT} N(ω d2)
    neg_half_t = np.divide(0.5, neg_te, out=neg_te)              # −1 / (2T)
    np.multiply(vega, vol, out=theta)
    theta *= neg_half_t
    theta += np.multiply(rb, a, out=cf)
    theta -= np.multiply(r, bb, out=cf)
    np.multiply(price, te, out=rho)
    np.negative(rho, out=rho)
    np.multiply(a, te, out=crho)
    # charm = (r−b) delta − e^{(b−r)T} n(d1) (b/(σ√T) − d2/(2T))
    u = np.divide(b, vs, out=bb)
    u += np.multiply(d2, neg_half_t, out=kd)
    u *= cpdf
    np.multiply(rb, delta, out=charm)
    charm -= u
    # vanna = −e^{(b−r)T} n(d1) d2 / σ,  volga = vega d1 d2 / σ, with 1/σ = √T / (σ√T)
    d2_vol = np.divide(sqrt_t, vs, out=vs)
    d2_vol *= d2
    np.multiply(cpdf, d2_vol, out=vanna)
    np.negative(vanna, out=vanna)
    np.multiply(vega, d2_vol, out=volga)
    volga *= d1
    expired_fill(w, s, k, t, outs)


def price_kernel(ins: Sequence[np.ndarray], outs: Sequence[np.ndarray]) -> None:
    """Fill the price only for one chunk; ``ins`` as in ``greeks_kernel``, ``outs`` = (price,)."""
    w, s, k, t, r, b, vol = ins
    w = omega(w)
    (price,) = outs
    m = price.shape[0]
    te = np.maximum(t, YEARS_FLOOR, out=np.empty(m))
    vs = np.sqrt(te)
    vs *= vol
    np.maximum(vs, VOL_SQRT_T_FLOOR, out=vs)
    d1, d2 = _d1_d2(s, k, te, b, vs, m)
    d1 *= w
    ndtr(d1, out=d1)
    d2 *= w
    ndtr(d2, out=d2)
    # ω e^{−rT} [S e^{bT} N(ω d1) − K N(ω d2)]
    e = np.multiply(b, te, out=vs)
    np.exp(e, out=e)
    e *= s
    d1 *= e
    d2 *= k
    np.subtract(d1, d2, out=price)
    e = np.multiply(r, te, out=vs)
    np.negative(e, out=e)
    np.exp(e, out=e)
    price *= e
    price *= w
    np.maximum(price, 0.0, out=price)
    expired_fill(w, s, k, t, outs)
