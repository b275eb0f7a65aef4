"""American options by the exercise-boundary integral equation, boundaries shared by the rows of
one (time to expiry, rate, carry) and reused across calls through a ``BoundaryCache``.

The method (``_alo``): Kim (1990)'s integral equation for the early-exercise boundary of a put,
solved by Chebyshev collocation in √u with Newton's method, as Andersen, Lake & Offengenden
(2016) set it out; a row's value is the European value plus one quadrature over the boundary.
Calls are puts by the put–call symmetry C(S, K, r, b) = P(K, S, r − b, −b) (McDonald & Schroder
1998), so every row is valued as a put in its "put form" (rate r_p, dividend yield q_p).

Rows by put form:

- r_p > 0, or r_p = 0 with q_p < 0: one exercise boundary, solved (``EXERCISE_BOUNDARY``);
- r_p <= 0 with q_p >= r_p: never exercised early (for calls: b >= r with r >= 0, or
  b >= r with r < 0 and r_p <= 0); the European value exactly (``NEVER_EARLY``);
- q_p < r_p < 0 (a put with q < r < 0, a call with r < q < 0; negative rates on both sides
  of an FX pair): two exercise boundaries, which this engine does not solve; valued as
  max(European, intrinsic), a lower bound, and reported per row (``DOUBLE_BOUNDARY``).

The boundary divided by the strike depends only on (τ, r_p, q_p, σ), so rows are grouped by
exact (τ, r_p, q_p); each group's boundary is solved at a few vol nodes (Chebyshev–Lobatto in
ln σ spanning the group's vols with a margin) and interpolated to each row's vol by Hermite
interpolation in ln σ (values and the exact σ-derivatives of the nodes), which also gives the
σ-derivatives that vega, vanna and volga need. A spot move changes no boundary; a shorter time
to expiry uses the same boundary on [0, τ].
"""

from __future__ import annotations

import threading
from collections import OrderedDict
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from blotter.engine import _alo, black
from blotter.engine._chunks import run_chunked

EXERCISE_BOUNDARY = 0
"""The row has one exercise boundary, solved by the converged method."""
NEVER_EARLY = 1
"""Early exercise never pays for the row: its value is the European one."""
DOUBLE_BOUNDARY = 2
"""Negative rates on both sides (put q < r < 0, call r < q < 0): two boundaries, not solved;
the value is max(European, intrinsic), a lower bound."""
NOT_CONVERGED = 3
"""The boundary's Newton iteration did not converge; the value is max(European, intrinsic)."""
EXPIRED = 4
"""The row has expired: intrinsic value."""
SHORT = 5
"""Under ``YEARS_MIN`` to expiry: max(European, intrinsic), within r K τ of the value."""

AMERICAN_STATUS: dict[int, str] = {
    EXERCISE_BOUNDARY: "converged exercise boundary",
    NEVER_EARLY: "never exercised early: European value",
    DOUBLE_BOUNDARY: "two exercise boundaries (negative rates): lower bound max(European, "
                     "intrinsic)",
    NOT_CONVERGED: "boundary did not converge: lower bound max(European, intrinsic)",
    EXPIRED: "expired: intrinsic value",
    SHORT: "under a minute to expiry: max(European, intrinsic)",
}
"""Words for each American status code, for a screen that shows why a value is a bound."""

YEARS_MIN = 1e-6
"""Rows with less time than this (about 30 seconds) take max(European, intrinsic): the early
exercise premium is below r K τ, 1e-7 of the strike at r = 10%."""
VOL_MIN = 0.01
"""Vols below this (annualised decimal) use the boundary at this vol (their quadrature uses the
true vol); below it the boundary is within 1% of its σ = 0 limit and the solver's densities
underflow."""
NODE_MARGIN = 0.05
"""Margin in ln σ added on each side of a group's vols before placing its vol nodes."""
NODE_SPAN = 0.35
"""Width in ln σ covered per vol node beyond the first three (a group spanning vols 15%–60%
gets 3 + 5 nodes)."""
NODES_MAX = 12
"""Most vol nodes per group."""
SINGLE_HALF_WIDTH = 0.05
"""Half-width in ln σ of the three vol nodes of a group with one vol (greeks need the
boundary's second σ-derivative, which three nodes with derivatives give to O(width⁴))."""
BATCH_ROWS = 512
"""Rows per unit of work on the thread pool (whole groups; a larger group is one unit)."""



@dataclass(frozen=True, eq=False)
class Scheme:
    """Discretization of the method: Chebyshev intervals, Gauss–Legendre points per half of a
    boundary integral, and the tanh-sinh rule of the price integral, with their tables."""

    nodes: int
    gauss: int
    ts_step: float
    ts_half: int
    graded: tuple[int, int, int] | None = None

    def __post_init__(self) -> None:
        tabs = _alo.solver_tables(self.nodes, self.gauss)
        if self.graded is None:
            ts_x, ts_w = _alo.tanh_sinh(self.ts_step, self.ts_half)
        else:
            ts_x, ts_w = _alo.graded_rule(*self.graded)
        object.__setattr__(self, "tables", tabs)
        object.__setattr__(self, "cheb", _alo.chebyshev_transform(self.nodes))
        object.__setattr__(self, "ts_x", ts_x)
        object.__setattr__(self, "ts_w", ts_w)


DEFAULT = Scheme(_alo.N_NODES, _alo.N_GAUSS, 0.0, 0, _alo.GRADED)
"""The engine's scheme (ACCURACY.md has its errors by region)."""
FINE = Scheme(32, 24, 0.0, 0, (28, 8, 16))
"""A much finer scheme, for reference runs (``tests.engine.american_reference``)."""


@dataclass(frozen=True, eq=False)
class Boundary:
    """One solved group: put-form rate and dividend yield, the time τmax the boundary spans, vol
    nodes (ln σ, ascending) and ln(B/K) with its (σ, r, b) derivatives at the Chebyshev nodes."""

    rate: float
    div: float
    tmax: float
    lnsig: np.ndarray        # (ns,)
    lnb: np.ndarray          # (ns, n)
    tangents: np.ndarray     # (ns, 3, n)
    steps: int               # Newton steps of the slowest node, −1 when one failed

    def covers(self, tau: float, lo: float, hi: float) -> bool:
        """True when this boundary serves rows of time ``tau`` and ln-vols in [lo, hi]."""
        return (ROLL_MIN * self.tmax <= tau <= self.tmax and self.lnsig[0] <= lo + 1e-12
                and hi <= self.lnsig[-1] + 1e-12)

    @property
    def nbytes(self) -> int:
        return int(self.lnsig.nbytes + self.lnb.nbytes + self.tangents.nbytes) + 200


ROLL_MIN = 0.75
"""A cached boundary spanning τmax serves rows with τ in [ROLL_MIN τmax, τmax] (day rolls);
shorter ones get a boundary of their own (the Chebyshev nodes would thin out near u = 0)."""


class BoundaryCache:
    """Solved exercise boundaries kept between calls, at most ``max_bytes`` (least recently used
    dropped first), safe to share between threads.

    Key: the put form's (rate, dividend yield) as exact floats; each key holds boundaries by
    τmax and vol range. Pass one cache to every call of one valuation (base, what-ifs, ladder,
    profile): spot moves reuse every boundary, day rolls reuse them for τ >= 0.75 τmax, vol
    moves within the solved range reuse them (``prepare`` widens the range ahead).
    """

    def __init__(self, max_bytes: int = 64 << 20) -> None:
        self.max_bytes = max_bytes
        self._lock = threading.Lock()
        self._items: OrderedDict[tuple[float, float, float], Boundary] = OrderedDict()
        self._bytes = 0
        self.hits = 0
        self.misses = 0

    def __len__(self) -> int:
        with self._lock:
            return len(self._items)

    def copy(self) -> BoundaryCache:
        """A new cache holding the same boundaries in the same order (a solved boundary is never
        changed), so what is solved or reordered in one does not reach the other."""
        out = BoundaryCache(self.max_bytes)
        with self._lock:
            out._items = OrderedDict(self._items)
            out._bytes = self._bytes
        return out

    def find(self, rate: float, div: float, tau: float, lo: float, hi: float) -> Boundary | None:
        """A boundary serving (rate, div, τ) for ln-vols [lo, hi], or None."""
        with self._lock:
            exact = self._items.get((rate, div, tau))
            if exact is not None and exact.covers(tau, lo, hi):
                self._items.move_to_end((rate, div, tau))
                self.hits += 1
                return exact
            for key, item in self._items.items():
                if key[0] == rate and key[1] == div and item.covers(tau, lo, hi):
                    self._items.move_to_end(key)
                    self.hits += 1
                    return item
            self.misses += 1
            return None

    def store(self, item: Boundary) -> None:
        """Keep ``item`` (replacing one of the same key), dropping the oldest beyond the cap."""
        key = (item.rate, item.div, item.tmax)
        with self._lock:
            old = self._items.pop(key, None)
            if old is not None:
                self._bytes -= old.nbytes
            self._items[key] = item
            self._bytes += item.nbytes
            while self._bytes > self.max_bytes and len(self._items) > 1:
                _, dropped = self._items.popitem(last=False)
                self._bytes -= dropped.nbytes

    def prepare(self, is_call: object, years: object, rate: object, carry: object,
                vol_lo: object, vol_hi: object) -> None:
        """Solve (or find) the boundaries that rows of these (years, rate, carry) need for any
        vol in [vol_lo, vol_hi], e.g. a ladder's lowest and highest shocked vols."""
        w, t, r, b, lo, hi = np.broadcast_arrays(
            np.where(np.asarray(is_call, dtype=bool), 1.0, -1.0), *(
                np.asarray(a, dtype=np.float64) for a in (years, rate, carry, vol_lo, vol_hi)))
        w, t, r, b, lo, hi = (np.ravel(a) for a in (w, t, r, b, lo, hi))
        r_p = np.where(w > 0, r - b, r)
        q_p = np.where(w > 0, r, r - b)
        keep = (t > 0) & (status_of(r_p, q_p) == EXERCISE_BOUNDARY)
        both = np.concatenate([lo[keep], hi[keep]])
        n = int(keep.sum())
        if n:
            rows = _Rows(np.zeros(2 * n), np.tile(t[keep], 2), np.tile(r_p[keep], 2),
                         np.tile(q_p[keep], 2), both, np.ones(2 * n), np.zeros(2 * n, bool))
            _boundaries(rows, greeks=True, cache=self)


def status_of(r_p: np.ndarray, q_p: np.ndarray) -> np.ndarray:
    """Status by put form (``EXERCISE_BOUNDARY``, ``NEVER_EARLY`` or ``DOUBLE_BOUNDARY``)."""
    out = np.full(r_p.shape, NEVER_EARLY, dtype=np.int8)
    out[(r_p > 0.0) | ((r_p == 0.0) & (q_p < 0.0))] = EXERCISE_BOUNDARY
    out[(q_p < r_p) & (r_p < 0.0)] = DOUBLE_BOUNDARY
    return out


@dataclass(frozen=True)
class _Rows:
    """Rows in put form: ln(spot/strike), τ, rate, dividend yield, vol, scale, is_call."""

    lnx: np.ndarray
    tau: np.ndarray
    rate: np.ndarray
    div: np.ndarray
    vol: np.ndarray
    scale: np.ndarray
    call: np.ndarray


@dataclass(frozen=True)
class _Groups:
    """Rows sorted by group (``order`` maps sorted position -> row, ``first`` (G + 1,) the
    first sorted row of each group) and each group's put form, row time τ and boundary arrays
    (vol nodes ``lnsig`` (G, NSM) of which the first ``ns`` are used; ``lnb`` (G, NSM, n);
    ``tan`` (G, NSM, 3, n); ``steps``, −1 where a node failed)."""

    order: np.ndarray
    first: np.ndarray
    rate: np.ndarray
    div: np.ndarray
    tau: np.ndarray
    tmax: np.ndarray
    ns: np.ndarray
    lnsig: np.ndarray
    lnb: np.ndarray
    tan: np.ndarray
    steps: np.ndarray


def _vol_nodes(lo: np.ndarray, hi: np.ndarray, greeks: bool) -> tuple[np.ndarray, np.ndarray]:
    """Vol nodes (ln σ, ascending; (G, NSM), the first ``ns`` (G,) used) for groups whose
    ln-vols span [lo, hi]: Chebyshev–Lobatto points over the span widened by ``NODE_MARGIN``;
    a group of one vol gets that vol alone (prices) or it and ± ``SINGLE_HALF_WIDTH`` (greeks)."""
    single = hi - lo <= 1e-12
    a, c = lo - NODE_MARGIN, hi + NODE_MARGIN
    ns = np.minimum(NODES_MAX, 3 + np.ceil((c - a) / NODE_SPAN)).astype(np.int64)
    ns[single] = 3 if greeks else 1
    nsm = int(ns.max())
    k = np.arange(nsm)[None, :]
    denom = np.maximum(ns - 1, 1)[:, None]
    nodes = 0.5 * (a + c)[:, None] - 0.5 * (c - a)[:, None] * np.cos(
        np.minimum(k, denom) * np.pi / denom)
    if single.any():
        offs = (SINGLE_HALF_WIDTH * np.array([-1.0, 0.0, 1.0]) if greeks else np.zeros(1))
        nodes[single, : offs.size] = lo[single, None] + offs[None, :]
    return nodes, ns


def _boundaries(rows: _Rows, greeks: bool, cache: BoundaryCache | None,
                scheme: Scheme = DEFAULT) -> _Groups:
    """Group the rows by exact (τ, rate, dividend yield) and find (in ``cache``) or solve each
    group's boundary; solves run on the engine's thread pool, into arrays of all groups."""
    lnv = np.log(np.maximum(rows.vol, VOL_MIN))
    order = np.lexsort((lnv, rows.div, rows.rate, rows.tau))
    t, r, q = rows.tau[order], rows.rate[order], rows.div[order]
    new = np.ones(order.size, dtype=bool)
    new[1:] = (t[1:] != t[:-1]) | (r[1:] != r[:-1]) | (q[1:] != q[:-1])
    first = np.append(np.flatnonzero(new), order.size)
    lv = lnv[order]
    g_r, g_q, g_tau = r[first[:-1]], q[first[:-1]], t[first[:-1]]
    lo, hi = lv[first[:-1]], lv[first[1:] - 1]
    nodes, ns = _vol_nodes(lo, hi, greeks)
    g_tmax = g_tau.copy()
    use_cache = cache is not None and scheme is DEFAULT
    found: dict[int, Boundary] = {}
    if use_cache:
        assert cache is not None
        for g in range(g_r.size):
            item = cache.find(float(g_r[g]), float(g_q[g]), float(g_tau[g]), float(lo[g]),
                              float(hi[g]))
            if item is not None:
                found[g] = item
    nsm = max([int(ns.max())] + [it.lnsig.size for it in found.values()])
    if nsm > nodes.shape[1]:
        nodes = np.pad(nodes, ((0, 0), (0, nsm - nodes.shape[1])))
    n = scheme.nodes
    grp = _Groups(order, first, g_r, g_q, g_tau, g_tmax, ns, nodes,
                  np.zeros((g_r.size, nsm, n)), np.zeros((g_r.size, nsm, 3, n)),
                  np.zeros(g_r.size, dtype=np.int64))
    for g, item in found.items():
        k = item.lnsig.size
        grp.tmax[g] = item.tmax
        grp.ns[g] = k
        grp.lnsig[g, :k] = item.lnsig
        grp.lnb[g, :k] = item.lnb
        grp.tan[g, :k] = item.tangents
        grp.steps[g] = item.steps
    todo = np.setdiff1d(np.arange(g_r.size), np.fromiter(found, dtype=np.int64))
    if todo.size:
        _solve(grp, todo, scheme)
        if use_cache:
            assert cache is not None
            for g in todo:
                k = int(grp.ns[g])
                cache.store(Boundary(float(g_r[g]), float(g_q[g]), float(g_tau[g]),
                                     grp.lnsig[g, :k].copy(), grp.lnb[g, :k].copy(),
                                     grp.tan[g, :k].copy(), int(grp.steps[g])))
    return grp


def _solve(grp: _Groups, todo: np.ndarray, scheme: Scheme) -> None:
    """Solve the boundaries of groups ``todo`` into ``grp``'s arrays, in batches of groups on
    the thread pool (in place when every group is to be solved, else through a copy)."""
    tabs: dict[str, np.ndarray] = scheme.tables  # type: ignore[attr-defined]
    whole = todo.size == grp.rate.size
    sel = slice(None) if whole else todo
    arrs = [a[sel] for a in (grp.rate, grp.div, grp.tmax, grp.ns, grp.lnsig, grp.lnb,
                             grp.tan, grp.steps)]
    count = todo.size
    per = max(1, BATCH_ROWS // (4 * grp.lnsig.shape[1]))
    starts = np.arange(0, count, per)

    def kernel(ins: Sequence[np.ndarray], outs: Sequence[np.ndarray]) -> None:
        for a in ins[0]:
            sl = slice(int(a), int(min(a + per, count)))
            r, q, tmax, ns, lnsig, lnb, tan, steps = (x[sl] for x in arrs)
            _alo.solve_groups(r, q, tmax, ns, lnsig, tabs["t"], tabs["s"], tabs["u"],
                              tabs["w"], tabs["W"], lnb, tan, steps)

    run_chunked(kernel, starts.size, (starts,), (np.empty(starts.size),), chunk=1, min_split=1)
    if not whole:
        grp.lnb[todo] = arrs[5]
        grp.tan[todo] = arrs[6]
        grp.steps[todo] = arrs[7]


def _value(rows: _Rows, greeks: bool, cache: BoundaryCache | None,
           scheme: Scheme) -> tuple[np.ndarray, np.ndarray]:
    """Values (1, m) or price and nine greeks (10, m) of rows with one exercise boundary, and
    each row's status (``EXERCISE_BOUNDARY`` or ``NOT_CONVERGED``)."""
    grp = _boundaries(rows, greeks, cache, scheme)
    m = rows.lnx.size
    n_out = 10 if greeks else 1
    out_sorted = np.empty((n_out, m))
    n_groups = grp.rate.size
    o = grp.order
    lnx, vol, scale, call = rows.lnx[o], rows.vol[o], rows.scale[o], rows.call[o]
    # batches of whole groups of about BATCH_ROWS rows
    sizes = np.diff(grp.first)
    cum = np.cumsum(sizes)
    cuts = np.unique(np.searchsorted(cum, np.arange(BATCH_ROWS, m, BATCH_ROWS), side="left"))
    bounds = np.unique(np.concatenate([[0], cuts + 1, [n_groups]])).astype(np.int64)
    bounds = bounds[bounds <= n_groups]

    def kernel(ins: Sequence[np.ndarray], outs: Sequence[np.ndarray]) -> None:
        for c in ins[0]:
            g0, g1 = int(bounds[c]), int(bounds[c + 1])
            base = int(grp.first[g0])
            sl = slice(g0, g1)
            rs = slice(base, int(grp.first[g1]))
            _alo.value_groups(grp.rate[sl], grp.div[sl], grp.tau[sl], grp.tmax[sl],
                              grp.ns[sl], grp.lnsig[sl], grp.lnb[sl], grp.tan[sl],
                              grp.first[g0:g1 + 1] - base, lnx[rs], vol[rs], scale[rs],
                              call[rs], scheme.cheb,  # type: ignore[attr-defined]
                              scheme.ts_x, scheme.ts_w,  # type: ignore[attr-defined]
                              VOL_MIN, greeks, out_sorted[:, rs])

    ids = np.arange(bounds.size - 1)
    run_chunked(kernel, ids.size, (ids,), (np.empty(ids.size),), chunk=1, min_split=1)
    out = np.empty((n_out, m))
    out[:, o] = out_sorted
    status = np.zeros(m, dtype=np.int8)
    failed = grp.steps < 0
    if failed.any():
        status[o[np.repeat(failed, sizes)]] = NOT_CONVERGED
    return out, status


def put_form(w: np.ndarray, s: np.ndarray, k: np.ndarray, r: np.ndarray,
             b: np.ndarray) -> tuple[np.ndarray, ...]:
    """ln(spot/strike), rate, dividend yield and scale of each row's put form."""
    call = w > 0
    lnx = np.where(call, np.log(k / s), np.log(s / k))
    r_p = np.where(call, r - b, r)
    q_p = np.where(call, r, r - b)
    scale = np.where(call, s, k)
    return lnx, r_p, q_p, scale


def evaluate(w: np.ndarray, s: np.ndarray, k: np.ndarray, t: np.ndarray, r: np.ndarray,
             b: np.ndarray, v: np.ndarray, greeks: bool, cache: BoundaryCache | None = None,
             scheme: Scheme = DEFAULT) -> tuple[list[np.ndarray], np.ndarray]:
    """American price (``greeks`` False) or price and nine greeks of rows given as flat arrays
    of one shape (m,), ω = ±1; returns the outputs in ``results.GREEK_NAMES`` order and each
    row's status code (``AMERICAN_STATUS``)."""
    m = s.size
    n_out = 10 if greeks else 1
    outs = [np.empty(m) for _ in range(n_out)]
    lnx, r_p, q_p, scale = put_form(w, s, k, r, b)
    status = status_of(r_p, q_p)
    status[(status == EXERCISE_BOUNDARY) & (t < YEARS_MIN)] = SHORT
    status[t <= 0.0] = EXPIRED
    solve = status == EXERCISE_BOUNDARY
    if solve.any():
        idx = np.flatnonzero(solve)
        rows = _Rows(lnx[idx], t[idx], r_p[idx], q_p[idx], v[idx], scale[idx], w[idx] > 0)
        vals, st = _value(rows, greeks, cache, scheme)
        # The value is at least European and intrinsic; the floors only absorb rounding.
        euro = np.empty(idx.size)
        black.price_kernel(tuple(a[idx] for a in (w, s, k, t, r, b, v)), (euro,))
        np.maximum(vals[0], euro, out=vals[0])
        np.maximum(vals[0], np.maximum(w[idx] * (s[idx] - k[idx]), 0.0), out=vals[0])
        for o, val in zip(outs, vals, strict=True):
            o[idx] = val
        status[idx] = np.maximum(status[idx], st)
    european = status != EXERCISE_BOUNDARY
    if european.any():
        idx = np.flatnonzero(european)
        sub = [np.empty(idx.size) for _ in range(n_out)]
        ins = tuple(a[idx] for a in (w, s, k, t, r, b, v))
        if greeks:
            black.greeks_kernel(ins, sub)
        # the price kernel's value, so that prices equal ``price``'s to the last bit
        black.price_kernel(ins, sub[:1])
        for o, so in zip(outs, sub, strict=True):
            o[idx] = so
    bound = (status == DOUBLE_BOUNDARY) | (status == NOT_CONVERGED) | (status == SHORT)
    if bound.any():
        _floor_at_intrinsic(w, s, k, outs, bound)
    return outs, status


def _floor_at_intrinsic(w: np.ndarray, s: np.ndarray, k: np.ndarray, outs: list[np.ndarray],
                        rows: np.ndarray) -> None:
    """Rows ``rows`` take max(European already in ``outs``, intrinsic), with intrinsic's greeks
    (delta ±1, the rest 0) where intrinsic is larger."""
    intrinsic = np.maximum(w * (s - k), 0.0)
    take = rows & (intrinsic > outs[0])
    if take.any():
        outs[0][take] = intrinsic[take]
        if len(outs) > 1:
            outs[1][take] = w[take]
            for o in outs[2:]:
                o[take] = 0.0
