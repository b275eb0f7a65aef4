"""The one Taylor expansion: its terms, their orders, and its exactness where Taylor's theorem
says it must be exact.

Source: Taylor's theorem (any calculus text). The second-order expansion of a function that is a
polynomial of degree two in spot and vol, and linear in time, rate and carry, is the function's
change itself; the sensitivities below are that polynomial's derivatives, worked by hand.
"""

from __future__ import annotations

import numpy as np
import pytest

from blotter.scenario.taylor import (
    EXPLAIN_TERMS,
    FIRST_ORDER,
    SECOND_ORDER,
    TERM_NAMES,
    Sensitivities,
    first_order,
    second_order,
    taylor_terms,
)

COEF = {"a": 0.6, "g": 0.03, "v": 12.0, "w": -40.0, "x": 0.8, "th": -5.0, "rh": 7.0, "c": -3.0}
"""f(S, σ, t, r, b) = a·S + ½g·S² + v·σ + ½w·σ² + x·S·σ + th·t + rh·r + c·b (invented)."""


def _f(s: float, vol: float, t: float, r: float, b: float) -> float:
    k = COEF
    return (
        k["a"] * s + 0.5 * k["g"] * s * s + k["v"] * vol + 0.5 * k["w"] * vol * vol
        + k["x"] * s * vol + k["th"] * t + k["rh"] * r + k["c"] * b
    )


def _sens_at(s: float, vol: float) -> Sensitivities:
    """The polynomial's derivatives at (s, vol), as one-element arrays."""
    k = COEF

    def one(x: float) -> np.ndarray:
        return np.array([x])

    return Sensitivities(
        delta=one(k["a"] + k["g"] * s + k["x"] * vol),
        gamma=one(k["g"]),
        vega=one(k["v"] + k["w"] * vol + k["x"] * s),
        volga=one(k["w"]),
        vanna=one(k["x"]),
        theta=one(k["th"]),
        rho=one(k["rh"]),
        carry=one(k["c"]),
    )


@pytest.mark.parametrize(
    ("ds", "dvol", "dt", "dr", "db"),
    [(3.0, 0.02, 1 / 365, 0.0025, -0.01), (-40.0, -0.1, 0.5, -0.01, 0.0), (0.0, 0.0, 0.0, 0, 0)],
)
def test_second_order_is_exact_for_a_quadratic(
    ds: float, dvol: float, dt: float, dr: float, db: float
) -> None:
    s0, v0 = 100.0, 0.25
    terms = taylor_terms(_sens_at(s0, v0), ds, dvol, dt, dr, db)
    assert tuple(terms) == EXPLAIN_TERMS
    change = _f(s0 + ds, v0 + dvol, dt, dr, db) - _f(s0, v0, 0.0, 0.0, 0.0)
    assert float(second_order(terms)[0]) == pytest.approx(change, rel=1e-12, abs=1e-12)
    linear = _sens_at(s0, v0)
    expected_first = (
        linear.delta * ds + linear.vega * dvol + linear.theta * dt + linear.rho * dr
        + linear.carry * db
    )
    assert first_order(terms) == pytest.approx(expected_first, rel=1e-12, abs=1e-12)


def test_without_a_carry_change_there_is_no_carry_term() -> None:
    terms = taylor_terms(_sens_at(100.0, 0.25), 1.0, 0.01, 0.0, 0.0)
    assert tuple(terms) == TERM_NAMES


def test_the_orders_split_the_terms() -> None:
    assert set(FIRST_ORDER).isdisjoint(SECOND_ORDER)
    assert set(FIRST_ORDER) | set(SECOND_ORDER) == set(EXPLAIN_TERMS)
    assert [t for t in EXPLAIN_TERMS if t in FIRST_ORDER] == list(FIRST_ORDER)


def test_terms_of_a_group_are_the_sum_of_its_positions_terms() -> None:
    """Linear in the sensitivities: a group sharing one move gets the sum of its rows' terms."""
    rng = np.random.default_rng(7)
    sens = Sensitivities(**{f: rng.normal(size=6) for f in Sensitivities.__dataclass_fields__})
    codes = np.array([0, 1, 0, 2, 1, 0])
    ds, dvol = np.array([1.5, -2.0, 0.7]), np.array([0.01, 0.0, -0.03])
    per_row = taylor_terms(sens, ds[codes], dvol[codes], 0.01, 0.002, 0.001)
    per_group = taylor_terms(sens.per_group(codes, 3), ds, dvol, 0.01, 0.002, 0.001)
    for name in EXPLAIN_TERMS:
        summed = np.bincount(codes, weights=per_row[name], minlength=3)
        assert per_group[name] == pytest.approx(summed, rel=1e-12, abs=1e-12)
