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
exact (τ, r_p, q_p) (sorted by a hash of the three, ``_group``); each group's boundary is solved
at a few vol nodes (Chebyshev–Lobatto in ln σ spanning the group's vols with a margin; each
node's Newton iteration starts from its neighbour's solution moved along that neighbour's
σ-derivative) and interpolated to each row's vol by Hermite interpolation in ln σ (values and
the exact σ-derivatives of the nodes), which also gives the σ-derivatives that vega, vanna and
volga need. A group of one vol has one node, with its second σ-derivative when greeks are
asked for. A spot move changes no boundary; a shorter time to expiry uses the same boundary on
[0, τ].
"""

from __future__ import annotations

import threading
from collections import OrderedDict
from collections.abc import Sequence
from dataclasses import dataclass
from types import ModuleType

import numpy as np

from blotter.engine import _alo, _alo_np, _kernels, _premium, black
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
NODE_SPAN_PRICE = 0.5
"""Width in ln σ per vol node for prices: values and σ-derivatives at the nodes (Hermite)
interpolate ln B to about 1e-8 of the strike in price."""
NODE_SPAN_GREEKS = 0.09
"""Width in ln σ per vol node for greeks: the boundary's r- and b-derivatives are interpolated
from their values alone (Lagrange), which needs nodes this close; rows sharing a boundary then
keep rho and carry rho within 5e-6 of each row valued alone (ACCURACY.md, shared boundaries;
0.12 let them reach 4e-5)."""
NODES_MIN = (3, 4)
"""Fewest vol nodes of a group of several vols, for prices and for greeks."""
NODES_MAX = 12
"""Most vol nodes per group."""
BATCH_ROWS = 512
"""Rows per unit of work on the thread pool (whole groups; a larger group is one unit)."""



@dataclass(frozen=True, eq=False)
class Scheme:
    """Discretization of the method: Chebyshev intervals of the boundary, Gauss–Legendre points
    per half of a boundary integral, the graded price rule (``_alo.graded_rule``), the power of
    the node map and whether the gap's square is interpolated where X = 1, with their
    tables."""

    nodes: int
    gauss: int
    graded: tuple[int, int, int, int]
    power: float = _alo.POWER
    squares: bool = True

    def __post_init__(self) -> None:
        ts_x, ts_w = _alo.graded_rule(*self.graded)
        object.__setattr__(self, "tables",
                           _alo.solver_tables(self.nodes, self.gauss, self.power))
        object.__setattr__(self, "ts_x", ts_x)
        object.__setattr__(self, "ts_w", ts_w)
        object.__setattr__(self, "wq_t", np.ascontiguousarray(
            _alo.price_table(self.nodes, ts_x, self.power).T))


DEFAULT = Scheme(_alo.N_NODES, _alo.N_GAUSS, _alo.GRADED)
"""The engine's scheme (ACCURACY.md has its errors by region)."""
FINE = Scheme(64, 32, (16, 10, 2, 24), power=3.0, squares=False)
"""A much finer scheme, for reference runs (``tests.engine.american_reference``): the gap
interpolated in (u/τmax)^(1/3), which resolves u -> 0 better and, unlike the squared gap with
this many nodes, converges on every boundary of the accuracy study."""


@dataclass(frozen=True, eq=False)
class Boundary:
    """One solved group: put-form rate and dividend yield, the time τmax the boundary spans, vol
    nodes (ln σ, ascending) and ln(B/K) at the Chebyshev nodes with its derivatives in σ, r, b
    and, for a lone node solved for greeks, in (ln σ)²; ``greeks``: solved for greeks (vol nodes
    close enough for the r- and b-derivatives)."""

    rate: float
    div: float
    tmax: float
    lnsig: np.ndarray        # (ns,)
    lnb: np.ndarray          # (ns, n)
    tangents: np.ndarray     # (ns, 4, n)
    steps: int               # Newton steps of the slowest node, −1 when one failed
    greeks: bool

    def covers(self, tau: float, lo: float, hi: float, greeks: bool) -> bool:
        """True when this boundary serves rows of time ``tau`` and ln-vols in [lo, hi], for
        greeks only when it was solved for them."""
        return (ROLL_MIN * self.tmax <= tau <= self.tmax and self.lnsig[0] <= lo + 1e-12
                and hi <= self.lnsig[-1] + 1e-12 and (self.greeks or not greeks))

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
        self._by_rates: dict[tuple[float, float], dict[float, Boundary]] = {}
        self._bytes = 0
        self._tables: OrderedDict[tuple[float, ...], tuple[float, float, np.ndarray]] = (
            OrderedDict())
        self._table_bytes = 0
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
            out._by_rates = {k: dict(v) for k, v in self._by_rates.items()}
            out._bytes = self._bytes
            out._tables = OrderedDict(self._tables)
            out._table_bytes = self._table_bytes
        return out

    def __getstate__(self) -> dict[str, object]:
        """The cache without its lock: a process or a cluster worker unpickles its own copy of
        the boundaries solved so far."""
        with self._lock:
            state = dict(self.__dict__)
            state["_items"] = OrderedDict(self._items)
            state["_tables"] = OrderedDict(self._tables)
        del state["_lock"]
        return state

    def __setstate__(self, state: dict[str, object]) -> None:
        self.__dict__.update(state)
        self.__dict__.setdefault("_tables", OrderedDict())
        self.__dict__.setdefault("_table_bytes", 0)
        self._lock = threading.Lock()

    def find(self, rate: float, div: float, tau: float, lo: float, hi: float,
             greeks: bool = False) -> Boundary | None:
        """A boundary serving (rate, div, τ) for ln-vols [lo, hi] (and greeks), or None."""
        with self._lock:
            exact = self._items.get((rate, div, tau))
            if exact is not None and exact.covers(tau, lo, hi, greeks):
                self._items.move_to_end((rate, div, tau))
                self.hits += 1
                return exact
            for item in self._by_rates.get((rate, div), {}).values():
                if item.covers(tau, lo, hi, greeks):
                    self._items.move_to_end((rate, div, item.tmax))
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
            self._by_rates.setdefault((item.rate, item.div), {})[item.tmax] = item
            self._bytes += item.nbytes
            while self._bytes > self.max_bytes and len(self._items) > 1:
                (r, q, tmax), dropped = self._items.popitem(last=False)
                same = self._by_rates[(r, q)]
                del same[tmax]
                if not same:
                    del self._by_rates[(r, q)]
                self._bytes -= dropped.nbytes

    def tables(self, keys: Sequence[tuple[float, ...]]
               ) -> list[tuple[float, float, np.ndarray] | None]:
        """Premium tables kept for ``keys`` (``american_grid``), None where none is kept."""
        with self._lock:
            out = [self._tables.get(k) for k in keys]
            for k, item in zip(keys, out, strict=True):
                if item is not None:
                    self._tables.move_to_end(k)
            return out

    def has_tables(self) -> bool:
        """Whether any premium table is kept (a grid or profile of this valuation ran)."""
        with self._lock:
            return bool(self._tables)

    def drop_tables(self) -> None:
        """Forget every premium table (the boundaries stay), e.g. to time building them."""
        with self._lock:
            self._tables.clear()
            self._table_bytes = 0

    def keep_tables(self, items: dict[tuple[float, ...], tuple[float, float, np.ndarray]]
                    ) -> None:
        """Keep premium tables by key, dropping the oldest beyond ``max_bytes`` of tables (a
        budget of their own beside the boundaries')."""
        with self._lock:
            for k, item in items.items():
                old = self._tables.pop(k, None)
                if old is not None:
                    self._table_bytes -= old[2].nbytes + 100
                self._tables[k] = item
                self._table_bytes += item[2].nbytes + 100
            while self._table_bytes > self.max_bytes and self._tables:
                _, dropped = self._tables.popitem(last=False)
                self._table_bytes -= dropped[2].nbytes + 100

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
        keep = np.flatnonzero((t > 0) & (status_of(r_p, q_p) == EXERCISE_BOUNDARY))
        if keep.size:
            tt, rr, qq = (np.tile(a[keep], 2) for a in (t, r_p, q_p))
            lnv = np.log(np.maximum(np.concatenate([lo[keep], hi[keep]]), VOL_MIN))
            key = np.empty(tt.size, dtype=np.uint64)
            kernels = _implementation(None)
            kernels.group_keys(tt, rr, qq, key)
            order, first = _group(np.arange(tt.size), key, tt, rr, qq)
            _boundaries(order, first, tt, rr, qq, lnv, True, self, kernels)


def status_of(r_p: np.ndarray, q_p: np.ndarray) -> np.ndarray:
    """Status by put form (``EXERCISE_BOUNDARY``, ``NEVER_EARLY`` or ``DOUBLE_BOUNDARY``)."""
    out = np.full(r_p.shape, NEVER_EARLY, dtype=np.int8)
    out[(r_p > 0.0) | ((r_p == 0.0) & (q_p < 0.0))] = EXERCISE_BOUNDARY
    out[(q_p < r_p) & (r_p < 0.0)] = DOUBLE_BOUNDARY
    return out


@dataclass(frozen=True)
class _Groups:
    """Rows by group (``order`` lists the rows of group g at ``first[g]:first[g + 1]``) and each
    group's put form, row time τ and boundary arrays (vol nodes ``lnsig`` (G, NSM) of which the
    first ``ns`` are used; ``lnb`` (G, NSM, n); ``tan`` (G, NSM, 4, n); ``steps``, −1 where a
    node failed; ``greeks``: nodes placed for greeks, lone nodes with their second
    σ-derivative)."""

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
    greeks: bool


def _vol_nodes(lo: np.ndarray, hi: np.ndarray, greeks: bool) -> tuple[np.ndarray, np.ndarray]:
    """Vol nodes (ln σ, ascending; (G, NSM), the first ``ns`` (G,) used) for groups whose
    ln-vols span [lo, hi]: Chebyshev–Lobatto points over the span widened by ``NODE_MARGIN``,
    one per ``NODE_SPAN_GREEKS`` or ``NODE_SPAN_PRICE`` of it; a group of one vol gets that vol
    alone (with its second σ-derivative for greeks)."""
    single = hi - lo <= 1e-12
    a, c = lo - NODE_MARGIN, hi + NODE_MARGIN
    span = NODE_SPAN_GREEKS if greeks else NODE_SPAN_PRICE
    ns = np.clip(1 + np.ceil((c - a) / span), NODES_MIN[int(greeks)],
                 NODES_MAX).astype(np.int64)
    ns[single] = 1
    nsm = int(ns.max())
    k = np.arange(nsm)[None, :]
    denom = np.maximum(ns - 1, 1)[:, None]
    nodes = 0.5 * (a + c)[:, None] - 0.5 * (c - a)[:, None] * np.cos(
        np.minimum(k, denom) * np.pi / denom)
    nodes[single, 0] = lo[single]
    return nodes, ns


def _group(rows: np.ndarray, key: np.ndarray, tau: np.ndarray, rate: np.ndarray,
           div: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Rows ``rows`` ordered so that rows of one exact (τ, rate, dividend yield) are adjacent
    (sorted by the hash ``key``), and the first position of each run of equal keys, with the
    end appended. Two keys sharing a hash at worst split into several runs of one key each."""
    order = rows[np.argsort(key[rows])]
    t, r, q = tau[order], rate[order], div[order]
    new = np.ones(order.size, dtype=bool)
    new[1:] = (t[1:] != t[:-1]) | (r[1:] != r[:-1]) | (q[1:] != q[:-1])
    first = np.append(np.flatnonzero(new), order.size)
    return order, first


def _implementation(kernels: ModuleType | None) -> ModuleType:
    """``kernels`` when given, else the compiled kernels (``_alo``) when they are ready or no
    warm-up is compiling them (they then compile or load here), else their NumPy mirror
    (``_alo_np``), so that a caller never waits on a compilation running elsewhere."""
    if kernels is not None:
        return kernels
    return _alo if _kernels.use_compiled() else _alo_np


def _boundaries(order: np.ndarray, first: np.ndarray, tau: np.ndarray, rate: np.ndarray,
                div: np.ndarray, lnv: np.ndarray, greeks: bool, cache: BoundaryCache | None,
                kernels: ModuleType, scheme: Scheme = DEFAULT) -> _Groups:
    """Find (in ``cache``) or solve the boundary of each group of rows (``_group``); solves run
    on the engine's thread pool, into arrays of all groups."""
    starts = first[:-1]
    g_r, g_q, g_tau = rate[order[starts]], div[order[starts]], tau[order[starts]]
    lv = lnv[order]
    lo = np.minimum.reduceat(lv, starts)
    hi = np.maximum.reduceat(lv, starts)
    nodes, ns = _vol_nodes(lo, hi, greeks)
    g_tmax = g_tau.copy()
    use_cache = cache is not None and scheme is DEFAULT
    found: dict[int, Boundary] = {}
    if use_cache:
        assert cache is not None
        for g in range(g_r.size):
            item = cache.find(float(g_r[g]), float(g_q[g]), float(g_tau[g]), float(lo[g]),
                              float(hi[g]), greeks)
            if item is not None:
                found[g] = item
    nsm = max([int(ns.max())] + [it.lnsig.size for it in found.values()])
    if nsm > nodes.shape[1]:
        nodes = np.pad(nodes, ((0, 0), (0, nsm - nodes.shape[1])))
    n = scheme.nodes
    grp = _Groups(order, first, g_r, g_q, g_tau, g_tmax, ns, nodes,
                  np.zeros((g_r.size, nsm, n)), np.zeros((g_r.size, nsm, 4, n)),
                  np.zeros(g_r.size, dtype=np.int64), greeks)
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
        _solve(grp, todo, scheme, kernels)
        if use_cache:
            assert cache is not None
            for g in todo:
                k = int(grp.ns[g])
                cache.store(Boundary(float(g_r[g]), float(g_q[g]), float(g_tau[g]),
                                     grp.lnsig[g, :k].copy(), grp.lnb[g, :k].copy(),
                                     grp.tan[g, :k].copy(), int(grp.steps[g]), greeks))
    return grp


def _solve(grp: _Groups, todo: np.ndarray, scheme: Scheme, kernels: ModuleType) -> None:
    """Solve the boundaries of groups ``todo`` into ``grp``'s arrays, in batches of groups on
    the thread pool."""
    tabs: dict[str, np.ndarray] = scheme.tables  # type: ignore[attr-defined]
    # groups of one underlying and type sit together, longest first, so that each can start
    # from the one before it (``_alo.borrow_start``): rate minus dividend yield in put form
    # is nearly the same for them, while either alone is shared by unrelated groups
    todo = todo[np.lexsort((-grp.tmax[todo], np.round(grp.div[todo] - grp.rate[todo], 3)))]
    # inputs gathered in solve order; the outputs (boundaries, tangents, steps) start empty,
    # since every node is written before it is read
    arrs = [a[todo] for a in (grp.rate, grp.div, grp.tmax, grp.ns, grp.lnsig)]
    arrs += [np.zeros((todo.size,) + a.shape[1:], dtype=a.dtype)
             for a in (grp.lnb, grp.tan, grp.steps)]
    count = todo.size
    per = max(1, BATCH_ROWS // (4 * grp.lnsig.shape[1]))
    starts = np.arange(0, count, per)

    def kernel(ins: Sequence[np.ndarray], outs: Sequence[np.ndarray]) -> None:
        for a in ins[0]:
            sl = slice(int(a), int(min(a + per, count)))
            r, q, tmax, ns, lnsig, lnb, tan, steps = (x[sl] for x in arrs)
            kernels.solve_groups(r, q, tmax, ns, lnsig, tabs["t"], tabs["s"], tabs["u"],
                                 tabs["w"], tabs["W"], tabs["WT"], tabs["W0"], lnb, tan, steps,
                                 grp.greeks, scheme.squares, scheme.power)

    run_chunked(kernel, starts.size, (starts,), (np.empty(starts.size),), chunk=1, min_split=1)
    grp.lnb[todo] = arrs[5]
    grp.tan[todo] = arrs[6]
    grp.steps[todo] = arrs[7]


def _value(grp: _Groups, lnx: np.ndarray, v: np.ndarray, s: np.ndarray, k: np.ndarray,
           w: np.ndarray, greeks: bool, scheme: Scheme, out: np.ndarray,
           near: np.ndarray, kernels: ModuleType) -> None:
    """Values (or price and nine greeks) of the rows of ``grp`` into ``out`` (1 or 10, m), in
    batches of whole groups of about ``BATCH_ROWS`` rows on the thread pool; rows of groups
    whose boundary failed are left untouched; ``near`` marks rows at their European value."""
    n_groups = grp.rate.size
    m = grp.order.size
    cum = grp.first[1:]
    cuts = np.searchsorted(cum, np.arange(BATCH_ROWS, m, BATCH_ROWS), side="left")
    bounds = np.unique(np.concatenate([[0], cuts + 1, [n_groups]])).astype(np.int64)
    bounds = bounds[bounds <= n_groups]

    def kernel(ins: Sequence[np.ndarray], outs: Sequence[np.ndarray]) -> None:
        for c in ins[0]:
            g0, g1 = int(bounds[c]), int(bounds[c + 1])
            sl = slice(g0, g1)
            kernels.value_groups(grp.rate[sl], grp.div[sl], grp.tau[sl], grp.tmax[sl],
                                 grp.ns[sl], grp.lnsig[sl], grp.lnb[sl], grp.tan[sl],
                                 grp.steps[sl], grp.first[g0:g1 + 1], grp.order, lnx, v, s, k,
                                 w, scheme.wq_t, scheme.power,  # type: ignore[attr-defined]
                                 scheme.ts_x, scheme.ts_w,  # type: ignore[attr-defined]
                                 VOL_MIN, greeks, out, near, scheme.squares,
                                 scheme.graded[1])

    ids = np.arange(bounds.size - 1)
    run_chunked(kernel, ids.size, (ids,), (np.empty(ids.size),), chunk=1, min_split=1)


def _exercise() -> None:
    """Value one American put and one call with greeks and prices, and key a group, through
    the compiled kernels: that compiles (or loads) every entry point."""
    one = np.ones(2)
    for greeks in (True, False):
        evaluate(np.array([-1.0, 1.0]), 100.0 * one, 100.0 * one, 0.5 * one, 0.05 * one,
                 0.01 * one, np.array([0.25, 0.3]), greeks=greeks, kernels=_alo)
    key = np.empty(2, dtype=np.uint64)
    _alo.group_keys(0.5 * one, 0.05 * one, 0.04 * one, key)
    _exercise_grid(one)


def _exercise_grid(one: np.ndarray) -> None:
    """Call the kernels of ``american_grid`` once each on a solved boundary, with the argument
    types that module passes, which compiles (or loads) them."""
    t, r, q = 0.5 * one[:1], 0.05 * one[:1], 0.01 * one[:1]
    lnv = np.log(np.array([0.2, 0.3]))
    grp = _boundaries(np.arange(2), np.array([0, 2]), np.tile(t, 2), np.tile(r, 2),
                      np.tile(q, 2), lnv, True, None, _alo)
    edge = np.zeros((1, 2))
    _alo.edge_groups(grp.rate, grp.div, grp.tau, grp.tmax, grp.ns, grp.lnsig, grp.lnb, grp.tan,
                     DEFAULT.power, DEFAULT.squares, lnv[None, :].copy(),
                     np.array([2], dtype=np.int64), edge)
    coef = np.zeros((4, 1, 2, 3))
    _premium.table_points(grp.rate, grp.div, grp.tau, grp.tmax, grp.ns, grp.lnsig, grp.lnb,
                          grp.tan, DEFAULT.wq_t, DEFAULT.power,  # type: ignore[attr-defined]
                          DEFAULT.ts_x, DEFAULT.ts_w,  # type: ignore[attr-defined]
                          DEFAULT.squares, DEFAULT.graded[1], lnv[None, :].copy(), edge,
                          np.ones((1, 2, 4), dtype=np.bool_), np.array([np.inf, 4.0, 0.0]),
                          12.0, np.eye(3), 1e-10, np.zeros(1, dtype=np.int64), coef,
                          np.zeros((4, 1, 2)))
    for outs in (np.ones(1, dtype=np.bool_), np.ones(5, dtype=np.bool_)):
        out = np.empty((1, outs.size, 1, 1))
        _premium.table_cells(grp.rate, grp.div, grp.tau, np.array([-16], dtype=np.int64),
                             np.array([2], dtype=np.int64), edge, np.ones((4, 1, 2)), coef,
                             0.1, 2, 4.0, np.ones((2, 4), dtype=np.bool_), outs,
                             np.zeros(1, dtype=np.int64), np.zeros(1), -one[:1], one[:1],
                             one[:1], np.zeros(1), one[:1], np.full((1, 1, 1), 0.25),
                             np.zeros(1, dtype=np.int64), out)


def warm_up(background: bool = True) -> threading.Thread | None:
    """Compile (or load from numba's cache) the American kernels: in a daemon thread that is
    returned (one per process; later calls return the same thread), or now when ``background``
    is False; American valuations use the NumPy mirror while the thread runs."""
    return _kernels.start_warm_up(_exercise, background)


def put_form(w: np.ndarray, s: np.ndarray, k: np.ndarray, r: np.ndarray,
             b: np.ndarray) -> tuple[np.ndarray, ...]:
    """ln(spot/strike), rate, dividend yield and scale of each row's put form."""
    call = w > 0
    lnx = np.where(call, np.log(k / s), np.log(s / k))
    r_p = np.where(call, r - b, r)
    q_p = np.where(call, r, r - b)
    scale = np.where(call, s, k)
    return lnx, r_p, q_p, scale


def _writable(a: np.ndarray) -> np.ndarray:
    """``a`` as a contiguous, writable float64 array (a copy only when it is not one already).
    numba compiles one specialisation per argument type, and a read-only array is another type:
    a book's read-only arrays would compile a second set of kernels in the caller's thread
    after the warm-up's (tens of seconds on a first start, seen to stall the app's grid)."""
    a = np.ascontiguousarray(a, dtype=np.float64)
    return a if a.flags.writeable else a.copy()


def evaluate(w: np.ndarray, s: np.ndarray, k: np.ndarray, t: np.ndarray, r: np.ndarray,
             b: np.ndarray, v: np.ndarray, greeks: bool, cache: BoundaryCache | None = None,
             scheme: Scheme = DEFAULT, kernels: ModuleType | None = None
             ) -> tuple[list[np.ndarray], np.ndarray]:
    """American price (``greeks`` False) or price and nine greeks of rows given as flat arrays
    of one shape (m,), ω = ±1; returns the outputs in ``results.GREEK_NAMES`` order and each
    row's status code (``AMERICAN_STATUS``). ``kernels``: ``_alo`` or ``_alo_np`` (default:
    ``_implementation``)."""
    kernels = _implementation(kernels)
    w, s, k, t, r, b, v = (_writable(a) for a in (w, s, k, t, r, b, v))
    m = s.size
    n_out = 10 if greeks else 1
    block = np.empty((n_out, m))
    status = np.empty(m, dtype=np.int8)
    lnx, r_p, q_p, lnv = (np.empty(m) for _ in range(4))
    key = np.empty(m, dtype=np.uint64)

    def prepare(ins: Sequence[np.ndarray], outs: Sequence[np.ndarray]) -> None:
        kernels.prepare_rows(*ins[:7], YEARS_MIN, VOL_MIN, *outs)

    run_chunked(prepare, m, (w, s, k, t, r, b, v), (status, lnx, r_p, q_p, lnv, key))
    solve = np.flatnonzero(status == EXERCISE_BOUNDARY)
    if solve.size:
        order, first = _group(solve, key, t, r_p, q_p)
        grp = _boundaries(order, first, t, r_p, q_p, lnv, greeks, cache, kernels, scheme)
        near = np.zeros(m, dtype=np.bool_)
        _value(grp, lnx, v, s, k, w, greeks, scheme, block, near, kernels)
        failed = grp.steps < 0
        if failed.any():
            status[order[np.repeat(failed, np.diff(first))]] = NOT_CONVERGED
            near[status == NOT_CONVERGED] = False
        if near.any():
            # at least ``price``'s European value to the last bit
            idx = np.flatnonzero(near)
            euro = np.empty(idx.size)
            black.price_kernel(tuple(a[idx] for a in (w, s, k, t, r, b, v)), (euro,))
            block[0, idx] = np.maximum(block[0, idx], euro)
    outs = list(block)
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
