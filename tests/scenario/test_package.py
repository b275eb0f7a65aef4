"""The scenario package's shape: every name the root gives comes from its one module, the type
checker's view of the root says the same, and the grammar and the Taylor terms load without the
engine (the store and the command line's help import them)."""

from __future__ import annotations

import ast
import importlib
import subprocess
import sys
from pathlib import Path

import pytest

import blotter.scenario as scenario

INIT = Path(scenario.__file__)

IMPORTED_ELSEWHERE = (
    "DEFAULT_SPOT_PCTS", "DEFAULT_VOL_PTS", "EXAMPLES", "EXPLAIN_TERMS", "Ladder",
    "MONEYNESS_RULE", "Move", "MoveError", "MoveResult", "MoveSyntaxError", "PIN_BAND_PCT",
    "PROFILE_EXPOSURES", "SECOND_ORDER", "SpotShift", "TERM_NAMES", "VolShift", "apply_move",
    "closes_in_force", "explain", "greek_profile", "ladder", "ladders", "parse_move", "prepare",
    "roll_time",
)
"""Names the app, the command line, the benchmarks and the tests take from ``blotter.scenario``
(found with grep when the module became a package)."""


@pytest.mark.parametrize("module", sorted(scenario.HOMES))
def test_each_name_of_the_root_is_its_modules_own(module: str) -> None:
    home = importlib.import_module(f"blotter.scenario.{module}")
    for name in scenario.HOMES[module]:
        value = getattr(home, name)
        assert getattr(scenario, name) is value
        if callable(value):  # defined there, not imported from elsewhere
            assert value.__module__ == home.__name__


def test_names_imported_elsewhere_still_resolve_from_the_root() -> None:
    for name in IMPORTED_ELSEWHERE:
        assert name in scenario.__all__
        getattr(scenario, name)


def test_an_unknown_name_is_an_attribute_error() -> None:
    with pytest.raises(AttributeError, match="no attribute 'nope'"):
        getattr(scenario, "nope")  # noqa: B009


def test_the_type_checkers_imports_match_the_homes() -> None:
    tree = ast.parse(INIT.read_text(encoding="utf-8"))
    guarded = next(
        n for n in tree.body if isinstance(n, ast.If) and ast.unparse(n.test) == "TYPE_CHECKING"
    )
    seen: dict[str, list[str]] = {}
    for node in guarded.body:
        assert isinstance(node, ast.ImportFrom) and node.module is not None
        module = node.module.removeprefix("blotter.scenario.")
        for alias in node.names:
            assert alias.asname == alias.name  # an explicit re-export
            seen.setdefault(module, []).append(alias.name)
    assert {m: sorted(n) for m, n in seen.items()} == {
        m: sorted(n) for m, n in scenario.HOMES.items()
    }


def test_grammar_and_taylor_load_without_the_engine() -> None:
    code = (
        "import sys\n"
        "from blotter.scenario.grammar import EXAMPLES, parse_move\n"
        "from blotter.scenario.taylor import FIRST_ORDER, TERM_NAMES\n"
        "parse_move('spot -3% vol +2 days 1')\n"
        "heavy = ('numba', 'scipy', 'blotter.engine', 'blotter.risk', 'blotter.market')\n"
        "print(','.join(m for m in sys.modules if any(m.startswith(h) for h in heavy)))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == ""
