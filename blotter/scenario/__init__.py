"""What-if moves, the greeks' Taylor estimate against full revaluation, ladders, profiles and
P&L explain, one concern per module.

``grammar`` parses a move line; ``taylor`` holds the one Taylor expansion and its term lists;
``base`` prepares a valuation once for every move; ``whatif``, ``spot_vol_ladder`` and
``profile`` apply moves to it; ``pnl_explain`` explains P&L between two mark sets from what a
store gives it (``ExplainSource``). The names below are loaded from their modules on first use,
so importing ``grammar`` or ``taylor`` alone (the store, the command line's help) never loads the
engine.

Vol is sticky strike by default: under a spot move each option keeps the vol of its strike and
expiry, and a day roll keeps each contract's vol (and its rate). With ``moneyness`` each option
instead takes the marked vol at its moneyness on the moved spot (strike K read at K × S / S').
Options that expire inside a roll settle at intrinsic value on the moved spot; they are listed as
expiring, flagged as pin risk when the moved spot is within ``PIN_BAND_PCT`` of the strike, and
their Taylor estimate is kept but flagged.
"""

from __future__ import annotations

from importlib import import_module
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from blotter.scenario.base import Prepared as Prepared
    from blotter.scenario.base import desk_calendar as desk_calendar
    from blotter.scenario.base import moved_vols as moved_vols
    from blotter.scenario.base import prepare as prepare
    from blotter.scenario.base import roll_time as roll_time
    from blotter.scenario.grammar import EXAMPLES as EXAMPLES
    from blotter.scenario.grammar import MONEYNESS_RULE as MONEYNESS_RULE
    from blotter.scenario.grammar import STICKY_RULE as STICKY_RULE
    from blotter.scenario.grammar import VOL_RULES as VOL_RULES
    from blotter.scenario.grammar import Move as Move
    from blotter.scenario.grammar import MoveSyntaxError as MoveSyntaxError
    from blotter.scenario.grammar import SpotShift as SpotShift
    from blotter.scenario.grammar import VolShift as VolShift
    from blotter.scenario.grammar import parse_move as parse_move
    from blotter.scenario.pnl_explain import Explain as Explain
    from blotter.scenario.pnl_explain import ExplainInBase as ExplainInBase
    from blotter.scenario.pnl_explain import ExplainMarkSet as ExplainMarkSet
    from blotter.scenario.pnl_explain import ExplainRow as ExplainRow
    from blotter.scenario.pnl_explain import ExplainSource as ExplainSource
    from blotter.scenario.pnl_explain import ExplainTrade as ExplainTrade
    from blotter.scenario.pnl_explain import closes_in_force as closes_in_force
    from blotter.scenario.pnl_explain import explain as explain
    from blotter.scenario.pnl_explain import explain_in_base as explain_in_base
    from blotter.scenario.profile import PROFILE_AXES as PROFILE_AXES
    from blotter.scenario.profile import PROFILE_EXPOSURES as PROFILE_EXPOSURES
    from blotter.scenario.profile import PROFILE_MEASURES as PROFILE_MEASURES
    from blotter.scenario.profile import Profile as Profile
    from blotter.scenario.profile import ProfileCurve as ProfileCurve
    from blotter.scenario.profile import greek_profile as greek_profile
    from blotter.scenario.profile import profile_curves as profile_curves
    from blotter.scenario.spot_vol_ladder import DEFAULT_SPOT_PCTS as DEFAULT_SPOT_PCTS
    from blotter.scenario.spot_vol_ladder import DEFAULT_VOL_PTS as DEFAULT_VOL_PTS
    from blotter.scenario.spot_vol_ladder import LADDER_CHUNK_CELLS as LADDER_CHUNK_CELLS
    from blotter.scenario.spot_vol_ladder import Ladder as Ladder
    from blotter.scenario.spot_vol_ladder import ladder as ladder
    from blotter.scenario.spot_vol_ladder import ladders as ladders
    from blotter.scenario.taylor import EXPLAIN_TERMS as EXPLAIN_TERMS
    from blotter.scenario.taylor import FIRST_ORDER as FIRST_ORDER
    from blotter.scenario.taylor import SECOND_ORDER as SECOND_ORDER
    from blotter.scenario.taylor import TERM_NAMES as TERM_NAMES
    from blotter.scenario.taylor import Sensitivities as Sensitivities
    from blotter.scenario.taylor import first_order as first_order
    from blotter.scenario.taylor import second_order as second_order
    from blotter.scenario.taylor import taylor_terms as taylor_terms
    from blotter.scenario.whatif import PIN_BAND_PCT as PIN_BAND_PCT
    from blotter.scenario.whatif import ExpiringPosition as ExpiringPosition
    from blotter.scenario.whatif import MoveError as MoveError
    from blotter.scenario.whatif import MoveResult as MoveResult
    from blotter.scenario.whatif import MoveRow as MoveRow
    from blotter.scenario.whatif import apply_move as apply_move

HOMES: dict[str, tuple[str, ...]] = {
    "grammar": (
        "EXAMPLES", "MONEYNESS_RULE", "STICKY_RULE", "VOL_RULES", "Move", "MoveSyntaxError",
        "SpotShift", "VolShift", "parse_move",
    ),
    "taylor": (
        "EXPLAIN_TERMS", "FIRST_ORDER", "SECOND_ORDER", "TERM_NAMES", "Sensitivities",
        "first_order", "second_order", "taylor_terms",
    ),
    "base": ("Prepared", "desk_calendar", "moved_vols", "prepare", "roll_time"),
    "whatif": (
        "PIN_BAND_PCT", "ExpiringPosition", "MoveError", "MoveResult", "MoveRow", "apply_move",
    ),
    "spot_vol_ladder": (
        "DEFAULT_SPOT_PCTS", "DEFAULT_VOL_PTS", "LADDER_CHUNK_CELLS", "Ladder", "ladder", "ladders",
    ),
    "profile": (
        "PROFILE_AXES", "PROFILE_EXPOSURES", "PROFILE_MEASURES", "Profile", "ProfileCurve",
        "greek_profile", "profile_curves",
    ),
    "pnl_explain": (
        "Explain", "ExplainInBase", "ExplainMarkSet", "ExplainRow", "ExplainSource",
        "ExplainTrade", "closes_in_force", "explain", "explain_in_base",
    ),
}
"""Module -> the public names the package root gives from it (the ``TYPE_CHECKING`` imports
above say the same for the type checker; a test keeps the two alike)."""

_HOME_OF = {name: module for module, names in HOMES.items() for name in names}

__all__ = sorted(_HOME_OF)


def __getattr__(name: str) -> Any:
    """Load a public name from its module on first use and keep it on the package."""
    module = _HOME_OF.get(name)
    if module is None:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    value = getattr(import_module(f"{__name__}.{module}"), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted({*globals(), *__all__})
