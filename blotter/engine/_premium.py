"""Compiled kernels of the American premium tables (``american_grid``): the early-exercise
premiums of a put (strike 1) at the points of each table, and grid cells from the tables.

A table point's premium is the quadrature of ``_alo.value_put`` without its European part (the
premium integral alone, so nothing cancels), on the price nodes and the boundary that
``_alo.value_groups`` gives a row of the lattice vol (``_alo.group_nodes``,
``lattice_boundary``), with the same cut of negligible nodes and the same
``_alo.refined_rule`` next to the boundary. Each premium (price, delta, gamma, vega) has a
loop of its own over the nodes, so that a table of one of them costs only its own terms (the
price two normal CDFs per node, the delta one, gamma and vega one exponential) and each loop
vectorizes; the tables' Chebyshev coefficients are summed here too, not by a BLAS call whose
own threads would compete with the engine's pool.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from blotter.engine._alo import (
    D_NEGLIGIBLE,
    LAYER_POINTS,
    WINDOW,
    boundary_table,
    european_put,
    fsum,
    group_nodes,
    hermite_weights,
    lattice_weights,
    refined_rule,
)
from blotter.engine._special import fexp, ncdf, ncdf_and_pdf, npdf


@njit(cache=True, nogil=True, error_model="numpy", fastmath={"contract"})
def lattice_boundary(g_lnsig: np.ndarray, g: int, ns: int, lv: float, v: float,
                     lq_k: np.ndarray, dlq_k: np.ndarray, slope: bool, lq: np.ndarray,
                     dlq: np.ndarray, w0: np.ndarray, w1: np.ndarray, lag: np.ndarray,
                     acc: np.ndarray) -> None:
    """ln B at the price nodes into ``lq`` (nq + 1,) at vol ``v`` (ln σ = ``lv``), from group
    g's ``ns`` vol nodes ``g_lnsig[g]`` with their values ``lq_k`` and ln σ-derivatives
    ``dlq_k[:, 0]`` (``boundary_table``), as ``value_groups`` interpolates it for a row of
    that vol; with ``slope``, its derivative per unit σ into ``dlq[0]``. ``w0``, ``w1``,
    ``lag`` and ``acc`` (2, nq + 1) are scratch."""
    nq1 = lq.size
    iv = 1.0 / v
    if ns == 1:
        for j in range(nq1):
            lq[j] = lq_k[0, j]
            if slope:
                dlq[0, j] = dlq_k[0, 0, j] * iv
        return
    # the WINDOW nodes around the vol (all of them in smaller groups)
    width = min(ns, WINDOW)
    k0 = 0
    while k0 + width < ns and g_lnsig[g, k0 + width // 2] < lv:
        k0 += 1
    hermite_weights(lv, g_lnsig[g, k0:k0 + width], width, w0, w1, lag)
    for j in range(nq1):
        acc[0, j] = 0.0
        acc[1, j] = 0.0
    for kw in range(width):
        fk = lq_k[k0 + kw]
        dk = dlq_k[k0 + kw, 0]
        # Hermite in values and σ-derivatives: ln B, and its σ-derivative for the slope
        for d in range(2 if slope else 1):
            c0 = w0[d, kw]
            c1 = w1[d, kw]
            ad = acc[d]
            for j in range(nq1):
                ad[j] += c0 * fk[j] + c1 * dk[j]
    for j in range(nq1):
        lq[j] = acc[0, j]
        if slope:
            dlq[0, j] = acc[1, j] * iv


@njit(cache=True, nogil=True, error_model="numpy", fastmath={"contract"})
def point_premiums(lnxs: float, r: float, q: float, v: float, lq: np.ndarray,
                   dlq: np.ndarray, rb: np.ndarray, nodes: np.ndarray, want: np.ndarray,
                   out: np.ndarray, terms: np.ndarray, start: int, inner: int) -> int:
    """Early-exercise premiums of a put (strike 1, spot e^lnxs above the boundary ``lq``) into
    ``out`` (4,): price, delta, gamma and vega where ``want`` (4,), by the terms of
    ``value_put`` on price nodes ``nodes`` (6, nq); ``rb`` (nq,) holds r / B at the nodes,
    ``dlq[0]`` the boundary's σ-derivative (vega only) and ``terms`` (4, ≥ nq) is scratch.
    Returns the first node that counts, j0, searched from ``start`` (no earlier node counts
    where a lower spot's j0 is ``start``: each node's d rises with the spot), computing
    nothing where j0 < ``inner`` (``value_put`` takes the refined rule there)."""
    nq = nodes.shape[1]
    xs = math.exp(lnxs)
    v = max(v, 1e-8)
    b = r - q
    v2 = v * v
    mup = b + 0.5 * v2
    mum = b - 0.5 * v2
    iv = 1.0 / v
    # nodes before j0 (s -> 0, far from the boundary) add nothing, as in ``value_put``
    j0: int = nq
    for j in range(start, nq):
        if (lnxs - lq[j] + mum * nodes[0, j]) * iv * nodes[5, j] <= D_NEGLIGIBLE:
            j0 = j
            break
    if j0 < inner:
        return j0
    if want[0]:
        tp = terms[0]
        for j in range(j0, nq):
            dp = (lnxs - lq[j] + mup * nodes[0, j]) * iv * nodes[5, j]
            cp = ncdf(-dp)
            cm = ncdf(v * nodes[2, j] - dp)
            tp[j] = nodes[1, j] * (r * nodes[3, j] * cm - q * xs * nodes[4, j] * cp)
        out[0] = fsum(tp, j0, nq)
    if want[1]:
        td = terms[1]
        for j in range(j0, nq):
            eq = nodes[4, j]
            ivs = iv * nodes[5, j]
            dp = (lnxs - lq[j] + mup * nodes[0, j]) * ivs
            cp, pp = ncdf_and_pdf(-dp)
            td[j] = nodes[1, j] * (-q * eq * cp + eq * pp * (q - rb[j]) * ivs)
        out[1] = fsum(td, j0, nq)
    if want[2]:
        ixs = 1.0 / xs
        tg = terms[2]
        for j in range(j0, nq):
            ivs = iv * nodes[5, j]
            dp = (lnxs - lq[j] + mup * nodes[0, j]) * ivs
            e = nodes[4, j] * npdf(dp)
            tg[j] = nodes[1, j] * e * ivs * ixs * (q - (q - rb[j]) * dp * ivs)
        out[2] = fsum(tg, j0, nq)
    if want[3]:
        tv = terms[3]
        for j in range(j0, nq):
            ivs = iv * nodes[5, j]
            dp = (lnxs - lq[j] + mup * nodes[0, j]) * ivs
            dm = dp - v * nodes[2, j]
            e = nodes[4, j] * npdf(dp)
            f_l = -xs * e * (q - rb[j]) * ivs
            f_v = e * xs * iv * (rb[j] * dp - q * dm)
            tv[j] = nodes[1, j] * (f_v + f_l * dlq[0, j])
        out[3] = fsum(tv, j0, nq)
    return j0


@njit(cache=True, nogil=True, error_model="numpy", fastmath={"contract"})
def table_points(g_r: np.ndarray, g_q: np.ndarray, g_tau: np.ndarray, g_tmax: np.ndarray,
                 g_ns: np.ndarray, g_lnsig: np.ndarray, g_lnb: np.ndarray, g_tan: np.ndarray,
                 wq_t: np.ndarray, power: float, ts_x: np.ndarray, ts_w: np.ndarray,
                 squares: bool, inner: int, lat: np.ndarray, edge: np.ndarray,
                 todo: np.ndarray, z_pts: np.ndarray, z_max: float, to_coef_t: np.ndarray,
                 negligible: float, groups: np.ndarray, coef: np.ndarray,
                 tail: np.ndarray) -> None:
    """Tables of the premiums t (price, delta, gamma, vega) with ``todo[g, a, t]`` for each
    group g of ``groups`` and lattice vol a (ln σ ``lat[g, a]``, boundary ln B
    ``edge[g, a]``): their values at the points ``z_pts`` (N + 1,) standard deviations above
    the boundary (``point_premiums``; 0 beyond ``z_max``; on the boundary, z = 0 at
    index N, the continuation's limits), their Chebyshev coefficients (the values times
    ``to_coef_t``, the transpose of the map to coefficients) into ``coef[t, g, a]`` and the
    largest z of a value not below ``negligible`` into ``tail[t, g, a]``. Group arguments as
    ``value_groups`` takes them; the price rule ``ts_x``, ``ts_w`` and ``wq_t`` and ``inner``
    as there."""
    nq = ts_x.size
    n = wq_t.shape[0]
    nsm = g_lnsig.shape[1]
    n_lat = lat.shape[1]
    n_t = todo.shape[2]
    lq_k = np.empty((nsm, nq + 1))
    dlq_k = np.zeros((nsm, 4, nq + 1))
    lq = np.empty(nq + 1)
    dlq = np.zeros((3, nq + 1))
    d2lq = np.zeros(nq + 1)
    w0 = np.empty((3, nsm))
    w1 = np.empty((3, nsm))
    lag = np.empty(nsm)
    acc = np.empty((2, nq + 1))
    nodes = np.empty((6, nq))
    own = np.empty((n, nq + 1))
    wrow = np.empty(n)
    xk = np.cos(np.arange(n + 1) * (math.pi / n))
    work = np.empty((5, nq + 1))
    rb = np.empty(nq)
    rb_r = np.empty(nq + LAYER_POINTS)
    terms = np.empty((4, nq + LAYER_POINTS))
    res = np.empty(4)
    n_c = z_pts.size
    vals = np.empty((4, n_c))
    eu = np.empty(9)
    for g in groups:
        slope = False
        some = False
        for a in range(n_lat):
            for t in range(n_t):
                some = some or todo[g, a, t]
            slope = slope or todo[g, a, 3]
        if not some:
            continue
        ns = g_ns[g]
        r = g_r[g]
        q = g_q[g]
        tau = g_tau[g]
        table = group_nodes(tau, g_tmax[g], r, q, ts_x, ts_w, wq_t, power, xk, wrow, nodes,
                            own)
        nd = 3 if (slope or ns > 1) else 0
        for k in range(ns):
            boundary_table(r, q, math.exp(g_lnsig[g, k]), g_lnb[g, k], g_tan[g, k], table,
                           lq_k[k], dlq_k[k], nd, work, squares)
        root_t = math.sqrt(tau)
        for a in range(n_lat):
            want = todo[g, a]
            some = False
            for t in range(n_t):
                some = some or want[t]
            if not some:
                continue
            v = math.exp(lat[g, a])
            # as ``value_groups`` for a row of this vol: ln B, and its σ-derivative for vega
            lattice_boundary(g_lnsig, g, ns, lat[g, a], v, lq_k, dlq_k, want[3], lq, dlq, w0,
                             w1, lag, acc)
            for j in range(nq):
                rb[j] = r * fexp(-lq[j])
            vst = v * root_t
            # the points from the boundary up (z rising), so that each starts its search of
            # the first node that counts at the one below's
            j0 = 0
            for c in range(n_c - 2, -1, -1):
                for t in range(n_t):
                    vals[t, c] = 0.0
                if z_pts[c] > z_max:
                    continue
                lnxs = edge[g, a] + vst * z_pts[c]
                j0 = point_premiums(lnxs, r, q, v, lq, dlq, rb, nodes, want, res, terms, j0,
                                    inner)
                if j0 < inner:
                    rule, lq_r, dlq_r, _ = refined_rule(lnxs, v, r, q, lq, dlq, d2lq, nodes,
                                                        inner)
                    for j in range(rule.shape[1]):
                        rb_r[j] = r * fexp(-lq_r[j])
                    point_premiums(lnxs, r, q, v, lq_r, dlq_r, rb_r, rule, want, res, terms, 0,
                                   0)
                for t in range(n_t):
                    if want[t]:
                        vals[t, c] = max(res[t], 0.0) if t == 0 else res[t]
            # on the boundary, exactly: the value 1 − B, delta −1, vega 0 (the value touches
            # intrinsic smoothly) and gamma from the Black–Scholes equation with θ = 0 there,
            # Γ = 2 (r − q B) / (σ² B²), each less the European put's: the continuation
            # side's limits, where the quadrature at z = 0 gives the exercise side's values
            x = math.exp(edge[g, a])
            european_put(x, tau, r, q, v, eu)
            vals[0, n_c - 1] = max(1.0 - x - eu[0], 0.0)
            vals[1, n_c - 1] = -1.0 - eu[1]
            vals[2, n_c - 1] = 2.0 * (r - q * x) / (v * v * x * x) - eu[2]
            vals[3, n_c - 1] = -eu[4]
            for t in range(n_t):
                if not want[t]:
                    continue
                # points run from z = ∞ (0) to z = 0: the first significant one has the
                # largest z
                first = n_c - 1
                for c in range(n_c):
                    if abs(vals[t, c]) > negligible:
                        first = c
                        break
                tail[t, g, a] = z_pts[first]
                # coefficient k is Σ_c to_coef[k, c] values[c], summed in the order of c
                # for all k at once
                ck = coef[t, g, a]
                for k in range(n_c):
                    ck[k] = 0.0
                for c in range(n_c):
                    vc = vals[t, c]
                    row = to_coef_t[c]
                    for k in range(n_c):
                        ck[k] += row[k] * vc


@njit(cache=True, nogil=True, error_model="numpy", fastmath={"contract"})
def table_cells(g_r: np.ndarray, g_q: np.ndarray, g_tau: np.ndarray, g_first_lat: np.ndarray,
                g_nl: np.ndarray, g_edge: np.ndarray, g_tail: np.ndarray, g_coef: np.ndarray,
                step: float, points: int, scale: float, tabs: np.ndarray, outs: np.ndarray,
                row_group: np.ndarray, row_lnx: np.ndarray, row_w: np.ndarray,
                row_s: np.ndarray, row_k: np.ndarray, ln_shock: np.ndarray,
                shock: np.ndarray, vols: np.ndarray, dest: np.ndarray,
                out: np.ndarray) -> None:
    """American price (``outs`` (1,)) or price, delta, gamma, vega and theta (``outs`` (5,))
    of every cell (row m, spot shock i, vol column j) from the groups' tables, the outputs
    where ``outs`` is True (NaN elsewhere): the European value plus the early-exercise premium
    interpolated in z = (ln x − ln B(σ)) / (σ√τ) (Chebyshev coefficients ``g_coef``
    (n_t, G, L, N + 1) of the premiums of price, delta, gamma and vega, the first n_t of
    them, in ζ = (z − ``scale``) / (z + ``scale``), those of ``tabs`` (2, n_t) read: row 0
    for puts, 1 for calls) and in ln σ (Lagrange over ``points`` lattice vols), 0 beyond
    the largest ``g_tail`` (n_t, G, L) of those vols; cells at or beyond the boundary are
    intrinsic (delta ±1, the rest 0). ``vols`` (m, n_s or 1, n_v); rows: group, ln of the
    put-form spot over strike at the base spot, ω, spot, strike; row m's cells go to
    ``out[dest[m]]`` (rows, len(outs), n_s, n_v). The spot points of one vol share its
    coefficients, so their series are summed four at a time in registers."""
    n_s = ln_shock.size
    n_v = vols.shape[2]
    n_out = outs.size
    per_spot = vols.shape[1] > 1
    n_c = g_coef.shape[3]
    n_t = g_coef.shape[0]
    lag = np.empty(points)
    coef = np.empty((n_t, n_c))
    tail = np.empty(n_t)
    lnx = np.empty(n_s)
    zs = np.empty(n_s)
    zeta = np.empty(n_s)
    live = np.empty(n_s + 3, dtype=np.int64)
    pre = np.empty((n_t, n_s))
    res = np.empty(5)
    for m in range(row_lnx.size):
        o = dest[m]
        g = row_group[m]
        r = g_r[g]
        q = g_q[g]
        tau = g_tau[g]
        st = math.sqrt(tau)
        dq = math.exp(-q * tau)
        dr = math.exp(-r * tau)
        call = row_w[m] > 0.0
        use = tabs[1 if call else 0]
        last = -1.0
        lnb = 0.0
        for j in range(n_v):
            i0 = 0
            while i0 < n_s:
                # spot points [i0, i1) share a vol: all of them unless vols vary by spot
                i1 = i0 + 1 if per_spot else n_s
                v = vols[m, i0 if per_spot else 0, j]
                if v != last:
                    last = v
                    a0 = lattice_weights(math.log(v), step, g_first_lat[g], g_nl[g], points,
                                         lag)
                    lnb = 0.0
                    for k in range(points):
                        lnb += lag[k] * g_edge[g, a0 + k]
                    for t in range(n_t):
                        tail_t = 0.0
                        coef_t = coef[t]
                        for c in range(n_c):
                            coef_t[c] = 0.0
                        for k in range(points):
                            lk = lag[k]
                            tail_t = max(tail_t, g_tail[t, g, a0 + k])
                            src = g_coef[t, g, a0 + k]
                            for c in range(n_c):
                                coef_t[c] += lk * src[c]
                        tail[t] = tail_t
                vst = v * st
                for i in range(i0, i1):
                    lnx[i] = row_lnx[m] - ln_shock[i] if call else row_lnx[m] + ln_shock[i]
                    zs[i] = (lnx[i] - lnb) / vst
                # with four spot points or more, their series four at a time in registers
                # (the last block padded with its last point); fewer are summed one by one
                # below
                blocks = i1 - i0 >= 4
                for t in range(n_t if blocks else 0):
                    if not use[t]:
                        continue
                    # the points above the boundary and within the table's tail
                    n_live = 0
                    for i in range(i0, i1):
                        if lnx[i] > lnb and zs[i] <= tail[t]:
                            zeta[i] = (zs[i] - scale) / (zs[i] + scale)
                            live[n_live] = i
                            n_live += 1
                    # Clenshaw's recurrence for Σ c_k T_k(ζ)
                    ct = coef[t]
                    for k in range(n_live, n_live + (-n_live) % 4):
                        live[k] = live[n_live - 1]
                    for k in range(0, n_live, 4):
                        ia, ib, ic, id_ = live[k], live[k + 1], live[k + 2], live[k + 3]
                        za, zb, zc, zd = zeta[ia], zeta[ib], zeta[ic], zeta[id_]
                        a1 = a2 = b1 = b2 = c1 = c2 = d1 = d2 = 0.0
                        for c in range(n_c - 1, 0, -1):
                            cc = ct[c]
                            a1, a2 = 2.0 * za * a1 - a2 + cc, a1
                            b1, b2 = 2.0 * zb * b1 - b2 + cc, b1
                            c1, c2 = 2.0 * zc * c1 - c2 + cc, c1
                            d1, d2 = 2.0 * zd * d1 - d2 + cc, d1
                        pre[t, ia] = za * a1 - a2 + ct[0]
                        pre[t, ib] = zb * b1 - b2 + ct[0]
                        pre[t, ic] = zc * c1 - c2 + ct[0]
                        pre[t, id_] = zd * d1 - d2 + ct[0]
                for i in range(i0, i1):
                    s1 = row_s[m] * shock[i]
                    sc = s1 if call else row_k[m]
                    xs = fexp(lnx[i])
                    if lnx[i] <= lnb:
                        res[0] = 1.0 - xs
                        res[1] = -1.0
                        res[2] = 0.0
                        res[3] = 0.0
                        res[4] = 0.0
                    else:
                        for t in range(4):
                            res[t] = 0.0
                            if t >= n_t or not use[t] or zs[i] > tail[t]:
                                continue
                            if blocks:
                                res[t] = pre[t, i]
                                continue
                            za = (zs[i] - scale) / (zs[i] + scale)
                            a1 = a2 = 0.0
                            for c in range(n_c - 1, 0, -1):
                                a1, a2 = 2.0 * za * a1 - a2 + coef[t, c], a1
                            res[t] = za * a1 - a2 + coef[t, 0]
                        # the European put (strike 1, spot xs), as ``european_put``
                        d1 = (lnx[i] + (r - q + 0.5 * v * v) * tau) / vst
                        nd1, pd1 = ncdf_and_pdf(-d1)
                        eu0 = dr * ncdf(vst - d1) - xs * dq * nd1
                        res[0] = eu0 + max(res[0], 0.0)
                        if n_out > 1:
                            res[1] += -dq * nd1
                            res[2] += dq * pd1 / (xs * vst)
                            res[3] += xs * dq * pd1 * st
                            res[4] = -(0.5 * v * v * xs * xs * res[2] + (r - q) * xs * res[1]
                                       - r * res[0])
                    value = sc * res[0]
                    out[o, 0, i, j] = (max(value, row_w[m] * (s1 - row_k[m]), 0.0) if outs[0]
                                       else np.nan)
                    if n_out == 1:
                        continue
                    if call:
                        delta = res[0] - xs * res[1]
                        gamma = xs * xs * res[2] / sc
                    else:
                        delta = res[1]
                        gamma = res[2] / sc
                    out[o, 1, i, j] = delta if outs[1] else np.nan
                    out[o, 2, i, j] = gamma if outs[2] else np.nan
                    out[o, 3, i, j] = sc * res[3] if outs[3] else np.nan
                    out[o, 4, i, j] = sc * res[4] if outs[4] else np.nan
                i0 = i1
