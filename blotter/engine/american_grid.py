"""American prices and spot greeks of many cells per row (a scenario grid or a spot profile)
from one small table per exercise boundary, instead of one quadrature per cell.

A put's value in units of its strike is the European value plus the early-exercise premium
E(ln x, σ; τ, r, q), where x is spot over strike. Rows of one (τ, r, q) in put form share E, so
each group gets a table of it (the engine's quadrature, ``_premium.table_points``) at
``LATTICE_POINTS``-wide windows of a fixed lattice of vols (ln σ = i × ``LATTICE_STEP``) and at
the Chebyshev–Lobatto points of ζ = (z − ``Z_SCALE``) / (z + ``Z_SCALE``), with
z = (ln x − ln B(σ)) / (σ√τ) the distance above the exercise boundary B(σ) in standard
deviations (ζ = 1 is z = ∞, where E is 0). E is smooth in (z, ln σ) on z > 0, and the kink of
the value at the boundary stays outside the table: a cell at or beyond the interpolated
boundary is exercised (intrinsic, delta ±1, the rest 0). Each cell is then the closed-form
European value plus a Lagrange interpolation in ln σ of Chebyshev series in ζ. Greeks (delta,
gamma, vega) get tables of their own premiums, taken from the method's exact derivatives, not
by differentiating the interpolant; theta follows from the Black–Scholes equation as in the
method. Greek cells next to the boundary, or of a small σ√τ, are valued by the quadrature
(``_Near``): there the tables' gamma misses the greeks' accuracy.

A table node depends only on its group's boundary and its lattice position, never on which
rows or cells asked for it, so a cell's value does not depend on the other rows (a grid summed
over shards equals the serial grid); each group keeps in the cache one set per premium
(price, delta, gamma, vega) over the lattice vols built so far, and a call builds only the
premiums its outputs read (a grid the price, a delta profile the delta, and the price too
for calls). The tables cost a few hundred exact values per group, computed for all groups in
one compiled pass on the engine's thread pool; rows the tables do not serve (other statuses,
vols below ``VOL_TABLE_MIN``, a failed boundary, and every row while the compiled kernels are
not ready: the tables have no NumPy mirror) are valued cell by cell by
``american.evaluate``.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from types import ModuleType

import numpy as np

from blotter.engine import _alo, _premium, american
from blotter.engine._chunks import run_chunked

LATTICE_STEP = 0.1
"""Spacing of the vol lattice in ln σ."""
LATTICE_POINTS = 6
"""Lattice vols each cell's premium is interpolated from (Lagrange in ln σ)."""
CHEB_DEGREE = 32
"""Degree N of the Chebyshev series in ζ (N + 1 points, one of them z = ∞)."""
Z_SCALE = 4.0
"""z at ζ = 0: half of the Chebyshev points lie within this many standard deviations of the
boundary."""
VOL_TABLE_MIN = 0.03
"""Rows with a cell vol below this are valued cell by cell (the lattice would reach below
``american.VOL_MIN``)."""
Z_CAP = 12.0
"""Table points farther than this many standard deviations above the boundary hold 0 and cost
no quadrature: the drift moves a row at most about 5.5 standard deviations towards the
boundary (|r − q| <= 8%, three years, the lattice's lowest vol 2.5%), so the premium there
is below Φ(−6) of r K τ (a cap of 40 gave the same cells to 4e-15 on such rows)."""
TAIL_NEGLIGIBLE = 1e-10
"""Premiums (per unit strike, or of a greek per unit) below this at every table point from some
z on are taken as 0 beyond the last point above it: there the interpolant's own error would be
larger than the premium."""
NEAR_Z = 0.5
"""Greek cells within this many standard deviations of the interpolated boundary (either side)
are valued by the engine's quadrature: there the tables' gamma follows the boundary limit,
which the engine's own gamma reaches only within a layer of width z² in time."""
SHORT_SD = 0.03
"""Greek cells whose σ√τ is below this, up to ``SHORT_Z`` above the boundary, are valued by
the engine's quadrature: the gamma premium peaks at about 1/(σ√τ) near the boundary, and the
tables' error of about 1e-6 of that peak exceeds 1e-6 per unit of underlying farther out."""
SHORT_Z = 9.0
"""Standard deviations above the boundary past which the premium of a row with a small σ√τ is
below 1e-12 of its strike, and its table cells are kept."""
ROWS_PER_TASK = 256
"""Rows per unit of work of the cell kernel on the thread pool."""
TABLES_PER_TASK = 32
"""(Group, lattice vol, premium) tables per unit of work of the table kernel on the thread pool
(about 0.3 ms of work each)."""
BLOCK_ROWS = 8192
"""Rows whose cells are held at once (with greeks and 31 spot points, 10 MB)."""

TABLE_OUTPUTS = 4
"""Premium tables: price, delta, gamma, vega (put form, strike 1), each kept in a set of its
own per boundary."""
CELL_OUTPUTS = ("price", "delta", "gamma", "vega", "theta")
"""What ``american_cells`` gives with ``greeks`` (per unit of underlying, as ``price_greeks``)."""


def _wanted(greeks: bool, outputs: Sequence[str] | None) -> tuple[np.ndarray, np.ndarray]:
    """Which outputs a call writes ((1,) price, or (5,) of ``CELL_OUTPUTS``) and which premium
    tables the cells of puts (row 0) and of calls (row 1) read (2, 4): theta reads the price,
    delta and gamma premiums, and a call's delta the price premium too (in put form it is
    P − x ∂P/∂x)."""
    if not greeks:
        return np.ones(1, dtype=np.bool_), np.array([[True, False, False, False]] * 2)
    names = CELL_OUTPUTS if outputs is None else tuple(outputs)
    unknown = sorted(set(names) - set(CELL_OUTPUTS))
    if unknown or not names:
        raise ValueError(f"outputs must name some of {', '.join(CELL_OUTPUTS)}, not "
                         f"{', '.join(unknown) or 'none'}")
    price, delta, gamma, vega, theta = (n in names for n in CELL_OUTPUTS)
    puts = [price or theta, delta or theta, gamma or theta, vega]
    calls = [price or delta or theta, *puts[1:]]
    return np.array([price, delta, gamma, vega, theta]), np.array([puts, calls])


def _lobatto() -> tuple[np.ndarray, np.ndarray]:
    """z at the Chebyshev–Lobatto points ζ_c = cos(cπ/N) (c = 0 is z = ∞, left as inf) and the
    matrix from values there to Chebyshev coefficients."""
    n = CHEB_DEGREE
    zeta = np.cos(np.arange(n + 1) * np.pi / n)
    with np.errstate(divide="ignore"):
        z = Z_SCALE * (1.0 + zeta) / (1.0 - zeta)
    z[n] = 0.0
    half = np.ones(n + 1)
    half[0] = half[n] = 0.5
    k = np.arange(n + 1)
    to_coef = (2.0 / n) * np.cos(np.outer(k, k) * np.pi / n) * half[None, :]
    to_coef[0] *= 0.5
    to_coef[n] *= 0.5
    return z, to_coef


_Z, _TO_COEF = _lobatto()
_TO_COEF_T = np.ascontiguousarray(_TO_COEF.T)


def american_cells(is_call: np.ndarray, spot: np.ndarray, strike: np.ndarray,
                   years: np.ndarray, rate: np.ndarray, carry: np.ndarray, vols: np.ndarray,
                   shocks: np.ndarray, greeks: bool = False,
                   cache: american.BoundaryCache | None = None,
                   kernels: ModuleType | None = None,
                   base_vols: np.ndarray | None = None,
                   weights: np.ndarray | None = None, with_base: bool = True,
                   kept_only: bool = False,
                   exact_near: bool = True,
                   outputs: Sequence[str] | None = None) -> tuple[np.ndarray, np.ndarray]:
    """American values (``greeks`` False: shape (1, n_s, n_v, m)) or ``CELL_OUTPUTS``
    (5, n_s, n_v, m) of m rows in every cell (spot × ``shocks[i]``, vol ``vols[i or 0, j, m]``);
    with ``greeks``, ``outputs`` names those of ``CELL_OUTPUTS`` computed (the others NaN; all
    by default), so that only the premium tables they read are built.

    Row arguments are flat (m,); ``vols`` is (n_s or 1, n_v, m) and ``shocks`` (n_s,) spot
    multipliers. Equal to ``price``/``price_greeks`` with ``american=True`` of each cell within
    the method's accuracy (ACCURACY.md); ``cache`` as for ``price``. Also returns the same
    outputs (n_out, m) at the unmoved spot and ``base_vols`` (m,) (default: the rows' first
    vol column) from the same tables, so that a P&L against them is 0 where nothing moves.
    With ``weights`` (m,), the weighted sums over rows instead: (n_out, n_s, n_v) and
    (n_out,), the cells computed ``BLOCK_ROWS`` rows at a time (a few MB, however large the
    book). ``with_base`` False leaves the outputs at the unmoved spot NaN (half the work of one
    cell per row); with ``kept_only``, rows whose boundary or tables are not already kept in
    ``cache`` are valued cell by cell instead of building them (that costs several times a
    quadrature per cell, so pays only over many cells). With ``greeks`` and ``exact_near``,
    cells within ``NEAR_Z`` of the boundary, or up to ``SHORT_Z`` above it where σ√τ is
    below ``SHORT_SD``, are valued by the quadrature (``_Near``)."""
    outs, tabs = _wanted(greeks, outputs)
    kern = american._implementation(kernels)
    w = np.where(np.asarray(is_call, dtype=bool), 1.0, -1.0)
    s, k, t, r, b = (american._writable(a) for a in (spot, strike, years, rate, carry))
    vols = np.asarray(vols, dtype=np.float64)
    shocks = american._writable(np.asarray(shocks, dtype=np.float64).ravel())
    m = s.size
    n_s, n_v = shocks.size, vols.shape[1]
    n_out = outs.size
    out: np.ndarray
    base: np.ndarray
    if weights is None:
        out = np.empty((m, n_out, n_s, n_v))
        base = np.empty((m, n_out, 1, 1))

        def sink(rows: np.ndarray, cells: np.ndarray, at_base: np.ndarray) -> None:
            out[rows] = cells
            base[rows] = at_base
    else:
        wts = np.asarray(weights, dtype=np.float64)
        out = np.zeros((n_out, n_s, n_v))
        base = np.zeros(n_out)

        def sink(rows: np.ndarray, cells: np.ndarray, at_base: np.ndarray) -> None:
            out[...] += np.tensordot(wts[rows], cells, axes=1)
            base[...] += wts[rows] @ at_base[:, :, 0, 0]

    def result() -> tuple[np.ndarray, np.ndarray]:
        if weights is None:
            return out.transpose(1, 2, 3, 0), base[:, :, 0, 0].T
        return out, base

    if m == 0:
        return result()
    vol_rows = np.ascontiguousarray(np.moveaxis(vols, -1, 0))   # (m, n_s or 1, n_v)
    base_v = np.ascontiguousarray(
        (vol_rows[:, 0, 0] if base_vols is None else np.asarray(base_vols, dtype=np.float64)
         ).reshape(m, 1, 1))
    lo_v = np.minimum(vol_rows.reshape(m, -1).min(axis=1), base_v[:, 0, 0])
    hi_v = np.maximum(vol_rows.reshape(m, -1).max(axis=1), base_v[:, 0, 0])
    status = np.empty(m, dtype=np.int8)
    lnx, r_p, q_p, lnv = (np.empty(m) for _ in range(4))
    key = np.empty(m, dtype=np.uint64)
    kern.prepare_rows(w, s, k, t, r, b, american._writable(np.maximum(lo_v, 1e-8)),
                      american.YEARS_MIN, american.VOL_MIN, status, lnx, r_p, q_p, lnv, key)
    # the tables' kernels are compiled only: while they compile (the NumPy mirror in use),
    # every cell is valued by the mirror's quadrature
    table = ((status == american.EXERCISE_BOUNDARY) & (lo_v >= VOL_TABLE_MIN)
             & np.isfinite(hi_v) & (kern is _alo))
    rows = np.flatnonzero(table)
    if kept_only and cache is None:
        rows = rows[:0]
    if rows.size:
        done = _tabulated(rows, w, s, k, t, r, b, r_p, q_p, lnx, lo_v, hi_v, vol_rows, shocks,
                          key, greeks, cache, kern, outs, tabs, base_v, sink, with_base,
                          kept_only, exact_near)
        table[rows[~done]] = False
    rest = np.flatnonzero(~table)
    if rest.size:
        cells = np.empty((rest.size, n_out, n_s, n_v))
        at_base = np.empty((rest.size, n_out, 1, 1))
        _cell_by_cell(rest, w, s, k, t, r, b, vol_rows, shocks, greeks, cache, kern, cells)
        if with_base:
            _cell_by_cell(rest, w, s, k, t, r, b, base_v, np.ones(1), greeks, cache, kern,
                          at_base)
        else:
            at_base.fill(np.nan)
        cells[:, ~outs] = np.nan
        at_base[:, ~outs] = np.nan
        sink(rest, cells, at_base)
    return result()


def _tabulated(rows: np.ndarray, w: np.ndarray, s: np.ndarray, k: np.ndarray, t: np.ndarray,
               r: np.ndarray, b: np.ndarray, r_p: np.ndarray, q_p: np.ndarray, lnx: np.ndarray,
               lo_v: np.ndarray,
               hi_v: np.ndarray, vol_rows: np.ndarray, shocks: np.ndarray, key: np.ndarray,
               greeks: bool, cache: american.BoundaryCache | None, kern: ModuleType,
               outs: np.ndarray, tabs: np.ndarray, base_v: np.ndarray,
               sink: Callable[[np.ndarray, np.ndarray, np.ndarray], None],
               with_base: bool = True, kept_only: bool = False,
               exact_near: bool = True) -> np.ndarray:
    """Cells of ``rows`` (status one boundary) from their groups' tables, and their values at
    the unmoved spot and ``base_v`` (NaN unless ``with_base``), handed to ``sink``
    ``BLOCK_ROWS`` rows at a time (row indices, (rows, n_out, n_s, n_v), (rows, n_out, 1, 1));
    ``outs`` and ``tabs`` as ``_wanted`` gives them. Returns which rows were served (False
    where the group's boundary did not converge, and with ``kept_only`` where its boundary or
    a table it needs is not kept in ``cache``)."""
    n_out = outs.size
    order, first = american._group(rows, key, t, r_p, q_p)
    starts = first[:-1]
    n_g = starts.size
    counts = np.diff(first)
    # the premium tables each group's cells read: its puts' and its calls'
    call = w[order] > 0.0
    need = ((np.logical_or.reduceat(~call, starts)[:, None] & tabs[0])
            | (np.logical_or.reduceat(call, starts)[:, None] & tabs[1]))
    lv_lo = np.minimum.reduceat(np.log(lo_v[order]), starts)
    lv_hi = np.maximum.reduceat(np.log(hi_v[order]), starts)
    half = LATTICE_POINTS // 2
    lat_first = (np.floor(lv_lo / LATTICE_STEP) - half + 1).astype(np.int64)
    lat_last = (np.floor(lv_hi / LATTICE_STEP) + half).astype(np.int64)
    n_lat = lat_last - lat_first + 1
    g_rows = order[starts]
    g_t, g_r, g_q = t[g_rows], r_p[g_rows], q_p[g_rows]
    # the group's boundary over its lattice's vols: found in the cache or solved once, with
    # vol nodes close enough for greeks even for prices, so that a grid's boundary also
    # serves a greek profile (one per key is kept: a price-only one would be solved again)
    span = np.concatenate([lat_first, lat_last]) * LATTICE_STEP
    if kept_only:
        # the kept tables alone: no boundary is interpolated and no table built
        assert cache is not None
        ok, coef, tail, edge = _kept_sets(cache, g_r, g_q, g_t, span, lat_first, n_lat, need)
    else:
        two = np.arange(2 * n_g).reshape(2, n_g).T.ravel()
        grp = american._boundaries(two, np.arange(0, 2 * n_g + 1, 2), np.tile(g_t, 2),
                                   np.tile(g_r, 2), np.tile(g_q, 2), span, True, cache, kern)
        ok = grp.steps >= 0
        nl_max = int(n_lat.max())
        lat = (lat_first[:, None] + np.arange(nl_max)[None, :]) * LATTICE_STEP
        edge = np.zeros((n_g, nl_max))
        scheme = american.DEFAULT
        kern.edge_groups(grp.rate, grp.div, grp.tau, grp.tmax, grp.ns, grp.lnsig, grp.lnb,
                         grp.tan, scheme.power, scheme.squares, np.ascontiguousarray(lat),
                         n_lat, edge)
        use = ok[:, None] & (np.arange(nl_max)[None, :] < n_lat[:, None])
        coef, tail = _cached_tables(grp, use, need, lat_first, n_lat, lat, edge, scheme, cache)
    served = np.repeat(ok, counts)
    sel = order[served]
    if sel.size:
        row_group = np.repeat(np.arange(n_g), counts)[served]
        # the tables up to the last one read (a grid's price alone), so the cell kernel's
        # loops over tables are no longer than they need be
        n_t = int(np.flatnonzero(tabs.any(axis=0))[-1]) + 1
        args = (g_r, g_q, g_t, lat_first, n_lat, edge, tail[:n_t], coef[:n_t], LATTICE_STEP,
                LATTICE_POINTS, Z_SCALE, np.ascontiguousarray(tabs[:, :n_t]), outs)
        ln_shock = np.log(shocks)
        n_s, n_v = shocks.size, vol_rows.shape[2]
        b_s = np.ascontiguousarray(base_v[sel])
        one = np.ones(1)
        zero = np.zeros(1)
        g_sel = np.ascontiguousarray(row_group)
        lnx_s, w_s, s_s, k_s = (np.ascontiguousarray(a[sel]) for a in (lnx, w, s, k))
        for b0 in range(0, sel.size, BLOCK_ROWS):
            b1 = min(b0 + BLOCK_ROWS, sel.size)
            cells = np.empty((b1 - b0, n_out, n_s, n_v))
            at_base = np.empty((b1 - b0, n_out, 1, 1))
            if not with_base:
                at_base.fill(np.nan)
            v_s = np.ascontiguousarray(vol_rows[sel[b0:b1]])
            cuts = np.arange(b0, b1, ROWS_PER_TASK)

            def kernel(ins: Sequence[np.ndarray], outs: Sequence[np.ndarray],
                       b0: int = b0, b1: int = b1, cells: np.ndarray = cells,
                       at_base: np.ndarray = at_base, v_s: np.ndarray = v_s,
                       base_too: bool = with_base) -> None:
                for a in ins[0]:
                    c = slice(int(a), int(min(a + ROWS_PER_TASK, b1)))
                    dest = np.arange(c.start - b0, c.stop - b0)
                    _premium.table_cells(*args, g_sel[c], lnx_s[c], w_s[c], s_s[c], k_s[c],
                                         ln_shock, shocks, v_s[dest[0]:dest[-1] + 1], dest,
                                         cells)
                    if base_too:
                        _premium.table_cells(*args, g_sel[c], lnx_s[c], w_s[c], s_s[c],
                                             k_s[c], zero, one, b_s[c], dest, at_base)

            run_chunked(kernel, cuts.size, (cuts,), (np.empty(cuts.size),), chunk=1,
                        min_split=1)
            if greeks and exact_near:
                near = _Near(sel[b0:b1], g_sel[b0:b1], lnx_s[b0:b1], lat_first, n_lat, edge,
                             g_t, (w, s, k, t, r, b), cache, kern, outs)
                near.replace(cells, v_s, ln_shock, shocks)
                if with_base:
                    near.replace(at_base, b_s[b0:b1], zero, one)
            sink(sel[b0:b1], cells, at_base)
    # which rows were served, by a mask over row indices rather than a search of ``rows``
    # for each of ``sel`` (that search costs about 10 ms at 90k rows)
    hit = np.zeros(int(rows[-1]) + 1, dtype=bool)
    hit[sel] = True
    served_rows: np.ndarray = hit[rows]
    return served_rows


@dataclass(frozen=True)
class _Near:
    """Greek cells the tables do not serve to the greeks' accuracy (within ``NEAR_Z`` of the
    boundary, or up to ``SHORT_Z`` above it where σ√τ is small), valued again by the engine's
    quadrature, for one block of rows."""

    rows: np.ndarray
    groups: np.ndarray
    lnx: np.ndarray
    lat_first: np.ndarray
    n_lat: np.ndarray
    edge: np.ndarray
    g_t: np.ndarray
    row_args: tuple[np.ndarray, ...]
    cache: american.BoundaryCache | None
    kern: ModuleType
    outs: np.ndarray

    def replace(self, out: np.ndarray, vols: np.ndarray, ln_shock: np.ndarray,
                shocks: np.ndarray) -> None:
        """Overwrite the cells (rows, 5, n_s, n_v) of ``out`` at the spot multipliers
        ``shocks`` and ``vols`` (rows, n_s or 1, n_v) that need the quadrature."""
        m, n_s, n_v = self.rows.size, shocks.size, vols.shape[2]
        g = self.groups[:, None, None]
        c = np.log(vols) / LATTICE_STEP
        first, count = self.lat_first[g], self.n_lat[g]
        i0 = np.clip(np.floor(c).astype(np.int64) - LATTICE_POINTS // 2 + 1, first,
                     first + count - LATTICE_POINTS)
        lnb = np.zeros(c.shape)
        for a in range(LATTICE_POINTS):
            lag = np.ones(c.shape)
            for e in range(LATTICE_POINTS):
                if e != a:
                    lag *= (c - (i0 + e)) / (a - e)
            lnb += lag * self.edge[g, i0 - first + a]
        call = self.row_args[0][self.rows] > 0.0
        lnx = self.lnx[:, None, None] + np.where(call, -1.0, 1.0)[:, None, None] * (
            ln_shock[None, :, None])
        tau = self.g_t[self.groups][:, None, None]
        sd = vols * np.sqrt(tau)
        z = (lnx - lnb) / sd
        near = (np.abs(z) < NEAR_Z) | ((sd < SHORT_SD) & (z < SHORT_Z))
        near = np.broadcast_to(near, (m, n_s, n_v))
        ri, si, vi = np.nonzero(near)
        if not ri.size:
            return
        w, s, k, t, r, b = (a[self.rows[ri]] for a in self.row_args)
        vv = vols[ri, si if vols.shape[1] > 1 else 0, vi]
        vals, _ = american.evaluate(w, s * shocks[si], k, t, r, b, vv, True, self.cache,
                                    kernels=self.kern)
        # price, delta, gamma, vega, theta of results.GREEK_NAMES, those asked for
        exact = np.stack(vals[:len(CELL_OUTPUTS)], axis=1)
        exact[:, ~self.outs] = np.nan
        out[ri, :, si, vi] = exact


Boundary = tuple[float, float, float, float, float, float, float]
"""A group's part of a set's cache key: its put form (rate, dividend yield), row time τ and
the boundary the set is built on (τmax, first and last vol node, node count − 1)."""


def _set_keys(bounds: Sequence[Boundary | None], which: int
              ) -> list[tuple[float, ...] | None]:
    """Cache keys of the groups' table sets of premium ``which`` (index into
    ``TABLE_OUTPUTS``), None where a group has no boundary (``bounds``)."""
    w = float(which)
    return [None if b is None else (*b, w) for b in bounds]


SET_WIDTH = CHEB_DEGREE + 3
"""Numbers per lattice vol of a kept set: ln B, the tail and the coefficients."""


def _gather(items: Sequence[tuple[float, float, np.ndarray] | None], lat_first: np.ndarray,
            n_lat: np.ndarray, coef: np.ndarray, tail: np.ndarray) -> np.ndarray | None:
    """The groups' kept tables of one premium (``items``, one set per group or None) at their
    lattice vols, gathered in one indexing pass over all sets into ``coef`` (G, L, N + 1) and
    ``tail`` (G, L) (left as they are where none is kept); returns their boundary points ln B
    (G, L; NaN where no table is kept), or None when no set is kept."""
    have = [g for g, item in enumerate(items) if item is not None]
    if not have:
        return None
    n_g, nl_max = lat_first.size, int(n_lat.max())
    sets = [items[g] for g in have]
    first = np.array([item[0] for item in sets if item is not None], dtype=np.int64)
    big = np.concatenate([item[2] for item in sets if item is not None])
    size = np.array([item[2].shape[0] for item in sets if item is not None])
    start = np.concatenate([[0], np.cumsum(size)[:-1]])
    g_have = np.array(have)
    pos = lat_first[g_have, None] + np.arange(nl_max)[None, :] - first[:, None]
    inside = (pos >= 0) & (pos < size[:, None]) & (
        np.arange(nl_max)[None, :] < n_lat[g_have, None])
    gi, ai = np.nonzero(inside)
    rows = big[(start[:, None] + pos)[gi, ai]]
    # a kept set's lattice vols between those built hold NaN
    built = ~np.isnan(rows[:, 0])
    gi, ai, rows = g_have[gi[built]], ai[built], rows[built]
    edge = np.full((n_g, nl_max), np.nan)
    edge[gi, ai] = rows[:, 0]
    tail[gi, ai] = rows[:, 1]
    coef[gi, ai] = rows[:, 2:]
    return edge


def _kept_sets(cache: american.BoundaryCache, g_r: np.ndarray, g_q: np.ndarray,
               g_t: np.ndarray, span: np.ndarray, lat_first: np.ndarray, n_lat: np.ndarray,
               need: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Which groups have a kept boundary and kept tables of each premium they ``need``
    (G, 4) at every lattice vol they need (G,), and those tables: coefficients
    (4, G, L, N + 1), tails (4, G, L) and ln B (G, L; 0 where not kept)."""
    n_g = g_r.size
    bounds: list[Boundary | None] = []
    for r, q, t, lo, hi in zip(g_r.tolist(), g_q.tolist(), g_t.tolist(), span[:n_g].tolist(),
                               span[n_g:].tolist(), strict=True):
        item = cache.find(r, q, t, lo, hi, True)
        bounds.append(None if item is None or item.steps < 0 else (
            r, q, t, item.tmax, float(item.lnsig[0]), float(item.lnsig[-1]),
            float(item.lnsig.size - 1)))
    nl_max = int(n_lat.max())
    coef = np.zeros((TABLE_OUTPUTS, n_g, nl_max, CHEB_DEGREE + 1))
    tail = np.zeros((TABLE_OUTPUTS, n_g, nl_max))
    edge = np.zeros((n_g, nl_max))
    ok = np.array([bd is not None for bd in bounds], dtype=bool)
    use = np.arange(nl_max)[None, :] < n_lat[:, None]
    for p in np.flatnonzero(need.any(axis=0)).tolist():
        keys = _set_keys([bd if need[g, p] else None for g, bd in enumerate(bounds)], p)
        kept = iter(cache.tables([k for k in keys if k is not None]))
        at = _gather([None if k is None else next(kept) for k in keys], lat_first, n_lat,
                     coef[p], tail[p])
        if at is None:
            ok &= ~need[:, p]
            continue
        ok &= ~(need[:, p, None] & use & np.isnan(at)).any(axis=1)
        edge = np.where(np.isnan(at), edge, at)
    return ok, coef, tail, edge


def _cached_tables(grp: american._Groups, use: np.ndarray, need: np.ndarray,
                   lat_first: np.ndarray, n_lat: np.ndarray, lat: np.ndarray, edge: np.ndarray,
                   scheme: american.Scheme, cache: american.BoundaryCache | None
                   ) -> tuple[np.ndarray, np.ndarray]:
    """Coefficients (4, G, L, N + 1) and tails (4, G, L) of the premium tables each group
    ``need``s (G, 4) at its lattice vols ``use`` (G, L) (0 elsewhere), those kept in
    ``cache`` taken from it and the others computed and kept. Each group keeps one array per
    premium, over a range of lattice vols (a table depends only on its boundary, τ and
    lattice vol, so a spot move or another grid or profile of the same valuation reuses
    it)."""
    n_g, nl_max = use.shape
    coef = np.zeros((TABLE_OUTPUTS, n_g, nl_max, CHEB_DEGREE + 1))
    tail = np.zeros((TABLE_OUTPUTS, n_g, nl_max))
    todo = use[:, :, None] & need[:, None, :]
    keys: dict[int, list[tuple[float, ...]]] = {}
    kept: dict[int, list[tuple[float, float, np.ndarray] | None]] = {}
    wanted = np.flatnonzero(need.any(axis=0)).tolist()
    if cache is not None:
        bounds: list[Boundary | None] = list(zip(
            grp.rate.tolist(), grp.div.tolist(), grp.tau.tolist(), grp.tmax.tolist(),
            grp.lnsig[:, 0].tolist(), grp.lnsig[np.arange(n_g), grp.ns - 1].tolist(),
            (grp.ns - 1.0).tolist(), strict=True))
        for p in wanted:
            keys[p] = [k for k in _set_keys(bounds, p) if k is not None]
            kept[p] = cache.tables(keys[p])
            have = _gather(kept[p], lat_first, n_lat, coef[p], tail[p])
            if have is not None:
                todo[:, :, p] &= ~(have == edge)
    if not todo.any():
        return coef, tail
    _tables(grp, todo, lat, edge, scheme, coef, tail)
    if cache is None:
        return coef, tail
    fresh: dict[tuple[float, ...], tuple[float, float, np.ndarray]] = {}
    for p in wanted:
        built = todo[:, :, p]
        # each lattice vol as a row of its set: ln B (NaN where none is built), tail, coef
        rows = np.concatenate([np.where(built, edge, np.nan)[:, :, None], tail[p, :, :, None],
                               coef[p]], axis=2)
        for g in np.flatnonzero(built.any(axis=1)).tolist():
            fresh[keys[p][g]] = _merged(kept[p][g], int(lat_first[g]), rows[g, :n_lat[g]])
    cache.keep_tables(fresh)
    return coef, tail


def _merged(old: tuple[float, float, np.ndarray] | None, first: int, rows: np.ndarray
            ) -> tuple[float, float, np.ndarray]:
    """A group's set over the union of its kept lattice vols (``old``) and ``rows``
    (lattice index ``first`` on; ln B NaN where none is built): (first index, count, rows of
    ln B, tail and coefficients)."""
    n = rows.shape[0]
    if old is None:
        return float(first), float(n), rows.copy()
    lo, hi = min(first, int(old[0])), max(first + n, int(old[0]) + old[2].shape[0])
    out = np.full((hi - lo, SET_WIDTH), np.nan)
    out[int(old[0]) - lo:int(old[0]) - lo + old[2].shape[0]] = old[2]
    built = ~np.isnan(rows[:, 0])
    out[first - lo:first - lo + n][built] = rows[built]
    return float(lo), float(hi - lo), out


def _tables(grp: american._Groups, todo: np.ndarray, lat: np.ndarray, edge: np.ndarray,
            scheme: american.Scheme, coef: np.ndarray, tail: np.ndarray) -> None:
    """Chebyshev coefficients ``coef`` (4, G, L, N + 1) of the groups' premium tables at their
    lattice vols where ``todo`` (G, L, 4), from the premiums of synthetic puts (strike 1) at
    the table's points, and each table's tail ``tail`` (4, G, L): the largest z of a point
    whose premium is not below ``TAIL_NEGLIGIBLE`` (``_premium.table_points``, on the thread
    pool; other entries are left as they are)."""
    groups = np.flatnonzero(todo.any(axis=(1, 2)))
    # units of work: runs of groups of about TABLES_PER_TASK tables each
    done = np.cumsum(todo[groups].sum(axis=(1, 2)))
    bounds = np.unique(np.concatenate([[0], np.searchsorted(
        done, np.arange(TABLES_PER_TASK, done[-1], TABLES_PER_TASK), side="right"),
        [groups.size]]))
    args = (grp.rate, grp.div, grp.tau, grp.tmax, grp.ns, grp.lnsig, grp.lnb, grp.tan,
            scheme.wq_t, scheme.power, scheme.ts_x, scheme.ts_w,  # type: ignore[attr-defined]
            scheme.squares, scheme.graded[1], np.ascontiguousarray(lat), edge, todo, _Z,
            Z_CAP, _TO_COEF_T, TAIL_NEGLIGIBLE)

    def kernel(ins: Sequence[np.ndarray], outs: Sequence[np.ndarray]) -> None:
        for c in ins[0]:
            _premium.table_points(*args, groups[bounds[c]:bounds[c + 1]], coef, tail)

    ids = np.arange(bounds.size - 1)
    run_chunked(kernel, ids.size, (ids,), (np.empty(ids.size),), chunk=1, min_split=1)


def _cell_by_cell(rest: np.ndarray, w: np.ndarray, s: np.ndarray, k: np.ndarray, t: np.ndarray,
                  r: np.ndarray, b: np.ndarray, vol_rows: np.ndarray, shocks: np.ndarray,
                  greeks: bool, cache: american.BoundaryCache | None, kern: ModuleType,
                  out: np.ndarray) -> None:
    """Cells of ``rest`` valued one by one by ``american.evaluate`` into ``out`` (rest.size,
    n_out, n_s, n_v)."""
    n_s, n_v = shocks.size, vol_rows.shape[2]
    m = rest.size
    shape = (m, n_s, n_v)
    vv = np.broadcast_to(vol_rows[rest], shape)
    s1 = s[rest][:, None, None] * shocks[None, :, None]
    cols = [np.broadcast_to(a[rest][:, None, None], shape).ravel()
            for a in (w, k, t, r, b)]
    vals, _ = american.evaluate(cols[0], np.broadcast_to(s1, shape).ravel(), cols[1], cols[2],
                                cols[3], cols[4], vv.ravel(), greeks, cache, kernels=kern)
    if greeks:
        # price, delta, gamma, vega, theta of results.GREEK_NAMES
        picked = [vals[i] for i in range(5)]
    else:
        picked = [vals[0]]
    for o, val in enumerate(picked):
        out[:, o] = val.reshape(shape)
