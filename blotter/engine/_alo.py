"""Compiled kernels of the American method: the exercise boundary of a put and the price and
greeks of puts over a given boundary, in units of the strike (K = 1).

The method is the integral equation for the early-exercise boundary B(u) of an American put
(Kim 1990), solved as in Andersen, Lake & Offengenden (2016, "High-performance American option
pricing", Journal of Computational Finance 20(1)): with u the time to expiry, X = min(1, r/q)
(X = 1 when q <= 0) the boundary at u -> 0+ and μ± = b ± σ²/2 (b = r − q),

    B(τ) = e^{−bτ} N(τ, B) / D(τ, B),
    N = φ(d₋(τ, B)) / (σ√τ) + r ∫_0^τ e^{ru} φ(d₋(τ−u, B(τ)/B(u))) / (σ√(τ−u)) du,
    D = φ(d₊(τ, B)) / (σ√τ) + Φ(d₊(τ, B))
        + q ∫_0^τ e^{qu} [φ(d₊(τ−u, B(τ)/B(u))) / (σ√(τ−u)) + Φ(d₊(τ−u, B(τ)/B(u)))] du,
    d±(s, z) = (ln z + μ± s) / (σ√s).

The boundary is represented by H = (ln(B/X))² at the n + 1 Chebyshev–Lobatto nodes of
ξ = 2√(u/τmax) − 1 (H = 0 at u = 0), interpolated by Chebyshev polynomials in ξ. The equation is
solved at the n nodes u > 0 by Newton's method on L = ln B, with the full Jacobian (the
paper iterates the fixed point with a diagonal Newton correction; the full Jacobian converges
in 3–8 steps from the start below, and the same Jacobian gives the boundary's sensitivities to
σ, r and b by the implicit function theorem). Each node's integral is split at u = τ_i/2 and
each half integrated by Gauss–Legendre in √u (near u = 0, where B has a square-root profile)
and in √(τ_i − u) (near u = τ_i, where the integrand has 1/√(τ_i − u)).

A put's value is the European value plus the early-exercise premium
∫_0^τ [r e^{−rs} Φ(−d₋(s, S/B(τ−s))) − q S e^{−qs} Φ(−d₊(s, S/B(τ−s)))] ds, integrated by
Gauss–Legendre panels in √s that halve towards s = 0, where the integrand changes on the scale
of ln(S/B)/σ (``graded_rule``), and Gauss–Legendre in √u near u = 0, where B has its
square-root profile. Delta, gamma and the third spot
derivative are derivatives at a fixed boundary (the boundary does not depend on S); vega, rho
and carry rho add the boundary's own sensitivities, and vanna and volga its first and second
derivatives in σ (``hermite_weights``).
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

_INV_SQRT_2PI = 0.3989422804014327
_INV_SQRT2 = 0.7071067811865476

N_NODES = 12
"""Chebyshev intervals n of the boundary in √u (n + 1 nodes, one of them u = 0)."""
N_GAUSS = 8
"""Gauss–Legendre points on each half of a node's integral (2 × N_GAUSS per node)."""
GRADED = (14, 5, 6)
"""Price rule (``graded_rule``): panels halving towards s = 0, points per panel, points on the
far half (81 points in all)."""
NEWTON_MAX = 60
"""Newton steps before a boundary is reported as not converged."""
NEWTON_TOL = 1e-12
"""Largest change of ln B at any node that ends the Newton iteration."""
D_NEGLIGIBLE = 8.5
"""Price nodes where d₋ (<= d₊) exceeds this add nothing: Φ(−8.5) ≈ 1e-17 and the greeks'
terms carry φ(d₊) ≈ 1e-16 times powers of d/σ√s that stay below it."""
MAX_STEP = 0.5
"""Largest change of ln B per Newton step (a guard far from the solution)."""


@njit(cache=True, nogil=True, error_model="numpy")
def ncdf(x: float) -> float:
    """Standard normal CDF Φ(x)."""
    return 0.5 * math.erfc(-x * _INV_SQRT2)


@njit(cache=True, nogil=True, error_model="numpy")
def npdf(x: float) -> float:
    """Standard normal density φ(x)."""
    return _INV_SQRT_2PI * math.exp(-0.5 * x * x)


def chebyshev_weights(n: int, xi: np.ndarray) -> np.ndarray:
    """Matrix W (len(xi), n + 1) with Σ_k W[p, k] H_k = the Chebyshev interpolant through
    (cos(kπ/n), H_k) at xi[p]."""
    k = np.arange(n + 1)
    half = np.ones(n + 1)
    half[0] = half[-1] = 0.5
    coef = (2.0 / n) * np.cos(np.outer(k, k) * np.pi / n) * half[None, :]
    basis = np.cos(np.outer(np.arccos(np.clip(xi, -1.0, 1.0)), k)) * half[None, :]
    out: np.ndarray = basis @ coef
    return out


def solver_tables(n: int = N_NODES, half: int = N_GAUSS) -> dict[str, np.ndarray]:
    """Node times, quadrature points and interpolation weights of the boundary solver, with
    times in units of τmax: ``t`` (n,), ``s``, ``u``, ``w`` (n, 2 half), ``W`` (n, 2 half, n)."""
    xi = np.cos(np.arange(n + 1) * np.pi / n)
    t = (1.0 + xi[:n]) ** 2 / 4.0
    y, gw = np.polynomial.legendre.leggauss(half)
    s = np.empty((n, 2 * half))
    u = np.empty((n, 2 * half))
    w = np.empty((n, 2 * half))
    for i in range(n):
        h = math.sqrt(t[i] / 2.0)
        a = h * (1.0 + y) / 2.0
        # first half: u in [0, t/2] by √u = a; second half: s in [0, t/2] by √s = a
        u[i, :half] = a * a
        s[i, :half] = t[i] - a * a
        s[i, half:] = a * a
        u[i, half:] = t[i] - a * a
        w[i, :half] = gw * (h / 2.0) * 2.0 * a
        w[i, half:] = gw * (h / 2.0) * 2.0 * a
    full = chebyshev_weights(n, 2.0 * np.sqrt(np.maximum(u.ravel(), 0.0)) - 1.0)
    return {"t": t, "s": s, "u": u, "w": w,
            "W": np.ascontiguousarray(full[:, :n].reshape(n, 2 * half, n))}


def tanh_sinh(step: float, half: int) -> tuple[np.ndarray, np.ndarray]:
    """Nodes in (0, 1) and weights of the tanh-sinh rule for ∫_0^1."""
    k = np.arange(-half, half + 1) * step
    arg = 0.5 * np.pi * np.sinh(k)
    x = 0.5 * (1.0 + np.tanh(arg))
    w = 0.5 * step * 0.5 * np.pi * np.cosh(k) / np.cosh(arg) ** 2
    keep = (x > 0.0) & (x < 1.0) & (w > 1e-300)
    return x[keep], w[keep]


def graded_rule(panels: int = 12, per_panel: int = 4, far: int = 6
                ) -> tuple[np.ndarray, np.ndarray]:
    """Nodes x in (0, 1) and weights of a rule for ∫_0^1 g(x) dx with x = √(s/τ): on x² <= ½,
    Gauss–Legendre panels halving towards x = 0 (the layer of width ln(S/B)/σ at s -> 0 is
    resolved at any scale down to 2^-panels); on x² >= ½, Gauss–Legendre in √(u/τ) =
    √(1 − x²) (the boundary's square-root profile at u -> 0)."""
    y, gw = np.polynomial.legendre.leggauss(per_panel)
    xs: list[np.ndarray] = []
    ws: list[np.ndarray] = []
    top = math.sqrt(0.5)
    edges = [top * 0.5 ** k for k in range(panels + 1)] + [0.0]
    for a, c in zip(edges[1:], edges[:-1], strict=True):
        xs.append(a + (c - a) * (1.0 + y) / 2.0)
        ws.append(gw * (c - a) / 2.0)
    yf, gf = np.polynomial.legendre.leggauss(far)
    v = top * (1.0 + yf) / 2.0
    xs.append(np.sqrt(1.0 - v * v))
    ws.append(gf * top / 2.0 * v / np.sqrt(1.0 - v * v))
    x = np.concatenate(xs)
    w = np.concatenate(ws)
    order = np.argsort(x)
    return x[order], w[order]


@njit(cache=True, nogil=True, error_model="numpy")
def exercise_level(r: float, q: float) -> float:
    """ln X, the put boundary's limit at u -> 0+: X = min(1, r/q), or 1 when q <= 0."""
    if q <= 0.0 or r >= q:
        return 0.0
    return math.log(r / q)


@njit(cache=True, nogil=True, error_model="numpy")
def exercise_slopes(r: float, q: float) -> tuple[float, float]:
    """∂ ln X/∂r at fixed b and ∂ ln X/∂b at fixed r (X = r/q only when 0 < r < q)."""
    if q > 0.0 and r < q:
        return 1.0 / r - 1.0 / q, 1.0 / q
    return 0.0, 0.0


@njit(cache=True, nogil=True, error_model="numpy")
def _start(r: float, q: float, v: float, tmax: float, t: np.ndarray, lnx: float,
           out: np.ndarray) -> None:
    """A first guess of ln B at the nodes: the perpetual boundary blended into X over σ√u."""
    b = r - q
    v2 = v * v
    a = b / v2 - 0.5
    beta = -a - math.sqrt(a * a + 2.0 * r / v2)
    x = math.exp(lnx)
    b_inf = beta / (beta - 1.0)
    for i in range(t.size):
        ti = tmax * t[i]
        if x > b_inf:
            g = b_inf + (x - b_inf) * math.exp(-2.0 * v * math.sqrt(ti) * x / (x - b_inf))
            out[i] = min(math.log(g), lnx)
        else:
            out[i] = lnx


@njit(cache=True, nogil=True, error_model="numpy")
def lu_solve(a: np.ndarray, rhs: np.ndarray, piv: np.ndarray) -> None:
    """Solve a x = rhs in place (``rhs`` (n, k) becomes x) by Gaussian elimination with partial
    pivoting; ``a`` (n, n) is overwritten by its factors."""
    n = a.shape[0]
    k = rhs.shape[1]
    for c in range(n):
        p = c
        big = abs(a[c, c])
        for i in range(c + 1, n):
            if abs(a[i, c]) > big:
                big = abs(a[i, c])
                p = i
        piv[c] = p
        if p != c:
            for j in range(n):
                a[c, j], a[p, j] = a[p, j], a[c, j]
            for j in range(k):
                rhs[c, j], rhs[p, j] = rhs[p, j], rhs[c, j]
        inv = 1.0 / a[c, c] if a[c, c] != 0.0 else 0.0
        for i in range(c + 1, n):
            f = a[i, c] * inv
            if f != 0.0:
                for j in range(c + 1, n):
                    a[i, j] -= f * a[c, j]
                for j in range(k):
                    rhs[i, j] -= f * rhs[c, j]
    for c in range(n - 1, -1, -1):
        inv = 1.0 / a[c, c] if a[c, c] != 0.0 else 0.0
        for j in range(k):
            acc = rhs[c, j]
            for i in range(c + 1, n):
                acc -= a[c, i] * rhs[i, j]
            rhs[c, j] = acc * inv


@njit(cache=True, nogil=True, error_model="numpy")
def solve_boundary(r: float, q: float, v: float, tmax: float, t: np.ndarray, s_hat: np.ndarray,
                   u_hat: np.ndarray, w_hat: np.ndarray, wmat: np.ndarray, lnb: np.ndarray,
                   tangents: np.ndarray, warm: bool) -> int:
    """Solve ln B at the nodes into ``lnb`` (n,) (which holds the start when ``warm``) and its
    derivatives in (σ, r, b) into ``tangents`` (3, n); returns the Newton steps taken, or −1
    when the iteration did not converge. Put form: rate r >= 0, dividend yield q, vol σ > 0.

    A start that does not converge is retried from the perpetual guess with steps capped at
    a tenth of ``MAX_STEP`` (seen where X = r/q is just below 1, whose boundary drops steeply
    near u = 0)."""
    steps = _newton(r, q, v, tmax, t, s_hat, u_hat, w_hat, wmat, lnb, tangents, warm, MAX_STEP)
    if steps < 0:
        steps = _newton(r, q, v, tmax, t, s_hat, u_hat, w_hat, wmat, lnb, tangents, False,
                        0.1 * MAX_STEP)
    return steps


@njit(cache=True, nogil=True, error_model="numpy")
def _newton(r: float, q: float, v: float, tmax: float, t: np.ndarray, s_hat: np.ndarray,
            u_hat: np.ndarray, w_hat: np.ndarray, wmat: np.ndarray, lnb: np.ndarray,
            tangents: np.ndarray, warm: bool, max_step: float) -> int:
    """One Newton run of ``solve_boundary`` with steps capped at ``max_step`` in ln B."""
    n = t.size
    m = s_hat.shape[1]
    b = r - q
    v2 = v * v
    mup = b + 0.5 * v2
    mum = b - 0.5 * v2
    lnx = exercise_level(r, q)
    dlx_r, dlx_b = exercise_slopes(r, q)
    if not warm:
        _start(r, q, v, tmax, t, lnx, lnb)
    # iteration-invariant quantities at the quadrature points
    pre = np.empty((4, n, m))
    for i in range(n):
        for j in range(m):
            s = tmax * s_hat[i, j]
            u = tmax * u_hat[i, j]
            wt = tmax * w_hat[i, j]
            pre[0, i, j] = s
            pre[1, i, j] = math.sqrt(s)
            pre[2, i, j] = wt * math.exp(r * u)
            pre[3, i, j] = wt * math.exp(q * u)
    jac = np.empty((n, n))
    rhs = np.empty((n, 4))
    hn = np.empty(n)
    gap = np.empty(n)
    cn = np.empty(n)
    cd = np.empty(n)
    piv = np.empty(n, dtype=np.int64)
    steps = -1
    for it in range(NEWTON_MAX + 1):
        for k in range(n):
            gap[k] = lnx - lnb[k]
            hn[k] = gap[k] * gap[k]
        for i in range(n):
            ti = tmax * t[i]
            sti = math.sqrt(ti)
            vst = v * sti
            dp = (lnb[i] + mup * ti) / vst
            dm = (lnb[i] + mum * ti) / vst
            pp0 = npdf(dp)
            pm0 = npdf(dm)
            num = pm0 / vst
            den = pp0 / vst + ncdf(dp)
            # derivatives of the terms outside the integrals in ln B(τ_i), σ and b
            num_l = -dm * pm0 / (v2 * ti)
            den_l = -dp * pp0 / (v2 * ti) + pp0 / vst
            num_v = num * (dm * dp - 1.0) / v
            den_v = pp0 / vst * (dp * dm - 1.0) / v - pp0 * dm / v
            num_b = -dm * pm0 / (v * v)
            den_b = (-dp * pp0 / vst + pp0) * sti / v
            num_r = 0.0
            den_r = 0.0
            sum_nl = 0.0
            sum_dl = 0.0
            for k in range(n):
                cn[k] = 0.0
                cd[k] = 0.0
            for j in range(m):
                s = pre[0, i, j]
                u = tmax * u_hat[i, j]
                h = 0.0
                ph = 0.0
                for k in range(n):
                    h += wmat[i, j, k] * hn[k]
                    ph += wmat[i, j, k] * gap[k]
                sh = math.sqrt(h) if h > 0.0 else 0.0
                ell = lnb[i] - lnx + sh                      # ln(B(τ_i) / B(u))
                # ℓ's partials in r and b through X at fixed node values
                dlb_lx = 1.0 - ph / sh if sh > 1e-150 else 0.0
                ell_r = -dlb_lx * dlx_r
                ell_b = -dlb_lx * dlx_b
                ss = pre[1, i, j]
                vs = v * ss
                ap = (ell + mup * s) / vs
                am = (ell + mum * s) / vs
                ppa = npdf(ap)
                # φ(a₋) = φ(a₊) e^{a₊ σ√s − σ² s / 2}
                pma = ppa * math.exp(ap * vs - 0.5 * vs * vs)
                cpa = ncdf(ap)
                er = pre[2, i, j]
                eq = pre[3, i, j]
                tn = er * pma / vs
                td = eq * (ppa / vs + cpa)
                num += r * tn
                den += q * td
                # derivatives in ℓ
                dd = eq * (-ap * ppa / vs + ppa)            # ∂td/∂a₊
                nl = -r * tn * am / vs
                dl = q * dd / vs
                sum_nl += nl
                sum_dl += dl
                # partials in σ, r, b at fixed node values
                num_v += r * tn * (am * ap - 1.0) / v
                den_v += q * eq * (ppa / vs * (ap * am - 1.0) / v - ppa * am / v)
                da_r = ell_r / vs
                da_b = ss / v + ell_b / vs
                num_r += tn + r * tn * (u - am * da_r)
                den_r += td + q * (td * u + dd * da_r)
                num_b += -r * tn * am * da_b
                den_b += -td + q * (-td * u + dd * da_b)
                # other nodes through ln B(u): ∂ℓ/∂L_k = −W_k (ln X − L_k) / √H
                if sh > 1e-150:
                    for k in range(n):
                        dk = wmat[i, j, k] * gap[k] / sh
                        cn[k] -= nl * dk
                        cd[k] -= dl * dk
            lnf = -b * ti + math.log(num) - math.log(den)
            rhs[i, 3] = lnb[i] - lnf
            for k in range(n):
                jac[i, k] = -(cn[k] / num - cd[k] / den)
            jac[i, i] += 1.0 - ((num_l + sum_nl) / num - (den_l + sum_dl) / den)
            rhs[i, 0] = num_v / num - den_v / den
            rhs[i, 1] = num_r / num - den_r / den
            rhs[i, 2] = -ti + num_b / num - den_b / den
        # one elimination gives the Newton step (column 3) and the tangents (columns 0–2)
        lu_solve(jac, rhs, piv)
        biggest = 0.0
        for i in range(n):
            if not abs(rhs[i, 3]) <= biggest:      # NaN too
                biggest = abs(rhs[i, 3])
        if not math.isfinite(biggest):
            break
        if biggest <= NEWTON_TOL:
            steps = it
            break
        if it == NEWTON_MAX:
            break
        scale = 1.0 if biggest <= max_step else max_step / biggest
        for i in range(n):
            lnb[i] = min(lnb[i] - scale * rhs[i, 3], lnx)
    for i in range(n):
        for d in range(3):
            tangents[d, i] = rhs[i, d]
    return steps


def chebyshev_transform(n: int = N_NODES) -> np.ndarray:
    """Matrix C (n + 1, n + 1): coefficients a = C H of the Chebyshev interpolant through the
    node values H, pre-scaled so that H(ξ) = Σ_k a_k T_k(ξ)."""
    k = np.arange(n + 1)
    half = np.ones(n + 1)
    half[0] = half[-1] = 0.5
    out: np.ndarray = (2.0 / n) * np.cos(np.outer(k, k) * np.pi / n) * half[None, :]
    out *= half[:, None]
    return out


@njit(cache=True, nogil=True, error_model="numpy")
def boundary_table(r: float, q: float, tau: float, tmax: float, lnb: np.ndarray,
                   tangents: np.ndarray, cheb: np.ndarray, ts_x: np.ndarray, lq: np.ndarray,
                   dlq: np.ndarray, greeks: bool) -> None:
    """ln B and its (σ, r, b) derivatives at the price nodes of a row with time ``tau`` <= the
    boundary's ``tmax``: u_j = τ (1 − ts_x_j²) into ``lq`` (nq + 1,), ``dlq`` (3, nq + 1); the
    last entry is u = τ (the boundary at the row's own time)."""
    n = lnb.size
    nq = ts_x.size
    lnx = exercise_level(r, q)
    dlx_r, dlx_b = exercise_slopes(r, q)
    dlx = (0.0, dlx_r, dlx_b)
    gap = np.empty(n + 1)
    dgap = np.empty((3, n + 1))
    for i in range(n):
        gap[i] = lnx - lnb[i]
        for d in range(3):
            dgap[d, i] = dlx[d] - tangents[d, i]
    gap[n] = 0.0
    for d in range(3):
        dgap[d, n] = 0.0
    # Chebyshev coefficients of H = gap² and of its tangents dH = 2 gap dgap
    a = np.zeros(n + 1)
    da = np.zeros((3, n + 1))
    nd = 3 if greeks else 0
    for k in range(n + 1):
        for i in range(n + 1):
            a[k] += cheb[k, i] * gap[i] * gap[i]
            for d in range(nd):
                da[d, k] += cheb[k, i] * 2.0 * gap[i] * dgap[d, i]
    for j in range(nq + 1):
        u = tau if j == nq else tau * (1.0 - ts_x[j] * ts_x[j])
        xi = 2.0 * math.sqrt(max(u, 0.0) / tmax) - 1.0
        if xi > 1.0:
            xi = 1.0
        # Clenshaw for H and the three dH
        b1 = 0.0
        b2 = 0.0
        c1 = np.zeros(3)
        c2 = np.zeros(3)
        for k in range(n, 0, -1):
            bk = 2.0 * xi * b1 - b2 + a[k]
            b2 = b1
            b1 = bk
            for d in range(nd):
                ck = 2.0 * xi * c1[d] - c2[d] + da[d, k]
                c2[d] = c1[d]
                c1[d] = ck
        h = xi * b1 - b2 + a[0]
        sh = math.sqrt(h) if h > 0.0 else 0.0
        lq[j] = lnx - sh
        for d in range(nd):
            dh = xi * c1[d] - c2[d] + da[d, 0]
            dlq[d, j] = dlx[d] - (0.5 * dh / sh if sh > 1e-150 else 0.0)


@njit(cache=True, nogil=True, error_model="numpy")
def hermite_weights(x: float, nodes: np.ndarray, ns: int, w0: np.ndarray, w1: np.ndarray,
                    lag: np.ndarray) -> None:
    """Weights of Hermite interpolation through values and first derivatives at ``nodes[:ns]``:
    f^{(d)}(x) = Σ_k w0[d, k] f_k + w1[d, k] f'_k for d = 0, 1, 2; ``lag`` gets the Lagrange
    weights ℓ_k(x) (interpolation of values alone)."""
    for k in range(ns):
        p0 = 1.0
        p1 = 0.0
        p2 = 0.0
        den = 1.0
        c = 0.0
        for m in range(ns):
            if m == k:
                continue
            f = x - nodes[m]
            p2 = p2 * f + 2.0 * p1
            p1 = p1 * f + p0
            p0 = p0 * f
            den *= nodes[k] - nodes[m]
            c += 1.0 / (nodes[k] - nodes[m])
        l0 = p0 / den
        l1 = p1 / den
        l2 = p2 / den
        lag[k] = l0
        q0 = l0 * l0
        q1 = 2.0 * l0 * l1
        q2 = 2.0 * l1 * l1 + 2.0 * l0 * l2
        dx = x - nodes[k]
        a0 = 1.0 - 2.0 * c * dx
        a1 = -2.0 * c
        w0[0, k] = a0 * q0
        w0[1, k] = a1 * q0 + a0 * q1
        w0[2, k] = 2.0 * a1 * q1 + a0 * q2
        w1[0, k] = dx * q0
        w1[1, k] = q0 + dx * q1
        w1[2, k] = 2.0 * q1 + dx * q2


@njit(cache=True, nogil=True, error_model="numpy")
def european_put(x: float, tau: float, r: float, q: float, v: float, g: np.ndarray) -> None:
    """European put (strike 1, spot x) into g: price, delta, gamma, speed, vega, vanna, volga,
    rho (b fixed), carry rho."""
    b = r - q
    st = math.sqrt(tau)
    vst = v * st
    d1 = (math.log(x) + (b + 0.5 * v * v) * tau) / vst
    d2 = d1 - vst
    dq = math.exp(-q * tau)
    dr = math.exp(-r * tau)
    nd1 = ncdf(-d1)
    pd1 = npdf(d1)
    g[0] = dr * ncdf(-d2) - x * dq * nd1
    g[1] = -dq * nd1
    g[2] = dq * pd1 / (x * vst)
    g[3] = -g[2] / x * (1.0 + d1 / vst)
    g[4] = x * dq * pd1 * st
    g[5] = -dq * pd1 * d2 / v
    g[6] = g[4] * d1 * d2 / v
    g[7] = -tau * g[0]
    g[8] = -x * tau * dq * nd1


@njit(cache=True, nogil=True, error_model="numpy")
def value_put(lnxs: float, tau: float, r: float, q: float, v: float, lq: np.ndarray,
              dlq: np.ndarray, d2lq: np.ndarray, nodes: np.ndarray, greeks: bool,
              eu: np.ndarray, out: np.ndarray) -> None:
    """Put (strike 1, spot e^lnxs) over the boundary ``lq`` (nq + 1,) with its derivatives
    ``dlq`` (σ, r, b) and ``d2lq`` (σσ), price nodes ``nodes`` (5, nq: s, weight, √s, e^{−rs},
    e^{−qs}): out = price, delta, gamma, vega, theta, rho, carry rho, vanna, volga, charm
    (out[0] only unless ``greeks``)."""
    nq = nodes.shape[1]
    xs = math.exp(lnxs)
    v = max(v, 1e-8)
    if lnxs <= lq[nq]:
        out[0] = 1.0 - xs
        if greeks:
            out[1] = -1.0
            for i in range(2, 10):
                out[i] = 0.0
        return
    b = r - q
    v2 = v * v
    mup = b + 0.5 * v2
    european_put(xs, tau, r, q, v, eu)
    p = eu[0]
    dl = eu[1]
    gm = eu[2]
    sp = eu[3]
    vg = eu[4]
    vn = eu[5]
    vo = eu[6]
    rh = eu[7]
    cr = eu[8]
    for j in range(nq):
        s = nodes[0, j]
        wt = nodes[1, j]
        ss = nodes[2, j]
        er = nodes[3, j]
        eq = nodes[4, j]
        vs = v * ss
        x = lnxs - lq[j]
        dp = (x + mup * s) / vs
        dm = dp - vs
        if dm > D_NEGLIGIBLE:
            continue
        cp = ncdf(-dp)
        cm = ncdf(-dm)
        p += wt * (r * er * cm - q * xs * eq * cp)
        if not greeks:
            continue
        e = eq * npdf(dp)
        rb = r * math.exp(x) / xs          # r / B(u)
        c = q - rb
        ivs = 1.0 / vs
        dl += wt * (-q * eq * cp + e * c * ivs)
        gq = q - c * dp * ivs
        gm += wt * e * ivs / xs * gq
        sp += wt * e * ivs / (xs * xs) * (-gq - dp * gq * ivs - c * ivs * ivs)
        f_l = -xs * e * c * ivs
        f_v = e * xs / v * (rb * dp - q * dm)
        f_r = er * cm * (1.0 - r * s) - xs * eq * cp * (1.0 - q * s)
        f_b = xs * eq * (1.0 - q * s) * cp + xs * e * c * ss / v
        f_sv = -q * e * dm / v + c * e * (dp * dm - 1.0) / (v * vs)
        f_sl = e * c * ivs * (dp * ivs - 1.0)
        f_vl = -xs * c * e * (dp * dm - 1.0) / (v * vs)
        f_ll = -xs * e * ivs * (c * dp * ivs + rb)
        f_vv = xs * e / v2 * ((dp * dm - 1.0) * (rb * dp - q * dm) - rb * dm + q * dp)
        lv = dlq[0, j]
        vg += wt * (f_v + f_l * lv)
        rh += wt * (f_r + f_l * dlq[1, j])
        cr += wt * (f_b + f_l * dlq[2, j])
        vn += wt * (f_sv + f_sl * lv)
        vo += wt * (f_vv + 2.0 * f_vl * lv + f_ll * lv * lv + f_l * d2lq[j])
    out[0] = p
    if not greeks:
        return
    out[1] = dl
    out[2] = gm
    out[3] = vg
    theta = -(0.5 * v2 * xs * xs * gm + b * xs * dl - r * p)
    out[4] = theta
    out[5] = rh
    out[6] = cr
    out[7] = vn
    out[8] = vo
    out[9] = -(v2 * xs * gm + 0.5 * v2 * xs * xs * sp + (b - r) * dl + b * xs * gm)


@njit(cache=True, nogil=True, error_model="numpy")
def solve_groups(g_r: np.ndarray, g_q: np.ndarray, g_tmax: np.ndarray, g_ns: np.ndarray,
                 g_lnsig: np.ndarray, t: np.ndarray, s_hat: np.ndarray, u_hat: np.ndarray,
                 w_hat: np.ndarray, wmat: np.ndarray, g_lnb: np.ndarray, g_tan: np.ndarray,
                 g_steps: np.ndarray) -> None:
    """Boundaries of groups (put form r, q, τmax) at their vol nodes ``g_lnsig`` (G, NSM) (ln σ,
    ascending, the first ``g_ns`` used) into ``g_lnb`` (G, NSM, n) and ``g_tan`` (G, NSM, 3, n);
    ``g_steps`` (G,) gets the most Newton steps of a group's nodes, or −1 if one failed. The
    middle node starts cold; the others start from their inner neighbour."""
    for g in range(g_r.size):
        ns = g_ns[g]
        mid = ns // 2
        worst = 0
        for o in range(ns):
            # mid, mid−1, mid+1, mid−2, ... walking outwards
            k = mid - (o + 1) // 2 if o % 2 == 1 else mid + o // 2
            if k < 0 or k >= ns:
                continue
            warm = o > 0
            if warm:
                src = k + 1 if k < mid else k - 1
                for i in range(t.size):
                    g_lnb[g, k, i] = g_lnb[g, src, i]
            st = solve_boundary(g_r[g], g_q[g], math.exp(g_lnsig[g, k]), g_tmax[g], t, s_hat,
                                u_hat, w_hat, wmat, g_lnb[g, k], g_tan[g, k], warm)
            if st < 0:
                worst = -1
            elif worst >= 0:
                worst = max(worst, st)
        g_steps[g] = worst


@njit(cache=True, nogil=True, error_model="numpy")
def value_groups(g_r: np.ndarray, g_q: np.ndarray, g_tau: np.ndarray, g_tmax: np.ndarray,
                 g_ns: np.ndarray, g_lnsig: np.ndarray, g_lnb: np.ndarray, g_tan: np.ndarray,
                 g_first: np.ndarray, row_lnx: np.ndarray, row_v: np.ndarray,
                 row_scale: np.ndarray, row_call: np.ndarray, cheb: np.ndarray,
                 ts_x: np.ndarray, ts_w: np.ndarray, vol_min: float, greeks: bool,
                 out: np.ndarray) -> None:
    """Prices (and greeks) of the rows of each group, rows ``g_first[g]:g_first[g + 1]``, into
    ``out`` (1 or 10, rows). Row inputs are in the put form: ln of the put-form spot over
    strike, vol, the scale (strike of a put, spot of a call) and whether the row is a call."""
    nq = ts_x.size
    nsm = g_lnsig.shape[1]
    lq_k = np.empty((nsm, nq + 1))
    dlq_k = np.zeros((nsm, 3, nq + 1))
    lq = np.empty(nq + 1)
    dlq = np.zeros((3, nq + 1))
    d2lq = np.zeros(nq + 1)
    w0 = np.empty((3, nsm))
    w1 = np.empty((3, nsm))
    lag = np.empty(nsm)
    sig = np.empty(nsm)
    nodes = np.empty((5, nq))
    eu = np.empty(9)
    res = np.empty(10)
    for g in range(g_r.size):
        ns = g_ns[g]
        r = g_r[g]
        q = g_q[g]
        tau = g_tau[g]
        for j in range(nq):
            s = tau * ts_x[j] * ts_x[j]
            nodes[0, j] = s
            nodes[1, j] = tau * 2.0 * ts_x[j] * ts_w[j]
            nodes[2, j] = math.sqrt(s)
            nodes[3, j] = math.exp(-r * s)
            nodes[4, j] = math.exp(-q * s)
        for k in range(ns):
            sig[k] = math.exp(g_lnsig[g, k])
            boundary_table(r, q, tau, g_tmax[g], g_lnb[g, k], g_tan[g, k], cheb, ts_x,
                           lq_k[k], dlq_k[k], greeks or ns > 1)
            for j in range(nq + 1):
                dlq_k[k, 0, j] *= sig[k]              # per unit of ln σ
        for row in range(g_first[g], g_first[g + 1]):
            v = max(row_v[row], vol_min)
            hermite_weights(math.log(v), g_lnsig[g], ns, w0, w1, lag)
            if not greeks:
                for j in range(nq + 1):
                    a0 = 0.0
                    for k in range(ns):
                        a0 += w0[0, k] * lq_k[k, j] + w1[0, k] * dlq_k[k, 0, j]
                    lq[j] = a0
            else:
                for j in range(nq + 1):
                    a0 = 0.0
                    a1 = 0.0
                    a2 = 0.0
                    ar = 0.0
                    ab = 0.0
                    for k in range(ns):
                        fk = lq_k[k, j]
                        dk = dlq_k[k, 0, j]
                        a0 += w0[0, k] * fk + w1[0, k] * dk
                        a1 += w0[1, k] * fk + w1[1, k] * dk
                        a2 += w0[2, k] * fk + w1[2, k] * dk
                        ar += lag[k] * dlq_k[k, 1, j]
                        ab += lag[k] * dlq_k[k, 2, j]
                    lq[j] = a0
                    dlq[0, j] = a1 / v
                    dlq[1, j] = ar
                    dlq[2, j] = ab
                    d2lq[j] = (a2 - a1) / (v * v)
            value_put(row_lnx[row], tau, r, q, row_v[row], lq, dlq, d2lq, nodes, greeks, eu,
                      res)
            sc = row_scale[row]
            if not greeks:
                out[0, row] = sc * res[0]
                continue
            if row_call[row]:
                xs = math.exp(row_lnx[row])
                out[0, row] = sc * res[0]
                out[1, row] = res[0] - xs * res[1]
                out[2, row] = xs * xs * res[2] / sc
                out[3, row] = sc * res[3]
                out[4, row] = sc * res[4]
                out[5, row] = sc * res[5]
                out[6, row] = -sc * (res[5] + res[6])
                out[7, row] = res[3] - xs * res[7]
                out[8, row] = sc * res[8]
                out[9, row] = res[4] - xs * res[9]
            else:
                out[0, row] = sc * res[0]
                out[1, row] = res[1]
                out[2, row] = res[2] / sc
                out[3, row] = sc * res[3]
                out[4, row] = sc * res[4]
                out[5, row] = sc * res[5]
                out[6, row] = sc * res[6]
                out[7, row] = res[7]
                out[8, row] = sc * res[8]
                out[9, row] = res[9]
