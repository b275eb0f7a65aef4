"""The greeks' Taylor estimate: the one expansion and the one list of its terms.

What-if, ladder and explain all call ``taylor_terms`` (per position, or on ``Sensitivities``
summed over positions that share a move), and every layer that shows the terms takes their
names and orders from here.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    import numpy as np

    from blotter.risk import BookValuation

TERM_NAMES = ("delta", "gamma", "vega", "volga", "vanna", "theta", "rho")
"""The what-if's Taylor terms, in the order they are shown."""

EXPLAIN_TERMS = (*TERM_NAMES, "carry")
"""Explain's terms: the what-if's, and ``carry`` for a change of the cost of carry b that the rate
does not account for (a dividend yield mark, a foreign rate)."""

SECOND_ORDER = ("gamma", "volga", "vanna")
"""Terms the second-order estimate adds to the first order."""

FIRST_ORDER = tuple(t for t in EXPLAIN_TERMS if t not in SECOND_ORDER)
"""Terms of the first-order estimate, in the order they are summed (``carry`` in explain only)."""


@dataclass(frozen=True, eq=False)
class Sensitivities:
    """Greeks × units of positions or groups, any shapes that broadcast with the moves.

    Currency per unit of each move: ``delta`` per 1 of spot, ``gamma`` per (1 of spot)²,
    ``vega`` per 1.00 of vol, ``volga`` per (1.00 of vol)², ``vanna`` per (1 of spot × 1.00 of
    vol), ``theta`` per year, ``rho`` per 1.00 of rate (desk rho: with the carry where it moves
    with the rate), ``carry`` per 1.00 of carry b beyond the rate's share (engine carry rho).
    """

    delta: np.ndarray
    gamma: np.ndarray
    vega: np.ndarray
    volga: np.ndarray
    vanna: np.ndarray
    theta: np.ndarray
    rho: np.ndarray
    carry: np.ndarray

    @classmethod
    def of(cls, valuation: BookValuation) -> Sensitivities:
        """Per-position sensitivities (n,) of a valuation: its raw greeks × units."""
        g, u = valuation.greeks, valuation.units
        return cls(
            delta=g.delta * u,
            gamma=g.gamma * u,
            vega=g.vega * u,
            volga=g.volga * u,
            vanna=g.vanna * u,
            theta=g.theta * u,
            rho=valuation.rho_unit * u,
            carry=g.carry_rho * u,
        )

    def take(self, rows: np.ndarray | slice) -> Sensitivities:
        """The rows ``rows`` of every field."""
        return Sensitivities(**{k: v[rows] for k, v in self.__dict__.items()})

    def per_group(self, codes: np.ndarray, n_groups: int) -> Sensitivities:
        """Each field summed per group code 0..n_groups-1, shape (n_groups,)."""
        import numpy as np  # here: the term lists load without NumPy (CLI help, completion)

        fields = self.__dict__.items()
        return Sensitivities(
            **{k: np.bincount(codes, weights=v, minlength=n_groups) for k, v in fields}
        )


def taylor_terms(
    sens: Sensitivities,
    ds: np.ndarray | float,
    dvol: np.ndarray | float,
    dt: float,
    dr: np.ndarray | float,
    dcarry: np.ndarray | float | None = None,
) -> dict[str, np.ndarray]:
    """The Taylor estimate term by term (currency), in ``TERM_NAMES`` order plus ``carry`` when
    ``dcarry`` is given; each term has the broadcast shape of its inputs.

    Δ·dS, ½Γ·dS², vega·dσ, ½volga·dσ², vanna·dS·dσ, θ·dt, ρ·dr and carry ρ·db: ``ds`` spot
    change (currency), ``dvol`` the vol change the full revaluation applied (after
    ``moved_vols``), ``dt`` years, ``dr`` rate change, ``dcarry`` the change of carry b beyond
    the rate's share (all decimal). Being linear in ``sens``, it applies to per-position
    sensitivities and to sums over positions that share the same moves alike.
    """
    import numpy as np

    terms = {
        "delta": sens.delta * ds,
        "gamma": 0.5 * sens.gamma * ds * ds,
        "vega": sens.vega * dvol,
        "volga": 0.5 * sens.volga * dvol * dvol,
        "vanna": sens.vanna * ds * dvol,
        "theta": sens.theta * dt,
        "rho": sens.rho * dr,
    }
    if dcarry is not None:
        terms["carry"] = sens.carry * dcarry
    return {k: np.asarray(v) for k, v in terms.items()}


def first_order(terms: Mapping[str, Any]) -> Any:
    """The first-order estimate: the sum of the ``FIRST_ORDER`` terms present in ``terms``."""
    return sum((terms[k] for k in FIRST_ORDER if k in terms), 0.0)


def second_order(terms: Mapping[str, Any]) -> Any:
    """The second-order estimate: the first order plus the ``SECOND_ORDER`` terms."""
    return first_order(terms) + sum((terms[k] for k in SECOND_ORDER), 0.0)
