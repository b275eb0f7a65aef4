"""``blotter bench`` engine cases: European and American price + all greeks, and implied vol.

Random books (seeded) of calls and puts: spot 50–150, moneyness S/K 0.7–1.4, 1 week to 3 years,
rate 0–8%, carry −4%…8%, vol 10%–60%. Where QuantLib imports, the same run times its per-option
loop on a 2,000-option sample (instruments and quotes built once and reused; NPV plus delta,
gamma, vega, theta, rho; American rows use its Bjerksund–Stensland engine, the 1993 formula with
analytic greeks) and fills ``reference`` and ``ratio`` = QuantLib ns per option / ours.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from blotter.benchmarks import Result, result_from, timed
from blotter.engine import implied_vol, price_greeks

TARGET_NS = {"european": 60.0, "american": 600.0, "implied_vol": 1000.0}
"""Targets in ns per position on the 2-core reference machine (issue 2, section 4)."""
QL_SAMPLE = 2000
"""Options in QuantLib's timed per-option loop."""


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


def _quantlib_ns(book: dict[str, np.ndarray], american: bool, repeat: int) -> float | None:
    """Median ns per option of QuantLib's loop over a sample (None when QuantLib is absent)."""
    try:
        import QuantLib as ql  # test-only reference; the product never imports it
    except ImportError:
        return None
    n = min(QL_SAMPLE, book["spot"].size)
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
        kind = ql.Option.Call if book["is_call"][i] else ql.Option.Put
        days = max(1, int(round(float(book["years"][i]) * 365.0)))
        payoff = ql.PlainVanillaPayoff(kind, float(book["strike"][i]))
        if american:
            exercise = ql.AmericanExercise(today, today + days)
            engine = ql.BjerksundStenslandApproximationEngine(process)
        else:
            exercise = ql.EuropeanExercise(today + days)
            engine = ql.AnalyticEuropeanEngine(process)
        option = ql.VanillaOption(payoff, exercise)
        option.setPricingEngine(engine)
        options.append((option, s_q))

    def loop() -> None:
        # Touch a quote so every option recalculates, then ask for the value and five greeks.
        for option, s_q in options:
            s_q.setValue(s_q.value())
            option.NPV()
            option.delta()
            option.gamma()
            option.vega()
            option.theta()
            option.rho()

    seconds = timed(loop, repeat=repeat, warmup=1)
    return float(np.median(seconds) * 1e9 / n)


def _greeks_case(case: str, sizes: list[int], american: bool, repeat: int) -> list[Result]:
    ref_ns = _quantlib_ns(random_book(QL_SAMPLE), american, repeat)
    out: list[Result] = []
    for n in sizes:
        book = random_book(n)
        # A million American positions take tens of seconds per call: no untimed warm-up there.
        warmup = 0 if american and n >= 1_000_000 else 1
        def call(b: dict[str, np.ndarray] = book) -> None:
            price_greeks(**b, american=american)

        seconds = timed(call, repeat=repeat, warmup=warmup)
        res = result_from(case, n, seconds, target_ns=TARGET_NS[case],
                          note="price + 9 greeks" + (", BS2002, FD greeks" if american else ""))
        if ref_ns is not None:
            res = Result(**{**res.as_dict(),
                            "reference": "QuantLib loop" + (" (BS1993 engine)" if american
                                                            else ""),
                            "ratio": ref_ns / res.ns_per_position})
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
    """Engine cases: ``european`` and ``american`` at 10k, 100k, 1M (quick: 10k), IV at 100k."""
    sizes = [10_000] if quick else [10_000, 100_000, 1_000_000]
    repeat = 3 if quick else 7
    results = _greeks_case("european", sizes, american=False, repeat=repeat)
    results += _greeks_case("american", sizes, american=True, repeat=3)
    results.append(_iv_case(10_000 if quick else 100_000, repeat))
    return results
