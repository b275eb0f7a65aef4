"""``blotter bench`` cases for the risk layer, on a synthetic book built in memory.

- ``whatif``: ``apply_move`` of "spot -3% vol +2 days 1" on a 100k-position book, full
  revaluation, Taylor terms and aggregation per underlying included (target 10 ms). The base
  valuation is built once beforehand, as the app does.
- ``whatif american``: the same with 20% of the options American (the converged exercise-boundary
  method), no target; ``whatif american-heavy``: the same move on a book with 75% American
  options (like the demo); ``whatif american-heavy one name``: "SYN00 spot -3%" on it, where only
  that name's options are repriced.
- ``grid``: the default 9 × 5 spot × vol scenario grid on 10k and 100k positions (targets 35 ms and
  350 ms), one broadcast pass chunked to ``LADDER_CHUNK_CELLS`` cells.
- ``american book …``: on books 90% American at 10k and 100k positions, valuing the book (cold,
  every exercise boundary solved), the what-if, the 9 × 5 grid, the P&L profile (31 spot
  points), the Δ $ profile and the gamma profile (its cells near the exercise boundary or of a
  small σ√τ by quadrature), against issue 11's targets. The grid and profiles reuse the
  premium tables kept in the valuation's cache (as after a spot move), and ``whatif tables
  kept`` times ``NO_ROLL_MOVE`` after the grid (its American rows from those tables, as in the
  app, which computes the grid on each load); ``… tables cold`` times
  the grid and the Δ $ profile with every table built again (boundaries kept), as after a vol
  or time change.

The book: fictitious names ``SYN00``… (stocks and one index), 8 expiries from a week to two years,
strikes 70–130% of spot, European options (index and ETF style) plus one stock hedge per name.
Where QuantLib is installed, the reference is its per-option loop (AnalyticEuropeanEngine,
``NPV()`` after a quote change) timed on a sample, scaled to the case (× cells for a grid).
"""

from __future__ import annotations

import tracemalloc
from collections.abc import Callable
from datetime import UTC, datetime
from functools import partial
from typing import Any

import numpy as np

from blotter.benchmarks import Result, result_from, timed

VALUATION = np.datetime64("2026-12-01T15:00:00", "s")
"""Valuation instant of the synthetic books (a Tuesday, 10:00 New York)."""

MOVE = "spot -3% vol +2 days 1"
"""The what-if timed."""

NO_ROLL_MOVE = "spot -3% vol +2"
"""The what-if timed after the grid, whose premium tables then serve its American rows."""

ONE_NAME_MOVE = "SYN00 spot -3%"
"""A one-name what-if: one of the 50 names moves, the others keep their prices."""


def synthetic_book(
    n: int, n_underlyings: int = 50, american_share: float = 0.0, seed: int = 11
) -> tuple[Any, Any]:
    """A (Book, Market) of ``n`` positions on fictitious names: options, one hedge per name."""
    from blotter.book import Book, Underlyings
    from blotter.market import Market, RateCurve, VolSurface

    rng = np.random.default_rng(seed)
    symbols = ("SYNIDX",) + tuple(f"SYN{i:02d}" for i in range(n_underlyings - 1))
    kinds = ("index",) + ("stock",) * (n_underlyings - 1)
    und = Underlyings(
        symbols=symbols,
        kinds=kinds,
        currencies=("USD",) * n_underlyings,
        betas=np.concatenate([[1.0], rng.uniform(0.5, 1.6, n_underlyings - 1)]),
        div_yields=rng.uniform(0.0, 0.03, n_underlyings),
        calendars=("NYSE",) * n_underlyings,
    )
    spots = np.concatenate([[4500.0], rng.uniform(20, 500, n_underlyings - 1)])
    n_hedge = min(n_underlyings, n)
    n_opt = n - n_hedge
    uidx = np.concatenate([rng.integers(0, n_underlyings, n_opt), np.arange(n_hedge)])
    days = np.array([7, 14, 30, 60, 90, 180, 365, 730])
    exp_days = VALUATION.astype("datetime64[D]") + rng.choice(days, n).astype("timedelta64[D]")
    expiries = exp_days.astype("datetime64[s]") + np.timedelta64(21, "h")
    is_opt = np.arange(n) < n_opt
    strikes = np.where(is_opt, np.round(spots[uidx] * rng.uniform(0.7, 1.3, n), 1), np.nan)
    american = is_opt & (rng.random(n) < american_share)
    book = Book(
        name="SYNTHETIC",
        underlyings=und,
        reference_index="SYNIDX",
        contract_ids=np.arange(1, n + 1),
        labels=tuple(f"syn{i}" for i in range(n)),
        underlying_idx=uidx,
        is_option=is_opt,
        is_call=is_opt & (rng.random(n) < 0.5),
        american=american,
        strikes=strikes,
        expiries=np.where(is_opt, expiries, np.datetime64("NaT", "s")),
        multipliers=np.where(is_opt, 100.0, 1.0),
        quantities=np.where(is_opt, rng.integers(-50, 51, n) + 0.5, 1000.0),
    )
    surfaces = {}
    slice_dates = np.unique(exp_days)
    for i, sym in enumerate(symbols):
        ks = spots[i] * np.array([0.7, 0.85, 1.0, 1.15, 1.3])
        atm = rng.uniform(0.15, 0.45)
        e = np.repeat(slice_dates, ks.size)
        k = np.tile(ks, slice_dates.size)
        vols = (
            atm
            * (1.0 - 0.4 * (k / spots[i] - 1.0))
            * np.repeat(np.linspace(1.1, 0.9, slice_dates.size), ks.size)
        )
        surfaces[sym] = VolSurface(e, k, vols)
    market = Market(
        version=1,
        marks_as_of=datetime(2026, 12, 1, 15, 0, tzinfo=UTC),
        spots=dict(zip(symbols, spots.tolist(), strict=True)),
        surfaces=surfaces,
        curves={
            "USD": RateCurve(
                np.array([1.0, 90.0, 365.0, 730.0]), np.array([0.030, 0.031, 0.033, 0.035])
            )
        },
    )
    return book, market


def _quantlib_ns_per_option(sample: int = 2000) -> float | None:
    """QuantLib's per-option revaluation time (ns), European analytic engine, or None without it."""
    try:
        import QuantLib as ql
    except ImportError:
        return None
    rng = np.random.default_rng(3)
    today = ql.Date(1, 12, 2026)
    ql.Settings.instance().evaluationDate = today
    dc = ql.Actual365Fixed()
    options = []
    quotes = []
    for _ in range(sample):
        s = ql.SimpleQuote(float(rng.uniform(50, 150)))
        proc = ql.BlackScholesMertonProcess(
            ql.QuoteHandle(s),
            ql.YieldTermStructureHandle(ql.FlatForward(today, 0.01, dc)),
            ql.YieldTermStructureHandle(ql.FlatForward(today, 0.03, dc)),
            ql.BlackVolTermStructureHandle(ql.BlackConstantVol(today, ql.NullCalendar(), 0.25, dc)),
        )
        opt = ql.VanillaOption(
            ql.PlainVanillaPayoff(ql.Option.Call, 100.0),
            ql.EuropeanExercise(today + int(rng.integers(7, 730))),
        )
        opt.setPricingEngine(ql.AnalyticEuropeanEngine(proc))
        options.append(opt)
        quotes.append(s)

    def loop() -> None:
        for q, o in zip(quotes, options, strict=True):
            q.setValue(q.value() * 0.97)
            o.NPV()

    secs = timed(loop, repeat=3, warmup=1)
    return float(np.median(secs)) * 1e9 / sample


def run(quick: bool) -> list[Result]:
    """Time the what-if and the scenario grid; ``quick`` uses small books and few repetitions."""
    from blotter.risk import value_book
    from blotter.scenario.base import prepare
    from blotter.scenario.grammar import parse_move
    from blotter.scenario.spot_vol_ladder import DEFAULT_SPOT_PCTS, DEFAULT_VOL_PTS, ladder
    from blotter.scenario.whatif import apply_move

    repeat = 3 if quick else 11
    ql_ns = _quantlib_ns_per_option(200 if quick else 2000)
    ref = "QuantLib loop" if ql_ns else None
    cells = len(DEFAULT_SPOT_PCTS) * len(DEFAULT_VOL_PTS)
    results: list[Result] = []

    for label, share, n, target_ms, text in (
        ("whatif", 0.0, 100_000, 10.0, MOVE),
        ("whatif american", 0.2, 100_000, None, MOVE),
        ("whatif american-heavy", 0.75, 100_000, None, MOVE),
        ("whatif american-heavy one name", 0.75, 100_000, None, ONE_NAME_MOVE),
    ):
        n = 5_000 if quick else n
        book, market = synthetic_book(n, american_share=share)
        v = value_book(book, market, VALUATION)
        prepare(v)
        move = parse_move(text)
        secs = timed(partial(apply_move, v, move), repeat=repeat)
        med_ns = float(np.median(secs)) * 1e9 / n
        results.append(
            result_from(
                label,
                n,
                secs,
                reference=ref,
                ratio=(ql_ns / med_ns) if ql_ns else None,
                target_ns=target_ms * 1e6 / n if target_ms and not quick else None,
                note=f"'{text}', {share:.0%} American, incl. aggregation",
            )
        )

    for n, target_ms in ((10_000, 35.0), (100_000, 350.0)):
        n = n // 20 if quick else n
        book, market = synthetic_book(n)
        v = value_book(book, market, VALUATION)
        prepare(v)
        secs = timed(partial(ladder, v), repeat=max(3, repeat // 2))
        med_ns = float(np.median(secs)) * 1e9 / n
        tracemalloc.start()
        ladder(v)
        peak_mb = tracemalloc.get_traced_memory()[1] / 2**20
        tracemalloc.stop()
        results.append(
            result_from(
                "grid",
                n,
                secs,
                reference=ref,
                ratio=(ql_ns * cells / med_ns) if ql_ns else None,
                target_ns=target_ms * 1e6 / n if not quick else None,
                note=f"{len(DEFAULT_SPOT_PCTS)}×{len(DEFAULT_VOL_PTS)} sticky strike, chunked, "
                f"peak {peak_mb:.0f} MB allocated",
            )
        )
    results += _american_book_cases(quick)
    return results


AMERICAN_SHARE = 0.9
"""Share of American options in the book of the American cases (a single-stock desk's book)."""

AMERICAN_TARGETS_MS = {
    "value": (100.0, 500.0),
    "whatif": (100.0, 50.0),
    "grid": (100.0, 500.0),
    "pnl profile": (100.0, 500.0),
    "delta profile": (100.0, 1000.0),
    "gamma profile": (100.0, 1000.0),
}
"""Targets (ms at 10k, ms at 100k positions) of the American cases (issue 11)."""


def _timed_cold(fn: Callable[[], Any], before: Callable[[], None], repeat: int) -> np.ndarray:
    """Seconds of ``repeat`` calls of ``fn``, each after an untimed call of ``before``."""
    import time

    out = np.empty(repeat)
    for i in range(repeat):
        before()
        t0 = time.perf_counter_ns()
        fn()
        out[i] = (time.perf_counter_ns() - t0) * 1e-9
    return out


def _american_book_cases(quick: bool) -> list[Result]:
    """Value, what-if, 9×5 grid, P&L profile and Δ $ profile on books that are 90% American.

    ``value`` is cold: a new valuation solves every exercise boundary. The others reuse the
    valuation's boundaries as the app does (the first call, untimed, solves any a vol shift
    needs), and the grid and profiles its premium tables, except the ``tables cold`` cases.
    """
    from blotter.risk import value_book
    from blotter.scenario.base import prepare
    from blotter.scenario.grammar import parse_move
    from blotter.scenario.profile import greek_profile
    from blotter.scenario.spot_vol_ladder import ladder
    from blotter.scenario.whatif import apply_move

    repeat = 3 if quick else 7
    spot_pcts = np.linspace(-15.0, 15.0, 31).tolist()
    out: list[Result] = []
    for n, which in ((10_000, 0), (100_000, 1)):
        n = 2_000 if quick else n
        book, market = synthetic_book(n, american_share=AMERICAN_SHARE)
        v = value_book(book, market, VALUATION)
        prepare(v)
        move = parse_move(MOVE)
        cases: dict[str, Callable[[], Any]] = {
            "value": partial(value_book, book, market, VALUATION),
            "whatif": partial(apply_move, v, move),
            "grid": partial(ladder, v),
            "whatif tables kept": partial(apply_move, v, parse_move(NO_ROLL_MOVE)),
            "pnl profile": partial(ladder, v, spot_pcts, (0.0,)),
            "delta profile": partial(greek_profile, v, "delta_cash", spot_pcts),
            "gamma profile": partial(greek_profile, v, "gamma_1pct", spot_pcts),
            "grid tables cold": partial(ladder, v),
            "delta profile tables cold": partial(greek_profile, v, "delta_cash", spot_pcts),
        }
        for name, fn in cases.items():
            if name.endswith("tables cold"):
                secs = _timed_cold(fn, v.boundaries.drop_tables, repeat)
            else:
                secs = timed(fn, repeat=repeat, warmup=1)
            target_ms = AMERICAN_TARGETS_MS[
                name.removesuffix(" tables cold").removesuffix(" tables kept")][which]
            out.append(
                result_from(
                    f"american book {name}",
                    n,
                    secs,
                    target_ns=None if quick else target_ms * 1e6 / n,
                    note=f"{AMERICAN_SHARE:.0%} American; median {np.median(secs) * 1e3:.0f} ms"
                    + ("; cold: boundaries solved" if name == "value" else "")
                    + ("; premium tables built" if "cold" in name else "")
                    + (f"; '{MOVE}'" if name == "whatif" else "")
                    + (f"; '{NO_ROLL_MOVE}' after the grid" if "kept" in name else "")
                    + ("; 31 spot points" if "profile" in name else ""),
                )
            )
    return out
