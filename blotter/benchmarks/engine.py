"""``blotter bench`` engine cases: European and American price + all greeks, and implied vol.

Two kinds of book (seeded), calls and puts:

- random: every row its own (spot, expiry, rate, carry): spot 50–150, moneyness S/K 0.7–1.4,
  1 week to 3 years, rate 0–8%, carry −4%…8%, vol 10%–60%. For the American method every row
  is a boundary of its own (the per-row solve cost).
- listed: 50 underlyings with listed expiries (weeklies to 3 years, 15 in all), strikes around
  the money with a smile, so rows share (underlying, expiry) and the American method solves
  one boundary per (underlying, expiry, call or put) (the shared-boundary cost).

American cases run cold (boundaries solved in the call, no cache; the note gives how many: at
100k rows 1,500 for the listed book and one per row for the random one) and, for ``american
price cached``, with a ``BoundaryCache`` from an earlier call at another spot (a what-if's cost:
every boundary found, none solved). Where QuantLib
imports, the same run times its per-option loop on a sample (instruments and quotes built once;
each pass sets the spot quote to a new value so every option recalculates): European rows with
``AnalyticEuropeanEngine``, American rows with its approximate Bjerksund–Stensland (1993) engine
and its converged ``QdFpAmericanEngine`` (high-precision scheme, a smaller sample), NPV plus
the greeks each engine gives (QdFp gives none: its ratio is price for price); ``ratio`` =
QuantLib ns / ours.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from blotter.benchmarks import Result, result_from, timed
from blotter.engine import BoundaryCache, implied_vol, price, price_greeks

TARGET_NS = {"european": 60.0, "american greeks": 3000.0, "american price": 1000.0,
             "american price cached": 1000.0, "implied_vol": 1000.0}
"""Targets in ns per position on the 2-core reference machine (issues 2 and 11)."""
QL_SAMPLE = 2000
"""Options in QuantLib's timed per-option loop."""
QL_CONVERGED_SAMPLE = 100
"""Options in the loop of QuantLib's converged American engine (about 0.2 ms each)."""
LISTED_EXPIRY_DAYS = (7, 14, 21, 30, 60, 91, 121, 182, 273, 365, 456, 547, 730, 912, 1095)
"""Listed expiries of the listed book, days from today."""


def listed_book(n: int, seed: int = 3, n_underlyings: int = 50) -> dict[str, np.ndarray]:
    """A listed-style book of ``n`` options: ``n_underlyings`` names, ``LISTED_EXPIRY_DAYS``,
    whole-number strikes around the money and a smile (vol rises away from the money)."""
    rng = np.random.default_rng(seed)
    u = rng.integers(0, n_underlyings, n)
    e = rng.integers(0, len(LISTED_EXPIRY_DAYS), n)
    spot = (50.0 + 150.0 * rng.random(n_underlyings))[u]
    div = (0.06 * rng.random(n_underlyings))[u]
    years = np.asarray(LISTED_EXPIRY_DAYS, dtype=np.float64)[e] / 365.0
    rate = np.interp(years, [0.0, 3.0], [0.04, 0.045])
    atm = (0.15 + 0.35 * rng.random(n_underlyings))[u]
    strike = np.round(spot * np.exp(rng.normal(0.0, 0.12, n) * np.sqrt(np.maximum(years, 0.1))))
    k = np.log(strike / spot)
    return {
        "is_call": rng.random(n) < 0.5,
        "spot": spot,
        "strike": strike,
        "years": years,
        "rate": rate,
        "carry": rate - div,
        "vol": atm * (1.0 - 0.3 * k + 0.8 * k * k),
    }


def random_book(n: int, seed: int = 7) -> dict[str, np.ndarray]:
    """A random book of ``n`` options as engine arguments (see the module docstring for ranges)."""
    rng = np.random.default_rng(seed)
    spot = rng.uniform(50.0, 150.0, n)
    return {
        "is_call": rng.random(n) < 0.5,
        "spot": spot,
        "strike": spot / rng.uniform(0.7, 1.4, n),
        "years": rng.uniform(7.0 / 365.0, 3.0, n),
        "rate": rng.uniform(0.0, 0.08, n),
        "carry": rng.uniform(-0.04, 0.08, n),
        "vol": rng.uniform(0.10, 0.60, n),
    }


def _quantlib_ns(book: dict[str, np.ndarray], kind: str, repeat: int) -> float | None:
    """Median ns per option of QuantLib's loop over a sample (None when QuantLib is absent);
    ``kind`` is "european", "approximate" (American, Bjerksund–Stensland 1993) or
    "converged" (American, QdFp high precision, which gives the price only)."""
    try:
        import QuantLib as ql  # test-only reference; the product never imports it
    except ImportError:
        return None
    n = min(QL_CONVERGED_SAMPLE if kind == "converged" else QL_SAMPLE, book["spot"].size)
    today = ql.Date(15, ql.January, 2026)
    ql.Settings.instance().evaluationDate = today
    dc = ql.Actual365Fixed()
    options: list[tuple[Any, ...]] = []
    for i in range(n):
        s_q = ql.SimpleQuote(float(book["spot"][i]))
        r_q = ql.SimpleQuote(float(book["rate"][i]))
        q_q = ql.SimpleQuote(float(book["rate"][i] - book["carry"][i]))
        v_q = ql.SimpleQuote(float(book["vol"][i]))
        r_ts = ql.YieldTermStructureHandle(ql.FlatForward(today, ql.QuoteHandle(r_q), dc))
        q_ts = ql.YieldTermStructureHandle(ql.FlatForward(today, ql.QuoteHandle(q_q), dc))
        v_ts = ql.BlackVolTermStructureHandle(
            ql.BlackConstantVol(today, ql.NullCalendar(), ql.QuoteHandle(v_q), dc))
        process = ql.BlackScholesMertonProcess(ql.QuoteHandle(s_q), q_ts, r_ts, v_ts)
        kind_ql = ql.Option.Call if book["is_call"][i] else ql.Option.Put
        days = max(1, int(round(float(book["years"][i]) * 365.0)))
        payoff = ql.PlainVanillaPayoff(kind_ql, float(book["strike"][i]))
        if kind == "european":
            exercise = ql.EuropeanExercise(today + days)
            engine = ql.AnalyticEuropeanEngine(process)
        else:
            exercise = ql.AmericanExercise(today, today + days)
            engine = (ql.BjerksundStenslandApproximationEngine(process) if kind == "approximate"
                      else ql.QdFpAmericanEngine(process,
                                                 ql.QdFpAmericanEngine.highPrecisionScheme()))
        option = ql.VanillaOption(payoff, exercise)
        option.setPricingEngine(engine)
        options.append((option, s_q, float(book["spot"][i])))
    bump = [0]

    def loop() -> None:
        # A quote set to its own value does not make QuantLib recalculate: each pass moves
        # every spot to a new value, then asks for the value and the greeks.
        bump[0] += 1
        scale = 1.0 + 1e-6 * (bump[0] % 2 + 1)
        for option, s_q, s0 in options:
            s_q.setValue(s0 * scale)
            option.NPV()
            if kind == "converged":
                continue
            option.delta()
            option.gamma()
            if kind == "european":
                option.vega()
                option.theta()
                option.rho()

    seconds = timed(loop, repeat=repeat, warmup=1)
    return float(np.median(seconds) * 1e9 / n)


def _with_ratio(res: Result, reference: str, ref_ns: float | None) -> Result:
    """``res`` with ``reference`` and ``ratio`` filled when ``ref_ns`` is known."""
    if ref_ns is None:
        return res
    return Result(**{**res.as_dict(), "reference": reference,
                     "ratio": ref_ns / res.ns_per_position})


def _european_case(sizes: list[int], repeat: int) -> list[Result]:
    ref_ns = _quantlib_ns(random_book(QL_SAMPLE), "european", repeat)
    out: list[Result] = []
    for n in sizes:
        book = random_book(n)

        def call(b: dict[str, np.ndarray] = book) -> None:
            price_greeks(**b)

        seconds = timed(call, repeat=repeat, warmup=1)
        res = result_from("european", n, seconds, target_ns=TARGET_NS["european"],
                          note="price + 9 greeks")
        out.append(_with_ratio(res, "QuantLib loop", ref_ns))
    return out


def _boundary_count(book: dict[str, np.ndarray]) -> int:
    """Exercise boundaries the American method solves for ``book``: one per distinct (time to
    expiry, rate, dividend yield) of the rows' put form (a call's is its rates swapped)."""
    r, b, call = book["rate"], book["carry"], book["is_call"]
    forms = np.stack([book["years"], np.where(call, r - b, r), np.where(call, r, r - b)])
    return int(np.unique(forms, axis=1).shape[1])


def _american_cases(sizes: dict[str, list[int]], repeat: int) -> list[Result]:
    """American price, price + greeks, and cached price, on the listed and random books."""
    approx = _quantlib_ns(random_book(QL_SAMPLE), "approximate", max(3, repeat // 2))
    converged = _quantlib_ns(random_book(QL_SAMPLE), "converged", 3)
    out: list[Result] = []
    for name, maker in (("listed", listed_book), ("random", random_book)):
        for n in sizes[name]:
            book: dict[str, Any] = maker(n)
            cache = BoundaryCache(max_bytes=256 << 20)
            moved: dict[str, Any] = {**book, "spot": book["spot"] * 0.97}
            cold = f"cold: {_boundary_count(book):,} boundaries solved in the call"
            cases = (
                ("american price", lambda b=book: price(**b, american=True), cold),
                ("american greeks", lambda b=book: price_greeks(**b, american=True),
                 f"price + 9 greeks, {cold}"),
                ("american price cached",
                 lambda b=moved, c=cache: price(**b, american=True, boundaries=c),
                 "spot -3% with the valuation's BoundaryCache"),
            )
            price(**book, american=True, boundaries=cache)
            for case, fn, note in cases:
                seconds = timed(fn, repeat=repeat, warmup=1 if n <= 100_000 else 0)
                res = result_from(f"{case} ({name})", n, seconds, target_ns=TARGET_NS[case],
                                  note=note)
                res = _with_ratio(res, "QuantLib BS1993 loop (approximate)", approx)
                if converged is not None:
                    res = Result(**{**res.as_dict(), "note": res.note
                                    + f"; QuantLib QdFp converged ratio "
                                    f"{converged / res.ns_per_position:.1f}"})
                out.append(res)
    return out


def _iv_case(n: int, repeat: int) -> Result:
    book = random_book(n, seed=11)
    prices = price_greeks(**book).price
    args = {k: v for k, v in book.items() if k != "vol"}
    seconds = timed(lambda: implied_vol(prices, **args), repeat=repeat)
    res = result_from("implied_vol", n, seconds, target_ns=TARGET_NS["implied_vol"],
                      note="European, per option")
    ref_ns = _quantlib_iv_ns(book, prices, repeat)
    if ref_ns is not None:
        res = Result(**{**res.as_dict(), "reference": "QuantLib impliedVolatility loop",
                        "ratio": ref_ns / res.ns_per_position})
    return res


def _quantlib_iv_ns(book: dict[str, np.ndarray], prices: np.ndarray, repeat: int) -> float | None:
    """Median ns per option of QuantLib's ``impliedVolatility`` over a 500-option sample."""
    try:
        import QuantLib as ql
    except ImportError:
        return None
    n = min(500, prices.size)
    today = ql.Date(15, ql.January, 2026)
    ql.Settings.instance().evaluationDate = today
    dc = ql.Actual365Fixed()
    jobs = []
    for i in range(n):
        r_ts = ql.YieldTermStructureHandle(ql.FlatForward(today, float(book["rate"][i]), dc))
        q_ts = ql.YieldTermStructureHandle(
            ql.FlatForward(today, float(book["rate"][i] - book["carry"][i]), dc))
        v_ts = ql.BlackVolTermStructureHandle(
            ql.BlackConstantVol(today, ql.NullCalendar(), 0.2, dc))
        process = ql.BlackScholesMertonProcess(
            ql.QuoteHandle(ql.SimpleQuote(float(book["spot"][i]))), q_ts, r_ts, v_ts)
        kind = ql.Option.Call if book["is_call"][i] else ql.Option.Put
        days = max(1, int(round(float(book["years"][i]) * 365.0)))
        option = ql.VanillaOption(ql.PlainVanillaPayoff(kind, float(book["strike"][i])),
                                  ql.EuropeanExercise(today + days))
        jobs.append((option, process, float(prices[i])))

    def loop() -> None:
        for option, process, p in jobs:
            try:
                option.impliedVolatility(p, process, 1e-10, 200, 1e-4, 10.0)
            except RuntimeError:
                pass

    seconds = timed(loop, repeat=max(3, repeat // 2), warmup=1)
    return float(np.median(seconds) * 1e9 / n)


def run(quick: bool) -> list[Result]:
    """Engine cases: ``european`` at 10k, 100k, 1M; American on the listed book at 10k, 100k,
    1M and on the random book at 10k, 100k (its per-row solves make 1M a minutes-long call);
    implied vol at 100k (quick: 10k everywhere)."""
    sizes = [10_000] if quick else [10_000, 100_000, 1_000_000]
    repeat = 3 if quick else 7
    results = _european_case(sizes, repeat)
    amer = ({"listed": [10_000], "random": [2_000]} if quick
            else {"listed": sizes, "random": [10_000, 100_000]})
    results += _american_cases(amer, 3)
    results.append(_iv_case(10_000 if quick else 100_000, repeat))
    return results
