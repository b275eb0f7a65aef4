"""The converged American method against QuantLib's converged engine, published values, boundary
cases, its greeks against differences, shared boundaries and the cache, and fork safety.

References: QuantLib 1.44 ``QdFpAmericanEngine`` with its high-precision scheme (test-only);
differences of a finer run of the same method (``american.FINE``) whose prices agree with
QuantLib; published values named beside each check.
"""

from __future__ import annotations

import os
import sys

import numpy as np
import pytest

from blotter.engine import (
    AMERICAN_STATUS,
    BoundaryCache,
    american_status,
    kernels_ready,
    price,
    price_greeks,
    warm_up,
)
from blotter.engine import american as am
from tests.engine.american_reference import (
    GREEKS,
    REGIONS,
    greek_errors,
    qdfp_prices,
    region_cases,
)

PRICE_TOL = 1e-6
"""Price error allowed, as a share of the strike (the issue's target)."""


def _kw(c: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    return {k: c[k] for k in ("is_call", "spot", "strike", "years", "rate", "carry", "vol")}


@pytest.mark.parametrize("region", list(REGIONS))
def test_prices_match_quantlib_converged_engine(region: str) -> None:
    """Source: QuantLib 1.44 QdFpAmericanEngine, high-precision scheme, 12 cases per region of
    the grid (calls and puts, q 0–6%, r −1–8%, 1 day–3 years, S/K 0.7–1.3, σ 5–80%)."""
    pytest.importorskip("QuantLib")
    c = region_cases(region, 12, seed=3000 + list(REGIONS).index(region))
    ours = price(**_kw(c), american=True)
    ref = qdfp_prices(c)
    assert np.max(np.abs(ours - ref) / c["strike"]) <= PRICE_TOL


GREEK_TOL = 1e-4
"""Greek error allowed: 1e-4 relative or 1e-6 per unit of underlying (the issue's target), in
the measure of ``greek_errors``."""


@pytest.mark.parametrize("region", list(REGIONS))
def test_greeks_match_differences_of_a_fine_run(region: str) -> None:
    """Every greek within 1e-4 relative or 1e-6 per unit of underlying of Richardson central
    differences of ``american.FINE`` (whose prices agree with QuantLib's QdFp), on 8 cases per
    region of the grid."""
    c = region_cases(region, 8, seed=4000 + list(REGIONS).index(region))
    errs = greek_errors(c)
    for g in GREEKS:
        assert np.nanmax(errs[g]) <= GREEK_TOL, g


def test_delta_and_vega_match_quantlib_differences() -> None:
    """Delta and vega against central differences of QuantLib's QdFp (steps 1e-3 S, 1e-3 vol)
    near the money: an outside check of the derivatives, to the differences' own error."""
    pytest.importorskip("QuantLib")
    c = region_cases("near the money, 3 months–3 years", 8, seed=21)
    g = price_greeks(**_kw(c), american=True)
    hs, hv = 1e-3 * c["spot"], 1e-3
    d_ref = (qdfp_prices({**c, "spot": c["spot"] + hs})
             - qdfp_prices({**c, "spot": c["spot"] - hs})) / (2 * hs)
    v_ref = (qdfp_prices({**c, "vol": c["vol"] + hv})
             - qdfp_prices({**c, "vol": c["vol"] - hv})) / (2 * hv)
    assert np.max(np.abs(g.delta - d_ref)) <= 2e-5
    assert np.max(np.abs(g.vega - v_ref) / np.maximum(np.abs(v_ref), 1.0)) <= 2e-5


def test_hull_american_put_tree_value() -> None:
    """J. C. Hull, Options, Futures, and Other Derivatives (9th ed. 2015), Ch. 21, Example 21.1:
    American put S = K = 50, r = 10%, σ = 40%, 5 months; the text quotes 4.283 for a 500-step
    binomial tree (from memory). A 500-step tree is within about 1e-3 of the converged value."""
    got = float(price(False, 50.0, 50.0, 5.0 / 12.0, 0.10, 0.10, 0.40, american=True))
    assert abs(got - 4.283) <= 2e-3


@pytest.mark.parametrize(("is_call", "spot", "days", "rate", "div", "vol"), [
    (False, 100.0, 1, 0.05, 0.0, 0.3),        # one day
    (False, 100.0, 1095, 0.08, 0.0, 0.05),    # long-dated, low vol
    (False, 96.0, 1095, 0.08, 0.0, 0.10),     # just above the boundary (≈ 94.2)
    (False, 100.0, 365, 0.0, -0.02, 0.2),     # zero rate, negative yield: exercise pays
    (True, 100.0, 365, -0.01, 0.0, 0.2),      # call, negative rate, no dividend
    (True, 110.0, 730, 0.03, 0.03, 0.25),     # zero carry (a future's b = 0)
    (False, 100.0, 365, 0.05, 0.05, 0.02),    # 2% vol
    (False, 100.0, 365, 0.05, 0.05, 0.06),    # 6% vol
])
def test_boundary_cases_match_quantlib(is_call: bool, spot: float, days: int, rate: float,
                                       div: float, vol: float) -> None:
    """Source: QuantLib 1.44 QdFpAmericanEngine, high-precision scheme."""
    pytest.importorskip("QuantLib")
    c = {"is_call": np.array([is_call]), "spot": np.array([spot]), "strike": np.array([100.0]),
         "days": np.array([days]), "years": np.array([days / 365.0]), "rate": np.array([rate]),
         "carry": np.array([rate - div]), "vol": np.array([vol])}
    g = price_greeks(**_kw(c), american=True)
    assert all(np.all(np.isfinite(getattr(g, f))) for f in GREEKS + ("price",))
    assert abs(float(g.price[0]) - float(qdfp_prices(c)[0])) <= PRICE_TOL * 100.0


def test_exercise_region_is_intrinsic_with_exact_greeks() -> None:
    """Deep in the exercise region: intrinsic value, delta ±1, every other greek exactly 0;
    the same puts just outside the boundary have delta strictly inside (−1, 0)."""
    g = price_greeks([False, True], [60.0, 160.0], 100.0, 1.0, 0.08, [0.08, -0.1], 0.2,
                     american=True)
    assert np.allclose(g.price, [40.0, 60.0], rtol=1e-15)
    assert np.array_equal(g.delta, [-1.0, 1.0])
    for name in GREEKS[1:]:
        assert np.array_equal(getattr(g, name), [0.0, 0.0]), name
    near = price_greeks(False, 96.0, 100.0, 3.0, 0.08, 0.08, 0.10, american=True)
    assert -1.0 < float(near.delta) < 0.0 and float(near.gamma) > 0.0


def test_calls_never_exercised_early_are_european() -> None:
    """With b >= r and r >= 0 an American call is never exercised early (Merton 1973): the
    American value and greeks are the European ones exactly."""
    kw = {"is_call": True, "spot": np.linspace(80, 120, 5), "strike": 100.0, "years": 1.0,
          "rate": 0.03, "carry": 0.05, "vol": 0.25}
    a, e = price_greeks(**kw, american=True), price_greeks(**kw)
    assert np.array_equal(a.price, price(**kw))
    for name in GREEKS:
        assert np.array_equal(getattr(a, name), getattr(e, name)), name


def test_tiny_and_zero_vols_are_finite_and_ordered() -> None:
    """Vols of 0 to 6% give finite greeks, prices at least European and intrinsic, rising
    with vol."""
    vols = np.array([0.0, 1e-6, 0.005, 0.02, 0.04, 0.06])
    g = price_greeks(False, 95.0, 100.0, 1.0, 0.05, 0.03, vols, american=True)
    assert all(np.all(np.isfinite(getattr(g, f))) for f in GREEKS + ("price",))
    assert np.all(np.diff(g.price) >= -1e-12)
    assert np.all(g.price >= 5.0)


def test_rows_sharing_a_boundary_equal_rows_alone() -> None:
    """A listed expiry's strikes with a smile, valued together (one boundary, interpolated in
    vol), equal each row valued alone (its own boundary) to 1e-8 of the strike."""
    strikes = np.arange(70.0, 131.0, 5.0)
    vols = 0.25 * (1 - 0.3 * np.log(strikes / 100) + 0.8 * np.log(strikes / 100) ** 2)
    kw = {"is_call": False, "spot": 100.0, "strike": strikes, "years": 0.75, "rate": 0.05,
          "carry": 0.02, "vol": vols}
    together = price_greeks(**kw, american=True)
    for i in range(strikes.size):
        alone = price_greeks(False, 100.0, strikes[i], 0.75, 0.05, 0.02, vols[i], american=True)
        assert abs(together.price[i] - float(alone.price)) <= 1e-8 * strikes[i]
        assert abs(together.vega[i] - float(alone.vega)) <= 1e-6 * strikes[i]


def test_cache_reuses_boundaries_across_spot_moves_and_day_rolls() -> None:
    """A spot ladder and a one-day roll reuse the valuation's boundaries (no new solves) and
    give the same numbers as calls without a cache."""
    rng = np.random.default_rng(5)
    n = 200
    kw = {"is_call": rng.random(n) < 0.5, "spot": 100.0, "strike": rng.uniform(80, 120, n),
          "years": np.repeat([0.25, 1.0], n // 2), "rate": 0.04, "carry": 0.01,
          "vol": rng.uniform(0.2, 0.3, n)}
    cache = BoundaryCache()
    base = price(**kw, american=True, boundaries=cache)
    solved = len(cache)
    assert np.array_equal(base, price(**kw, american=True))
    for move in (0.9, 0.97, 1.03, 1.1):
        got = price(**{**kw, "spot": 100.0 * move}, american=True, boundaries=cache)
        want = price(**{**kw, "spot": 100.0 * move}, american=True)
        assert np.allclose(got, want, rtol=0, atol=1e-10 * 100.0)
    rolled = {**kw, "years": kw["years"] - 1.0 / 365.0}
    got = price(**rolled, american=True, boundaries=cache)
    assert len(cache) == solved
    assert np.allclose(got, price(**rolled, american=True), rtol=0, atol=1e-7 * 100.0)


def test_double_boundary_rows_are_reported_and_bounded() -> None:
    """Negative rates on both sides (put q < r < 0) are not solved: the status says so in words
    and the value is max(European, intrinsic)."""
    status = american_status([False, False, True], 1.0, [-0.01, 0.03, -0.02], [0.01, 0.0, -0.01])
    assert list(status) == [am.DOUBLE_BOUNDARY, am.EXERCISE_BOUNDARY, am.DOUBLE_BOUNDARY]
    assert "negative rates" in AMERICAN_STATUS[am.DOUBLE_BOUNDARY]
    p = price(False, 90.0, 100.0, 1.0, -0.01, 0.01, 0.2, american=True)
    e = price(False, 90.0, 100.0, 1.0, -0.01, 0.01, 0.2)
    assert float(p) == max(float(e), 10.0)


def test_kernels_ready_after_warm_up() -> None:
    """``warm_up`` compiles or loads the kernels; ``kernels_ready`` then reports True."""
    warm_up(background=False)
    assert kernels_ready()


def test_read_only_inputs_compile_nothing_after_the_warm_up() -> None:
    """A book's arrays are read-only, which numba types apart from writable ones: valuing them
    after the warm-up must use the warm-up's kernels, not compile another set in the caller's
    thread (on a first start that took tens of seconds and stalled the app's grid)."""
    from blotter.engine import _alo, _kernels

    warm_up(background=False)
    before = {k.__name__: len(k.signatures) for k in _kernels._ENTRY_POINTS}
    arrays = [np.array(x, dtype=float) for x in
              ([-1.0, 1.0], [95.0, 105.0], [100.0, 100.0], [0.4, 0.7], [0.03, 0.03],
               [0.01, 0.0], [0.22, 0.31])]
    for a in arrays:
        a.flags.writeable = False
    got, _ = am.evaluate(*arrays, greeks=True, kernels=_alo)
    after = {k.__name__: len(k.signatures) for k in _kernels._ENTRY_POINTS}
    assert after == before
    want, _ = am.evaluate(*(a.copy() for a in arrays), greeks=True, kernels=_alo)
    assert all(np.array_equal(g, w) for g, w in zip(got, want, strict=True))


@pytest.mark.skipif(sys.platform == "win32", reason="fork")
def test_american_pricing_works_in_a_forked_child() -> None:
    """A child forked after the engine ran (thread pool and compiled kernels live) prices
    American rows and gets the parent's numbers."""
    kw = {"is_call": np.arange(20000) % 2 == 0, "spot": np.linspace(80, 120, 20000),
          "strike": 100.0, "years": 0.5, "rate": 0.05, "carry": 0.01, "vol": 0.3}
    want = price(**kw, american=True)
    read, write = os.pipe()
    pid = os.fork()
    if pid == 0:  # pragma: no cover - child
        try:
            got = price(**kw, american=True)
            os.write(write, b"1" if np.array_equal(got, want) else b"0")
        finally:
            os._exit(0)
    os.close(write)
    import select

    ready, _, _ = select.select([read], [], [], 30.0)
    result = os.read(read, 1) if ready else b""
    os.close(read)
    if not ready:
        os.kill(pid, 9)
    os.waitpid(pid, 0)
    assert result == b"1"
