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

The boundary is represented by its gap g = ln X − ln B (0 at u = 0) at the n + 1
Chebyshev–Lobatto nodes of ξ = 2√(u/τmax) − 1 (``POWER``), interpolated by Chebyshev
polynomials in ξ: the gap itself where X < 1 (there g ≈ c√u near u = 0, a polynomial in ξ), its
square H = g² where X = 1 (there g ≈ σ√(u ln(1/u)) and H is the smoother; Andersen, Lake &
Offengenden interpolate H in both cases, but where X is just below 1 the interpolated H dips
below 0 near u = 0 and the boundary stops being smooth in σ). The equation is solved at the n
nodes u > 0 by Newton's method on L = ln B with the full Jacobian (the paper iterates the fixed
point with a diagonal Newton correction; the full Jacobian converges in a few steps from a start
continued from the neighbouring vol node, and the same Jacobian gives the boundary's
sensitivities to σ, r and b by the implicit function theorem). Each node's integral is split at
u = τ_i/2 and each half integrated by Gauss–Legendre in √u (near u = 0, where B has a
square-root profile) and in √(τ_i − u) (near u = τ_i, where the integrand has 1/√(τ_i − u)).

A put's value is the European value plus the early-exercise premium
∫_0^τ [r e^{−rs} Φ(−d₋(s, S/B(τ−s))) − q S e^{−qs} Φ(−d₊(s, S/B(τ−s)))] ds, integrated by
Gauss–Legendre panels in √s that halve towards s = 0, where the integrand changes on the scale
of ln(S/B)/σ, and Gauss–Legendre panels in √u that halve towards u = 0, where B has its
square-root profile (``graded_rule``); for a spot so near B that this scale reaches the panel
at s = 0, that panel is integrated in d = ln(S/B)/(σ√s) instead (``refined_rule``). Delta,
gamma and the third spot derivative are derivatives at a fixed boundary (the boundary does not
depend on S); vega, rho and carry rho add the boundary's own sensitivities, and vanna and volga
its first and second derivatives in σ (``hermite_weights``).

Loops over quadrature points are written without calls or data-dependent branches, with the
exponential and normal CDF of ``_special`` inlined, so that LLVM vectorizes them.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from blotter.engine._special import bits as _bits
from blotter.engine._special import fexp, ncdf, ncdf_and_pdf, npdf

N_NODES = 24
"""Chebyshev intervals n of the boundary in √u (n + 1 nodes, one of them u = 0)."""
POWER = 2.0
"""Power p of the node map u/τmax = ((1 + ξ)/2)^p: 2, Chebyshev in √u (3 and 4 resolve u -> 0
better but put nodes so close to 0 that Newton's method fails on some boundaries)."""
N_GAUSS = 6
"""Gauss–Legendre points on each half of a node's integral (2 × N_GAUSS per node)."""
GRADED = (8, 6, 1, 10)
"""Price rule (``graded_rule``): panels halving towards s = 0 and points per panel, panels
halving towards u = 0 and points per panel."""
NEWTON_MAX = 60
"""Newton steps before a boundary is reported as not converged."""
NEWTON_TOL = 1e-8
"""Largest Newton step in ln B at any node that ends the iteration (the step is applied: the
error left is of the order of its square)."""
D_NEGLIGIBLE = 8.5
"""Price nodes before the first whose d₋ is at most this add nothing: Φ(−8.5) ≈ 1e-17 and the
greeks' terms carry φ(d₊) ≈ 1e-16 times powers of d/σ√s that stay below it."""
MAX_STEP = 0.5
"""Largest change of ln B per Newton step (a guard far from the solution)."""
BACKTRACKS = 6
"""Halvings of a Newton step that does not lower the residual before it is kept anyway."""
TANGENT_STEP = 5e-3
"""Step in ln σ of the five-point difference that gives a lone vol node's second
σ-derivative."""


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


def node_times(n: int, power: float) -> np.ndarray:
    """Times u/τmax of the n + 1 Chebyshev–Lobatto nodes, u/τmax = ((1 + ξ)/2)^power, from
    u = τmax (node 0) to u = 0 (node n)."""
    xi = np.cos(np.arange(n + 1) * np.pi / n)
    out: np.ndarray = ((1.0 + xi) / 2.0) ** power
    return out


def map_to_xi(z: np.ndarray, power: float) -> np.ndarray:
    """ξ of times u/τmax = ``z`` (inverse of ``node_times``' map)."""
    out: np.ndarray = 2.0 * np.maximum(z, 0.0) ** (1.0 / power) - 1.0
    return out


def solver_tables(n: int = N_NODES, half: int = N_GAUSS, power: float = 2.0
                  ) -> dict[str, np.ndarray]:
    """Node times, quadrature points and interpolation weights of the boundary solver, with
    times in units of τmax, point j of node i at p = j n + i (so that sums over a node's points
    run over whole rows of n): ``t`` (n,), ``s``, ``u``, ``w`` (m n,) with m = 2 half, ``W``
    (m n, n) and its transpose ``WT`` (n, m n), and ``W0`` (m n,), the weight of the node at
    u = 0 (the gap's value there is 0)."""
    t = node_times(n, power)[:n]
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
    s_p, u_p, w_p = (np.ascontiguousarray(a.T).ravel() for a in (s, u, w))
    full = chebyshev_weights(n, map_to_xi(u_p, power))
    return {"t": t, "s": s_p, "u": u_p, "w": w_p, "W": np.ascontiguousarray(full[:, :n]),
            "WT": np.ascontiguousarray(full[:, :n].T), "W0": np.ascontiguousarray(full[:, n])}


def graded_rule(near_panels: int = GRADED[0], near_points: int = GRADED[1],
                far_panels: int = GRADED[2], far_points: int = GRADED[3]
                ) -> tuple[np.ndarray, np.ndarray]:
    """Nodes x in (0, 1) (ascending) and weights of a rule for ∫_0^1 g(x) dx with x = √(s/τ):
    on x² <= ½, Gauss–Legendre panels halving towards x = 0 (the layer of width ln(S/B)/σ at
    s -> 0 is resolved at any scale down to 2^-near_panels), and on x² >= ½, panels in
    v = √(u/τ) = √(1 − x²) halving towards v = 0 (the boundary's square-root profile)."""
    y, gw = np.polynomial.legendre.leggauss(near_points)
    xs: list[np.ndarray] = []
    ws: list[np.ndarray] = []
    top = math.sqrt(0.5)
    edges = [top * 0.5 ** k for k in range(near_panels + 1)] + [0.0]
    for a, c in zip(edges[1:], edges[:-1], strict=True):
        xs.append(a + (c - a) * (1.0 + y) / 2.0)
        ws.append(gw * (c - a) / 2.0)
    yf, gf = np.polynomial.legendre.leggauss(far_points)
    fedges = [top * 0.5 ** k for k in range(far_panels + 1)] + [0.0]
    for a, c in zip(fedges[1:], fedges[:-1], strict=True):
        v = a + (c - a) * (1.0 + yf) / 2.0
        xs.append(np.sqrt(1.0 - v * v))
        ws.append(gf * (c - a) / 2.0 * v / np.sqrt(1.0 - v * v))
    x = np.concatenate(xs)
    w = np.concatenate(ws)
    order = np.argsort(x)
    return x[order], w[order]


def price_table(n: int, ts_x: np.ndarray, power: float = 2.0) -> np.ndarray:
    """Weights (nq + 1, n) giving the gap at the price nodes u_j = τ (1 − x_j²) and at u = τ
    (last row) from its values at the solver's nodes, for a row whose time τ is the boundary's
    τmax."""
    u = np.append(1.0 - ts_x * ts_x, 1.0)
    out: np.ndarray = np.ascontiguousarray(chebyshev_weights(n, map_to_xi(u, power))[:, :n])
    return out


@njit(cache=True, nogil=True, error_model="numpy", fastmath={"contract"})
def exercise_level(r: float, q: float) -> float:
    """ln X, the put boundary's limit at u -> 0+: X = min(1, r/q), or 1 when q <= 0."""
    if q <= 0.0 or r >= q:
        return 0.0
    return math.log(r / q)


@njit(cache=True, nogil=True, error_model="numpy", fastmath={"contract"})
def exercise_slopes(r: float, q: float) -> tuple[float, float]:
    """∂ ln X/∂r at fixed b and ∂ ln X/∂b at fixed r (X = r/q only when 0 < r < q)."""
    if q > 0.0 and r < q:
        return 1.0 / r - 1.0 / q, 1.0 / q
    return 0.0, 0.0


@njit(cache=True, nogil=True, error_model="numpy", fastmath={"contract"})
def _start(r: float, q: float, v: float, tmax: float, t: np.ndarray, lnx: float,
           out: np.ndarray) -> None:
    """A first guess of ln B at the nodes: the perpetual boundary blended into X over σ√u, and
    where X = 1 (r >= q) no higher than the near-expiry form ln B ≈ −σ √(u ln(σ² / (8π (r − q)²
    u))), whose logarithm the blend lacks."""
    b = r - q
    v2 = v * v
    a = b / v2 - 0.5
    beta = -a - math.sqrt(a * a + 2.0 * r / v2)
    x = math.exp(lnx)
    b_inf = beta / (beta - 1.0)
    ln_inf = math.log(b_inf) if b_inf > 0.0 else -700.0
    for i in range(t.size):
        ti = tmax * t[i]
        if x > b_inf:
            g = b_inf + (x - b_inf) * math.exp(-2.0 * v * math.sqrt(ti) * x / (x - b_inf))
            guess = min(math.log(g), lnx)
            if lnx == 0.0 and b > 0.0:
                arg = v2 / (8.0 * math.pi * b * b * ti)
                near = -v * math.sqrt(ti * max(math.log(arg), 1.0)) if arg > 1.0 else 0.0
                guess = max(min(guess, near), ln_inf)
            out[i] = guess
        else:
            out[i] = lnx


@njit(cache=True, nogil=True, error_model="numpy", fastmath={"contract"})
def lu_factor(a: np.ndarray, piv: np.ndarray) -> None:
    """LU factors of ``a`` (n, n) in place, partial pivoting (row swaps in ``piv``); rows are
    eliminated four at a time, so each pivot-row element loaded feeds four updates."""
    n = a.shape[0]
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
        inv = 1.0 / a[c, c] if a[c, c] != 0.0 else 0.0
        i = c + 1
        while i + 3 < n:
            f0 = a[i, c] * inv
            f1 = a[i + 1, c] * inv
            f2 = a[i + 2, c] * inv
            f3 = a[i + 3, c] * inv
            a[i, c] = f0
            a[i + 1, c] = f1
            a[i + 2, c] = f2
            a[i + 3, c] = f3
            for j in range(c + 1, n):
                pj = a[c, j]
                a[i, j] -= f0 * pj
                a[i + 1, j] -= f1 * pj
                a[i + 2, j] -= f2 * pj
                a[i + 3, j] -= f3 * pj
            i += 4
        while i < n:
            f = a[i, c] * inv
            a[i, c] = f
            for j in range(c + 1, n):
                a[i, j] -= f * a[c, j]
            i += 1


@njit(cache=True, nogil=True, error_model="numpy", fastmath={"contract"})
def lu_solve(a: np.ndarray, piv: np.ndarray, rhs: np.ndarray) -> None:
    """Solve with the factors of ``lu_factor``: ``rhs`` (n, 4) becomes the solution (four
    columns written out, so that each row update is one vector operation)."""
    n = a.shape[0]
    for c in range(n):
        p = piv[c]
        if p != c:
            for j in range(4):
                rhs[c, j], rhs[p, j] = rhs[p, j], rhs[c, j]
        r0 = rhs[c, 0]
        r1 = rhs[c, 1]
        r2 = rhs[c, 2]
        r3 = rhs[c, 3]
        for i in range(c + 1, n):
            f = a[i, c]
            rhs[i, 0] -= f * r0
            rhs[i, 1] -= f * r1
            rhs[i, 2] -= f * r2
            rhs[i, 3] -= f * r3
    for c in range(n - 1, -1, -1):
        inv = 1.0 / a[c, c] if a[c, c] != 0.0 else 0.0
        s0 = rhs[c, 0]
        s1 = rhs[c, 1]
        s2 = rhs[c, 2]
        s3 = rhs[c, 3]
        for i in range(c + 1, n):
            f = a[c, i]
            s0 -= f * rhs[i, 0]
            s1 -= f * rhs[i, 1]
            s2 -= f * rhs[i, 2]
            s3 -= f * rhs[i, 3]
        rhs[c, 0] = s0 * inv
        rhs[c, 1] = s1 * inv
        rhs[c, 2] = s2 * inv
        rhs[c, 3] = s3 * inv


@njit(cache=True, nogil=True, error_model="numpy", fastmath={"contract"})
def lu_solve1(a: np.ndarray, piv: np.ndarray, b: np.ndarray) -> None:
    """Solve with the factors of ``lu_factor`` for one right-hand side ``b`` (n,), in place."""
    n = a.shape[0]
    for c in range(n):
        p = piv[c]
        if p != c:
            b[c], b[p] = b[p], b[c]
        bc = b[c]
        for i in range(c + 1, n):
            b[i] -= a[i, c] * bc
    for c in range(n - 1, -1, -1):
        acc = b[c]
        for i in range(c + 1, n):
            acc -= a[c, i] * b[i]
        b[c] = acc / a[c, c] if a[c, c] != 0.0 else 0.0


@njit(cache=True, nogil=True, error_model="numpy", fastmath={"contract"})
def group_points(r: float, q: float, tmax: float, s_hat: np.ndarray, u_hat: np.ndarray,
                 w_hat: np.ndarray, pre: np.ndarray) -> None:
    """Quantities of the solver's quadrature points shared by every vol node of a group:
    ``pre`` (6, P) = s, √s, u, w e^{ru}, w e^{qu}, 1/√s."""
    for p in range(s_hat.size):
        s = tmax * s_hat[p]
        u = tmax * u_hat[p]
        wt = tmax * w_hat[p]
        pre[0, p] = s
        pre[1, p] = math.sqrt(s)
        pre[2, p] = u
        pre[3, p] = wt * fexp(r * u)
        pre[4, p] = wt * fexp(q * u)
        pre[5, p] = 1.0 / pre[1, p]


@njit(cache=True, nogil=True, error_model="numpy", fastmath={"reassoc"})
def fsum(a: np.ndarray, lo: int, hi: int) -> float:
    """Σ a[lo:hi] (the order of the additions is the vectorizer's)."""
    acc = 0.0
    for i in range(lo, hi):
        acc += a[i]
    return acc


WORK_ROWS = 15
"""Rows of the solver's workspace (``residual``): per-point arrays of length P."""
PARTIALS_BELOW = 1e-5
"""Largest residual at which ``newton`` also computes the σ-, r- and b-derivatives: the step
taken from there is the last or the one before it."""


@njit(cache=True, nogil=True, error_model="numpy", fastmath={"contract"})
def residual(r: float, q: float, v: float, tmax: float, t: np.ndarray, pre: np.ndarray,
             wmat: np.ndarray, wmat_t: np.ndarray, w0: np.ndarray, lnb: np.ndarray,
             work: np.ndarray, nodes: np.ndarray, jac: np.ndarray, rhs: np.ndarray, col: int,
             full: bool, partials_below: float, squares: bool) -> bool:
    """The boundary equation's residual R = L − ln f(L) at the nodes into ``rhs[:, col]``;
    when ``full``, its Jacobian ∂R/∂L into ``jac`` (n, n), and when moreover max |R| <=
    ``partials_below``, ∂ ln f/∂(σ, r, b) into ``rhs[:, 0:3]`` (returns whether it did).
    ``work`` (WORK_ROWS, P) and ``nodes`` (16, n) are scratch; ``squares``: the gap's square is
    interpolated where X = 1 (else the gap itself everywhere)."""
    n = t.size
    npts = pre.shape[1]
    m = npts // n
    b = r - q
    v2 = v * v
    mup = b + 0.5 * v2
    lnx = exercise_level(r, q)
    dlx_r, dlx_b = exercise_slopes(r, q)
    squared = squares and lnx == 0.0
    # the gap ln X − ln B at the points: interpolated itself, or as its square (``squared``)
    gp = work[0]
    qp = work[14]
    for p in range(npts):
        qp[p] = 0.0
    for k in range(n):
        gk = lnx - lnb[k]
        nodes[0, k] = gk
        qk = gk * gk if squared else gk
        row = wmat_t[k]
        for p in range(npts):
            qp[p] += row[p] * qk
    if squared:
        for p in range(npts):
            h = qp[p]
            gp[p] = math.sqrt(h) if h > 0.0 else 0.0
    else:
        for p in range(npts):
            gp[p] = qp[p]
    tn = work[1]
    td = work[2]
    nl = work[3]
    dl = work[4]
    apa = work[5]
    ppa_ = work[6]
    iv = 1.0 / v
    for j in range(m):
        for i in range(n):
            p = j * n + i
            ell = lnb[i] - lnx + gp[p]                   # ln(B(τ_i) / B(u))
            s = pre[0, p]
            vs = v * pre[1, p]
            ivs = iv * pre[5, p]
            ap = (ell + mup * s) * ivs
            am = ap - vs
            cpa, ppa = ncdf_and_pdf(ap)
            t_n = pre[3, p] * npdf(am) * ivs
            t_d = pre[4, p] * (ppa * ivs + cpa)
            tn[p] = t_n
            td[p] = t_d
            nl[p] = -r * t_n * am * ivs                  # ∂(r t_n)/∂ℓ
            dl[p] = q * pre[4, p] * ppa * (1.0 - ap * ivs) * ivs   # ∂(q t_d)/∂ℓ
            apa[p] = ap
            ppa_[p] = ppa
    # per node: the terms outside the integrals and the sums over the node's points
    num = nodes[2]
    den = nodes[3]
    snl = nodes[4]
    sdl = nodes[5]
    dps = nodes[6]
    pp0s = nodes[7]
    pm0s = nodes[8]
    for i in range(n):
        ti = tmax * t[i]
        vst = v * math.sqrt(ti)
        dp = (lnb[i] + mup * ti) / vst
        dm = dp - vst
        c0, p0 = ncdf_and_pdf(dp)
        pm0 = npdf(dm)
        num[i] = pm0 / vst
        den[i] = p0 / vst + c0
        snl[i] = 0.0
        sdl[i] = 0.0
        dps[i] = dp
        pp0s[i] = p0
        pm0s[i] = pm0
    for j in range(m):
        base = j * n
        for i in range(n):
            num[i] += r * tn[base + i]
            den[i] += q * td[base + i]
            snl[i] += nl[base + i]
            sdl[i] += dl[base + i]
    biggest = 0.0
    for i in range(n):
        lnf = -b * tmax * t[i] + math.log(num[i] / den[i])
        rhs[i, col] = lnb[i] - lnf
        if not abs(rhs[i, col]) <= biggest:
            biggest = abs(rhs[i, col])
    if not full:
        return False
    for i in range(n):
        nodes[9, i] = 1.0 / num[i]
        nodes[10, i] = 1.0 / den[i]
    inum = nodes[9]
    iden = nodes[10]
    # Jacobian: δ_ik (1 − explicit ∂ ln f/∂L_i) + Σ_j c_j ∂G_j/∂g_k, with ∂ℓ_j/∂L_k =
    # δ_ik − ∂G_j/∂g_k and ∂G_j/∂g_k = W_jk (gap interpolated) or W_jk g_k / G_j (squared)
    for i in range(n):
        for k in range(n):
            jac[i, k] = 0.0
    for j in range(m):
        base = j * n
        for i in range(n):
            p = base + i
            c = nl[p] * inum[i] - dl[p] * iden[i]
            if squared:
                if not gp[p] > 1e-150:
                    continue
                c /= gp[p]
            row = wmat[p]
            for k in range(n):
                jac[i, k] += c * row[k]
    if squared:
        for i in range(n):
            for k in range(n):
                jac[i, k] *= nodes[0, k]
    for i in range(n):
        ti = tmax * t[i]
        dp = dps[i]
        dm = dp - v * math.sqrt(ti)
        vst = v * math.sqrt(ti)
        num_l = -dm * pm0s[i] / (v2 * ti)
        den_l = -dp * pp0s[i] / (v2 * ti) + pp0s[i] / vst
        jac[i, i] += 1.0 - ((num_l + snl[i]) * inum[i] - (den_l + sdl[i]) * iden[i])
    if not biggest <= partials_below:
        return False
    # partials in σ, r, b at fixed node values; ℓ moves with r and b through X: ∂ℓ/∂ ln X =
    # −W0, the weight of the node at u = 0 (gap interpolated), or −(1 − Σ_k W_k g_k / G)
    # (squared; there X = 1 and does not move, so only the form matters)
    if squared:
        for p in range(npts):
            work[7, p] = 0.0
    else:
        for p in range(npts):
            work[7, p] = w0[p]
    vn = work[8]
    vd = work[9]
    rn = work[10]
    rd = work[11]
    bn = work[12]
    bd = work[13]
    for p in range(npts):
        ss = pre[1, p]
        u = pre[2, p]
        eq = pre[4, p]
        vs = v * ss
        ivs = iv * pre[5, p]
        ap = apa[p]
        am = ap - vs
        ppa = ppa_[p]
        t_n = tn[p]
        t_d = td[p]
        dd = eq * ppa * (1.0 - ap * ivs)
        dlb_lx = work[7, p]
        da_r = -dlb_lx * dlx_r * ivs
        da_b = ss * iv - dlb_lx * dlx_b * ivs
        vn[p] = r * t_n * (am * ap - 1.0) * iv
        vd[p] = q * eq * ppa * ((ap * am - 1.0) * ivs - am) * iv
        rn[p] = t_n + r * t_n * (u - am * da_r)
        rd[p] = t_d + q * (t_d * u + dd * da_r)
        bn[p] = -r * t_n * am * da_b
        bd[p] = -t_d + q * (-t_d * u + dd * da_b)
    sv_n = nodes[11]
    sv_d = nodes[12]
    sr_n = nodes[13]
    sr_d = nodes[14]
    sb_n = nodes[15]
    for i in range(n):
        ti = tmax * t[i]
        sti = math.sqrt(ti)
        vst = v * sti
        dp = dps[i]
        dm = dp - vst
        pp0 = pp0s[i]
        pm0 = pm0s[i]
        sv_n[i] = pm0 / vst * (dm * dp - 1.0) * iv
        sv_d[i] = pp0 / vst * (dp * dm - 1.0) * iv - pp0 * dm * iv
        sr_n[i] = 0.0
        sr_d[i] = 0.0
        sb_n[i] = -dm * pm0 / v2
        rhs[i, 2] = (-dp * pp0 / vst + pp0) * sti * iv     # den_b, outside the integral
    for j in range(m):
        base = j * n
        for i in range(n):
            p = base + i
            sv_n[i] += vn[p]
            sv_d[i] += vd[p]
            sr_n[i] += rn[p]
            sr_d[i] += rd[p]
            sb_n[i] += bn[p]
            rhs[i, 2] += bd[p]
    for i in range(n):
        ti = tmax * t[i]
        den_b = rhs[i, 2]
        rhs[i, 0] = sv_n[i] * inum[i] - sv_d[i] * iden[i]
        rhs[i, 1] = sr_n[i] * inum[i] - sr_d[i] * iden[i]
        rhs[i, 2] = -ti + sb_n[i] * inum[i] - den_b * iden[i]
    return True


@njit(cache=True, nogil=True, error_model="numpy", fastmath={"contract"})
def newton(r: float, q: float, v: float, tmax: float, t: np.ndarray, pre: np.ndarray,
           wmat: np.ndarray, wmat_t: np.ndarray, w0: np.ndarray, lnb: np.ndarray,
           tangents: np.ndarray, warm: bool, work: np.ndarray, nodes: np.ndarray,
           jac: np.ndarray, rhs: np.ndarray, piv: np.ndarray, back: np.ndarray,
           squares: bool, max_steps: int) -> int:
    """Solve ln B at the nodes into ``lnb`` (n,) (which holds the start when ``warm``) and its
    derivatives in (σ, r, b) into ``tangents[0:3]`` (n each); returns the Newton steps taken,
    or −1 when the iteration did not converge within ``max_steps``. ``jac`` keeps the last
    Jacobian's LU factors; ``back`` (2, n) is scratch.

    A step that does not lower Σ R² is halved (up to ``BACKTRACKS`` times) before the next
    Jacobian: the residual at the new point is computed with its Jacobian anyway, so a kept
    step costs nothing more. The derivatives come from the Jacobian of the last iteration,
    whose point is within one step (<= NEWTON_TOL) of the solution."""
    n = t.size
    lnx = exercise_level(r, q)
    if not warm:
        _start(r, q, v, tmax, t, lnx, lnb)
    steps = -1
    last = np.inf
    alpha = 1.0
    halved = 0
    for it in range(max_steps + 1):
        have = residual(r, q, v, tmax, t, pre, wmat, wmat_t, w0, lnb, work, nodes, jac, rhs,
                        3, True, PARTIALS_BELOW, squares)
        size = 0.0
        for i in range(n):
            size += rhs[i, 3] * rhs[i, 3]
        if not size < last and halved < BACKTRACKS and last < np.inf:
            # back along the last step: lnb = start − α step
            alpha *= 0.5
            halved += 1
            for i in range(n):
                lnb[i] = min(back[0, i] - alpha * back[1, i], lnx)
            continue
        lu_factor(jac, piv)
        if have:
            lu_solve(jac, piv, rhs)
        else:
            for i in range(n):
                back[1, i] = rhs[i, 3]
            lu_solve1(jac, piv, back[1])
            for i in range(n):
                rhs[i, 3] = back[1, i]
        biggest = 0.0
        for i in range(n):
            if not abs(rhs[i, 3]) <= biggest:      # NaN too
                biggest = abs(rhs[i, 3])
        if not math.isfinite(biggest):
            break
        scale = 1.0 if biggest <= MAX_STEP else MAX_STEP / biggest
        for i in range(n):
            back[0, i] = lnb[i]
            back[1, i] = scale * rhs[i, 3]
            lnb[i] = min(lnb[i] - back[1, i], lnx)
        last = size
        alpha = 1.0
        halved = 0
        if biggest <= NEWTON_TOL and have:
            steps = it + 1
            break
    for i in range(n):
        for d in range(3):
            tangents[d, i] = rhs[i, d]
    return steps


@njit(cache=True, nogil=True, error_model="numpy", fastmath={"contract"})
def second_tangent(r: float, q: float, v: float, tmax: float, t: np.ndarray, pre: np.ndarray,
                   wmat: np.ndarray, wmat_t: np.ndarray, w0: np.ndarray, lnb: np.ndarray,
                   tangents: np.ndarray, work: np.ndarray, nodes: np.ndarray, jac: np.ndarray,
                   rhs: np.ndarray, piv: np.ndarray, trial: np.ndarray, squares: bool) -> None:
    """∂²L/∂(ln σ)² into ``tangents[3]`` from the converged ``lnb`` and ``tangents[0]`` (per
    unit σ), with ``jac`` holding the LU factors: along the path (L + ε L', ln σ + ε) the
    residual's second difference gives −J L''."""
    n = t.size
    h = TANGENT_STEP
    # the five-point second difference (error O(h⁴), so h can be large enough that rounding
    # in the residual stays near 1e-11 of the result); one call site for the five residuals
    # (each call site of the large residual costs its own optimisation when kernels compile)
    for i in range(n):
        tangents[3, i] = 0.0
    for col in range(5):
        step = (2.0, 1.0, 0.0, -1.0, -2.0)[col]
        weight = (-1.0, 16.0, -30.0, 16.0, -1.0)[col]
        for i in range(n):
            trial[i] = lnb[i] + step * h * v * tangents[0, i]
        residual(r, q, v * math.exp(step * h), tmax, t, pre, wmat, wmat_t, w0, trial, work,
                 nodes, jac, rhs, 0, False, 0.0, squares)
        for i in range(n):
            tangents[3, i] -= weight * rhs[i, 0] / (12.0 * h * h)
    lu_solve1(jac, piv, tangents[3])


LOOKBACK = 8
"""Groups solved just before a group that are tried as its start (``borrow_start``)."""
BORROW_MAX = 0.01
"""Largest difference of put-form rate or dividend yield between a group and the group whose
boundary starts its Newton iteration."""
BORROW_SPAN = 4.0
"""Largest ratio of the lending group's τmax to the borrowing group's (a longer boundary has
too few nodes in the borrower's span)."""
WARM_MAX = 8
"""Newton steps allowed from a start taken from another node or group before the start
formula is tried instead."""


@njit(cache=True, nogil=True, error_model="numpy", fastmath={"contract"})
def borrow_start(g: int, k: int, g_r: np.ndarray, g_q: np.ndarray, g_tmax: np.ndarray,
                 g_ns: np.ndarray, g_lnsig: np.ndarray, g_lnb: np.ndarray, g_tan: np.ndarray,
                 g_steps: np.ndarray, t: np.ndarray, power: float, xk: np.ndarray,
                 row: np.ndarray, out: np.ndarray) -> bool:
    """A start for node ``k`` of group ``g`` from a group solved just before it (``LOOKBACK``)
    whose boundary spans at least as long a time (and at most ``BORROW_SPAN`` times), in the
    same form of X, with rate and dividend yield within ``BORROW_MAX``: its nearest vol node's
    boundary read at this group's node times and moved along its σ-, r- and b-derivatives;
    False (``out`` untouched) when none qualifies. Rows of one underlying and type at several
    expiries are such groups."""
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
        return False
    n = t.size
    hx = exercise_level(g_r[best], g_q[best])
    vh = math.exp(g_lnsig[best, bk])
    dv = math.exp(lv) - vh
    dr = r - g_r[best]
    db = (r - q) - (g_r[best] - g_q[best])
    ratio = g_tmax[g] / g_tmax[best]
    for i in range(n):
        chebyshev_row(ratio * t[i], power, xk, row)
        acc = 0.0
        for j in range(n):
            acc += row[j] * (hx - g_lnb[best, bk, j])
        lb = hx - acc
        dl = 0.0
        for j in range(n):
            dl += row[j] * (dv * g_tan[best, bk, 0, j] + dr * g_tan[best, bk, 1, j]
                            + db * g_tan[best, bk, 2, j])
        out[i] = min(lb + dl, lnx)
    return True


@njit(cache=True, nogil=True, error_model="numpy", fastmath={"contract"})
def side_start(lnsig: np.ndarray, lnb: np.ndarray, tan: np.ndarray, k: int, src: int,
               far: int, lnx: float, out: np.ndarray) -> None:
    """A start for vol node ``k`` of a group (``lnsig`` (NSM,), ``lnb`` (NSM, n), ``tan``
    (NSM, 4, n)) from its solved neighbour ``src``: moved along that node's σ-derivative, or,
    when ``far`` >= 0 names the solved node beyond ``src``, the cubic through both nodes'
    values and ln σ-derivatives (its error O(h⁴) against O(h²) saves about one Newton step)."""
    x1 = lnsig[src]
    v1 = math.exp(x1)
    dx = lnsig[k] - x1
    if far < 0:
        for i in range(out.size):
            out[i] = min(lnb[src, i] + dx * v1 * tan[src, 0, i], lnx)
        return
    x0 = lnsig[far]
    v0 = math.exp(x0)
    h = x1 - x0
    z = (lnsig[k] - x0) / h
    z2 = z * z
    z3 = z2 * z
    h00 = 2.0 * z3 - 3.0 * z2 + 1.0
    h10 = (z3 - 2.0 * z2 + z) * h * v0
    h01 = 3.0 * z2 - 2.0 * z3
    h11 = (z3 - z2) * h * v1
    for i in range(out.size):
        out[i] = min(h00 * lnb[far, i] + h10 * tan[far, 0, i] + h01 * lnb[src, i]
                     + h11 * tan[src, 0, i], lnx)


@njit(cache=True, nogil=True, error_model="numpy", fastmath={"contract"})
def solve_groups(g_r: np.ndarray, g_q: np.ndarray, g_tmax: np.ndarray, g_ns: np.ndarray,
                 g_lnsig: np.ndarray, t: np.ndarray, s_hat: np.ndarray, u_hat: np.ndarray,
                 w_hat: np.ndarray, wmat: np.ndarray, wmat_t: np.ndarray, w0: np.ndarray,
                 g_lnb: np.ndarray, g_tan: np.ndarray, g_steps: np.ndarray,
                 second: bool, squares: bool, power: float) -> None:
    """Boundaries of groups (put form r, q, τmax) at their vol nodes ``g_lnsig`` (G, NSM) (ln σ,
    ascending, the first ``g_ns`` used) into ``g_lnb`` (G, NSM, n) and ``g_tan`` (G, NSM, 4, n)
    (∂/∂σ, ∂/∂r, ∂/∂b, and for a group of one node when ``second``, ∂²/∂(ln σ)²);
    ``g_steps`` (G,) gets the most Newton steps of a group's nodes, or −1 if one failed. The
    middle node starts from a group solved just before it (``borrow_start``) or else from the
    start formula; each other node from its solved inner neighbours (``side_start``)."""
    n = t.size
    npts = s_hat.size
    pre = np.empty((6, npts))
    work = np.empty((WORK_ROWS, npts))
    nodes = np.empty((16, n))
    jac = np.empty((n, n))
    rhs = np.empty((n, 4))
    piv = np.empty(n, dtype=np.int64)
    trial = np.empty(n)
    back = np.empty((2, n))
    row = np.empty(n)
    xk = np.cos(np.arange(n + 1) * (math.pi / n))
    good = np.zeros(g_lnsig.shape[1], dtype=np.bool_)
    for g in range(g_r.size):
        r = g_r[g]
        q = g_q[g]
        tmax = g_tmax[g]
        lnx = exercise_level(r, q)
        group_points(r, q, tmax, s_hat, u_hat, w_hat, pre)
        ns = g_ns[g]
        mid = ns // 2
        worst = 0
        for o in range(ns):
            # mid, mid−1, mid+1, mid−2, ... walking outwards
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
                side_start(g_lnsig[g], g_lnb[g], g_tan[g], k, src, far, lnx, lnb)
            else:
                warm = borrow_start(g, k, g_r, g_q, g_tmax, g_ns, g_lnsig, g_lnb, g_tan,
                                    g_steps, t, power, xk, row, lnb)
            st = -1
            for _attempt in range(2):
                # a borrowed start that fails is retried from the start formula
                st = newton(r, q, v, tmax, t, pre, wmat, wmat_t, w0, lnb, g_tan[g, k], warm,
                            work, nodes, jac, rhs, piv, back, squares,
                            WARM_MAX if warm else NEWTON_MAX)
                if st >= 0 or not warm:
                    break
                warm = False
            if st >= 0 and second and ns == 1:
                second_tangent(r, q, v, tmax, t, pre, wmat, wmat_t, w0, lnb, g_tan[g, k], work,
                               nodes, jac, rhs, piv, trial, squares)
            else:
                for i in range(n):
                    g_tan[g, k, 3, i] = 0.0
            good[k] = st >= 0
            if st < 0:
                worst = -1
            elif worst >= 0:
                worst = max(worst, st)
        g_steps[g] = worst


@njit(cache=True, nogil=True, error_model="numpy", fastmath={"contract"})
def chebyshev_row(z: float, power: float, xk: np.ndarray, out: np.ndarray) -> None:
    """Weights ``out`` (n,) of the node values g_0..g_{n−1} (g_n = 0 at u = 0) in the
    Chebyshev interpolant at u/τmax = ``z`` (barycentric form); ``xk`` (n + 1,) holds the
    nodes cos(kπ/n)."""
    n = xk.size - 1
    xi = min(2.0 * max(z, 0.0) ** (1.0 / power) - 1.0, 1.0)
    for k in range(n + 1):
        if xi == xk[k]:
            for j in range(n):
                out[j] = 1.0 if j == k else 0.0
            return
    total = 0.0
    for k in range(n + 1):
        lam = (0.5 if (k == 0 or k == n) else 1.0) * (1.0 if k % 2 == 0 else -1.0)
        c = lam / (xi - xk[k])
        total += c
        if k < n:
            out[k] = c
    inv = 1.0 / total
    for k in range(n):
        out[k] *= inv


@njit(cache=True, nogil=True, error_model="numpy", fastmath={"contract"})
def boundary_table(r: float, q: float, v: float, lnb: np.ndarray, tangents: np.ndarray,
                   wq_t: np.ndarray, lq: np.ndarray, dlq: np.ndarray, nd: int,
                   work: np.ndarray, squares: bool) -> None:
    """ln B at the price nodes into ``lq`` (nq + 1,) and, for the first ``nd`` of (ln σ, r, b,
    (ln σ)²), its derivatives into ``dlq`` (4, nq + 1); ``wq_t`` (n, nq + 1) maps node values of
    the gap g = ln X − ln B (or of g² where X = 1) to the price nodes. ``tangents`` (4, n)
    holds ∂L/∂σ, ∂L/∂r, ∂L/∂b and ∂²L/∂(ln σ)² of the boundary solved at vol ``v``; ``work``
    (5, nq + 1) is scratch."""
    n = lnb.size
    nq1 = lq.size
    lnx = exercise_level(r, q)
    dlx_r, dlx_b = exercise_slopes(r, q)
    squared = squares and lnx == 0.0
    acc = work[0]
    dacc = work[1:5]
    for j in range(nq1):
        acc[j] = 0.0
        for d in range(nd):
            dacc[d, j] = 0.0
    for k in range(n):
        row = wq_t[k]
        gk = lnx - lnb[k]
        lam = v * tangents[0, k]
        # derivatives of the interpolated quantity (g, or g² with dg² = 2 g dg) at node k,
        # with dg = d ln X − dL and, in (ln σ)², d²g² = 2 L'² − 2 g L''
        if squared:
            qk = gk * gk
            c0 = -2.0 * gk * lam
            c1 = 2.0 * gk * (dlx_r - tangents[1, k])
            c2 = 2.0 * gk * (dlx_b - tangents[2, k])
            c3 = 2.0 * lam * lam - 2.0 * gk * tangents[3, k]
        else:
            qk = gk
            c0 = -lam
            c1 = dlx_r - tangents[1, k]
            c2 = dlx_b - tangents[2, k]
            c3 = -tangents[3, k]
        for j in range(nq1):
            acc[j] += row[j] * qk
        if nd == 0:
            continue
        for j in range(nq1):
            dacc[0, j] += row[j] * c0
            dacc[1, j] += row[j] * c1
            dacc[2, j] += row[j] * c2
        if nd == 4:
            for j in range(nq1):
                dacc[3, j] += row[j] * c3
    if not squared:
        for j in range(nq1):
            lq[j] = lnx - acc[j]
        if nd > 0:
            for j in range(nq1):
                dlq[0, j] = -dacc[0, j]
                dlq[1, j] = dlx_r - dacc[1, j]
                dlq[2, j] = dlx_b - dacc[2, j]
        if nd == 4:
            for j in range(nq1):
                dlq[3, j] = -dacc[3, j]
        return
    # ln B = ln X − √Q: d ln B = d ln X − dQ / (2√Q), d² ln B = −d²Q / (2√Q) + dQ² / (4 Q^{3/2})
    for j in range(nq1):
        h = acc[j]
        sh = math.sqrt(h) if h > 0.0 else 0.0
        lq[j] = lnx - sh
        if nd == 0:
            continue
        inv = 0.5 / sh if sh > 1e-150 else 0.0
        dlq[0, j] = -dacc[0, j] * inv
        dlq[1, j] = dlx_r - dacc[1, j] * inv
        dlq[2, j] = dlx_b - dacc[2, j] * inv
        if nd == 4:
            dlq[3, j] = -dacc[3, j] * inv + 2.0 * dacc[0, j] * dacc[0, j] * inv * inv * inv


@njit(cache=True, nogil=True, error_model="numpy", fastmath={"contract"})
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


@njit(cache=True, nogil=True, error_model="numpy", fastmath={"contract"})
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
    nd1, pd1 = ncdf_and_pdf(-d1)
    g[0] = dr * ncdf(-d2) - x * dq * nd1
    g[1] = -dq * nd1
    g[2] = dq * pd1 / (x * vst)
    g[3] = -g[2] / x * (1.0 + d1 / vst)
    g[4] = x * dq * pd1 * st
    g[5] = -dq * pd1 * d2 / v
    g[6] = g[4] * d1 * d2 / v
    g[7] = -tau * g[0]
    g[8] = -x * tau * dq * nd1


WINDOW = 5
"""Vol nodes, nearest a row's vol, that its boundary is interpolated from (a group spanning a
wide smile has more; the far ones add nothing but cost)."""
VALUE_ROWS = 10
"""Rows of the per-row scratch of ``value_put`` (one per accumulated term)."""


LAYER_POINTS = 24
"""Gauss–Legendre points of ``refined_rule``'s layer integral."""
LAYER_TOP = D_NEGLIGIBLE + 1.5
"""Largest d = ln(S/B)/(σ√s) of ``refined_rule``'s layer integral (beyond it, φ(d) < 1e-20)."""
LAYER_NODES, LAYER_WEIGHTS = np.polynomial.legendre.leggauss(LAYER_POINTS)
"""Gauss–Legendre nodes on [−1, 1] and weights of ``refined_rule``'s layer integral."""


@njit(cache=True, nogil=True, error_model="numpy", fastmath={"contract"})
def refined_rule(lnxs: float, v: float, r: float, q: float, lq: np.ndarray, dlq: np.ndarray,
                 d2lq: np.ndarray, nodes: np.ndarray, inner: int
                 ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """The price rule with its innermost panel [0, y₁] (in y = √s, the first ``inner`` nodes)
    replaced by a Gauss–Legendre rule in z = d₀/y (d₀ = ln(S/B)/σ) over [d₀/y₁, LAYER_TOP],
    in which the layer's integrands are smooth (φ(z) times powers of z), and the boundary and
    its derivatives at the new nodes, linear in s from s = 0: gamma, speed and so theta and
    charm carry a share of order one (speed of order 1/d₀) from the layer y ≈ d₀, which a
    fixed rule misses once S is that near B."""
    nq = nodes.shape[1]
    y_hi = nodes[2, inner - 1]
    y1 = nodes[2, 0] + y_hi                  # the panel's top (Gauss–Legendre is symmetric)
    s_hi = y_hi * y_hi
    d0 = (lnxs - lq[nq]) / v
    z1 = d0 / y1
    half = 0.5 * (max(LAYER_TOP, z1) - z1)
    nr = LAYER_POINTS + nq - inner
    nodes_r = np.empty((6, nr))
    lq_r = np.empty(nr + 1)
    dlq_r = np.empty((3, nr + 1))
    d2lq_r = np.empty(nr + 1)
    for i in range(LAYER_POINTS):
        z = z1 + half * (1.0 - LAYER_NODES[i])  # descending z: ascending y
        y = d0 / z
        s = y * y
        f = s / s_hi
        nodes_r[0, i] = s
        nodes_r[1, i] = 2.0 * y * (d0 / (z * z)) * half * LAYER_WEIGHTS[i]
        nodes_r[2, i] = y
        nodes_r[3, i] = fexp(-r * s)
        nodes_r[4, i] = fexp(-q * s)
        nodes_r[5, i] = 1.0 / y
        lq_r[i] = lq[nq] + (lq[inner - 1] - lq[nq]) * f
        for a in range(3):
            dlq_r[a, i] = dlq[a, nq] + (dlq[a, inner - 1] - dlq[a, nq]) * f
        d2lq_r[i] = d2lq[nq] + (d2lq[inner - 1] - d2lq[nq]) * f
    i = LAYER_POINTS
    for j in range(inner, nq):
        for a in range(6):
            nodes_r[a, i] = nodes[a, j]
        lq_r[i] = lq[j]
        for a in range(3):
            dlq_r[a, i] = dlq[a, j]
        d2lq_r[i] = d2lq[j]
        i += 1
    lq_r[nr] = lq[nq]
    for a in range(3):
        dlq_r[a, nr] = dlq[a, nq]
    d2lq_r[nr] = d2lq[nq]
    return nodes_r, lq_r, dlq_r, d2lq_r


@njit(cache=True, nogil=True, error_model="numpy", fastmath={"contract"})
def value_put(lnxs: float, tau: float, r: float, q: float, v: float, lq: np.ndarray,
              dlq: np.ndarray, d2lq: np.ndarray, nodes: np.ndarray, greeks: bool,
              eu: np.ndarray, out: np.ndarray, terms: np.ndarray, inner: int) -> bool:
    """Put (strike 1, spot e^lnxs) over the boundary ``lq`` (nq + 1,) with its derivatives
    ``dlq`` (σ, r, b; per unit) and ``d2lq`` (σσ), price nodes ``nodes`` (6, nq: s, weight, √s,
    e^{−rs}, e^{−qs}, 1/√s): out = price, delta, gamma, vega, theta, rho, carry rho, vanna, volga,
    charm (out[0] only unless ``greeks``); ``terms`` (VALUE_ROWS, nq) is scratch. Returns True,
    computing nothing, when the first ``inner`` nodes (the panel at s -> 0) are not negligible:
    the row is then valued on its ``refined_rule`` (with ``inner`` 0)."""
    nq = nodes.shape[1]
    xs = math.exp(lnxs)
    v = max(v, 1e-8)
    if lnxs <= lq[nq]:
        out[0] = 1.0 - xs
        if greeks:
            out[1] = -1.0
            for i in range(2, 10):
                out[i] = 0.0
        return False
    b = r - q
    v2 = v * v
    mup = b + 0.5 * v2
    mum = b - 0.5 * v2
    european_put(xs, tau, r, q, v, eu)
    # nodes before j0 (s -> 0, far from the boundary) add nothing
    iv = 1.0 / v
    j0 = nq
    for j in range(nq):
        if (lnxs - lq[j] + mum * nodes[0, j]) * iv * nodes[5, j] <= D_NEGLIGIBLE:
            j0 = j
            break
    if j0 < inner:
        return True
    if not greeks:
        tp = terms[0]
        for j in range(j0, nq):
            s = nodes[0, j]
            vs = v * nodes[2, j]
            dp = (lnxs - lq[j] + mup * s) * iv * nodes[5, j]
            cp = ncdf(-dp)
            cm = ncdf(vs - dp)
            tp[j] = nodes[1, j] * (r * nodes[3, j] * cm - q * xs * nodes[4, j] * cp)
        out[0] = eu[0] + fsum(tp, j0, nq)
        return False
    ixs = 1.0 / xs
    for j in range(j0, nq):
        s = nodes[0, j]
        wt = nodes[1, j]
        ss = nodes[2, j]
        er = nodes[3, j]
        eq = nodes[4, j]
        vs = v * ss
        ivs = iv * nodes[5, j]
        dp = (lnxs - lq[j] + mup * s) * ivs
        dm = dp - vs
        cp, pp = ncdf_and_pdf(-dp)
        cm = ncdf(-dm)
        e = eq * pp
        rb = r * fexp(-lq[j])                # r / B(u)
        c = q - rb
        gq = q - c * dp * ivs
        f_l = -xs * e * c * ivs
        f_v = e * xs * iv * (rb * dp - q * dm)
        f_r = er * cm * (1.0 - r * s) - xs * eq * cp * (1.0 - q * s)
        f_b = xs * eq * (1.0 - q * s) * cp + xs * e * c * ss * iv
        f_sv = -q * e * dm * iv + c * e * (dp * dm - 1.0) * iv * ivs
        f_sl = e * c * ivs * (dp * ivs - 1.0)
        f_vl = -xs * c * e * (dp * dm - 1.0) * iv * ivs
        f_ll = -xs * e * ivs * (c * dp * ivs + rb)
        f_vv = xs * e * iv * iv * ((dp * dm - 1.0) * (rb * dp - q * dm) - rb * dm + q * dp)
        lv = dlq[0, j]
        terms[0, j] = wt * (r * er * cm - q * xs * eq * cp)
        terms[1, j] = wt * (-q * eq * cp + e * c * ivs)
        terms[2, j] = wt * e * ivs * ixs * gq
        terms[3, j] = wt * e * ivs * ixs * ixs * (-gq - dp * gq * ivs - c * ivs * ivs)
        terms[4, j] = wt * (f_v + f_l * lv)
        terms[5, j] = wt * (f_r + f_l * dlq[1, j])
        terms[6, j] = wt * (f_b + f_l * dlq[2, j])
        terms[7, j] = wt * (f_sv + f_sl * lv)
        terms[8, j] = wt * (f_vv + 2.0 * f_vl * lv + f_ll * lv * lv + f_l * d2lq[j])
    p = eu[0] + fsum(terms[0], j0, nq)
    dl = eu[1] + fsum(terms[1], j0, nq)
    gm = eu[2] + fsum(terms[2], j0, nq)
    sp = eu[3] + fsum(terms[3], j0, nq)
    vg = eu[4] + fsum(terms[4], j0, nq)
    vn = eu[5] + fsum(terms[7], j0, nq)
    vo = eu[6] + fsum(terms[8], j0, nq)
    rh = eu[7] + fsum(terms[5], j0, nq)
    cr = eu[8] + fsum(terms[6], j0, nq)
    out[0] = p
    out[1] = dl
    out[2] = gm
    out[3] = vg
    out[4] = -(0.5 * v2 * xs * xs * gm + b * xs * dl - r * p)
    out[5] = rh
    out[6] = cr
    out[7] = vn
    out[8] = vo
    out[9] = -(v2 * xs * gm + 0.5 * v2 * xs * xs * sp + (b - r) * dl + b * xs * gm)
    return False


@njit(cache=True, nogil=True, error_model="numpy", fastmath={"contract"})
def prepare_rows(w: np.ndarray, s: np.ndarray, k: np.ndarray, t: np.ndarray, r: np.ndarray,
                 b: np.ndarray, v: np.ndarray, years_min: float, vol_min: float,
                 status: np.ndarray, lnx: np.ndarray, r_p: np.ndarray, q_p: np.ndarray,
                 lnv: np.ndarray, key: np.ndarray) -> None:
    """Each row's status code (0 one boundary, 1 never exercised early, 2 two boundaries, 4
    expired, 5 under ``years_min``), its put form (ln of the put-form spot over strike, rate,
    dividend yield), ln max(σ, ``vol_min``) and a hash ``key`` of (τ, rate, dividend yield)
    that sorts rows of one boundary together."""
    for i in range(s.size):
        if w[i] > 0.0:
            x = math.log(k[i] / s[i])
            rp = r[i] - b[i]
            qp = r[i]
        else:
            x = math.log(s[i] / k[i])
            rp = r[i]
            qp = r[i] - b[i]
        st = 1
        if rp > 0.0 or (rp == 0.0 and qp < 0.0):
            st = 0
        if qp < rp < 0.0:
            st = 2
        if st == 0 and t[i] < years_min:
            st = 5
        if t[i] <= 0.0:
            st = 4
        status[i] = st
        lnx[i] = x
        r_p[i] = rp
        q_p[i] = qp
        lnv[i] = math.log(max(v[i], vol_min))
        key[i] = group_key(t[i], rp, qp)


@njit(cache=True, nogil=True, error_model="numpy")
def group_key(t: float, r: float, q: float) -> np.uint64:
    """A hash of the exact bits of (τ, rate, dividend yield)."""
    h = _bits(t) * np.uint64(0x9E3779B97F4A7C15)
    h ^= _bits(r) * np.uint64(0xC2B2AE3D27D4EB4F) + (h >> np.uint64(29))
    h ^= _bits(q) * np.uint64(0x165667B19E3779F9) + (h >> np.uint64(31))
    return h


@njit(cache=True, nogil=True, error_model="numpy")
def group_keys(t: np.ndarray, r: np.ndarray, q: np.ndarray, key: np.ndarray) -> None:
    """``group_key`` of each row."""
    for i in range(t.size):
        key[i] = group_key(t[i], r[i], q[i])


@njit(cache=True, nogil=True, error_model="numpy", fastmath={"contract"})
def value_groups(g_r: np.ndarray, g_q: np.ndarray, g_tau: np.ndarray, g_tmax: np.ndarray,
                 g_ns: np.ndarray, g_lnsig: np.ndarray, g_lnb: np.ndarray, g_tan: np.ndarray,
                 g_steps: np.ndarray, g_first: np.ndarray, order: np.ndarray,
                 row_lnx: np.ndarray, row_v: np.ndarray, row_s: np.ndarray, row_k: np.ndarray,
                 row_w: np.ndarray, wq_t: np.ndarray, power: float, ts_x: np.ndarray,
                 ts_w: np.ndarray, vol_min: float, greeks: bool, out: np.ndarray,
                 near: np.ndarray, squares: bool, inner: int) -> None:
    """Prices (and greeks) of the rows of each group into ``out`` (1 or 10, all rows): group g
    holds rows ``order[g_first[g]:g_first[g + 1]]``; groups whose boundary failed
    (``g_steps`` < 0) are left for the caller. Row inputs: ln of the put-form spot over strike,
    vol, spot, strike and ω (+1 call, −1 put). ``wq_t`` (n, nq + 1) maps the boundary's node
    values to the price nodes of a row whose time is the boundary's τmax (other rows get their
    own); the rule's first ``inner`` nodes are its panel at s -> 0 (``value_put``). Prices are
    floored at the European value and intrinsic (rounding); ``near`` marks rows within 1e-9 of
    the strike of the European value, for the caller to floor at its own European price."""
    nq = ts_x.size
    n = wq_t.shape[0]
    nsm = g_lnsig.shape[1]
    lq_k = np.empty((nsm, nq + 1))
    dlq_k = np.zeros((nsm, 4, nq + 1))
    lq = np.empty(nq + 1)
    dlq = np.zeros((3, nq + 1))
    d2lq = np.zeros(nq + 1)
    w0 = np.empty((3, nsm))
    w1 = np.empty((3, nsm))
    lag = np.empty(nsm)
    nodes = np.empty((6, nq))
    own = np.empty((n, nq + 1))
    wrow = np.empty(n)
    xk = np.cos(np.arange(n + 1) * (math.pi / n))
    work = np.empty((5, nq + 1))
    terms = np.empty((VALUE_ROWS, nq))
    acc = np.empty((5, nq + 1))
    eu = np.empty(9)
    res = np.empty(10)
    for g in range(g_r.size):
        if g_steps[g] < 0:
            continue
        ns = g_ns[g]
        r = g_r[g]
        q = g_q[g]
        tau = g_tau[g]
        table = group_nodes(tau, g_tmax[g], r, q, ts_x, ts_w, wq_t, power, xk, wrow, nodes,
                            own)
        nd = 4 if (greeks and ns == 1) else (3 if (greeks or ns > 1) else 0)
        for k in range(ns):
            boundary_table(r, q, math.exp(g_lnsig[g, k]), g_lnb[g, k], g_tan[g, k], table,
                           lq_k[k], dlq_k[k], nd, work, squares)
        # rows by vol, so that rows of one vol share the boundary interpolated to it
        rows = order[g_first[g]:g_first[g + 1]]
        by_vol = rows[np.argsort(row_v[rows], kind="mergesort")]
        last = -1.0
        for row in by_vol:
            v = max(row_v[row], vol_min)
            if v == last:
                pass
            elif ns == 1:
                for j in range(nq + 1):
                    lq[j] = lq_k[0, j]
                if greeks:
                    iv = 1.0 / v
                    for j in range(nq + 1):
                        a1 = dlq_k[0, 0, j]
                        dlq[0, j] = a1 * iv
                        dlq[1, j] = dlq_k[0, 1, j]
                        dlq[2, j] = dlq_k[0, 2, j]
                        d2lq[j] = (dlq_k[0, 3, j] - a1) * iv * iv
            else:
                # the WINDOW nodes around the row's vol (all of them in smaller groups)
                lv = math.log(v)
                width = min(ns, WINDOW)
                k0 = 0
                while k0 + width < ns and g_lnsig[g, k0 + width // 2] < lv:
                    k0 += 1
                hermite_weights(lv, g_lnsig[g, k0:k0 + width], width, w0, w1, lag)
                nacc = 5 if greeks else 1
                for a in range(nacc):
                    for j in range(nq + 1):
                        acc[a, j] = 0.0
                for kw in range(width):
                    k = k0 + kw
                    c00 = w0[0, kw]
                    c01 = w1[0, kw]
                    fk = lq_k[k]
                    dk = dlq_k[k, 0]
                    a0 = acc[0]
                    for j in range(nq + 1):
                        a0[j] += c00 * fk[j] + c01 * dk[j]
                    if not greeks:
                        continue
                    c10 = w0[1, kw]
                    c11 = w1[1, kw]
                    c20 = w0[2, kw]
                    c21 = w1[2, kw]
                    lk = lag[kw]
                    rk = dlq_k[k, 1]
                    bk = dlq_k[k, 2]
                    a1 = acc[1]
                    a2 = acc[2]
                    ar = acc[3]
                    ab = acc[4]
                    for j in range(nq + 1):
                        a1[j] += c10 * fk[j] + c11 * dk[j]
                        a2[j] += c20 * fk[j] + c21 * dk[j]
                        ar[j] += lk * rk[j]
                        ab[j] += lk * bk[j]
                for j in range(nq + 1):
                    lq[j] = acc[0, j]
                if greeks:
                    iv = 1.0 / v
                    for j in range(nq + 1):
                        dlq[0, j] = acc[1, j] * iv
                        dlq[1, j] = acc[3, j]
                        dlq[2, j] = acc[4, j]
                        d2lq[j] = (acc[2, j] - acc[1, j]) * iv * iv
            last = v
            if value_put(row_lnx[row], tau, r, q, row_v[row], lq, dlq, d2lq, nodes, greeks,
                         eu, res, terms, inner):
                rule, lq_r, dlq_r, d2lq_r = refined_rule(row_lnx[row], max(row_v[row], 1e-8),
                                                         r, q, lq, dlq, d2lq, nodes, inner)
                value_put(row_lnx[row], tau, r, q, row_v[row], lq_r, dlq_r, d2lq_r, rule,
                          greeks, eu, res, np.empty((VALUE_ROWS, rule.shape[1])), 0)
            call = row_w[row] > 0.0
            sc = row_s[row] if call else row_k[row]
            xs = math.exp(row_lnx[row])
            # the value is at least the European one and intrinsic (the floors absorb rounding)
            live = row_lnx[row] > lq[nq]
            value = sc * (max(res[0], eu[0]) if live else res[0])
            out[0, row] = max(value, row_w[row] * (row_s[row] - row_k[row]), 0.0)
            near[row] = live and res[0] - eu[0] <= 1e-9
            if not greeks:
                continue
            if call:
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
                out[1, row] = res[1]
                out[2, row] = res[2] / sc
                out[3, row] = sc * res[3]
                out[4, row] = sc * res[4]
                out[5, row] = sc * res[5]
                out[6, row] = sc * res[6]
                out[7, row] = res[7]
                out[8, row] = sc * res[8]
                out[9, row] = res[9]


@njit(cache=True, nogil=True, error_model="numpy", fastmath={"contract"})
def edge_groups(g_r: np.ndarray, g_q: np.ndarray, g_tau: np.ndarray, g_tmax: np.ndarray,
                g_ns: np.ndarray, g_lnsig: np.ndarray, g_lnb: np.ndarray, g_tan: np.ndarray,
                power: float, squares: bool, lat: np.ndarray, g_nl: np.ndarray,
                out: np.ndarray) -> None:
    """ln B(τ) of each group at its row time τ for the vols ``lat`` (G, L) (ln σ, the first
    ``g_nl`` used) into ``out`` (G, L): the boundary interpolated in ln σ from the group's vol
    nodes exactly as ``value_groups`` interpolates it for a row of that vol."""
    n = g_lnb.shape[2]
    nsm = g_lnsig.shape[1]
    xk = np.cos(np.arange(n + 1) * (math.pi / n))
    wrow = np.empty(n)
    tab = np.empty((n, 1))
    lq1 = np.empty(1)
    dlq1 = np.zeros((4, 1))
    work = np.empty((5, 1))
    lnb_k = np.empty(nsm)
    dl_k = np.empty(nsm)
    w0 = np.empty((3, nsm))
    w1 = np.empty((3, nsm))
    lag = np.empty(nsm)
    for g in range(g_r.size):
        ns = g_ns[g]
        chebyshev_row(g_tau[g] / g_tmax[g], power, xk, wrow)
        for k in range(n):
            tab[k, 0] = wrow[k]
        nd = 3 if ns > 1 else 0
        for k in range(ns):
            boundary_table(g_r[g], g_q[g], math.exp(g_lnsig[g, k]), g_lnb[g, k], g_tan[g, k],
                           tab, lq1, dlq1, nd, work, squares)
            lnb_k[k] = lq1[0]
            dl_k[k] = dlq1[0, 0]
        for a in range(g_nl[g]):
            if ns == 1:
                out[g, a] = lnb_k[0]
                continue
            lv = lat[g, a]
            width = min(ns, WINDOW)
            k0 = 0
            while k0 + width < ns and g_lnsig[g, k0 + width // 2] < lv:
                k0 += 1
            hermite_weights(lv, g_lnsig[g, k0:k0 + width], width, w0, w1, lag)
            acc = 0.0
            for kw in range(width):
                acc += w0[0, kw] * lnb_k[k0 + kw] + w1[0, kw] * dl_k[k0 + kw]
            out[g, a] = acc


@njit(cache=True, nogil=True, error_model="numpy", fastmath={"contract"})
def lattice_weights(lv: float, step: float, first: int, count: int, points: int,
                    lag: np.ndarray) -> int:
    """Lagrange weights ``lag`` (points,) in ln σ = ``lv`` over the ``points`` lattice vols
    (ln σ = i × ``step``) nearest it among a group's lattice i = first … first + count − 1;
    returns the position of the first of them in the group's lattice."""
    c = lv / step
    i0 = int(math.floor(c)) - points // 2 + 1
    i0 = min(max(i0, first), first + count - points)
    for k in range(points):
        p = 1.0
        for m in range(points):
            if m != k:
                p *= (c - (i0 + m)) / (k - m)
        lag[k] = p
    return i0 - first


@njit(cache=True, nogil=True, error_model="numpy", inline="always",
      fastmath={"contract"})
def group_nodes(tau: float, tmax: float, r: float, q: float, ts_x: np.ndarray,
                ts_w: np.ndarray, wq_t: np.ndarray, power: float, xk: np.ndarray,
                wrow: np.ndarray, nodes: np.ndarray, own: np.ndarray) -> np.ndarray:
    """The price rule's nodes for rows of time ``tau`` into ``nodes`` (6, nq: s, weight, √s,
    e^{−rs}, e^{−qs}, 1/√s), and returns the map from a boundary's node values to them:
    ``wq_t`` (n, nq + 1) where ``tau`` is the boundary's ``tmax``, else their own, written
    into ``own`` (``xk`` the Chebyshev nodes, ``wrow`` (n,) scratch)."""
    nq = ts_x.size
    n = wq_t.shape[0]
    for j in range(nq):
        s = tau * ts_x[j] * ts_x[j]
        nodes[0, j] = s
        nodes[1, j] = tau * 2.0 * ts_x[j] * ts_w[j]
        nodes[2, j] = math.sqrt(s)
        nodes[3, j] = fexp(-r * s)
        nodes[4, j] = fexp(-q * s)
        nodes[5, j] = 1.0 / nodes[2, j]
    if tau == tmax:
        return wq_t
    for j in range(nq + 1):
        z = (tau / tmax) * ((1.0 - ts_x[j] * ts_x[j]) if j < nq else 1.0)
        chebyshev_row(z, power, xk, wrow)
        for k in range(n):
            own[k, j] = wrow[k]
    return own
