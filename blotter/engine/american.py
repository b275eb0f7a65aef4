"""American options by Bjerksund–Stensland (2002), vectorized, with finite-difference greeks.

P. Bjerksund and G. Stensland, "Closed Form Valuation of American Options", discussion paper,
NHH 2002: the call is valued as the strategy "exercise when the spot reaches a flat boundary I1
before t1 = ½(√5 − 1) T, or I2 after it", which needs the bivariate normal at ρ = ±√(t1/T)
(``bivariate``). Puts use the put–call transformation P(S, K, T, r, b, σ) = C(K, S, T, r − b, −b, σ).

Rules applied on top of the formula, per row:

- where the call form has b >= r (calls with b >= r, puts with r <= 0) the value is the
  European one floored at intrinsic; that is exact (no early exercise) for calls when r >= 0
  and for puts when b <= r, and a lower bound otherwise;
- the value is floored at the European value and at intrinsic (the 2002 formula can dip below
  the European value when b is near 0 and r is small);
- rows where the 2002 exponent β is not real (possible only with a negative call-form rate:
  r for calls, r − b for puts) take max(European, intrinsic), a lower bound;
- vols below ``VOL_FLOOR`` are valued at ``VOL_FLOOR`` by the 2002 formula (the European floor
  still uses the true vol).

Greeks are central differences of this price with the steps in ``STEPS``; vanna and charm use
the seven-point mixed-difference formula, which reuses the one-dimensional bumps.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from scipy.special import ndtr

from blotter.engine import black
from blotter.engine.bivariate import EXP_FLOOR, GOLDEN, bvn_quadrature

VOL_FLOOR = 1e-3
"""Smallest vol (annualised decimal) fed to the 2002 formula; below it terms lose precision."""
_EXP_CAP = 600.0
"""Cap on exponents of products c·e^L·N(d): e^600 leaves room for coefficients up to 1e47;
where e^L is that large the N(d) it multiplies is 0 in float64."""

STEPS = {
    "spot_rel": 1e-4,
    "vol": 1e-4,
    "rate": 1e-5,
    "carry": 1e-5,
    "years_rel": 1e-4,
}
"""Central-difference steps: spot 1e-4 × S, vol 1e-4 (0.01 vol point), rate and carry 1e-5
(0.1 bp), years 1e-4 × T. Vol differences are centred at max(σ, 1e-4), so greeks of rows with
vols below 1e-4 are those at 1e-4 (their price uses the true vol)."""


def _cexp(x: np.ndarray) -> np.ndarray:
    """e^x in place, with x clipped to [EXP_FLOOR, _EXP_CAP] (no overflow, no slow underflow)."""
    return np.exp(np.clip(x, EXP_FLOOR, _EXP_CAP, out=x), out=x)


def bs2002_call(s: np.ndarray, k: np.ndarray, t: np.ndarray, r: np.ndarray, b: np.ndarray,
                v: np.ndarray) -> np.ndarray:
    """Bjerksund–Stensland (2002) American call, arrays of one shape (m,), where b < r and β is real.

    Values of rows outside that domain are finite but meaningless; callers select them away.
    Terms are evaluated in log space, e.g. α_j S^β = (I_j − K) e^{β ln(S/I_j)}, with exponents
    capped at ``_EXP_CAP``, so small vols (large β) neither overflow nor lose the product.
    """
    v2 = v * v
    t1 = GOLDEN * t
    vs1 = v * np.sqrt(t1)
    vst = v * np.sqrt(t)
    bv = b / v2
    beta = (0.5 - bv) + np.sqrt(np.square(bv - 0.5) + 2.0 * r / v2)
    b_inf = beta / (beta - 1.0) * k
    b_0 = np.maximum(k, r / (r - b) * k)
    gap = np.maximum(b_inf - b_0, 1e-12 * k)
    scale = k * k / (gap * b_0)
    # h(t) = −(b t + 2σ√t) K² / ((B∞ − B0) B0), capped at 0 so that B0 <= I <= B∞ (the cap binds
    # only for strongly negative carry with a small vol, where the boundary is B0).
    i1 = b_0 - gap * np.expm1(np.minimum(-(b * t1 + 2.0 * vs1) * scale, 0.0))
    i2 = b_0 - gap * np.expm1(np.minimum(-(b * t + 2.0 * vst) * scale, 0.0))
    ls, lk, l1, l2 = np.log(s), np.log(k), np.log(i1), np.log(i2)
    m = s.shape[0]
    zero = np.zeros(m)
    one = np.ones(m)

    # Rows γ = β, 1, 0 of the exponents μ, λ, κ and of the prefactor's γ and β-part.
    gam = np.stack([beta, one, zero])
    bet = np.stack([beta, zero, zero])
    mu = b + (gam - 0.5) * v2
    lam = -r + gam * b + 0.5 * gam * (gam - 1.0) * v2
    kap = 2.0 * bv + (2.0 * gam - 1.0)
    x2 = l2 - ls                                          # ln(I2/S)
    inv1 = 1.0 / vs1
    invt = 1.0 / vst

    # φ(S, t1, γ, H, I2) for γ in (β, 1, 0) × H in (I2, I1): coefficient, log-prefactor, args.
    lh = np.stack([l2, l1])                               # (2, m)
    d = -(ls - lh[None] + (mu * t1)[:, None]) * inv1      # (3, 2, m)
    d_ref = d - 2.0 * x2 * inv1
    l_phi = ((lam * t1 + gam * ls)[:, None] - bet[:, None] * lh[None])
    c_phi = np.stack([np.stack([-(i2 - k), i1 - k]), np.stack([one, -one]),
                      np.stack([-k, k])])
    n_d = ndtr(d)
    n_dref = ndtr(d_ref)
    value = (i2 - k) * _cexp(beta * (ls - l2))
    value += np.sum(c_phi * (_cexp(l_phi.copy()) * n_d
                             - _cexp(l_phi + (kap * x2)[:, None]) * n_dref), axis=(0, 1))

    # ψ(S, T, γ, H, I2, I1, t1) for (γ, H) in (β, I1), (1, I1), (1, K), (0, I1), (0, K).
    g_idx = np.array([0, 1, 1, 2, 2])
    h_is_k = np.array([False, False, True, False, True])
    lh5 = np.where(h_is_k[:, None], lk, l1)              # (5, m)
    mu5 = mu[g_idx]
    mt = mu5 * t
    # −e1 and −e2 equal the φ arguments d and d_ref at H = I1, so their N values are shared.
    neg_e1 = d[g_idx, 1]
    neg_e2 = d_ref[g_idx, 1]
    n_e1 = n_d[g_idx, 1]
    n_e2 = n_dref[g_idx, 1]
    m1 = (mu * t1)[g_idx]
    neg_e3 = -(ls - l1 - m1) * inv1
    neg_e4 = -(2.0 * l2 - ls - l1 - m1) * inv1
    neg_f1 = -(ls - lh5 + mt) * invt
    neg_f2 = -(2.0 * l2 - ls - lh5 + mt) * invt
    neg_f3 = -(2.0 * l1 - ls - lh5 + mt) * invt
    neg_f4 = -(ls + 2.0 * l1 - lh5 - 2.0 * l2 + mt) * invt
    l_psi = (lam * t + gam * ls - bet * l1)[g_idx]
    kap5 = kap[g_idx]
    c_psi = np.stack([-(i1 - k), one, -one, -k, k])
    # Positive correlation: M(−e1, −f1) and M(−e2, −f2); negative: M(−e3, −f3), M(−e4, −f4).
    h_pos = np.concatenate([neg_e1, neg_e2])
    k_pos = np.concatenate([neg_f1, neg_f2])
    n_h_pos = np.concatenate([n_e1, n_e2])
    h_neg = np.concatenate([neg_e3, neg_e4])
    k_neg = np.concatenate([neg_f3, neg_f4])
    n_h_neg = ndtr(h_neg)
    m_pos = bvn_quadrature(h_pos, k_pos, +1)
    m_pos += n_h_pos * ndtr(k_pos)
    m_neg = bvn_quadrature(h_neg, k_neg, -1)
    m_neg += n_h_neg * ndtr(k_neg)
    logs = np.concatenate([l_psi, l_psi + kap5 * x2, l_psi + kap5 * (l1 - ls),
                           l_psi + kap5 * (l1 - l2)])
    weights = _cexp(logs)
    weights *= np.concatenate([c_psi, -c_psi, -c_psi, c_psi])
    value += np.sum(weights[:10] * m_pos, axis=0)
    value += np.sum(weights[10:] * m_neg, axis=0)
    return np.where(s >= i2, s - k, value)


def american_value(w: np.ndarray, s: np.ndarray, k: np.ndarray, t: np.ndarray, r: np.ndarray,
                   b: np.ndarray, v: np.ndarray) -> np.ndarray:
    """American value by the 2002 formula with the module's rules, arrays of one shape (m,)."""
    euro = np.empty(s.shape)
    black.price_kernel((w, s, k, t, r, b, v), (euro,))
    put = w < 0
    s_c = np.where(put, k, s)
    k_c = np.where(put, s, k)
    r_c = np.where(put, r - b, r)
    b_c = np.where(put, -b, b)
    v_c = np.maximum(v, VOL_FLOOR)
    bv = b_c / (v_c * v_c)
    disc = np.square(bv - 0.5) + 2.0 * r_c / (v_c * v_c)
    beta = 0.5 - bv + np.sqrt(np.maximum(disc, 0.0))
    # β → 1 as b → r, where the early-exercise premium vanishes; β <= 1 + 1e-9 is European.
    live = (t > 0.0) & (b_c < r_c) & (disc > 0.0) & (beta > 1.0 + 1e-9)
    intrinsic = np.maximum(w * (s - k), 0.0)
    out = np.maximum(euro, intrinsic)
    if live.any():
        idx = np.flatnonzero(live)
        t_c = np.maximum(t[idx], black.YEARS_FLOOR)
        bs = bs2002_call(s_c[idx], k_c[idx], t_c, r_c[idx], b_c[idx], v_c[idx])
        out[idx] = np.maximum(out[idx], bs)
    return out


def price_kernel(ins: Sequence[np.ndarray], outs: Sequence[np.ndarray]) -> None:
    """Fill American prices for one chunk; ``ins`` = (ω, S, K, T, r, b, σ), ``outs`` = (price,)."""
    (price,) = outs
    cols = np.broadcast_arrays(*ins, price)[:-1]
    price[:] = american_value(*cols)


def greeks_kernel(ins: Sequence[np.ndarray], outs: Sequence[np.ndarray]) -> None:
    """Fill American price and nine greeks by central differences, for one chunk.

    One call of ``american_value`` evaluates all 15 bumped copies of the chunk together.
    """
    w, s, k, t, r, b, v = np.broadcast_arrays(*ins, outs[0])[:-1]
    price, delta, gamma, vega, theta, rho, crho, vanna, volga, charm = outs
    hs = STEPS["spot_rel"] * s
    hv = STEPS["vol"]
    hr = STEPS["rate"]
    hb = STEPS["carry"]
    ht = STEPS["years_rel"] * np.maximum(t, 0.0)
    # Bumps: (dS, dσ, dr, db, dT) per copy, in units of the steps above.
    bumps = np.array([
        [0, 0, 0, 0, 0],
        [1, 0, 0, 0, 0], [-1, 0, 0, 0, 0],
        [0, 1, 0, 0, 0], [0, -1, 0, 0, 0],
        [0, 0, 1, 0, 0], [0, 0, -1, 0, 0],
        [0, 0, 0, 1, 0], [0, 0, 0, -1, 0],
        [0, 0, 0, 0, 1], [0, 0, 0, 0, -1],
        [1, 1, 0, 0, 0], [-1, -1, 0, 0, 0],
        [1, 0, 0, 0, 1], [-1, 0, 0, 0, -1],
    ], dtype=np.float64)
    n_b = bumps.shape[0]
    vg = np.maximum(v, hv)                    # centre of the vol differences, so σ − h >= 0
    sv = s + bumps[:, 0:1] * hs
    vv = vg + bumps[:, 1:2] * hv
    rv = r + bumps[:, 2:3] * hr
    bv = b + bumps[:, 3:4] * hb
    tv = t + bumps[:, 4:5] * ht
    vals = american_value(np.broadcast_to(w, sv.shape).ravel(), sv.ravel(),
                          np.broadcast_to(k, sv.shape).ravel(), tv.ravel(), rv.ravel(),
                          bv.ravel(), vv.ravel()).reshape(n_b, -1)
    f0 = vals[0]
    fs_p, fs_m, fv_p, fv_m, fr_p, fr_m, fb_p, fb_m, ft_p, ft_m, fsv_p, fsv_m, fst_p, fst_m = vals[1:]
    low_vol = v < hv
    if low_vol.any():
        price[:] = np.where(low_vol, american_value(w, s, k, t, r, b, v), f0)
    else:
        price[:] = f0
    delta[:] = (fs_p - fs_m) / (2.0 * hs)
    gamma[:] = (fs_p - 2.0 * f0 + fs_m) / (hs * hs)
    vega[:] = (fv_p - fv_m) / (2.0 * hv)
    volga[:] = (fv_p - 2.0 * f0 + fv_m) / (hv * hv)
    rho[:] = (fr_p - fr_m) / (2.0 * hr)
    crho[:] = (fb_p - fb_m) / (2.0 * hb)
    safe_ht = np.where(ht > 0, ht, 1.0)
    theta[:] = -(ft_p - ft_m) / (2.0 * safe_ht)
    # Seven-point mixed differences: f_xy ≈ (f++ − f+0 − f0+ + 2 f00 − f−0 − f0− + f−−) / (2 hx hy)
    vanna[:] = (fsv_p - fs_p - fv_p + 2.0 * f0 - fs_m - fv_m + fsv_m) / (2.0 * hs * hv)
    charm[:] = -(fst_p - fs_p - ft_p + 2.0 * f0 - fs_m - ft_m + fst_m) / (2.0 * hs * safe_ht)
    dead = t <= 0.0
    if dead.any():
        black.expired_fill(w, s, k, t, outs)
