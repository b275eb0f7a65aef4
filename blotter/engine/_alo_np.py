"""The kernels of ``_alo`` in NumPy: the same method, steps and starts, for the time before the
compiled kernels are ready (``_kernels``).

Each function mirrors the compiled one of the same name and signature, statement for statement
where the order of operations decides the result (Newton's starts, steps, halvings and stopping,
the groups a start is borrowed from), and vectorized over quadrature points, nodes and rows
elsewhere; the exponential and normal CDF are NumPy's and SciPy's. It calls no numba function
(a call would wait on numba's compiler lock, which the warm-up holds), hence its own copies of
the small scalar helpers. The two agree to about 1e-12 (``tests/engine/test_numpy_path.py``);
this one is 10–50 times slower, which a small book does not notice.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.special import ndtr

from blotter.engine._alo import (
    BACKTRACKS,
    BORROW_MAX,
    BORROW_SPAN,
    D_NEGLIGIBLE,
    LAYER_NODES,
    LAYER_TOP,
    LAYER_WEIGHTS,
    LOOKBACK,
    MAX_STEP,
    NEWTON_MAX,
    NEWTON_TOL,
    PARTIALS_BELOW,
    TANGENT_STEP,
    WARM_MAX,
    WINDOW,
)

_INV_SQRT_2PI = 0.3989422804014327


def _pdf(x: np.ndarray | float) -> np.ndarray:
    """Standard normal density."""
    out: np.ndarray = _INV_SQRT_2PI * np.exp(-0.5 * np.square(x))
    return out


def exercise_level(r: float, q: float) -> float:
    """ln X, the put boundary's limit at u -> 0+: X = min(1, r/q), or 1 when q <= 0."""
    if q <= 0.0 or r >= q:
        return 0.0
    return math.log(r / q)


def exercise_slopes(r: float, q: float) -> tuple[float, float]:
    """∂ ln X/∂r at fixed b and ∂ ln X/∂b at fixed r."""
    if q > 0.0 and r < q:
        return 1.0 / r - 1.0 / q, 1.0 / q
    return 0.0, 0.0


def group_key(t: np.ndarray, r: np.ndarray, q: np.ndarray) -> np.ndarray:
    """The compiled ``group_key`` hash of (τ, rate, dividend yield), elementwise."""
    with np.errstate(over="ignore"):
        h = t.view(np.uint64) * np.uint64(0x9E3779B97F4A7C15)
        h ^= r.view(np.uint64) * np.uint64(0xC2B2AE3D27D4EB4F) + (h >> np.uint64(29))
        h ^= q.view(np.uint64) * np.uint64(0x165667B19E3779F9) + (h >> np.uint64(31))
    return h


def group_keys(t: np.ndarray, r: np.ndarray, q: np.ndarray, key: np.ndarray) -> None:
    """``group_key`` of each row into ``key``."""
    key[:] = group_key(np.ascontiguousarray(t), np.ascontiguousarray(r),
                       np.ascontiguousarray(q))


def prepare_rows(w: np.ndarray, s: np.ndarray, k: np.ndarray, t: np.ndarray, r: np.ndarray,
                 b: np.ndarray, v: np.ndarray, years_min: float, vol_min: float,
                 status: np.ndarray, lnx: np.ndarray, r_p: np.ndarray, q_p: np.ndarray,
                 lnv: np.ndarray, key: np.ndarray) -> None:
    """Status codes, put form, ln max(σ, ``vol_min``) and group keys of rows (see
    ``_alo.prepare_rows``)."""
    call = w > 0.0
    lnx[:] = np.where(call, np.log(k / s), np.log(s / k))
    r_p[:] = np.where(call, r - b, r)
    q_p[:] = np.where(call, r, r - b)
    st = np.ones(s.size, dtype=np.int8)
    st[(r_p > 0.0) | ((r_p == 0.0) & (q_p < 0.0))] = 0
    st[(q_p < r_p) & (r_p < 0.0)] = 2
    st[(st == 0) & (t < years_min)] = 5
    st[t <= 0.0] = 4
    status[:] = st
    lnv[:] = np.log(np.maximum(v, vol_min))
    key[:] = group_key(np.ascontiguousarray(t), r_p, q_p)


def _start(r: float, q: float, v: float, tmax: float, t: np.ndarray, lnx: float) -> np.ndarray:
    """The compiled ``_start``: perpetual boundary blended into X, capped by the near-expiry
    form where X = 1."""
    b = r - q
    v2 = v * v
    a = b / v2 - 0.5
    beta = -a - math.sqrt(a * a + 2.0 * r / v2)
    x = math.exp(lnx)
    b_inf = beta / (beta - 1.0)
    ln_inf = math.log(b_inf) if b_inf > 0.0 else -700.0
    out = np.full(t.size, lnx)
    if not x > b_inf:
        return out
    ti = tmax * t
    g = b_inf + (x - b_inf) * np.exp(-2.0 * v * np.sqrt(ti) * x / (x - b_inf))
    guess = np.minimum(np.log(g), lnx)
    if lnx == 0.0 and b > 0.0:
        arg = v2 / (8.0 * math.pi * b * b * ti)
        with np.errstate(divide="ignore", invalid="ignore"):
            near = np.where(arg > 1.0,
                            -v * np.sqrt(ti * np.maximum(np.log(np.maximum(arg, 1.0)), 1.0)),
                            0.0)
        guess = np.maximum(np.minimum(guess, near), ln_inf)
    return guess


def group_points(r: float, q: float, tmax: float, s_hat: np.ndarray, u_hat: np.ndarray,
                 w_hat: np.ndarray) -> np.ndarray:
    """The compiled ``group_points``: (6, P) = s, √s, u, w e^{ru}, w e^{qu}, 1/√s."""
    s = tmax * s_hat
    u = tmax * u_hat
    wt = tmax * w_hat
    ss = np.sqrt(s)
    return np.stack([s, ss, u, wt * np.exp(r * u), wt * np.exp(q * u), 1.0 / ss])


def residual(r: float, q: float, v: float, tmax: float, t: np.ndarray, pre: np.ndarray,
             wmat: np.ndarray, w0: np.ndarray, lnb: np.ndarray, full: bool,
             partials_below: float, squares: bool
             ) -> tuple[np.ndarray, np.ndarray | None, np.ndarray | None]:
    """The compiled ``residual``: R = L − ln f(L) (n,), and when ``full`` the Jacobian (n, n),
    and when moreover max |R| <= ``partials_below`` ∂ ln f/∂(σ, r, b) (n, 3)."""
    n = t.size
    m = pre.shape[1] // n
    b = r - q
    v2 = v * v
    mup = b + 0.5 * v2
    lnx = exercise_level(r, q)
    dlx_r, dlx_b = exercise_slopes(r, q)
    squared = squares and lnx == 0.0
    gap = lnx - lnb
    qp = wmat @ (gap * gap if squared else gap)
    gp = np.where(qp > 0.0, np.sqrt(np.maximum(qp, 0.0)), 0.0) if squared else qp
    ell = np.tile(lnb, m) - lnx + gp
    s, ss, u, er, eq, iss = pre
    iv = 1.0 / v
    vs = v * ss
    ivs = iv * iss
    ap = (ell + mup * s) * ivs
    am = ap - vs
    cpa = ndtr(ap)
    ppa = _pdf(ap)
    tn = er * _pdf(am) * ivs
    td = eq * (ppa * ivs + cpa)
    nl = -r * tn * am * ivs
    dl = q * eq * ppa * (1.0 - ap * ivs) * ivs
    ti = tmax * t
    sti = np.sqrt(ti)
    vst = v * sti
    dp = (lnb + mup * ti) / vst
    dm = dp - vst
    p0 = _pdf(dp)
    pm0 = _pdf(dm)
    num = pm0 / vst + r * tn.reshape(m, n).sum(axis=0)
    den = p0 / vst + ndtr(dp) + q * td.reshape(m, n).sum(axis=0)
    res = lnb - (-b * ti + np.log(num / den))
    if not full:
        return res, None, None
    inum = 1.0 / num
    iden = 1.0 / den
    c = nl * np.tile(inum, m) - dl * np.tile(iden, m)
    if squared:
        c = np.where(gp > 1e-150, c / np.where(gp > 1e-150, gp, 1.0), 0.0)
    jac = (c.reshape(m, n)[:, :, None] * wmat.reshape(m, n, n)).sum(axis=0)
    if squared:
        jac = jac * gap[None, :]
    num_l = -dm * pm0 / (v2 * ti)
    den_l = -dp * p0 / (v2 * ti) + p0 / vst
    jac[np.diag_indices(n)] += 1.0 - ((num_l + nl.reshape(m, n).sum(axis=0)) * inum
                                       - (den_l + dl.reshape(m, n).sum(axis=0)) * iden)
    if not np.max(np.abs(res)) <= partials_below:
        return res, jac, None
    dlb_lx = np.zeros_like(w0) if squared else w0
    dd = eq * ppa * (1.0 - ap * ivs)
    da_r = -dlb_lx * dlx_r * ivs
    da_b = ss * iv - dlb_lx * dlx_b * ivs
    vn = r * tn * (am * ap - 1.0) * iv
    vd = q * eq * ppa * ((ap * am - 1.0) * ivs - am) * iv
    rn = tn + r * tn * (u - am * da_r)
    rd = td + q * (td * u + dd * da_r)
    bn = -r * tn * am * da_b
    bd = -td + q * (-td * u + dd * da_b)

    def node_sum(a: np.ndarray) -> np.ndarray:
        out: np.ndarray = a.reshape(m, n).sum(axis=0)
        return out

    sv_n = pm0 / vst * (dm * dp - 1.0) * iv + node_sum(vn)
    sv_d = p0 / vst * (dp * dm - 1.0) * iv - p0 * dm * iv + node_sum(vd)
    sb_n = -dm * pm0 / v2 + node_sum(bn)
    sb_d = (-dp * p0 / vst + p0) * sti * iv + node_sum(bd)
    tang = np.stack([sv_n * inum - sv_d * iden,
                     node_sum(rn) * inum - node_sum(rd) * iden,
                     -ti + sb_n * inum - sb_d * iden], axis=1)
    return res, jac, tang


def newton(r: float, q: float, v: float, tmax: float, t: np.ndarray, pre: np.ndarray,
           wmat: np.ndarray, w0: np.ndarray, lnb: np.ndarray, tangents: np.ndarray,
           warm: bool, squares: bool, max_steps: int) -> tuple[int, np.ndarray]:
    """The compiled ``newton``: ln B into ``lnb`` and (σ, r, b) derivatives into
    ``tangents[0:3]``; returns the steps taken (−1 when not converged) and the last Jacobian."""
    n = t.size
    lnx = exercise_level(r, q)
    if not warm:
        lnb[:] = _start(r, q, v, tmax, t, lnx)
    steps = -1
    last = np.inf
    alpha = 1.0
    halved = 0
    back0 = np.zeros(n)
    back1 = np.zeros(n)
    jac = np.eye(n)
    tang = np.zeros((n, 3))
    for it in range(max_steps + 1):
        res, jac_new, tang_new = residual(r, q, v, tmax, t, pre, wmat, w0, lnb, True,
                                          PARTIALS_BELOW, squares)
        assert jac_new is not None
        size = float(np.sum(res * res))
        if not size < last and halved < BACKTRACKS and last < np.inf:
            alpha *= 0.5
            halved += 1
            lnb[:] = np.minimum(back0 - alpha * back1, lnx)
            continue
        jac = jac_new
        have = tang_new is not None
        with np.errstate(all="ignore"):
            try:
                cols = [res] if tang_new is None else [res, tang_new]
                rhs = np.linalg.solve(jac, np.column_stack(cols))
            except np.linalg.LinAlgError:
                break
        step = rhs[:, 0]
        if have:
            tang = rhs[:, 1:4]
        biggest = float(np.max(np.abs(step)))
        if not math.isfinite(biggest):
            break
        scale = 1.0 if biggest <= MAX_STEP else MAX_STEP / biggest
        back0 = lnb.copy()
        back1 = scale * step
        lnb[:] = np.minimum(lnb - back1, lnx)
        last = size
        alpha = 1.0
        halved = 0
        if biggest <= NEWTON_TOL and have:
            steps = it + 1
            break
    tangents[0:3] = tang.T
    return steps, jac


def second_tangent(r: float, q: float, v: float, tmax: float, t: np.ndarray, pre: np.ndarray,
                   wmat: np.ndarray, w0: np.ndarray, lnb: np.ndarray, tangents: np.ndarray,
                   jac: np.ndarray, squares: bool) -> None:
    """The compiled ``second_tangent``: ∂²L/∂(ln σ)² into ``tangents[3]``."""
    h = TANGENT_STEP
    d2 = np.zeros(t.size)
    for step, weight in ((2.0, -1.0), (1.0, 16.0), (0.0, -30.0), (-1.0, 16.0), (-2.0, -1.0)):
        trial = lnb + step * h * v * tangents[0]
        res, _, _ = residual(r, q, v * math.exp(step * h), tmax, t, pre, wmat, w0, trial,
                             False, 0.0, squares)
        d2 -= weight * res / (12.0 * h * h)
    with np.errstate(all="ignore"):
        tangents[3] = np.linalg.solve(jac, d2)


def chebyshev_rows(z: np.ndarray, n: int, power: float) -> np.ndarray:
    """Weights (len(z), n) of the node values (the node at u = 0 has value 0) in the Chebyshev
    interpolant at u/τmax = ``z`` (barycentric form, as the compiled ``chebyshev_row``)."""
    xk = np.cos(np.arange(n + 1) * (math.pi / n))
    xi = np.minimum(2.0 * np.maximum(z, 0.0) ** (1.0 / power) - 1.0, 1.0)
    lam = np.where(np.arange(n + 1) % 2 == 0, 1.0, -1.0)
    lam[0] *= 0.5
    lam[n] *= 0.5
    diff = xi[:, None] - xk[None, :]
    exact = diff == 0.0
    with np.errstate(divide="ignore", invalid="ignore"):
        c = lam[None, :] / diff
    c = np.where(exact.any(axis=1)[:, None], exact.astype(np.float64), c)
    out: np.ndarray = c[:, :n] / c.sum(axis=1)[:, None]
    return out


def borrow_start(g: int, k: int, g_r: np.ndarray, g_q: np.ndarray, g_tmax: np.ndarray,
                 g_ns: np.ndarray, g_lnsig: np.ndarray, g_lnb: np.ndarray, g_tan: np.ndarray,
                 g_steps: np.ndarray, t: np.ndarray, power: float) -> np.ndarray | None:
    """The compiled ``borrow_start``: a start for node ``k`` of group ``g`` from a group solved
    just before it, or None."""
    r = g_r[g]
    q = g_q[g]
    lnx = exercise_level(r, q)
    lv = g_lnsig[g, k]
    best = -1
    bk = 0
    score = np.inf
    for h in range(max(0, g - LOOKBACK), g):
        if g_steps[h] < 0 or g_tmax[h] < g_tmax[g] or g_tmax[h] > BORROW_SPAN * g_tmax[g]:
            continue
        if (exercise_level(g_r[h], g_q[h]) == 0.0) != (lnx == 0.0):
            continue
        dr = abs(g_r[h] - r)
        dq = abs(g_q[h] - q)
        if dr > BORROW_MAX or dq > BORROW_MAX:
            continue
        for kk in range(g_ns[h]):
            sc = dr + dq + 0.05 * abs(g_lnsig[h, kk] - lv)
            if sc < score:
                score = sc
                best = h
                bk = kk
    if best < 0:
        return None
    hx = exercise_level(g_r[best], g_q[best])
    dv = math.exp(lv) - math.exp(g_lnsig[best, bk])
    dr = r - g_r[best]
    db = (r - q) - (g_r[best] - g_q[best])
    rows = chebyshev_rows(g_tmax[g] / g_tmax[best] * t, t.size, power)
    tan = g_tan[best, bk]
    lb = hx - rows @ (hx - g_lnb[best, bk])
    dl = rows @ (dv * tan[0] + dr * tan[1] + db * tan[2])
    out: np.ndarray = np.minimum(lb + dl, lnx)
    return out


def side_start(lnsig: np.ndarray, lnb: np.ndarray, tan: np.ndarray, k: int, src: int,
               far: int, lnx: float) -> np.ndarray:
    """The compiled ``side_start``, returning the start."""
    x1 = lnsig[src]
    dx = lnsig[k] - x1
    if far < 0:
        out: np.ndarray = np.minimum(lnb[src] + dx * math.exp(x1) * tan[src, 0], lnx)
        return out
    x0 = lnsig[far]
    h = x1 - x0
    z = (lnsig[k] - x0) / h
    cubic = ((2.0 * z**3 - 3.0 * z**2 + 1.0) * lnb[far]
             + (z**3 - 2.0 * z**2 + z) * h * math.exp(x0) * tan[far, 0]
             + (3.0 * z**2 - 2.0 * z**3) * lnb[src]
             + (z**3 - z**2) * h * math.exp(x1) * tan[src, 0])
    out = np.minimum(cubic, lnx)
    return out


def solve_groups(g_r: np.ndarray, g_q: np.ndarray, g_tmax: np.ndarray, g_ns: np.ndarray,
                 g_lnsig: np.ndarray, t: np.ndarray, s_hat: np.ndarray, u_hat: np.ndarray,
                 w_hat: np.ndarray, wmat: np.ndarray, wmat_t: np.ndarray, w0: np.ndarray,
                 g_lnb: np.ndarray, g_tan: np.ndarray, g_steps: np.ndarray,
                 second: bool, squares: bool, power: float) -> None:
    """The compiled ``solve_groups`` (same arguments; ``wmat_t`` unused)."""
    n = t.size
    good = np.zeros(g_lnsig.shape[1], dtype=bool)
    for g in range(g_r.size):
        r = g_r[g]
        q = g_q[g]
        tmax = g_tmax[g]
        lnx = exercise_level(r, q)
        pre = group_points(r, q, tmax, s_hat, u_hat, w_hat)
        ns = g_ns[g]
        mid = ns // 2
        worst = 0
        for o in range(ns):
            k = mid - (o + 1) // 2 if o % 2 == 1 else mid + o // 2
            if k < 0 or k >= ns:
                continue
            v = math.exp(g_lnsig[g, k])
            lnb = g_lnb[g, k]
            warm = o > 0
            if warm:
                src = k + 1 if k < mid else k - 1
                far = k + 2 if k < mid else k - 2
                if o < 2 or far < 0 or far >= ns or not good[far]:
                    far = -1
                lnb[:] = side_start(g_lnsig[g], g_lnb[g], g_tan[g], k, src, far, lnx)
            else:
                start = borrow_start(g, k, g_r, g_q, g_tmax, g_ns, g_lnsig, g_lnb, g_tan,
                                     g_steps, t, power)
                warm = start is not None
                if start is not None:
                    lnb[:] = start
            st = -1
            jac = np.eye(n)
            for _attempt in range(2):
                st, jac = newton(r, q, v, tmax, t, pre, wmat, w0, lnb, g_tan[g, k], warm,
                                 squares, WARM_MAX if warm else NEWTON_MAX)
                if st >= 0 or not warm:
                    break
                warm = False
            if st >= 0 and second and ns == 1:
                second_tangent(r, q, v, tmax, t, pre, wmat, w0, lnb, g_tan[g, k], jac,
                               squares)
            else:
                g_tan[g, k, 3] = 0.0
            good[k] = st >= 0
            if st < 0:
                worst = -1
            elif worst >= 0:
                worst = max(worst, st)
        g_steps[g] = worst


def boundary_tables(r: float, q: float, v: float, lnb: np.ndarray, tangents: np.ndarray,
                    wq: np.ndarray, nd: int, squares: bool) -> tuple[np.ndarray, np.ndarray]:
    """The compiled ``boundary_table``: ln B at the price nodes (nq + 1,) and its derivatives
    in (ln σ, r, b, (ln σ)²) (4, nq + 1), the first ``nd`` of them; ``wq`` (nq + 1, n)."""
    lnx = exercise_level(r, q)
    dlx_r, dlx_b = exercise_slopes(r, q)
    squared = squares and lnx == 0.0
    gk = lnx - lnb
    lam = v * tangents[0]
    if squared:
        qk = gk * gk
        cs = np.stack([-2.0 * gk * lam, 2.0 * gk * (dlx_r - tangents[1]),
                       2.0 * gk * (dlx_b - tangents[2]), 2.0 * lam * lam - 2.0 * gk * tangents[3]])
    else:
        qk = gk
        cs = np.stack([-lam, dlx_r - tangents[1], dlx_b - tangents[2], -tangents[3]])
    acc = wq @ qk
    dacc = cs @ wq.T
    dlq = np.zeros((4, acc.size))
    if not squared:
        lq = lnx - acc
        if nd > 0:
            dlq[0] = -dacc[0]
            dlq[1] = dlx_r - dacc[1]
            dlq[2] = dlx_b - dacc[2]
        if nd == 4:
            dlq[3] = -dacc[3]
        return lq, dlq
    sh = np.where(acc > 0.0, np.sqrt(np.maximum(acc, 0.0)), 0.0)
    lq = lnx - sh
    if nd > 0:
        inv = np.where(sh > 1e-150, 0.5 / np.where(sh > 1e-150, sh, 1.0), 0.0)
        dlq[0] = -dacc[0] * inv
        dlq[1] = dlx_r - dacc[1] * inv
        dlq[2] = dlx_b - dacc[2] * inv
        if nd == 4:
            dlq[3] = -dacc[3] * inv + 2.0 * dacc[0] * dacc[0] * inv * inv * inv
    return lq, dlq


def hermite_weights(x: np.ndarray, nodes: np.ndarray
                    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The compiled ``hermite_weights`` for many points: w0, w1 (3, len(x), ns) and the
    Lagrange weights (len(x), ns)."""
    ns = nodes.size
    w0 = np.empty((3, x.size, ns))
    w1 = np.empty((3, x.size, ns))
    lag = np.empty((x.size, ns))
    for k in range(ns):
        p0 = np.ones_like(x)
        p1 = np.zeros_like(x)
        p2 = np.zeros_like(x)
        den = 1.0
        c = 0.0
        for mm in range(ns):
            if mm == k:
                continue
            f = x - nodes[mm]
            p2 = p2 * f + 2.0 * p1
            p1 = p1 * f + p0
            p0 = p0 * f
            den *= nodes[k] - nodes[mm]
            c += 1.0 / (nodes[k] - nodes[mm])
        l0 = p0 / den
        l1 = p1 / den
        l2 = p2 / den
        lag[:, k] = l0
        q0 = l0 * l0
        q1 = 2.0 * l0 * l1
        q2 = 2.0 * l1 * l1 + 2.0 * l0 * l2
        dx = x - nodes[k]
        a0 = 1.0 - 2.0 * c * dx
        a1 = -2.0 * c
        w0[0, :, k] = a0 * q0
        w0[1, :, k] = a1 * q0 + a0 * q1
        w0[2, :, k] = 2.0 * a1 * q1 + a0 * q2
        w1[0, :, k] = dx * q0
        w1[1, :, k] = q0 + dx * q1
        w1[2, :, k] = 2.0 * q1 + dx * q2
    return w0, w1, lag


def european_puts(x: np.ndarray, tau: float, r: float, q: float, v: np.ndarray) -> np.ndarray:
    """The compiled ``european_put`` for many rows: (9, rows) = price, delta, gamma, speed,
    vega, vanna, volga, rho, carry rho (strike 1, spot x)."""
    b = r - q
    st = math.sqrt(tau)
    vst = v * st
    d1 = (np.log(x) + (b + 0.5 * v * v) * tau) / vst
    d2 = d1 - vst
    dq = math.exp(-q * tau)
    dr = math.exp(-r * tau)
    nd1 = ndtr(-d1)
    pd1 = _pdf(d1)
    g = np.empty((9, x.size))
    g[0] = dr * ndtr(-d2) - x * dq * nd1
    g[1] = -dq * nd1
    g[2] = dq * pd1 / (x * vst)
    g[3] = -g[2] / x * (1.0 + d1 / vst)
    g[4] = x * dq * pd1 * st
    g[5] = -dq * pd1 * d2 / v
    g[6] = g[4] * d1 * d2 / v
    g[7] = -tau * g[0]
    g[8] = -x * tau * dq * nd1
    return g


def value_groups(g_r: np.ndarray, g_q: np.ndarray, g_tau: np.ndarray, g_tmax: np.ndarray,
                 g_ns: np.ndarray, g_lnsig: np.ndarray, g_lnb: np.ndarray, g_tan: np.ndarray,
                 g_steps: np.ndarray, g_first: np.ndarray, order: np.ndarray,
                 row_lnx: np.ndarray, row_v: np.ndarray, row_s: np.ndarray, row_k: np.ndarray,
                 row_w: np.ndarray, wq_t: np.ndarray, power: float, ts_x: np.ndarray,
                 ts_w: np.ndarray, vol_min: float, greeks: bool, out: np.ndarray,
                 near: np.ndarray, squares: bool, inner: int) -> None:
    """The compiled ``value_groups`` (same arguments), a group at a time over all its rows."""
    nq = ts_x.size
    n = wq_t.shape[0]
    for g in range(g_r.size):
        if g_steps[g] < 0:
            continue
        ns = int(g_ns[g])
        r = float(g_r[g])
        q = float(g_q[g])
        tau = float(g_tau[g])
        tmax = float(g_tmax[g])
        rows = order[g_first[g]:g_first[g + 1]]
        s = tau * ts_x * ts_x
        wt = tau * 2.0 * ts_x * ts_w
        ss = np.sqrt(s)
        er = np.exp(-r * s)
        eq = np.exp(-q * s)
        iss = 1.0 / ss
        if tau != tmax:
            z = (tau / tmax) * np.append(1.0 - ts_x * ts_x, 1.0)
            wq = chebyshev_rows(z, n, power)
        else:
            wq = wq_t.T
        nd = 4 if (greeks and ns == 1) else (3 if (greeks or ns > 1) else 0)
        tabs = [boundary_tables(r, q, math.exp(g_lnsig[g, k]), g_lnb[g, k], g_tan[g, k], wq,
                                nd, squares) for k in range(ns)]
        lq_k = np.stack([a for a, _ in tabs])                # (ns, nq + 1)
        dlq_k = np.stack([d for _, d in tabs])               # (ns, 4, nq + 1)
        v = np.maximum(row_v[rows], vol_min)
        m = rows.size
        if ns == 1:
            lq = np.repeat(lq_k[0][None, :], m, axis=0)
            if greeks:
                iv = 1.0 / v[:, None]
                a1 = dlq_k[0, 0][None, :]
                dlq = np.stack([a1 * iv, np.repeat(dlq_k[0, 1][None, :], m, axis=0),
                                np.repeat(dlq_k[0, 2][None, :], m, axis=0)])
                d2lq = (dlq_k[0, 3][None, :] - a1) * iv * iv
        else:
            lv = np.log(v)
            width = min(ns, WINDOW)
            k0 = np.zeros(m, dtype=np.int64)
            for i in range(m):
                kk = 0
                while kk + width < ns and g_lnsig[g, kk + width // 2] < lv[i]:
                    kk += 1
                k0[i] = kk
            lq = np.empty((m, nq + 1))
            dlq = np.empty((3, m, nq + 1))
            d2lq = np.empty((m, nq + 1))
            for start in np.unique(k0):
                sel = np.flatnonzero(k0 == start)
                win = slice(int(start), int(start) + width)
                w0, w1, lag = hermite_weights(lv[sel], g_lnsig[g, win])
                f = lq_k[win]
                d = dlq_k[win, 0]
                lq[sel] = w0[0] @ f + w1[0] @ d
                if greeks:
                    a1 = w0[1] @ f + w1[1] @ d
                    a2 = w0[2] @ f + w1[2] @ d
                    iv = 1.0 / v[sel, None]
                    dlq[0, sel] = a1 * iv
                    dlq[1, sel] = lag @ dlq_k[win, 1]
                    dlq[2, sel] = lag @ dlq_k[win, 2]
                    d2lq[sel] = (a2 - a1) * iv * iv
        _value_rows(g, rows, row_lnx, row_v, row_s, row_k, row_w, tau, r, q, lq,
                    dlq if greeks else None, d2lq if greeks else None,
                    (s, wt, ss, er, eq, iss), greeks, out, near, inner)


def refined_rule(lnxs: float, v: float, r: float, q: float, lq: np.ndarray, dlq: np.ndarray,
                 d2lq: np.ndarray, nodes: tuple[np.ndarray, ...], inner: int
                 ) -> tuple[tuple[np.ndarray, ...], np.ndarray, np.ndarray, np.ndarray]:
    """The compiled ``refined_rule`` for one row (``lq`` (nq + 1,), ``dlq`` (3, nq + 1),
    ``d2lq`` (nq + 1,), ``nodes`` as ``_value_rows`` takes them)."""
    s, wt, ss, er, eq, iss = nodes
    nq = s.size
    y_hi = ss[inner - 1]
    y1 = ss[0] + y_hi
    d0 = (lnxs - lq[nq]) / v
    z1 = d0 / y1
    half = 0.5 * (max(LAYER_TOP, z1) - z1)
    z = z1 + half * (1.0 - LAYER_NODES)
    y = d0 / z
    s_r = y * y
    f = s_r / (y_hi * y_hi)
    nodes_r = (np.concatenate([s_r, s[inner:]]),
               np.concatenate([2.0 * y * (d0 / (z * z)) * half * LAYER_WEIGHTS, wt[inner:]]),
               np.concatenate([y, ss[inner:]]), np.concatenate([np.exp(-r * s_r), er[inner:]]),
               np.concatenate([np.exp(-q * s_r), eq[inner:]]),
               np.concatenate([1.0 / y, iss[inner:]]))

    def on(a: np.ndarray) -> np.ndarray:
        near0 = a[..., nq:nq + 1] + (a[..., inner - 1:inner] - a[..., nq:nq + 1]) * f
        out: np.ndarray = np.concatenate([near0, a[..., inner:]], axis=-1)
        return out

    return nodes_r, on(lq), on(dlq), on(d2lq)


def _value_rows(g: int, rows: np.ndarray, row_lnx: np.ndarray, row_v: np.ndarray,
                row_s: np.ndarray, row_k: np.ndarray, row_w: np.ndarray, tau: float, r: float,
                q: float, lq: np.ndarray, dlq: np.ndarray | None, d2lq: np.ndarray | None,
                nodes: tuple[np.ndarray, ...], greeks: bool, out: np.ndarray,
                near: np.ndarray, inner: int) -> None:
    """The compiled ``value_put`` and the conversion to call or put of ``value_groups``, for
    the rows of group ``g`` (boundaries ``lq`` (rows, nq + 1) with derivatives); a row near
    its boundary again on its ``refined_rule``."""
    _value_rows_on(rows, row_lnx, row_v, row_s, row_k, row_w, tau, r, q, lq, dlq, d2lq, nodes,
                   greeks, out, near)
    s, ss = nodes[0], nodes[2]
    nq = s.size
    if not 0 < inner < nq:
        return
    lnxs = row_lnx[rows]
    v = np.maximum(row_v[rows], 1e-8)
    mum = r - q - 0.5 * v * v
    dmn = ((lnxs[:, None] - lq[:, :inner] + mum[:, None] * s[:inner])
           / (v[:, None] * ss[:inner]))
    for i in np.flatnonzero((lnxs > lq[:, nq]) & (dmn <= D_NEGLIGIBLE).any(axis=1)):
        d1 = dlq[:, i] if dlq is not None else np.zeros((3, nq + 1))
        d2 = d2lq[i] if d2lq is not None else np.zeros(nq + 1)
        nodes_r, lq_r, dlq_r, d2lq_r = refined_rule(float(lnxs[i]), float(v[i]), r, q, lq[i],
                                                    d1, d2, nodes, inner)
        _value_rows_on(rows[i:i + 1], row_lnx, row_v, row_s, row_k, row_w, tau, r, q,
                       lq_r[None, :], dlq_r[:, None, :], d2lq_r[None, :], nodes_r, greeks,
                       out, near)


def _value_rows_on(rows: np.ndarray, row_lnx: np.ndarray, row_v: np.ndarray,
                   row_s: np.ndarray, row_k: np.ndarray, row_w: np.ndarray, tau: float,
                   r: float, q: float, lq: np.ndarray, dlq: np.ndarray | None,
                   d2lq: np.ndarray | None, nodes: tuple[np.ndarray, ...], greeks: bool,
                   out: np.ndarray, near: np.ndarray) -> None:
    """``_value_rows`` on the rule ``nodes`` as given."""
    s, wt, ss, er, eq, iss = nodes
    nq = s.size
    lnxs = row_lnx[rows]
    xs = np.exp(lnxs)
    v = np.maximum(row_v[rows], 1e-8)
    b = r - q
    v2 = v * v
    mup = b + 0.5 * v2
    mum = b - 0.5 * v2
    live = lnxs > lq[:, nq]
    eu = european_puts(xs, tau, r, q, v)
    iv = 1.0 / v
    x = lnxs[:, None] - lq[:, :nq]
    # nodes before the first whose d₋ is at most D_NEGLIGIBLE add nothing (as compiled)
    dmn = (x + mum[:, None] * s) * iv[:, None] * iss
    ok = dmn <= D_NEGLIGIBLE
    j0 = np.where(ok.any(axis=1), np.argmax(ok, axis=1), nq)
    use = np.arange(nq)[None, :] >= j0[:, None]
    ivs = iv[:, None] * iss
    vs = v[:, None] * ss
    dp = (x + mup[:, None] * s) * ivs
    dm = dp - vs
    cp = ndtr(-dp)
    cm = ndtr(-dm)
    terms = wt * (r * er * cm - q * xs[:, None] * eq * cp)
    res = np.zeros((10, rows.size))
    res[0] = eu[0] + np.where(use, terms, 0.0).sum(axis=1)
    if greeks:
        assert dlq is not None and d2lq is not None
        pp = _pdf(dp)
        e = eq * pp
        rb = r * np.exp(-lq[:, :nq])
        c = q - rb
        gq = q - c * dp * ivs
        xs2 = xs[:, None]
        ivc = iv[:, None]
        f_l = -xs2 * e * c * ivs
        f_v = e * xs2 * ivc * (rb * dp - q * dm)
        f_r = er * cm * (1.0 - r * s) - xs2 * eq * cp * (1.0 - q * s)
        f_b = xs2 * eq * (1.0 - q * s) * cp + xs2 * e * c * ss * ivc
        f_sv = -q * e * dm * ivc + c * e * (dp * dm - 1.0) * ivc * ivs
        f_sl = e * c * ivs * (dp * ivs - 1.0)
        f_vl = -xs2 * c * e * (dp * dm - 1.0) * ivc * ivs
        f_ll = -xs2 * e * ivs * (c * dp * ivs + rb)
        f_vv = xs2 * e * ivc * ivc * ((dp * dm - 1.0) * (rb * dp - q * dm) - rb * dm + q * dp)
        lv = dlq[0][:, :nq]
        ixs = 1.0 / xs2

        def total(term: np.ndarray) -> np.ndarray:
            out_: np.ndarray = np.where(use, wt * term, 0.0).sum(axis=1)
            return out_

        dl = eu[1] + total(-q * eq * cp + e * c * ivs)
        gm = eu[2] + total(e * ivs * ixs * gq)
        sp = eu[3] + total(e * ivs * ixs * ixs * (-gq - dp * gq * ivs - c * ivs * ivs))
        res[1] = dl
        res[2] = gm
        res[3] = eu[4] + total(f_v + f_l * lv)
        res[5] = eu[7] + total(f_r + f_l * dlq[1][:, :nq])
        res[6] = eu[8] + total(f_b + f_l * dlq[2][:, :nq])
        res[7] = eu[5] + total(f_sv + f_sl * lv)
        res[8] = eu[6] + total(f_vv + 2.0 * f_vl * lv + f_ll * lv * lv
                               + f_l * d2lq[:, :nq])
        res[4] = -(0.5 * v2 * xs * xs * gm + b * xs * dl - r * res[0])
        res[9] = -(v2 * xs * gm + 0.5 * v2 * xs * xs * sp + (b - r) * dl + b * xs * gm)
    # the exercise region: intrinsic, delta −1, the rest 0
    ex = ~live
    res[0, ex] = 1.0 - xs[ex]
    if greeks:
        res[1, ex] = -1.0
        res[2:, ex] = 0.0
    call = row_w[rows] > 0.0
    sc = np.where(call, row_s[rows], row_k[rows])
    value = sc * np.where(live, np.maximum(res[0], eu[0]), res[0])
    out[0, rows] = np.maximum(np.maximum(value, row_w[rows] * (row_s[rows] - row_k[rows])), 0.0)
    near[rows] = live & (res[0] - eu[0] <= 1e-9)
    if not greeks:
        return
    out[1, rows] = np.where(call, res[0] - xs * res[1], res[1])
    out[2, rows] = np.where(call, xs * xs * res[2], res[2]) / sc
    out[3, rows] = sc * res[3]
    out[4, rows] = sc * res[4]
    out[5, rows] = sc * res[5]
    out[6, rows] = np.where(call, -sc * (res[5] + res[6]), sc * res[6])
    out[7, rows] = np.where(call, res[3] - xs * res[7], res[7])
    out[8, rows] = sc * res[8]
    out[9, rows] = np.where(call, res[4] - xs * res[9], res[9])
