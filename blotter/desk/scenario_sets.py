"""Named scenario sets: read every set of named what-if moves, and run one as a table.

A set is a ``[scenarios.NAME]`` table of ``"move name" = "move line"`` in the settings file or in
a scenario file (the ``scenarios_file`` setting, or a file given for one run). Every move line is
parsed when the sets are read, and again against the book's symbols before anything is valued,
so a bad one is refused naming the file, the set and the move, and nothing runs. Each move runs
through ``scenario.apply_move``, the one valuation and Taylor path of a single what-if.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import TYPE_CHECKING

from blotter.config import ConfigError, ScenarioSetText, Settings, read_scenario_file
from blotter.scenario.grammar import Move, MoveSyntaxError, parse_move

if TYPE_CHECKING:
    from concurrent.futures import Executor

    from blotter.risk import BookValuation
    from blotter.scenario.whatif import MoveResult, MoveRow

WORST_MARK = "▼ WORST"
"""How the worst scenario of a currency is marked: a symbol and a word, never colour alone."""


class SetError(ValueError):
    """A scenario set that cannot be read or run; the message names the file, set and move."""


@dataclass(frozen=True)
class NamedMove:
    """One move of a set: its name, the line as written, and the line parsed."""

    name: str
    text: str
    move: Move


@dataclass(frozen=True)
class ScenarioSet:
    """A named set of moves, in the order its file lists them; ``source`` is that file."""

    name: str
    source: str
    moves: tuple[NamedMove, ...]


@dataclass(frozen=True)
class SetRow:
    """One move of a set applied to the book: ``result`` is ``scenario.apply_move``'s."""

    name: str
    text: str
    result: MoveResult

    @property
    def money_rows(self) -> tuple[MoveRow, ...]:
        """The move's total per currency (one row when the book has one currency)."""
        return self.result.by_currency or (self.result.total,)


@dataclass(frozen=True)
class SetRun:
    """A set run on one valuation; ``worst`` maps each currency to its worst move's index."""

    scenario_set: ScenarioSet
    rows: tuple[SetRow, ...]
    worst: dict[str, int] = field(default_factory=dict)

    def worst_in(self, index: int) -> list[str]:
        """Currencies whose worst scenario is the move at ``index``."""
        return [ccy for ccy, i in self.worst.items() if i == index]


def _where(s: ScenarioSetText | ScenarioSet, move_name: str) -> str:
    return f"{s.source}: scenario set {s.name!r}, move {move_name!r}"


def _syntax_words(exc: MoveSyntaxError) -> str:
    return f"{exc.message}\n  {exc.pointer().replace(chr(10), chr(10) + '  ')}"


def parse_set(text: ScenarioSetText) -> ScenarioSet:
    """Every move of ``text`` parsed; SetError naming the file, the set and the move."""
    moves = []
    for name, line in text.moves:
        try:
            moves.append(NamedMove(name, line, parse_move(line)))
        except MoveSyntaxError as exc:
            raise SetError(f"{_where(text, name)}: {_syntax_words(exc)}") from None
        if moves[-1].move.is_empty:
            raise SetError(f"{_where(text, name)}: the move changes nothing")
    return ScenarioSet(text.name, text.source, tuple(moves))


def read_sets(settings: Settings, file: Path | None = None) -> tuple[ScenarioSet, ...]:
    """The scenario sets, every move parsed: those of ``file`` alone when given, else the
    settings file's ``[scenarios]`` then ``scenarios_file``'s; SetError on the first bad one."""
    try:
        if file is not None:
            texts = read_scenario_file(file)
        else:
            texts = settings.scenarios
            if settings.scenarios_file:
                texts += read_scenario_file(Path(settings.scenarios_file))
    except ConfigError as exc:
        raise SetError(str(exc)) from None
    seen: dict[str, str] = {}
    for t in texts:
        if t.name in seen:
            raise SetError(
                f"scenario set {t.name!r} is defined twice: in {seen[t.name]} and in {t.source}"
            )
        seen[t.name] = t.source
    return tuple(parse_set(t) for t in texts)


def find_set(sets: Sequence[ScenarioSet], name: str) -> ScenarioSet:
    """The set called ``name``; SetError listing the sets there are."""
    for s in sets:
        if s.name == name:
            return s
    known = ", ".join(repr(s.name) for s in sets) or "none"
    raise SetError(f"no scenario set {name!r} (sets: {known})")


def worst_scenarios(rows: Sequence[SetRow]) -> dict[str, int]:
    """Each currency's worst move: the lowest full revaluation P&L (the first on a tie)."""
    worst: dict[str, int] = {}
    lowest: dict[str, float] = {}
    for i, row in enumerate(rows):
        for r in row.money_rows:
            if r.currency is None or not math.isfinite(r.full):
                continue
            if r.currency not in lowest or r.full < lowest[r.currency]:
                worst[r.currency], lowest[r.currency] = i, r.full
    return worst


def run_set(
    valuation: BookValuation,
    scenario_set: ScenarioSet,
    cancelled: Callable[[], bool] = lambda: False,
    executor: Executor | None = None,
    shards: int | None = None,
) -> SetRun | None:
    """Every move of the set applied to ``valuation`` by ``scenario.apply_move``, or None when
    ``cancelled`` says so; on ``executor`` (a local process pool, a Dask cluster's) the
    positions run in ``shards`` and are summed (``scenario.sharded.sharded_moves``).

    Each line is parsed against the book's symbols first, so a move naming an unknown underlying
    is refused (SetError) before anything is valued. Each move starts from a copy of the
    valuation's American boundaries as they stand, so a row is bit for bit that move applied
    alone, whatever came before it in the set (sharded: to rounding).
    """
    from blotter.scenario.whatif import MoveError, apply_move

    symbols = valuation.book.underlyings.symbols
    moves = []
    for m in scenario_set.moves:
        try:
            moves.append(parse_move(m.text, symbols))
        except MoveSyntaxError as exc:
            raise SetError(f"{_where(scenario_set, m.name)}: {_syntax_words(exc)}") from None
    rows = []
    if executor is not None:
        from blotter.scenario.sharded import sharded_moves

        if cancelled():
            return None
        results = sharded_moves(valuation, moves, executor, shards)
        for m, res in zip(scenario_set.moves, results, strict=True):
            if isinstance(res, MoveError):
                raise SetError(f"{_where(scenario_set, m.name)}: {res}")
            rows.append(SetRow(m.name, m.text, res))
        return None if cancelled() else SetRun(scenario_set, tuple(rows), worst_scenarios(rows))
    for m, move in zip(scenario_set.moves, moves, strict=True):
        if cancelled():
            return None
        try:
            alone = replace(valuation, boundaries=valuation.boundaries.copy())
            rows.append(SetRow(m.name, m.text, apply_move(alone, move)))
        except MoveError as exc:
            raise SetError(f"{_where(scenario_set, m.name)}: {exc}") from None
    return SetRun(scenario_set, tuple(rows), worst_scenarios(rows))
