"""Prices on a tick: rounding to the tick, the decimals a tick is written with."""

from __future__ import annotations

import math

import pytest

from blotter.ticks import on_tick, tick_decimals


@pytest.mark.parametrize(
    ("price", "tick", "expected"),
    [
        (180.271, 0.01, 180.27),
        (100.065001, 0.01, 100.07),
        (4312.4, 0.25, 4312.5),
        (4312.3, 0.25, 4312.25),
        (1.0842649, 0.00001, 1.08426),
        (17.4, 5.0, 15.0),
        (0.001, 0.01, 0.01),  # never below one tick: a quote of zero is no price
    ],
)
def test_a_price_rounds_to_the_nearest_tick(price: float, tick: float, expected: float) -> None:
    got = on_tick(price, tick)
    assert got == expected
    # the float is written to the tick's decimals, with no binary residue
    assert len(repr(got).split(".")[-1]) <= max(1, tick_decimals(tick))


@pytest.mark.parametrize("tick", [0.0, -0.01, math.nan])
def test_a_tick_that_is_no_positive_number_is_refused(tick: float) -> None:
    with pytest.raises(ValueError, match="positive"):
        on_tick(100.0, tick)
