"""Published worked examples, to the last printed digit (rows of /work/shared/REFERENCES.md).

Tolerance: half a unit in the last printed digit plus 1e-7. Each row names its source exactly as
REFERENCES.md does; rows recalled rather than read from the page say "from memory" there and here.
"""

from __future__ import annotations

from dataclasses import dataclass

import pytest

from blotter.engine import IV_OK, implied_vol, price_greeks

HAUG98_CH1 = ("E. G. Haug, The Complete Guide to Option Pricing Formulas, McGraw-Hill, 1st ed. "
              "1998, ch. 1")
HAUG98 = "E. G. Haug, The Complete Guide to Option Pricing Formulas, McGraw-Hill, 1st ed. 1998"
HULL = ("memory of J. C. Hull, Options, Futures, and Other Derivatives (9th ed. 2015 chapter "
        "numbering; the same examples appear one chapter earlier in the 8th ed.)")
HULL_SM = ("memory of J. C. Hull, Options, Futures, and Other Derivatives, end-of-chapter problem "
           "with the answer from the Solutions Manual")


@dataclass(frozen=True)
class Case:
    id: str
    is_call: bool
    spot: float
    strike: float
    years: float
    rate: float
    carry: float
    vol: float
    published: dict[str, str]    # quantity -> printed value (as printed, for its digit count)
    source: str
    american: bool = False


def tol(printed: str) -> float:
    """Half a unit in the last printed digit, plus 1e-7."""
    decimals = len(printed.split(".")[1]) if "." in printed else 0
    return 0.5 * 10.0 ** (-decimals) + 1e-7


CASES = [
    Case("haug98-bs73-call", True, 60.0, 65.0, 0.25, 0.08, 0.08, 0.3, {"price": "2.1334"},
         f"{HAUG98_CH1} p. 2 example (Black-Scholes 1973)"),
    Case("haug98-merton73-put", False, 100.0, 95.0, 0.5, 0.1, 0.1 - 0.05, 0.2, {"price": "2.4648"},
         f"{HAUG98_CH1} example (Merton 1973, continuous dividend yield)"),
    Case("haug98-black76-call", True, 19.0, 19.0, 0.75, 0.1, 0.0, 0.28, {"price": "1.7011"},
         f"{HAUG98_CH1} example (Black 1976, options on futures)"),
    Case("haug98-black76-put", False, 19.0, 19.0, 0.75, 0.1, 0.0, 0.28, {"price": "1.7011"},
         f"{HAUG98_CH1} example (Black 1976, options on futures)"),
    Case("haug98-gk-call", True, 1.56, 1.6, 0.5, 0.06, 0.06 - 0.08, 0.12, {"price": "0.0291"},
         f"{HAUG98_CH1} example (Garman-Kohlhagen 1983, currency options)"),
    Case("haug98-gbsm-put", False, 75.0, 70.0, 0.5, 0.1, 0.1 - 0.05, 0.35, {"price": "4.087"},
         f"{HAUG98_CH1} example (generalized BSM, b = 0.05)"),
    Case("haug98-delta-futures-call", True, 105.0, 100.0, 0.5, 0.1, 0.0, 0.36,
         {"delta": "0.5946"}, f"{HAUG98}, ch. 2 delta example (futures option)"),
    Case("haug98-delta-futures-put", False, 105.0, 100.0, 0.5, 0.1, 0.0, 0.36,
         {"delta": "-0.3566", "elasticity": "-4.8775"},
         f"{HAUG98}, ch. 2 delta and elasticity examples (futures option)"),
    Case("haug98-gamma-vega-call", True, 55.0, 60.0, 0.75, 0.1, 0.1, 0.3,
         {"gamma": "0.0278", "vega": "18.9358"}, f"{HAUG98}, ch. 2 gamma and vega examples"),
    Case("haug98-gamma-vega-put", False, 55.0, 60.0, 0.75, 0.1, 0.1, 0.3,
         {"gamma": "0.0278", "vega": "18.9358"}, f"{HAUG98}, ch. 2 gamma and vega examples"),
    Case("haug98-theta-put", False, 430.0, 405.0, 0.08333333333333333, 0.07, 0.07 - 0.05, 0.2,
         {"theta": "-31.1924", "theta_per_day": "-0.0855"},
         f"{HAUG98}, ch. 2 theta example (stock index put, one month)"),
    Case("haug98-rho-call", True, 72.0, 75.0, 1.0, 0.09, 0.09, 0.19, {"stock_rho": "38.7325"},
         f"{HAUG98}, ch. 2 rho example"),
    Case("haug98-carry-put", False, 500.0, 490.0, 0.25, 0.08, 0.08 - 0.05, 0.15,
         {"rho_q": "42.2254", "carry_rho": "-42.2254"},
         f"{HAUG98}, ch. 2 cost-of-carry sensitivity example"),
    Case("haug98-p27-european-call", True, 42.0, 40.0, 0.75, 0.04, 0.04 - 0.08, 0.35,
         {"price": "5.0975"},
         f"{HAUG98}, ch. 3 p. 27 (European value quoted beside the Bjerksund-Stensland example)"),
    Case("haug07-vanna-call", True, 90.0, 80.0, 0.25, 0.05, 0.05, 0.2, {"vanna": "-1.0008"},
         "memory of E. G. Haug, The Complete Guide to Option Pricing Formulas, McGraw-Hill, 2nd "
         "ed. 2007, ch. 2 DdeltaDvol (vanna) example — from memory"),
    Case("hull-bsm-42-40", True, 42.0, 40.0, 0.5, 0.1, 0.1, 0.2, {"price": "4.76"},
         f"{HULL}, Ch. 15 (Black-Scholes-Merton model), Example 15.6 — from memory"),
    Case("hull-bsm-42-40-put", False, 42.0, 40.0, 0.5, 0.1, 0.1, 0.2, {"price": "0.81"},
         f"{HULL}, Ch. 15, Example 15.6 — from memory"),
    Case("hull-greeks-49-50", True, 49.0, 50.0, 0.38461538461538464, 0.05, 0.05, 0.2,
         {"price": "2.4", "delta": "0.522", "gamma": "0.066", "theta": "-4.31",
          "theta_per_day": "-0.0118", "theta_per_trading_day": "-0.0171", "vega": "12.1",
          "vega_per_vol_point": "0.121", "stock_rho": "8.91", "rho_per_point": "0.0891"},
         f"{HULL}, Ch. 19 (The Greek Letters), running example: 100,000 calls, S0=49, K=50, "
         "r=5%, sigma=20%, 20 weeks — from memory"),
    Case("hull-index-call-930", True, 930.0, 900.0, 0.16666666666666666, 0.08, 0.08 - 0.03, 0.2,
         {"price": "51.83"},
         f"{HULL}, Ch. 17 (Options on stock indices and currencies), index example — from memory"),
    Case("hull-futures-put-20", False, 20.0, 20.0, 0.3333333333333333, 0.09, 0.0, 0.25,
         {"price": "1.12"},
         f"{HULL}, Ch. 18 (Futures options), Black's model example — from memory"),
    Case("hull-sm-call-52-50", True, 52.0, 50.0, 0.25, 0.12, 0.12, 0.3, {"price": "5.06"},
         f"{HULL_SM} (Ch. 15: S=52, K=50, r=12%, sigma=30%, 3 months) — from memory"),
    Case("hull-sm-put-69-70", False, 69.0, 70.0, 0.5, 0.05, 0.05, 0.35, {"price": "6.4"},
         f"{HULL_SM} (Ch. 15: S=69, K=70, r=5%, sigma=35%, 6 months) — from memory"),
    Case("hull-sm-index-call-250", True, 250.0, 250.0, 0.25, 0.1, 0.1 - 0.03, 0.18,
         {"price": "11.15"},
         f"{HULL_SM} (Ch. 17: ATM 3-month index call, r=10%, q=3%, sigma=18%) — from memory"),
    Case("hull-sm-fx-put", False, 0.52, 0.5, 0.6666666666666666, 0.04, 0.04 - 0.08, 0.12,
         {"price": "0.0162"},
         f"{HULL_SM} (Ch. 17: 8-month currency put, S=0.52, K=0.50) — from memory"),
    Case("hull-sm-futures-put", False, 19.0, 20.0, 0.4166666666666667, 0.12, 0.0, 0.2,
         {"price": "1.5"}, f"{HULL_SM} (Ch. 18: 5-month futures put, F=19, K=20) — from memory"),
    Case("hull-american-put-euro-tree-5", False, 50.0, 50.0, 0.4166666666666667, 0.1, 0.1, 0.4,
         {"price": "4.08"},
         f"{HULL}, Ch. 21, control-variate discussion of Example 21.1 — from memory "
         "(its BSM European put price)"),
    Case("analytic-atmf-zero-rates-call", True, 100.0, 100.0, 1.0, 0.0, 0.0, 0.2,
         {"price": "7.9655674554", "delta": "0.5398278373"},
         "analytic identity: with r = q = 0 and S = K, c = p = S (2 N(sigma sqrt(T)/2) - 1)"),
    Case("analytic-atmf-zero-rates-put", False, 100.0, 100.0, 1.0, 0.0, 0.0, 0.2,
         {"price": "7.9655674554", "delta": "-0.4601721627"},
         "analytic identity: with r = q = 0 and S = K, c = p = S (2 N(sigma sqrt(T)/2) - 1)"),
    Case("analytic-low-vol-call", True, 100.0, 90.0, 1.0, 0.05, 0.05 - 0.02, 0.001,
         {"price": "12.4092191256", "delta": "0.9801986733", "gamma": "0.0"},
         "analytic limit sigma -> 0 (ITM forward): c = S e^{-qT} - K e^{-rT}, delta = e^{-qT}"),
    Case("analytic-low-vol-put-otm", False, 100.0, 90.0, 1.0, 0.05, 0.05 - 0.02, 0.001,
         {"price": "0.0", "delta": "0.0"},
         "analytic limit sigma -> 0 (OTM forward): p = 0"),
    Case("analytic-deep-itm-put", False, 10.0, 100.0, 0.5, 0.03, 0.03 - 0.01, 0.3,
         {"price": "88.5610691684", "delta": "-0.9950124792"},
         "analytic limit (deep ITM European put): p = K e^{-rT} - S e^{-qT}, delta = -e^{-qT}"),
    Case("analytic-deep-otm-call", True, 100.0, 1000.0, 0.25, 0.05, 0.05, 0.2,
         {"price": "0.0", "delta": "0.0"}, "analytic limit (deep OTM call): c ~ 0"),
    Case("analytic-american-call-no-dividend", True, 100.0, 100.0, 1.0, 0.05, 0.05, 0.2,
         {"price": "10.4506"},
         "analytic (Merton 1973): an American call with b >= r (no dividend) is never exercised "
         "early, so it equals the European value", american=True),
    Case("analytic-american-put-deep-itm", False, 60.0, 100.0, 1.0, 0.08, 0.08, 0.2,
         {"price": "40.0"},
         "analytic: deep inside the exercise region an American put is worth its intrinsic value",
         american=True),
]

def _quantity(case: Case, name: str) -> float:
    g = price_greeks(case.is_call, case.spot, case.strike, case.years, case.rate, case.carry,
                     case.vol, american=case.american)
    direct = {"price", "delta", "gamma", "vega", "theta", "rho", "carry_rho", "vanna", "volga",
              "charm"}
    if name in direct:
        return float(getattr(g, name))
    derived = {
        "theta_per_day": lambda: g.theta / 365.0,
        "theta_per_trading_day": lambda: g.theta / 252.0,
        "vega_per_vol_point": lambda: g.vega * 0.01,
        "elasticity": lambda: g.delta * case.spot / g.price,
        # A stock option's rho with S and q fixed moves b with r: rho + carry_rho.
        "stock_rho": lambda: g.rho + g.carry_rho,
        "rho_per_point": lambda: (g.rho + g.carry_rho) * 0.01,
        "rho_q": lambda: -g.carry_rho,
    }
    return float(derived[name]())


@pytest.mark.parametrize(
    ("case", "name"), [(c, q) for c in CASES for q in c.published],
    ids=lambda x: getattr(x, "id", x),
)
def test_published_value(case: Case, name: str) -> None:
    """Source: ``case.source`` (named beside each case above)."""
    printed = case.published[name]
    got = _quantity(case, name)
    assert abs(got - float(printed)) <= tol(printed), (case.id, case.source, name, got, printed)


@pytest.mark.parametrize(
    ("case_id", "call_price", "spot", "strike", "years", "rate", "printed", "source"),
    [
        ("hull-iv-1.875", 1.875, 21.0, 20.0, 0.25, 0.1, "0.235",
         f"{HULL}, Ch. 15 section on implied volatilities — from memory"),
        ("hull-sm-iv-2.5", 2.5, 15.0, 13.0, 0.25, 0.05, "0.396",
         f"{HULL_SM} (Ch. 15: call price 2.5, S=15, K=13, 3 months, r=5%) — from memory"),
    ],
)
def test_published_implied_vol(case_id: str, call_price: float, spot: float, strike: float,
                               years: float, rate: float, printed: str, source: str) -> None:
    """Source: named in the parameter row (Hull, from memory)."""
    iv = implied_vol(call_price, True, spot, strike, years, rate, rate)
    assert int(iv.status) == IV_OK
    assert abs(float(iv.vol) - float(printed)) <= tol(printed), (case_id, source, float(iv.vol))
