"""``engine.american_cells`` (premium tables per exercise boundary) against the engine's own
per-cell values (``price``/``price_greeks`` with ``american=True``), which the QuantLib tests
of ``test_american.py`` check against QdFpAmericanEngine.

Tolerances are issue 11's accuracy targets: price within 1e-6 of the strike; each greek within
1e-4 relative or 1e-6 absolute per unit of underlying, measured as
|got − exact| / (|exact| + 1e-2 × unit) <= 1e-4 (unit: 1 for delta, 1/K for gamma, K for vega
and theta), the measure of ACCURACY.md.
"""

from __future__ import annotations

import numpy as np
import pytest

from blotter import engine

SPOT_PCTS = np.array([-10.0, -5.0, -2.0, -1.0, 0.0, 1.0, 2.0, 5.0, 10.0])
VOL_PTS = np.array([-5.0, -2.0, 0.0, 2.0, 5.0])


def _book(seed: int) -> dict[str, np.ndarray]:
    """Mixed rows sharing boundaries as a listed book does: a few names and expiries, calls and
    puts, strikes 70–130% of spot with a smile, from a day to three years (deep in-the-money
    rows lie in the exercise region)."""
    rng = np.random.default_rng(seed)
    m = 240
    name = rng.integers(0, 3, m)
    expiry = np.array([1.0, 7.0, 45.0, 180.0, 400.0, 1095.0])[rng.integers(0, 6, m)] / 365.0
    spot = np.array([40.0, 100.0, 250.0])[name]
    div = np.array([0.0, 0.02, 0.06])[name]
    rate = np.interp(expiry, [0.0, 3.0], [0.03, 0.08])
    strike = spot * rng.uniform(0.7, 1.3, m)
    atm = np.array([0.12, 0.3, 0.55])[name]
    k = np.log(strike / spot)
    return {
        "is_call": rng.random(m) < 0.5,
        "spot": spot,
        "strike": strike,
        "years": expiry,
        "rate": rate,
        "carry": rate - div,
        "vol": atm * (1.0 - 0.3 * k + 0.8 * k * k),
    }


def _cells(book: dict[str, np.ndarray], greeks: bool, exact_near: bool = True
           ) -> tuple[np.ndarray, list[np.ndarray], np.ndarray]:
    """Table cells, the per-cell exact values (one list entry per output) and the strikes,
    each (n_s, n_v, m)."""
    cache = engine.BoundaryCache()
    shocks = 1.0 + SPOT_PCTS / 100.0
    vols = book["vol"][None, None, :] + VOL_PTS[None, :, None] / 100.0
    got, _ = engine.american_cells(book["is_call"], book["spot"], book["strike"],
                                   book["years"], book["rate"], book["carry"], vols, shocks,
                                   greeks=greeks, boundaries=cache, exact_near=exact_near)
    args = (book["is_call"], book["spot"] * shocks[:, None, None], book["strike"],
            book["years"], book["rate"], book["carry"], vols)
    if greeks:
        g = engine.price_greeks(*args, american=True, boundaries=cache)
        exact = [g.price, g.delta, g.gamma, g.vega, g.theta]
    else:
        exact = [engine.price(*args, american=True, boundaries=cache)]
    return got, exact, np.broadcast_to(book["strike"], got.shape[1:])


@pytest.mark.parametrize("seed", [1, 2])
def test_grid_prices_equal_the_engines_per_cell(seed: int) -> None:
    book = _book(seed)
    got, exact, strike = _cells(book, greeks=False)
    assert np.max(np.abs(got[0] - exact[0]) / strike) <= 1e-6
    # the sample holds cells in the exercise region (price at intrinsic) and out of it
    s1 = book["spot"] * (1.0 + SPOT_PCTS / 100.0)[:, None, None]
    w = np.where(book["is_call"], 1.0, -1.0)
    at_intrinsic = exact[0] <= np.maximum(w * (s1 - book["strike"]), 0.0) + 1e-12
    assert at_intrinsic.any() and (~at_intrinsic).any()


def _greek_errors(seed: int, exact_near: bool = True) -> dict[str, float]:
    """Largest error measure of each output of ``CELL_OUTPUTS`` over the grid of ``_book``."""
    got, exact, strike = _cells(_book(seed), greeks=True, exact_near=exact_near)
    units = {"delta": 1.0, "gamma": 1.0 / strike, "vega": strike, "theta": strike}
    out = {"price": float(np.max(np.abs(got[0] - exact[0]) / strike))}
    for i, name in enumerate(engine.american_grid.CELL_OUTPUTS[1:], start=1):
        err = np.abs(got[i] - exact[i]) / (np.abs(exact[i]) + 1e-2 * units[name])
        out[name] = float(np.max(err))
    return out


@pytest.mark.parametrize(("seed", "exact_near"), [(1, True), (2, True), (1, False),
                                                  (2, False)])
def test_grid_price_and_delta_with_greeks_equal_the_engines_per_cell(
        seed: int, exact_near: bool) -> None:
    """Price and delta meet the targets from the tables alone too (``exact_near`` False, as
    the delta profile asks)."""
    errors = _greek_errors(seed, exact_near)
    assert errors["price"] <= 1e-6
    assert errors["delta"] <= 1e-4


@pytest.mark.parametrize("seed", [1, 2])
def test_grid_gamma_vega_theta_equal_the_engines_per_cell(seed: int) -> None:
    """Cells near the boundary or of a small σ√τ come from the quadrature (``_Near``), where
    the tables alone missed 1e-4 (gamma in 13-17 of 10,800 cells of these books, up to
    3.5e-3; theta in 1-3)."""
    errors = _greek_errors(seed)
    for name in ("gamma", "vega", "theta"):
        assert errors[name] <= 1e-4, name


def test_a_cell_does_not_depend_on_the_other_rows() -> None:
    """Each row's cells are the same valued alone or with the whole book (a grid summed over
    shards equals the serial grid): a table point depends only on its boundary and lattice vol."""
    book = _book(3)
    cache = engine.BoundaryCache()
    shocks = 1.0 + SPOT_PCTS / 100.0
    vols = book["vol"][None, None, :] + VOL_PTS[None, :, None] / 100.0
    cols = [book[c] for c in ("is_call", "spot", "strike", "years", "rate", "carry")]
    whole, _ = engine.american_cells(*cols, vols, shocks, boundaries=cache)
    half = np.arange(0, 240, 2)
    part, _ = engine.american_cells(*(c[half] for c in cols), vols[:, :, half], shocks,
                                    boundaries=cache)
    np.testing.assert_array_equal(part, whole[:, :, :, half])


def test_base_value_is_the_cell_of_no_move() -> None:
    book = _book(4)
    vols = book["vol"][None, None, :] + VOL_PTS[None, :, None] / 100.0
    cols = [book[c] for c in ("is_call", "spot", "strike", "years", "rate", "carry")]
    got, base = engine.american_cells(*cols, vols, np.array([0.9, 1.0]),
                                      boundaries=engine.BoundaryCache(),
                                      base_vols=book["vol"])
    np.testing.assert_array_equal(base[0], got[0, 1, 2])


def test_bad_shapes_are_refused() -> None:
    book = _book(5)
    cols = [book[c] for c in ("is_call", "spot", "strike", "years", "rate", "carry")]
    with pytest.raises(ValueError, match="vols must have shape"):
        engine.american_cells(*cols, book["vol"], np.array([1.0]))
    with pytest.raises(ValueError, match="shocks"):
        engine.american_cells(*cols, book["vol"][None, None, :], np.array([-1.0]))


def test_the_numpy_mirror_values_every_cell_by_quadrature() -> None:
    """While the compiled kernels are not ready (``_alo_np`` in use) no table kernel is
    called; the cells are the mirror's per-cell values."""
    from blotter.engine import _alo_np

    book = _book(6)
    cols = [book[c][:40] for c in ("is_call", "spot", "strike", "years", "rate", "carry")]
    vols = book["vol"][None, None, :40] + VOL_PTS[None, :, None] / 100.0
    shocks = 1.0 + SPOT_PCTS / 100.0
    got, _ = engine.american_grid.american_cells(
        np.asarray(cols[0]), *cols[1:], vols, shocks, kernels=_alo_np)
    exact = engine.price(cols[0], cols[1] * shocks[:, None, None], *cols[2:], vols,
                         american=True)
    assert np.max(np.abs(got[0] - exact) / cols[2]) <= 1e-6


def test_kept_tables_give_the_same_cells_at_another_spot() -> None:
    """A second grid on the same cache (spots moved, as after a what-if) takes the kept tables
    and equals the grid of a fresh cache to the bit."""
    book = _book(7)
    cache = engine.BoundaryCache()
    shocks = 1.0 + SPOT_PCTS / 100.0
    vols = book["vol"][None, None, :] + VOL_PTS[None, :, None] / 100.0
    cols = [book[c] for c in ("is_call", "spot", "strike", "years", "rate", "carry")]
    engine.american_cells(*cols, vols, shocks, boundaries=cache)
    kept = len(cache._tables)
    moved = [*cols[:1], cols[1] * 1.03, *cols[2:]]
    again, _ = engine.american_cells(*moved, vols, shocks, boundaries=cache)
    assert kept > 0 and len(cache._tables) == kept
    fresh_cache = engine.BoundaryCache()
    for item in cache._items.values():
        fresh_cache.store(item)
    fresh, _ = engine.american_cells(*moved, vols, shocks, boundaries=fresh_cache)
    np.testing.assert_array_equal(again, fresh)


def _short_dated() -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Gamma of a grid of out-of-the-money rows at a day or a week, low vols: the tables'
    cells and the engine's per cell, (n_s, n_v, m) each, and the strikes."""
    m = 60
    rng = np.random.default_rng(8)
    is_call = rng.random(m) < 0.5
    spot = np.full(m, 40.0)
    # puts struck 85–97% of spot, calls 103–115%: out of the money
    strike = np.where(is_call, rng.uniform(1.03, 1.15, m), rng.uniform(0.85, 0.97, m)) * spot
    years = np.where(rng.random(m) < 0.5, 1.0, 7.0) / 365.0
    rate = np.full(m, 0.03)
    carry = np.where(is_call, -0.02, 0.03)
    vol = rng.uniform(0.06, 0.12, m)
    shocks = 1.0 + SPOT_PCTS / 100.0
    vols = vol[None, None, :] + VOL_PTS[None, :, None] / 200.0
    cache = engine.BoundaryCache()
    got, _ = engine.american_cells(is_call, spot, strike, years, rate, carry, vols, shocks,
                                   greeks=True, boundaries=cache)
    g = engine.price_greeks(is_call, spot * shocks[:, None, None], strike, years, rate, carry,
                            vols, american=True, boundaries=cache)
    return got[2], g.gamma, strike


def test_short_dated_gamma_is_0_where_the_premium_is_negligible() -> None:
    """Where the premium's tables are near 0 (they peak near the boundary at 1/(σ√τ)), past
    the last table point holding more than ``TAIL_NEGLIGIBLE`` the premium is 0, so gamma
    keeps 1e-6 per unit of underlying there (the interpolant alone left about 2e-7 absolute on
    strikes of 40)."""
    got, exact, strike = _short_dated()
    tiny = np.abs(exact) < 1e-12
    assert tiny.sum() > 100
    err = np.abs(got - exact) / (np.abs(exact) + 1e-2 / strike)
    assert np.max(err[tiny]) <= 1e-4


def test_short_dated_gamma_equals_the_engines_per_cell() -> None:
    """At 1–7 days and vols of 6–12% (σ√τ below ``SHORT_SD``) the cells up to ``SHORT_Z``
    above the boundary come from the quadrature; the tables alone missed 1e-4 in about 6% of
    these out-of-the-money cells (up to 1.3e-3)."""
    got, exact, strike = _short_dated()
    err = np.abs(got - exact) / (np.abs(exact) + 1e-2 / strike)
    assert np.max(err) <= 1e-4


def test_weighted_sums_equal_the_sums_of_the_cells() -> None:
    """``weights`` gives the weighted sums over rows of the same cells, block by block."""
    book = _book(9)
    cache = engine.BoundaryCache()
    shocks = 1.0 + SPOT_PCTS / 100.0
    vols = book["vol"][None, None, :] + VOL_PTS[None, :, None] / 100.0
    cols = [book[c] for c in ("is_call", "spot", "strike", "years", "rate", "carry")]
    units = np.random.default_rng(9).normal(0.0, 100.0, 240)
    cells, base = engine.american_cells(*cols, vols, shocks, greeks=True, boundaries=cache)
    sums, base_sums = engine.american_cells(*cols, vols, shocks, greeks=True,
                                            boundaries=cache, weights=units)
    np.testing.assert_allclose(sums, cells @ units, rtol=1e-12, atol=1e-9)
    np.testing.assert_allclose(base_sums, base @ units, rtol=1e-12, atol=1e-9)



def test_kept_only_builds_nothing_and_then_takes_the_kept_tables() -> None:
    """``kept_only`` (the what-if's one cell per row): while no table is kept every cell is
    valued by quadrature and no table is built; once a grid has kept them, the same cells as
    that grid's, to the bit, with the base values left NaN when ``with_base`` is False."""
    book = _book(9)
    cache = engine.BoundaryCache()
    cols = [book[c] for c in ("is_call", "spot", "strike", "years", "rate", "carry")]
    one = book["vol"][None, None, :] + 0.02
    cold, _ = engine.american_cells(*cols, one, np.array([0.95]), boundaries=cache,
                                    kept_only=True)
    assert len(cache._tables) == 0
    exact = engine.price(cols[0], cols[1] * 0.95, *cols[2:], one[0, 0], american=True,
                         boundaries=cache)
    assert np.max(np.abs(cold[0, 0, 0] - exact) / cols[2]) <= 1e-12
    vols = book["vol"][None, None, :] + VOL_PTS[None, :, None] / 100.0
    grid, _ = engine.american_cells(*cols, vols, 1.0 + SPOT_PCTS / 100.0, boundaries=cache)
    kept = len(cache._tables)
    got, base = engine.american_cells(*cols, one, np.array([0.95]), boundaries=cache,
                                      kept_only=True, with_base=False)
    assert len(cache._tables) == kept
    # spot −5% and vol +2 points are a cell of the grid
    np.testing.assert_array_equal(got[0, 0, 0], grid[0, 1, 3])
    assert np.isnan(base).all()


def test_one_table_set_per_boundary_widened_by_a_wider_grid() -> None:
    """Each boundary keeps one set of tables over a range of lattice vols; a later grid over
    wider vols adds to that set (the vols already built are kept, not built again), and the
    what-if's one cell per row then takes its cells from the widened set, equal to that
    grid's to the bit."""
    book = _book(10)
    cache = engine.BoundaryCache()
    cols = [book[c] for c in ("is_call", "spot", "strike", "years", "rate", "carry")]
    # boundaries solved over vols wide enough for both grids' lattices, so both use them
    cache.prepare(*cols[:1], *cols[3:], book["vol"] * 0.4, book["vol"] * 2.5)
    shocks = 1.0 + SPOT_PCTS / 100.0
    narrow = book["vol"][None, None, :] + np.array([-1.0, 0.0, 1.0])[None, :, None] / 100.0
    engine.american_cells(*cols, narrow, shocks, boundaries=cache)
    sets = len(cache._tables)
    first = {k: v[2].copy() for k, v in cache._tables.items()}
    # one set per (τ, rate, dividend yield) in put form among the rows that have a boundary
    call = book["is_call"]
    r_p = np.where(call, book["rate"] - book["carry"], book["rate"])
    q_p = np.where(call, book["rate"], book["rate"] - book["carry"])
    solved = engine.american_status(call, book["years"], book["rate"], book["carry"]) == 0
    assert sets == len(set(zip(book["years"][solved].tolist(), r_p[solved].tolist(),
                               q_p[solved].tolist(), strict=True)))
    wide_vols = book["vol"][None, None, :] + VOL_PTS[None, :, None] / 100.0
    wide, _ = engine.american_cells(*cols, wide_vols, shocks, boundaries=cache)
    assert len(cache._tables) == sets
    for key, table in first.items():
        # the lattice vols built by the first grid are kept unchanged within the wider set
        now = cache._tables[key]
        grown = now[2][~np.isnan(now[2][:, 0])]
        assert grown.shape[0] >= table.shape[0]
        assert any(np.array_equal(grown[i:i + table.shape[0]], table)
                   for i in range(grown.shape[0] - table.shape[0] + 1))
    one = book["vol"][None, None, :] + 0.05
    got, _ = engine.american_cells(*cols, one, np.array([0.9]), boundaries=cache,
                                   kept_only=True, with_base=False)
    np.testing.assert_array_equal(got[0, 0, 0], wide[0, 0, 4])


def _premiums_kept(cache: engine.BoundaryCache, which: int
                   ) -> list[tuple[tuple[float, ...], np.ndarray, np.ndarray]]:
    """The points of every kept table of premium ``which`` (0 price, 1 delta, 2 gamma, 3
    vega): per lattice vol built, the set's key, ln σ (rows,) and the premium at the
    Chebyshev–Lobatto points (rows, N + 1), from the kept coefficients."""
    grid = engine.american_grid
    n = grid.CHEB_DEGREE
    basis = np.cos(np.outer(np.arange(n + 1), np.arange(n + 1)) * np.pi / n)
    out = []
    for key, (first, _, rows) in cache._tables.items():
        if key[-1] != which:
            continue
        built = ~np.isnan(rows[:, 0])
        lnsig = (first + np.flatnonzero(built)) * grid.LATTICE_STEP
        out.append((key, lnsig, rows[built, 2:] @ basis))
    return out


@pytest.mark.parametrize("which", [0, 1, 2, 3])
def test_table_points_are_the_engines_premiums(which: int) -> None:
    """Each table point (a put of strike 1 at z standard deviations above the boundary, at a
    lattice vol) holds the engine's own premium there: ``price_greeks`` with
    ``american=True`` less the European value, on the same kept boundary, to rounding. The
    points nearest the boundary take the engine's refined rule there."""
    book = _book(11)
    cache = engine.BoundaryCache()
    cols = [book[c] for c in ("is_call", "spot", "strike", "years", "rate", "carry")]
    vols = book["vol"][None, None, :] + VOL_PTS[None, :, None] / 100.0
    engine.american_cells(*cols, vols, 1.0 + SPOT_PCTS / 100.0, greeks=True,
                          boundaries=cache)
    grid = engine.american_grid
    # points above the boundary within the cap (z = 0 holds the boundary's limits instead)
    pts = np.flatnonzero((grid._Z > 0.0) & (grid._Z <= grid.Z_CAP))
    checked = 0
    for key, lnsig, values in _premiums_kept(cache, which):
        rate, div, tau = key[:3]
        first, _, rows = cache._tables[key]
        edge = rows[~np.isnan(rows[:, 0]), 0]
        sig = np.exp(lnsig)[:, None]
        x = np.exp(edge[:, None] + sig * np.sqrt(tau) * grid._Z[None, pts])
        args = (False, x, 1.0, tau, rate, rate - div, sig)
        am = engine.price_greeks(*args, american=True, boundaries=cache)
        eu = engine.price_greeks(*args)
        name = ("price", "delta", "gamma", "vega")[which]
        exact = getattr(am, name) - getattr(eu, name)
        if which == 0:
            exact = np.maximum(exact, 0.0)
        np.testing.assert_allclose(values[:, pts], exact, rtol=1e-9, atol=1e-12)
        checked += exact.size
    assert checked > 1000


def test_outputs_build_only_the_tables_they_read() -> None:
    """``outputs`` ("delta", as the delta profile asks) gives the same deltas as all five
    outputs, to the bit, and NaN for the others, and builds only the delta tables and, for
    boundaries of calls, the price ones (a call's delta in put form is P − x ∂P/∂x)."""
    book = _book(12)
    cols = [book[c] for c in ("is_call", "spot", "strike", "years", "rate", "carry")]
    vols = book["vol"][None, None, :]
    shocks = 1.0 + np.linspace(-0.15, 0.15, 31)
    every, _ = engine.american_cells(*cols, vols, shocks, greeks=True,
                                     boundaries=engine.BoundaryCache(), exact_near=False)
    cache = engine.BoundaryCache()
    delta, base = engine.american_cells(*cols, vols, shocks, greeks=True, boundaries=cache,
                                        exact_near=False, outputs=("delta",))
    np.testing.assert_array_equal(delta[1], every[1])
    assert np.isnan(np.delete(delta, 1, axis=0)).all()
    assert np.isnan(np.delete(base, 1, axis=0)).all() and not np.isnan(base[1]).any()
    kinds = [key[-1] for key in cache._tables]
    assert set(kinds) == {0.0, 1.0}
    # one delta set per boundary, a price set per boundary of calls only
    assert 0 < kinds.count(0.0) < kinds.count(1.0)
    with pytest.raises(ValueError, match="outputs must name"):
        engine.american_cells(*cols, vols, shocks, greeks=True, outputs=("rho",))


def test_a_grid_then_a_delta_profile_reuse_the_price_tables() -> None:
    """A price grid keeps a price set per boundary; a delta profile after it on the same cache
    builds only delta sets, taking the kept price sets (unchanged) for its calls."""
    book = _book(13)
    cache = engine.BoundaryCache()
    cols = [book[c] for c in ("is_call", "spot", "strike", "years", "rate", "carry")]
    vols = book["vol"][None, None, :] + VOL_PTS[None, :, None] / 100.0
    engine.american_cells(*cols, vols, 1.0 + SPOT_PCTS / 100.0, boundaries=cache)
    prices = {k: v[2] for k, v in cache._tables.items()}
    assert {k[-1] for k in prices} == {0.0}
    engine.american_cells(*cols, book["vol"][None, None, :], 1.0 + SPOT_PCTS / 100.0,
                          greeks=True, boundaries=cache, outputs=("delta",))
    after = {k: v[2] for k, v in cache._tables.items() if k[-1] == 0.0}
    assert after.keys() == prices.keys()
    assert all(after[k] is prices[k] for k in prices)
    assert any(k[-1] == 1.0 for k in cache._tables)


def _counts(seed: int, exact_near: bool) -> list[str]:
    """Cells of ``_book(seed)`` over each output's target, as 'largest (count)'."""
    got, exact, strike = _cells(_book(seed), greeks=True, exact_near=exact_near)
    units = {"delta": 1.0, "gamma": 1.0 / strike, "vega": strike, "theta": strike}
    price = np.abs(got[0] - exact[0]) / strike
    out = [f"{price.max():.1e} ({int((price > 1e-6).sum())})"]
    for i, name in enumerate(engine.american_grid.CELL_OUTPUTS[1:], start=1):
        err = np.abs(got[i] - exact[i]) / (np.abs(exact[i]) + 1e-2 * units[name])
        out.append(f"{err.max():.1e} ({int((err > 1e-4).sum())})")
    return out


if __name__ == "__main__":
    # the table of ACCURACY.md, "American grids": python -m tests.engine.test_american_grid
    print("| book | cells near the boundary | price | delta | gamma | vega | theta |")
    print("| --- | --- | --- | --- | --- | --- | --- |")
    for book_seed in (1, 2, 3, 4):
        for near in (True, False):
            words = "quadrature" if near else "tables"
            print(f"| {book_seed} | {words} | " + " | ".join(_counts(book_seed, near)) + " |")
    for book_seed in (1, 2, 3, 4):
        alone, alone_exact, alone_k = _cells(_book(book_seed), greeks=False)
        alone_err = np.abs(alone[0] - alone_exact[0]) / alone_k
        print(f"book {book_seed}, price-only tables: {alone_err.max():.1e} "
              f"({int((alone_err > 1e-6).sum())})")
    short, short_exact, short_k = _short_dated()
    short_err = np.abs(short - short_exact) / (np.abs(short_exact) + 1e-2 / short_k)
    print(f"short-dated gamma: {short_err.max():.1e} ({int((short_err > 1e-4).sum())} of "
          f"{short_err.size})")
