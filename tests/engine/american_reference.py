"""Converged American references and the accuracy study behind blotter/engine/ACCURACY.md.

Prices: QuantLib 1.44 ``QdFpAmericanEngine`` with its high-precision scheme (test-only).
Greeks: Richardson-extrapolated central differences of a much finer run of the engine's own
method (``american.FINE``: the gap on 64 Chebyshev intervals in (u/τ)^(1/3), 32 Gauss–Legendre
points per half of each boundary integral, a finer price rule; vanna and charm: differences of
that run's delta), whose prices are checked against QuantLib beside them.

``python -m tests.engine.american_reference [n_per_region]`` prints the accuracy table: price
error against QuantLib as a share of the strike, and per greek the largest error measure of
``greek_errors`` with, in brackets, the rows left out because a reference difference would
cross the exercise boundary or a change of regime. A second table (``shared_errors``) measures
what the table's lone rows do not: rows of a listed book sharing boundaries, interpolated
between vol nodes, against each row valued alone.
"""

from __future__ import annotations

import sys

import numpy as np

from blotter.engine import american

REGIONS: dict[str, dict[str, tuple[float, float]]] = {
    # name: ranges (uniform) of moneyness S/K, days, r, q, sigma
    "near the money, 1 day–3 months": {"m": (0.9, 1.1), "days": (1, 91), "r": (-0.01, 0.08),
                                       "q": (0.0, 0.06), "v": (0.05, 0.8)},
    "near the money, 3 months–3 years": {"m": (0.9, 1.1), "days": (91, 1095),
                                         "r": (-0.01, 0.08), "q": (0.0, 0.06), "v": (0.05, 0.8)},
    "in the money (puts S/K 0.7–0.9, calls 1.1–1.3)": {"m": (-1.0, -1.0), "days": (1, 1095),
                                                       "r": (-0.01, 0.08), "q": (0.0, 0.06),
                                                       "v": (0.05, 0.8)},
    "out of the money (puts S/K 1.1–1.3, calls 0.7–0.9)": {"m": (-2.0, -2.0),
                                                           "days": (1, 1095),
                                                           "r": (-0.01, 0.08),
                                                           "q": (0.0, 0.06), "v": (0.05, 0.8)},
    "low vol 5–10%, long-dated 1–3 years": {"m": (0.7, 1.3), "days": (365, 1095),
                                            "r": (0.0, 0.08), "q": (0.0, 0.06),
                                            "v": (0.05, 0.1)},
}
"""Regions of the study over the grid (calls and puts, q 0–6%, r −1–8%, 1 day–3 years, S/K
0.7–1.3, σ 5–80%); m = (−1, −1) is in the money and (−2, −2) out of the money by type."""

GREEKS = ("delta", "gamma", "vega", "theta", "rho", "carry_rho", "vanna", "volga", "charm")


def region_cases(region: str, n: int, seed: int) -> dict[str, np.ndarray]:
    """``n`` options of ``region``, half puts and half calls, K = 100, whole days."""
    spec = REGIONS[region]
    rng = np.random.default_rng(seed)
    is_call = np.arange(n) % 2 == 1
    if spec["m"] == (-1.0, -1.0):
        m = np.where(is_call, rng.uniform(1.1, 1.3, n), rng.uniform(0.7, 0.9, n))
    elif spec["m"] == (-2.0, -2.0):
        m = np.where(is_call, rng.uniform(0.7, 0.9, n), rng.uniform(1.1, 1.3, n))
    else:
        m = rng.uniform(*spec["m"], n)
    days = rng.integers(int(spec["days"][0]), int(spec["days"][1]) + 1, n)
    rate = rng.uniform(*spec["r"], n)
    div = rng.uniform(*spec["q"], n)
    return {"is_call": is_call, "spot": 100.0 * m, "strike": np.full(n, 100.0), "days": days,
            "years": days / 365.0, "rate": rate, "carry": rate - div,
            "vol": rng.uniform(*spec["v"], n)}


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


def _evaluate(c: dict[str, np.ndarray], greeks: bool,
              scheme: american.Scheme = american.DEFAULT) -> list[np.ndarray]:
    """Engine outputs; rows whose boundary did not converge are NaN (a reference run must not
    compare against the European fallback)."""
    w = np.where(c["is_call"], 1.0, -1.0)
    outs, status = american.evaluate(w, *(np.asarray(c[k], dtype=np.float64) for k in
                                          ("spot", "strike", "years", "rate", "carry", "vol")),
                                     greeks, scheme=scheme)
    bad = status == american.NOT_CONVERGED
    for o in outs:
        o[bad] = np.nan
    return outs


STEPS = {"spot": 2e-3, "vol": 4e-3, "rate": 1e-3, "carry": 1e-3, "years": 1e-3}
"""Largest central-difference steps of the reference greeks (relative for spot and years),
halved once for Richardson extrapolation. Spot steps shrink to a quarter of the distance to the
exercise boundary so that no difference straddles it; vol steps to 5% of the vol; rate and
carry steps to 5% of the smaller of |r_p| and |q_p − r_p| in put form (X = r_p/q_p makes the
price vary on that scale where 0 < r_p < q_p), and no lower than 1e-6."""


def reference_greeks(c: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """Greeks of the cases ``c`` by Richardson-extrapolated central differences of
    ``american.FINE`` prices (vanna and charm: of its delta, itself checked against differences
    of its prices, because four-point mixed differences of prices carry ~1e-3 of error and
    their corners cross the boundary where single bumps do not); NaN where a difference
    would cross the exercise boundary or a change of the method's regime (a kink in the
    price or in its representation, where a difference is not the derivative)."""
    def p(**bump: np.ndarray) -> np.ndarray:
        return _evaluate({**c, **bump}, False, american.FINE)[0]

    def dlt(**bump: np.ndarray) -> np.ndarray:
        return _evaluate({**c, **bump}, True, american.FINE)[1]

    s, v, t, r, b = (c[k] for k in ("spot", "vol", "years", "rate", "carry"))
    base = p()
    hs = STEPS["spot"] * s
    intrinsic = np.maximum(np.where(c["is_call"], s - c["strike"], c["strike"] - s), 0.0)
    near = base - intrinsic < 1e-3 * c["strike"]
    hs = np.where(near, 0.25 * hs, hs)

    def rich(f: object, h: np.ndarray | float) -> np.ndarray:
        fn = f  # type: ignore[assignment]
        out: np.ndarray = (4.0 * fn(np.asarray(h) / 2.0) - fn(np.asarray(h))) / 3.0  # type: ignore[operator]
        return out

    ht = STEPS["years"] * t
    hv = np.minimum(STEPS["vol"], 0.05 * v)
    r_p = np.where(c["is_call"], r - b, r)
    q_p = np.where(c["is_call"], r, r - b)
    scale = np.minimum(np.abs(r_p), np.abs(q_p - r_p))
    hr = np.clip(0.05 * scale, 1e-6, STEPS["rate"])
    # A difference is valid only if every bumped point is in the base point's regime: same
    # American status, same side of q = r (where X = min(1, r/q) changes form) and on the
    # same side of the exercise boundary.
    def regime(**bump: np.ndarray) -> np.ndarray:
        d = {**c, **bump}
        w = np.where(d["is_call"], 1.0, -1.0)
        r_p = np.where(d["is_call"], d["rate"] - d["carry"], d["rate"])
        q_p = np.where(d["is_call"], d["rate"], d["rate"] - d["carry"])
        px = p(**bump)
        intr = np.maximum(w * (d["spot"] - d["strike"]), 0.0)
        ex = px - intr <= 1e-12 * d["strike"]
        out: np.ndarray = (american.status_of(r_p, q_p) * 4 + (q_p > r_p) * 2 + ex).astype(int)
        return out

    here = regime()
    moves = {"spot": [{"spot": s + hs}, {"spot": s - hs}],
             "vol": [{"vol": v + hv}, {"vol": v - hv}],
             "years": [{"years": t + ht}, {"years": t - ht}],
             "rate": [{"rate": r + hr}, {"rate": r - hr}],
             "carry": [{"carry": b + hr}, {"carry": b - hr}]}
    same = {k: np.all([regime(**m) == here for m in ms], axis=0) for k, ms in moves.items()}
    uses = {"delta": ("spot",), "gamma": ("spot",), "vega": ("vol",), "volga": ("vol",),
            "theta": ("years",), "rho": ("rate",), "carry_rho": ("carry",),
            "vanna": ("spot", "vol"), "charm": ("spot", "years")}
    ref = {
        "delta": rich(lambda h: (p(spot=s + h) - p(spot=s - h)) / (2 * h), hs),
        "gamma": rich(lambda h: (p(spot=s + h) - 2 * base + p(spot=s - h)) / h**2, hs),
        "vega": rich(lambda h: (p(vol=v + h) - p(vol=v - h)) / (2 * h), hv),
        "volga": rich(lambda h: (p(vol=v + h) - 2 * base + p(vol=v - h)) / h**2, hv),
        "theta": rich(lambda h: -(p(years=t + h) - p(years=t - h)) / (2 * h), ht),
        "rho": rich(lambda h: (p(rate=r + h) - p(rate=r - h)) / (2 * h), hr),
        "carry_rho": rich(lambda h: (p(carry=b + h) - p(carry=b - h)) / (2 * h), hr),
        "vanna": rich(lambda h: (dlt(vol=v + h) - dlt(vol=v - h)) / (2 * h), hv),
        "charm": rich(lambda h: -(dlt(years=t + h) - dlt(years=t - h)) / (2 * h), ht),
        "price": base,
    }
    for g, fields in uses.items():
        ok = np.all([same[f] for f in fields], axis=0)
        ref[g] = np.where(ok, ref[g], np.nan)
    return ref


def greek_errors(c: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """Per greek, |engine − reference| / (|reference| + scale): a value at most 1e-4 meets
    "1e-4 relative or 1e-6 absolute per unit of underlying" (scale = 1e-2 × the greek's unit:
    1e-2 K for price-like greeks, 1e-2 for delta, vanna and charm, 1e-2 / K for gamma)."""
    ours = _evaluate(c, True)
    ref = reference_greeks(c)
    k = c["strike"]
    unit = {"delta": 1.0, "gamma": 1.0 / k, "vega": k, "theta": k, "rho": k, "carry_rho": k,
            "vanna": 1.0, "volga": k, "charm": 1.0}
    names = ("price", "delta", "gamma", "vega", "theta", "rho", "carry_rho", "vanna", "volga",
             "charm")
    got = dict(zip(names, ours, strict=True))
    return {g: np.abs(got[g] - ref[g]) / (np.abs(ref[g]) + 1e-2 * unit[g]) for g in GREEKS}


SHARED_BOOKS = (3, 4, 6)
"""Seeds of the listed books (``blotter.benchmarks.engine.listed_book``: 50 names, 15 expiries,
strikes around the money with a smile) of the shared-boundary table."""


def shared_errors(n: int, seed: int) -> dict[str, float]:
    """Largest error measure per output (price: as a share of the strike; greeks as in
    ``greek_errors``, against the row's own value) of the rows of an ``n``-row listed book
    valued together (boundaries shared by each (τ, r, q) and interpolated in vol) against each
    row valued alone (a boundary of its own, solved at the row's vol)."""
    from blotter.benchmarks.engine import listed_book

    c = listed_book(n, seed=seed)
    w = np.where(c["is_call"], 1.0, -1.0)
    s, k, t, r, b, v = (np.asarray(c[x], dtype=np.float64) for x in
                        ("spot", "strike", "years", "rate", "carry", "vol"))
    together, status = american.evaluate(w, s, k, t, r, b, v, True)
    alone = [np.empty(n) for _ in together]
    for i in range(n):
        j = slice(i, i + 1)
        one, _ = american.evaluate(w[j], s[j], k[j], t[j], r[j], b[j], v[j], True)
        for o, x in zip(alone, one, strict=True):
            o[i] = x[0]
    unit: dict[str, np.ndarray | float] = {
        "price": k, "delta": 1.0, "gamma": 1.0 / k, "vega": k, "theta": k, "rho": k,
        "carry_rho": k, "vanna": 1.0, "volga": k, "charm": 1.0}
    keep = status == american.EXERCISE_BOUNDARY
    out: dict[str, float] = {}
    for name, got, ref in zip(("price",) + GREEKS, together, alone, strict=True):
        scale = k if name == "price" else np.abs(ref) + 1e-2 * unit[name]
        out[name] = float(np.max((np.abs(got - ref) / scale)[keep]))
    return out


def main(n: int) -> None:
    print("| region | cases | price: max abs error / K | median abs error / K | "
          + " | ".join(GREEKS) + " |")
    print("| --- | --- | --- | --- | " + " | ".join("---" for _ in GREEKS) + " |")
    for j, region in enumerate(REGIONS):
        c = region_cases(region, n, seed=1000 + j)
        ours = _evaluate(c, False)[0]
        err = np.abs(ours - qdfp_prices(c)) / c["strike"]
        ge = greek_errors(c)
        cells = " | ".join(f"{np.nanmax(ge[g]):.1e} ({int(np.sum(np.isnan(ge[g])))})"
                           for g in GREEKS)
        print(f"| {region} | {n} | {np.max(err):.1e} | {np.median(err):.1e} | {cells} |")
    print()
    print("| listed book (seed) | rows | price / K | " + " | ".join(GREEKS) + " |")
    print("| --- | --- | --- | " + " | ".join("---" for _ in GREEKS) + " |")
    for seed in SHARED_BOOKS:
        e = shared_errors(10 * n, seed)
        print(f"| {seed} | {10 * n} | {e['price']:.1e} | "
              + " | ".join(f"{e[g]:.1e}" for g in GREEKS) + " |")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 200)
