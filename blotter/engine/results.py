"""Result containers of the engine: ``Greeks`` and ``ImpliedVol``, frozen, of float64 arrays."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

IV_OK = 0
"""The implied vol was found and reprices the option."""
IV_BELOW_INTRINSIC = 1
"""The price is below the no-arbitrage lower bound (intrinsic or discounted forward intrinsic)."""
IV_ABOVE_UPPER_BOUND = 2
"""The price is at or above the no-arbitrage upper bound (e.g. a call worth more than its spot)."""
IV_NO_TIME_VALUE = 3
"""The option has expired or its price equals its lower bound, so no vol is implied."""
IV_NOT_CONVERGED = 4
"""The search did not reach the price within its iteration or vol limits."""

IV_STATUS: dict[int, str] = {
    IV_OK: "ok",
    IV_BELOW_INTRINSIC: "below intrinsic",
    IV_ABOVE_UPPER_BOUND: "above upper bound",
    IV_NO_TIME_VALUE: "no time value",
    IV_NOT_CONVERGED: "did not converge",
}
"""Name of each implied-vol status code, for messages that say why a mark was refused."""


@dataclass(frozen=True, eq=False)
class Greeks:
    """Value and sensitivities per one unit of underlying, each of the broadcast input shape.

    price in currency per unit; delta per unit of spot; gamma per unit of spot squared; vega and
    volga per 1.00 of vol (divide by 100 for one vol point); theta = dV/dt per year of calendar
    time (negative for a long option that decays); rho = dV/dr per 1.00 of rate with the carry b
    held fixed; carry_rho = dV/db per 1.00 of carry; vanna = d(delta)/d(vol) per 1.00 of vol;
    charm = d(delta)/dt per year of calendar time.
    """

    price: np.ndarray
    delta: np.ndarray
    gamma: np.ndarray
    vega: np.ndarray
    theta: np.ndarray
    rho: np.ndarray
    carry_rho: np.ndarray
    vanna: np.ndarray
    volga: np.ndarray
    charm: np.ndarray


GREEK_NAMES: tuple[str, ...] = (
    "price", "delta", "gamma", "vega", "theta", "rho", "carry_rho", "vanna", "volga", "charm",
)
"""Field order of ``Greeks``; the kernels fill output buffers in this order."""


@dataclass(frozen=True, eq=False)
class ImpliedVol:
    """Implied vols (annualised decimal, NaN where refused) and a status code per element.

    ``status`` holds one of the ``IV_*`` codes; ``IV_STATUS`` names them.
    """

    vol: np.ndarray
    status: np.ndarray
