"""The NumPy mirror of the American kernels (``_alo_np``) against the compiled kernels (``_alo``)
on a fixed sample, and which of the two a valuation uses while a warm-up compiles the kernels.

Reference: the compiled kernels, themselves held to QuantLib's converged engine in
``test_american.py``; the mirror must give their numbers, not merely numbers as accurate.
"""

from __future__ import annotations

import threading
from collections.abc import Callable, Iterator
from typing import Any

import numpy as np
import pytest

from blotter.benchmarks.engine import listed_book
from blotter.engine import _alo, _alo_np, _kernels, price_greeks
from blotter.engine import american as am
from tests.engine.american_reference import GREEKS, REGIONS, region_cases
from tests.engine.test_near_boundary import near_boundary_rows

PRICE_TOL = 1e-12
"""Price difference allowed between the two, as a share of the strike (rounding only)."""
GREEK_TOL = 1e-8
"""Greek difference allowed, |a − b| / (|a| + 1e-2): rounding, amplified in volga by the
five-point second σ-difference of a lone vol node; 1e-4 of the accuracy target is far above."""


def _sample() -> dict[str, np.ndarray]:
    """Twenty options of each accuracy region (each its own boundary), 400 rows of a listed
    book (rows sharing boundaries, interpolated between vol nodes across a smile) and twelve
    spots just outside their exercise boundary."""
    parts = [region_cases(r, 20, 500 + i) for i, r in enumerate(REGIONS)]
    cases = {k: np.concatenate([p[k] for p in parts]) for k in
             ("is_call", "spot", "strike", "years", "rate", "carry", "vol")}
    listed = listed_book(400, seed=5, n_underlyings=8)
    n = listed["spot"].size
    for k in cases:
        cases[k] = np.concatenate([cases[k], np.broadcast_to(listed[k], (n,))])
    near = near_boundary_rows()       # valued on the refined rule at s -> 0
    for k in cases:
        cases[k] = np.concatenate([cases[k], near[k]])
    return cases


def _evaluate(kernels: Any, greeks: bool, c: dict[str, np.ndarray]
              ) -> tuple[list[np.ndarray], np.ndarray]:
    w = np.where(c["is_call"], 1.0, -1.0)
    return am.evaluate(w, c["spot"], c["strike"], c["years"], c["rate"], c["carry"], c["vol"],
                       greeks=greeks, kernels=kernels)


@pytest.mark.parametrize("greeks", [False, True])
def test_numpy_mirror_gives_the_compiled_kernels_numbers(greeks: bool) -> None:
    """Price (and with ``greeks`` every greek) and status of each row agree between the two."""
    c = _sample()
    want, want_status = _evaluate(_alo, greeks, c)
    got, got_status = _evaluate(_alo_np, greeks, c)
    assert np.array_equal(got_status, want_status)
    assert (want_status == am.EXERCISE_BOUNDARY).sum() > 400   # the sample solves boundaries
    k = c["strike"]
    assert np.max(np.abs(got[0] - want[0]) / k) < PRICE_TOL
    assert len(got) == len(want) == (1 + len(GREEKS) if greeks else 1)
    for name, a, b in zip(GREEKS, got[1:], want[1:], strict=False):
        err = np.max(np.abs(a - b) / (np.abs(b) + 1e-2))
        assert err < GREEK_TOL, f"{name}: {err:.2e}"


@pytest.fixture
def warming() -> Iterator[threading.Event]:
    """A warm-up that has not finished: a live warm-up thread and kernels reported not ready,
    until the returned event is set."""
    done = threading.Event()
    thread = threading.Thread(target=done.wait, daemon=True)
    thread.start()
    saved = _kernels._THREAD
    _kernels._THREAD = thread
    ready = _kernels.kernels_ready
    _kernels.kernels_ready = lambda: False  # type: ignore[assignment]
    try:
        yield done
    finally:
        _kernels.kernels_ready = ready  # type: ignore[assignment]
        _kernels._THREAD = saved
        done.set()
        thread.join()


def _spy(monkeypatch: pytest.MonkeyPatch, module: Any, name: str) -> list[int]:
    """Count the calls of ``module.name`` (the function is still called)."""
    calls: list[int] = []
    real: Callable[..., Any] = getattr(module, name)

    def counted(*args: Any) -> Any:
        calls.append(1)
        return real(*args)

    monkeypatch.setattr(module, name, counted)
    return calls


def test_a_valuation_during_warm_up_uses_the_numpy_mirror(
    warming: threading.Event, monkeypatch: pytest.MonkeyPatch
) -> None:
    """While the warm-up runs, American rows are valued by the mirror (the compiled kernels are
    not called, so nothing waits on their compilation) and give the compiled numbers."""
    kw: dict[str, Any] = {"is_call": np.arange(40) % 2 == 0, "spot": np.linspace(80, 120, 40),
                          "strike": 100.0, "years": 0.75, "rate": 0.05, "carry": 0.02,
                          "vol": 0.3}
    assert not _kernels.use_compiled()
    mirror = {n: _spy(monkeypatch, _alo_np, n) for n in ("solve_groups", "value_groups")}
    compiled = {n: _spy(monkeypatch, _alo, n) for n in ("solve_groups", "value_groups")}
    during = price_greeks(**kw, american=True)
    assert all(mirror.values())
    assert not any(compiled.values())
    warming.set()
    monkeypatch.setattr(_kernels, "kernels_ready", lambda: True)
    assert _kernels.use_compiled()
    after = price_greeks(**kw, american=True)
    assert all(compiled.values())
    assert np.allclose(during.price, after.price, rtol=0, atol=1e-12 * 100.0)
    assert np.allclose(during.vega, after.vega, rtol=1e-9, atol=1e-12)
