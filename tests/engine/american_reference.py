"""Converged American reference (QuantLib's QdFpAmericanEngine, high-precision scheme) and the
regions in which blotter/engine/ACCURACY.md reports the Bjerksund–Stensland (2002) error.

``python -m tests.engine.american_reference [n_per_region]`` prints the accuracy table.
"""

from __future__ import annotations

import sys

import numpy as np

REGIONS: dict[str, dict[str, tuple[float, float]]] = {
    # name: ranges (uniform) of put moneyness S/K, call moneyness S/K, T, r, q, sigma
    "near the money, T 0.05–1": {"put_m": (0.9, 1.1), "call_m": (0.9, 1.1), "t": (0.05, 1.0),
                                 "r": (0.01, 0.10), "q": (0.01, 0.08), "v": (0.1, 0.5)},
    "long-dated, T 2–10": {"put_m": (0.8, 1.25), "call_m": (0.8, 1.25), "t": (2.0, 10.0),
                           "r": (0.01, 0.10), "q": (0.01, 0.08), "v": (0.1, 0.5)},
    "deep in the money": {"put_m": (0.5, 0.8), "call_m": (1.25, 2.0), "t": (0.1, 3.0),
                          "r": (0.01, 0.10), "q": (0.01, 0.08), "v": (0.1, 0.5)},
    "out of the money": {"put_m": (1.1, 1.5), "call_m": (0.67, 0.9), "t": (0.1, 3.0),
                         "r": (0.01, 0.10), "q": (0.01, 0.08), "v": (0.1, 0.5)},
    "near-zero carry, b within ±0.5%": {"put_m": (0.8, 1.25), "call_m": (0.8, 1.25),
                                     "t": (0.1, 3.0), "r": (0.02, 0.10), "q": (-1.0, -1.0),
                                     "v": (0.1, 0.5)},
    "high vol, 60–150%": {"put_m": (0.7, 1.4), "call_m": (0.7, 1.4), "t": (0.1, 2.0),
                          "r": (0.01, 0.10), "q": (0.01, 0.08), "v": (0.6, 1.5)},
}
"""Regions of the accuracy study; q = (−1, −1) means carry b uniform in ±0.5% (q = r − b)."""


def region_cases(region: str, n: int, seed: int) -> dict[str, np.ndarray]:
    """``n`` random American options of ``region``, half puts and half calls, K = 100."""
    spec = REGIONS[region]
    rng = np.random.default_rng(seed)
    is_call = np.arange(n) % 2 == 1
    u = lambda lo_hi: rng.uniform(*lo_hi, n)  # noqa: E731
    moneyness = np.where(is_call, u(spec["call_m"]), u(spec["put_m"]))
    days = np.maximum(1, np.round(u(spec["t"]) * 365.0)).astype(int)
    rate = u(spec["r"])
    if spec["q"] == (-1.0, -1.0):
        carry = rng.uniform(-0.005, 0.005, n)
    else:
        carry = rate - u(spec["q"])
    return {"is_call": is_call, "spot": 100.0 * moneyness, "strike": np.full(n, 100.0),
            "days": days, "years": days / 365.0, "rate": rate, "carry": carry,
            "vol": u(spec["v"])}


def qdfp_prices(c: dict[str, np.ndarray]) -> np.ndarray:
    """QuantLib 1.44 QdFpAmericanEngine (high-precision scheme) prices of the cases ``c``."""
    import QuantLib as ql

    today = ql.Date(15, ql.January, 2026)
    ql.Settings.instance().evaluationDate = today
    dc = ql.Actual365Fixed()
    s_q, r_q, q_q, v_q = (ql.SimpleQuote(0.0) for _ in range(4))
    process = ql.BlackScholesMertonProcess(
        ql.QuoteHandle(s_q),
        ql.YieldTermStructureHandle(ql.FlatForward(today, ql.QuoteHandle(q_q), dc)),
        ql.YieldTermStructureHandle(ql.FlatForward(today, ql.QuoteHandle(r_q), dc)),
        ql.BlackVolTermStructureHandle(
            ql.BlackConstantVol(today, ql.NullCalendar(), ql.QuoteHandle(v_q), dc)))
    engine = ql.QdFpAmericanEngine(process, ql.QdFpAmericanEngine.highPrecisionScheme())
    out = np.empty(c["spot"].size)
    for i in range(out.size):
        kind = ql.Option.Call if c["is_call"][i] else ql.Option.Put
        option = ql.VanillaOption(ql.PlainVanillaPayoff(kind, float(c["strike"][i])),
                                  ql.AmericanExercise(today, today + int(c["days"][i])))
        option.setPricingEngine(engine)
        s_q.setValue(float(c["spot"][i]))
        r_q.setValue(float(c["rate"][i]))
        q_q.setValue(float(c["rate"][i] - c["carry"][i]))
        v_q.setValue(float(c["vol"][i]))
        out[i] = option.NPV()
    return out


def errors(c: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """BS2002 minus QdFp, in currency (K = 100) and relative to the QdFp price."""
    from blotter.engine import price

    ours = price(c["is_call"], c["spot"], c["strike"], c["years"], c["rate"], c["carry"],
                 c["vol"], american=True)
    euro = price(c["is_call"], c["spot"], c["strike"], c["years"], c["rate"], c["carry"],
                 c["vol"])
    ref = qdfp_prices(c)
    return {"ours": ours, "ref": ref, "euro": euro, "abs": ours - ref,
            "rel": (ours - ref) / np.maximum(ref, 1e-12)}


def main(n: int) -> None:
    print("| region | cases | max abs error (K = 100) | median abs error | max rel error "
          "| share of early-exercise premium missed (median) |")
    print("| --- | --- | --- | --- | --- | --- |")
    for j, region in enumerate(REGIONS):
        c = region_cases(region, n, seed=1000 + j)
        e = errors(c)
        premium = e["ref"] - e["euro"]
        has = premium > 1e-4
        missed = np.median(-e["abs"][has] / premium[has]) if has.any() else 0.0
        print(f"| {region} | {n} | {np.max(np.abs(e['abs'])):.2e} | "
              f"{np.median(np.abs(e['abs'])):.1e} | {np.max(np.abs(e['rel'])):.2e} | "
              f"{missed:.1%} |")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 400)
