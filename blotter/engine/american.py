"""American options by Bjerksund–Stensland (2002), vectorized, with finite-difference greeks.

P. Bjerksund and G. Stensland, "Closed Form Valuation of American Options", discussion paper,
NHH 2002: the call is valued as the strategy "exercise when the spot reaches a flat boundary I1
before t1 = ½(√5 − 1) T, or I2 after it", which needs the bivariate normal at ρ = ±√(t1/T)
(``bivariate``). Puts use the put–call transformation
P(S, K, T, r, b, σ) = C(K, S, T, r − b, −b, σ).

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

Greeks: delta, vega, theta, rho and carry rho are exact derivatives of this price
(``american_value_grad``, ``_bs2002_grad``); gamma, vanna and charm are central differences of
delta, vega and theta over spot ± ``STEPS["spot_rel"]`` × S, and volga the second difference
of the price over vol ± ``STEPS["vol"]``: five evaluations per row, three of them with
derivatives. Rows that are never exercised early near their inputs take the analytic European
greeks instead.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from scipy.special import ndtr

from blotter.engine import black
from blotter.engine._bs2002_grad import bs2002_call_grad
from blotter.engine._validate import omega
from blotter.engine.bivariate import GOLDEN, TERM_FLOOR, bvn_signed_sum, small_matmul

VOL_FLOOR = 1e-3
"""Smallest vol (annualised decimal) fed to the 2002 formula; below it terms lose precision."""
_EXP_CAP = 600.0
"""Cap on exponents of products c·e^L·N(d): e^600 leaves room for coefficients up to 1e47;
where e^L is that large the N(d) it multiplies is 0 in float64."""

STEPS = {
    "spot_rel": 1e-4,
    "vol": 1e-4,
}
"""Central-difference steps of the second-order greeks: spot 1e-4 × S (gamma, vanna, charm from
the exact delta, vega and theta at S ± step), vol 1e-4 = 0.01 vol point (volga). Greeks are
taken at max(σ, 1e-4), so those of rows with vols below 1e-4 are the ones at 1e-4 (their price
uses the true vol)."""


def _cexp(x: np.ndarray) -> np.ndarray:
    """e^x in place, with x clipped to [TERM_FLOOR, _EXP_CAP] (no overflow, no slow underflow)."""
    np.clip(x, TERM_FLOOR, _EXP_CAP, out=x)
    np.exp(x, out=x)
    return x


def _matrices() -> dict[str, np.ndarray]:
    """Constant matrices mapping per-row bases to the 2002 formula's arguments and exponents.

    Bases: B1 = [ln S, ln I1, ln I2, μβ t1, μ1 t1, μ0 t1] (t1 arguments, × 1/(σ√t1));
    B2 = [ln S, ln I1, ln I2, ln K, μβ T, μ1 T, μ0 T] (T arguments, × 1/(σ√T));
    B3 = [ln S, ln I1, ln I2, ln K, β ln S, β ln I1, β ln I2, (b/σ²) ln S, (b/σ²) ln I1,
    (b/σ²) ln I2, λβ t1, λ1 t1, λ0 t1, λβ T, λ1 T, λ0 T, ln(I2 − K), ln(I1 − K)] (exponents).
    """
    S, I1, I2, K = 0, 1, 2, 3
    # t1 arguments: d(γ, H) and d_ref(γ, H) of φ for γ = β, 1, 0 and H = I2, I1; then −e3, −e4.
    a1 = []
    for g in range(3):
        for lh in (I2, I1):
            row = np.zeros(6)
            row[S] -= 1.0
            row[lh] += 1.0
            row[3 + g] -= 1.0
            a1.append(row)                     # d = −(ln S − ln H + μ t1)
    for g in range(3):
        for lh in (I2, I1):
            row = np.zeros(6)
            row[S] += 1.0
            row[lh] += 1.0
            row[I2] -= 2.0
            row[3 + g] -= 1.0
            a1.append(row)                     # d_ref = d − 2 ln(I2/S)
    for g in range(3):
        row = np.zeros(6)
        row[[S, I1, 3 + g]] = [-1.0, 1.0, 1.0]
        a1.append(row)                         # −e3 = −(ln S − ln I1 − μ t1)
    for g in range(3):
        row = np.zeros(6)
        row[[S, I1, I2, 3 + g]] = [1.0, 1.0, -2.0, 1.0]
        a1.append(row)                         # −e4 = −(2 ln I2 − ln S − ln I1 − μ t1)
    # T arguments: −f1..−f4 for the ψ combinations (γ, H).
    a2: list[np.ndarray] = []
    for g, h_name in PSI_TERMS:
        hcol = I1 if h_name == "I1" else K
        rows = np.zeros((4, 7))
        # np.add.at, because H can be I1, which other terms of the same row also use.
        np.add.at(rows[0], [S, hcol, 4 + g], [-1.0, 1.0, -1.0])
        np.add.at(rows[1], [I2, S, hcol, 4 + g], [-2.0, 1.0, 1.0, -1.0])
        np.add.at(rows[2], [I1, S, hcol, 4 + g], [-2.0, 1.0, 1.0, -1.0])
        np.add.at(rows[3], [S, I1, hcol, I2, 4 + g], [-1.0, -2.0, 1.0, 2.0, -1.0])
        a2.extend(rows)
    # Exponents. Column helpers: β·x at 4 + x, (b/σ²)·x at 7 + x (x in S, I1, I2).
    def lam(g: int, at_t1: bool) -> int:
        return (10 if at_t1 else 13) + g

    def kap_times(row: np.ndarray, g: int, x: int, sign: float) -> None:
        # κγ x = 2 (b/σ²) x + (2γ − 1) x, with γ = β (g = 0), 1 (g = 1) or 0 (g = 2)
        row[7 + x] += 2.0 * sign
        if g == 0:
            row[4 + x] += 2.0 * sign
            row[x] -= sign
        elif g == 1:
            row[x] += sign
        else:
            row[x] -= sign

    LN_I2K, LN_I1K = 16, 17

    def exponent_row(g: int, at_t1: bool, level: int, coef_col: int | None) -> np.ndarray:
        # λγ(t) + γ ln(S / level) (γ = β, 1 or 0) plus the term's coefficient column, if any
        row = np.zeros(18)
        row[lam(g, at_t1)] = 1.0
        if g == 0:
            row[4 + S] += 1.0
            row[4 + level] -= 1.0
        elif g == 1:
            row[S] += 1.0
        if coef_col is not None:
            row[coef_col] += 1.0
        return row
    a3, signs = [], []
    # φ main and reflected, in the order of the t1 arguments above.
    phi_coef = {(0, I2): (LN_I2K, -1.0), (0, I1): (LN_I1K, 1.0), (1, I2): (None, 1.0),
                (1, I1): (None, -1.0), (2, I2): (K, -1.0), (2, I1): (K, 1.0)}
    mains = []
    for g in range(3):
        for lh in (I2, I1):
            col, sign = phi_coef[(g, lh)]
            mains.append((exponent_row(g, True, lh, col), sign, g))
    for row, sign, _ in mains:
        a3.append(row)
        signs.append(sign)
    for row, sign, g in mains:
        refl = row.copy()
        kap_times(refl, g, I2, 1.0)
        kap_times(refl, g, S, -1.0)            # κ ln(I2/S)
        a3.append(refl)
        signs.append(-sign)
    row = np.zeros(18)
    row[[LN_I2K, 4 + S, 4 + I2]] = [1.0, 1.0, -1.0]
    a3.append(row)                             # α2 S^β = (I2 − K) e^{β ln(S/I2)}
    signs.append(1.0)
    psi_coef = {(0, "I1"): (LN_I1K, -1.0), (1, "I1"): (None, 1.0), (1, "K"): (None, -1.0),
                (2, "I1"): (K, -1.0), (2, "K"): (K, 1.0)}
    for g, h_name in PSI_TERMS:
        col, sign = psi_coef[(g, h_name)]
        base = exponent_row(g, False, I1, col)
        r2 = base.copy()
        kap_times(r2, g, I2, 1.0)
        kap_times(r2, g, S, -1.0)              # (I2/S)^κ
        r3 = base.copy()
        kap_times(r3, g, I1, 1.0)
        kap_times(r3, g, S, -1.0)              # (I1/S)^κ
        r4 = base.copy()
        kap_times(r4, g, I1, 1.0)
        kap_times(r4, g, I2, -1.0)             # (I1/I2)^κ
        a3.extend([base, r2, r3, r4])
        signs.extend([sign, -sign, -sign, sign])
    # Rows of the t1 arguments giving h of each bivariate term (M1..M4 per ψ combination).
    h_rows = []
    for g, _ in PSI_TERMS:
        h_rows += [2 * g + 1, 6 + 2 * g + 1, 12 + g, 15 + g]   # d(γ,I1), d_ref(γ,I1), −e3, −e4
    return {"a1": np.array(a1), "a2": np.array(a2), "a3": np.array(a3),
            "signs": np.array(signs), "h_rows": np.array(h_rows)}


PSI_TERMS = ((0, "I1"), (1, "I1"), (1, "K"), (2, "I1"), (2, "K"))
"""(γ index in β, 1, 0; H) of the five ψ terms of the 2002 formula."""
_M = _matrices()
RHO_SIGN = np.array([1.0 if j % 4 < 2 else -1.0 for j in range(20)])
"""Sign of the correlation of each bivariate row: M1, M2 of a ψ term use +ρ, M3, M4 −ρ."""


def bs2002_call(s: np.ndarray, k: np.ndarray, t: np.ndarray, r: np.ndarray, b: np.ndarray,
                v: np.ndarray) -> np.ndarray:
    """Bjerksund–Stensland (2002) American call, arrays of one shape (m,), b < r and β real.

    Values of rows outside that domain are finite but meaningless; callers select them away.
    The formula is Σ_j ±e^{L_j} G_j with G_j a normal or bivariate normal CDF; every argument
    and exponent L_j is a fixed linear combination of a few per-row logs, so they come from
    three small matrix products (see ``_matrices``). Exponents are clipped to
    [``TERM_FLOOR``, ``_EXP_CAP``] so that small vols (large β) neither overflow nor lose terms.
    """
    m = s.shape[0]
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
    half_v2 = 0.5 * v2
    mu = np.stack([b + (beta - 0.5) * v2, b + half_v2, b - half_v2])
    lam = np.stack([-r + beta * b + half_v2 * beta * (beta - 1.0), b - r, -r])
    basis1 = np.concatenate([np.stack([ls, l1, l2]), mu * t1])
    basis2 = np.concatenate([np.stack([ls, l1, l2, lk]), mu * t])
    logs3 = np.stack([ls, l1, l2])
    basis3 = np.concatenate([
        logs3[:, :], lk[None], beta * logs3, bv * logs3, lam * t1, lam * t,
        np.log(np.maximum(np.stack([i2 - k, i1 - k]), 1e-300)),
    ])
    # BLAS in blocks small enough to stay on this thread (OpenBLAS's own threads, beside the
    # engine's workers, stall each other on this machine).
    args1 = small_matmul(_M["a1"], basis1)
    args1 /= vs1
    args2 = small_matmul(_M["a2"], basis2)
    args2 /= vst
    expo = small_matmul(_M["a3"], basis3)
    n1 = ndtr(args1)
    n2 = ndtr(args2)
    # Univariate part: φ rows (12), α2 S^β row, and N(h) N(k) of the 20 bivariate rows.
    h_rows = _M["h_rows"]
    g = np.empty((33, m))
    g[:12] = n1[:12]
    g[12] = 1.0
    np.multiply(n1[h_rows], n2, out=g[13:])
    weights = _cexp(expo.copy())
    weights *= g
    value = np.einsum("j,jm->m", _M["signs"], weights, optimize=False)
    # Quadrature part of the bivariate rows: Σ_i e^{L_j + ln w_i + a_i h k − b_i (h² + k²)}.
    h = args1[h_rows]
    hk = h * args2
    hs = np.square(h, out=h)
    hs += np.square(args2)
    value += bvn_signed_sum(hk, hs, expo[13:], _M["signs"][13:], RHO_SIGN)[0]
    out: np.ndarray = np.where(s >= i2, s - k, value)
    return out


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
    out: np.ndarray = np.maximum(euro, intrinsic)
    if live.any():
        idx = np.flatnonzero(live)
        t_c = np.maximum(t[idx], black.YEARS_FLOOR)
        # In units of the call-form strike (the formula is homogeneous of degree one in S, K),
        # as ``american_value_grad`` evaluates it, so the two agree to the bit.
        kc = k_c[idx]
        bs = bs2002_call(s_c[idx] / kc, np.ones(idx.size), t_c, r_c[idx], b_c[idx], v_c[idx])
        bs *= kc
        out[idx] = np.maximum(out[idx], bs)
    return out


def price_kernel(ins: Sequence[np.ndarray], outs: Sequence[np.ndarray]) -> None:
    """Fill American prices for one chunk; ``ins`` = (ω, S, K, T, r, b, σ), ``outs`` = (price,)."""
    (price,) = outs
    cols = np.broadcast_arrays(omega(ins[0]), *ins[1:], price)[:-1]
    price[:] = american_value(*cols)


def greeks_kernel(ins: Sequence[np.ndarray], outs: Sequence[np.ndarray]) -> None:
    """Fill American price and nine greeks for one chunk.

    Rows never exercised early (call form b > r with r >= 0 for calls, r < 0 with b <= r for
    puts; no floor at intrinsic binding) are European in a neighbourhood of their inputs, so
    they take the analytic European greeks. The others take ``_analytic_greeks``.
    """
    w, s, k, t, r, b, v = np.broadcast_arrays(omega(ins[0]), *ins[1:], outs[0])[:-1]
    euro_rows, euro = _european_rows(w, s, k, t, r, b, v)
    if euro_rows.any():
        black.greeks_kernel((w, s, k, t, r, b, v), outs)
        # The price kernel's value, so that prices equal ``price_kernel``'s to the last bit.
        np.copyto(outs[0], euro, where=euro_rows)
        fd = np.flatnonzero(~euro_rows)
        if fd.size:
            sub = [np.empty(fd.size) for _ in outs]
            _analytic_greeks([a[fd] for a in (w, s, k, t, r, b, v)], sub)
            for o, so in zip(outs, sub, strict=True):
                o[fd] = so
        return
    _analytic_greeks([w, s, k, t, r, b, v], outs)


def _european_rows(w: np.ndarray, s: np.ndarray, k: np.ndarray, t: np.ndarray, r: np.ndarray,
                   b: np.ndarray, v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Live rows whose American value is the European one for all nearby inputs, and the
    European prices (``black.price_kernel``) where that mask is set."""
    calls = w > 0
    no_early = np.where(calls, (b > r) & (r >= 0.0), (r < 0.0) & (b <= r))
    live = (t > 0.0) & no_early
    if not live.any():
        return live, np.zeros(s.shape)
    # The European value must also stay clear of intrinsic, where the floor takes over.
    euro = np.empty(s.shape)
    black.price_kernel((w, s, k, t, r, b, v), (euro,))
    clear = euro > np.maximum(w * (s - k), 0.0) + 1e-6 * k
    out: np.ndarray = live & clear
    return out, euro


def american_value_grad(w: np.ndarray, s: np.ndarray, k: np.ndarray, t: np.ndarray,
                        r: np.ndarray, b: np.ndarray, v: np.ndarray
                        ) -> tuple[np.ndarray, np.ndarray]:
    """``american_value`` (the same numbers) and its gradient in (S, σ, T, r, b), for n spots
    per row: ``s`` (n·m,) holds n copies of the m rows one after another, the other inputs are
    (m,); returns values (n·m,) and gradients (5, n·m).

    Each value's gradient is that of the term that sets it: the 2002 formula (exact
    derivatives, ``_bs2002_grad``), the European floor (analytic) or intrinsic (delta 0 or ±1,
    the rest 0). The formula is evaluated in units of the call-form strike K_c, at
    x = S_c / K_c; then ∂C/∂S_c = ∂c/∂x and ∂C/∂K_c = c − x ∂c/∂x. Puts map back from the call
    form: ∂P/∂S = ∂C/∂K_c, ∂P/∂r = ∂C/∂r_c, ∂P/∂b = −∂C/∂r_c − ∂C/∂b_c.
    """
    m = t.shape[0]
    n = s.shape[0] // m
    w_n, k_n, t_n, r_n, b_n, v_n = (np.concatenate((a,) * n) for a in (w, k, t, r, b, v))
    ins = (w_n, s, k_n, t_n, r_n, b_n, v_n)
    euro = np.empty(n * m)
    black.price_kernel(ins, (euro,))
    payoff = w_n * (s - k_n)
    intrinsic = np.maximum(payoff, 0.0)
    out: np.ndarray = np.maximum(euro, intrinsic)
    use_euro = euro >= intrinsic
    grad = np.zeros((5, n * m))
    grad[0] = np.where(payoff > 0.0, w_n, 0.0)
    put = w < 0
    r_c = np.where(put, r - b, r)
    b_c = np.where(put, -b, b)
    v_c = np.maximum(v, VOL_FLOOR)
    bv = b_c / (v_c * v_c)
    disc = np.square(bv - 0.5) + 2.0 * r_c / (v_c * v_c)
    beta = 0.5 - bv + np.sqrt(np.maximum(disc, 0.0))
    live = (t > 0.0) & (b_c < r_c) & (disc > 0.0) & (beta > 1.0 + 1e-9)
    if live.any():
        use_euro[_live_grad(live, put, s, k_n, t, r_c, b_c, v_c, v_n, t_n, out, grad)] = False
    rows = np.flatnonzero(use_euro)
    if rows.size:
        # European greeks only where the European floor sets the value.
        eg = [np.empty(rows.size) for _ in range(10)]
        black.greeks_kernel(tuple(a[rows] for a in ins), eg)
        for d, e in ((0, eg[1]), (1, eg[3]), (2, -eg[4]), (3, eg[5]), (4, eg[6])):
            grad[d, rows] = e
    return out, grad


def _live_grad(live: np.ndarray, put: np.ndarray, s: np.ndarray, k_n: np.ndarray,
               t: np.ndarray, r_c: np.ndarray, b_c: np.ndarray, v_c: np.ndarray,
               v_n: np.ndarray, t_n: np.ndarray, out: np.ndarray, grad: np.ndarray
               ) -> np.ndarray:
    """The 2002 formula on the rows ``live`` (m,) of every copy: raises ``out`` (n·m,) to it
    and sets ``grad`` (5, n·m) where it wins; returns the indices (into n·m) where it won."""
    m = live.shape[0]
    n = s.shape[0] // m
    idx = np.flatnonzero(live)
    n_live = idx.size
    cols = (idx[None, :] + m * np.arange(n)[:, None]).ravel()    # live rows of every copy
    put_n = np.concatenate((put[idx],) * n)
    s_l, k_l = s[cols], k_n[cols]
    s_c = np.where(put_n, k_l, s_l)
    k_c = np.where(put_n, s_l, k_l)
    x = s_c / k_c
    t_c = np.maximum(t[idx], black.YEARS_FLOOR)
    c, gc = bs2002_call_grad(x, np.ones(n_live), t_c, r_c[idx], b_c[idx], v_c[idx])
    bs = c * k_c
    win = bs > out[cols]
    out[cols] = np.maximum(out[cols], bs)
    sel = cols[win]
    gc = gc[:, win]
    c, x, k_c, pw = c[win], x[win], k_c[win], put_n[win]
    grad[0, sel] = np.where(pw, c - x * gc[0], gc[0])
    grad[1, sel] = np.where(v_n[sel] >= VOL_FLOOR, gc[1] * k_c, 0.0)
    grad[2, sel] = np.where(t_n[sel] >= black.YEARS_FLOOR, gc[2] * k_c, 0.0)
    grad[3, sel] = gc[3] * k_c
    grad[4, sel] = np.where(pw, -gc[3] - gc[4], gc[4]) * k_c
    out_sel: np.ndarray = sel
    return out_sel


def _analytic_greeks(ins: Sequence[np.ndarray], outs: Sequence[np.ndarray]) -> None:
    """Greeks of ``american_value``, arrays of one shape (m,).

    First-order greeks are exact derivatives (``american_value_grad``) at the inputs; gamma,
    vanna and charm are central differences of delta, vega and theta over spot ± ``STEPS``
    ["spot_rel"] × S, and volga the second difference of the price over vol ± ``STEPS["vol"]``.
    One call evaluates the three spot copies together, one more the two vol copies.
    """
    w, s, k, t, r, b, v = ins
    price, delta, gamma, vega, theta, rho, crho, vanna, volga, charm = outs
    m = s.shape[0]
    hs = STEPS["spot_rel"] * s
    hv = STEPS["vol"]
    vg = np.maximum(v, hv)                    # centre of the vol differences, so σ − h >= 0
    f, g = american_value_grad(w, np.concatenate([s, s + hs, s - hs]), k, t, r, b, vg)
    f0 = f[:m]
    g = g.reshape(5, 3, m)
    w2, s2, k2, t2, r2, b2 = (np.concatenate((a, a)) for a in (w, s, k, t, r, b))
    fv = american_value(w2, s2, k2, t2, r2, b2,
                        np.concatenate([vg + hv, vg - hv])).reshape(2, m)
    low_vol = v < hv
    if low_vol.any():
        price[:] = np.where(low_vol, american_value(w, s, k, t, r, b, v), f0)
    else:
        price[:] = f0
    delta[:] = g[0, 0]
    vega[:] = g[1, 0]
    theta[:] = -g[2, 0]
    rho[:] = g[3, 0]
    crho[:] = g[4, 0]
    two_hs = 2.0 * hs
    gamma[:] = (g[0, 1] - g[0, 2]) / two_hs
    vanna[:] = (g[1, 1] - g[1, 2]) / two_hs
    charm[:] = -(g[2, 1] - g[2, 2]) / two_hs
    volga[:] = (fv[0] - 2.0 * f0 + fv[1]) / (hv * hv)
    dead = t <= 0.0
    if dead.any():
        black.expired_fill(w, s, k, t, outs)
