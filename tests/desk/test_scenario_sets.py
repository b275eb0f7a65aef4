"""Named scenario sets: every move parsed when the file is read, a bad one refused naming the
file, the set and the move; a set's run is ``apply_move`` of each move, to the bit; the worst
scenario of each currency is the one with the lowest full P&L.

Sources: QuantLib 1.44 AnalyticEuropeanEngine reprices the XYZ book (``conftest``) and the
two-currency book (``books.two_ccy_ql``) under each move, one option at a time; a hedge is worth
units × spot (common practice).
"""

from __future__ import annotations

import math
from dataclasses import replace
from pathlib import Path
from zoneinfo import ZoneInfo

import numpy as np
import pytest
from books import T0, TWO_CCY, TWO_CCY_ROWS, TWO_CCY_SPOTS, make_book, two_ccy_market, two_ccy_ql
from books import by_currency as ql_by_currency

from blotter import risk, store
from blotter.config import ScenarioSetText, Settings, load_settings
from blotter.desk import scenario_sets, session
from blotter.desk.scenario_sets import SetError, find_set, read_sets, run_set
from blotter.scenario import apply_move, parse_move

from .conftest import NOW, SPOT, VOL, quantlib_european

NEW_YORK = ZoneInfo("America/New_York")

SETS = """
[scenarios.crash]
"down 10, vol +8" = "spot -10% vol +8"
"down 3" = "spot -3%"
"up 5, vol -2" = "spot +5% vol -2"
"XYZ down 6" = "XYZ spot -6%"

[scenarios."quiet week"]
"a week passes" = "days 7"
"""

BOOK = ((10, True, 105.0), (-5, False, 95.0))
"""(contracts, call, strike) of the XYZ book; 100 units per contract."""


def write(tmp_path: Path, text: str, name: str = "config.toml") -> Path:
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def settings_with(path: Path) -> Settings:
    return load_settings(env={"BLOTTER_CONFIG": str(path)})


def valued(db: Path) -> risk.BookValuation:
    with store.open_store(db, read_only=True) as st:
        return session.value(session.read(st), NOW, NEW_YORK).valuation


def quantlib_pnl(spot_pct: float, vol_pts: float) -> float:
    """The XYZ book's change in value under a spot % and vol point move, by QuantLib."""
    spot, vol = SPOT * (1 + spot_pct / 100), VOL + vol_pts / 100
    return sum(
        q * 100 * (quantlib_european(c, k, vol, spot) - quantlib_european(c, k)) for q, c, k in BOOK
    )


def test_sets_are_read_in_file_order_with_every_move_parsed(tmp_path: Path) -> None:
    sets = read_sets(settings_with(write(tmp_path, SETS)))
    assert [s.name for s in sets] == ["crash", "quiet week"]
    crash = find_set(sets, "crash")
    assert [m.name for m in crash.moves] == [
        "down 10, vol +8",
        "down 3",
        "up 5, vol -2",
        "XYZ down 6",
    ]
    assert crash.moves[0].move == parse_move("spot -10% vol +8")
    assert crash.source == str(tmp_path / "config.toml")
    with pytest.raises(SetError, match=r"no scenario set 'crush' \(sets: 'crash', 'quiet week'\)"):
        find_set(sets, "crush")


def test_a_scenario_file_from_the_setting_or_given_alone(tmp_path: Path) -> None:
    write(tmp_path, '[scenarios.rates]\n"up 50bp" = "rate +50bp"\n', "more.toml")
    config = write(tmp_path, 'scenarios_file = "more.toml"\n' + SETS)
    settings = settings_with(config)
    assert settings.scenarios_file == str(tmp_path / "more.toml")
    assert [s.name for s in read_sets(settings)] == ["crash", "quiet week", "rates"]
    alone = read_sets(Settings(), tmp_path / "more.toml")
    assert [(s.name, s.source) for s in alone] == [("rates", str(tmp_path / "more.toml"))]


@pytest.mark.parametrize(
    "text,words",
    [
        (
            '[scenarios.crash]\n"ok" = "spot -3%"\n"bad one" = "spot -3% vol"\n',
            r"config.toml: scenario set 'crash', move 'bad one': .*vol",
        ),
        (
            '[scenarios.crash]\n"typo" = "spto -3%"\n',
            r"scenario set 'crash', move 'typo': .*spto",
        ),
        (
            '[scenarios.crash]\n"number" = 3\n',
            r"scenario set 'crash', move 'number': the move must be a line of text",
        ),
        ("[scenarios.crash]\n", r"scenario set 'crash' has no moves"),
        ('[scenarios]\ncrash = "spot -3%"\n', r"scenario set 'crash' must be a table"),
        ('[scenarios.crash]\n"rule only" = "moneyness"\n', r"move 'rule only'"),
    ],
)
def test_a_bad_set_is_refused_naming_file_set_and_move(
    tmp_path: Path, text: str, words: str
) -> None:
    path = write(tmp_path, text)
    with pytest.raises((SetError, ValueError), match=words):
        read_sets(settings_with(path))


def test_a_bad_scenario_file_is_refused_in_words(tmp_path: Path) -> None:
    with pytest.raises(SetError, match=r"nowhere.toml: no such scenario file"):
        read_sets(Settings(), tmp_path / "nowhere.toml")
    bad = write(tmp_path, 'desk_tz = "UTC"\n[scenarios.a]\n"x" = "spot -1%"\n', "bad.toml")
    with pytest.raises(
        SetError, match=r"bad.toml: a scenario file holds \[scenarios.NAME\] tables"
    ):
        read_sets(Settings(), bad)
    broken = write(tmp_path, "[scenarios.a\n", "broken.toml")
    with pytest.raises(SetError, match=r"broken.toml: "):
        read_sets(Settings(), broken)
    dup = write(tmp_path, '[scenarios.crash]\n"x" = "spot -1%"\n', "dup.toml")
    config = write(tmp_path, f'scenarios_file = "{dup}"\n' + SETS)
    with pytest.raises(SetError, match=r"'crash' is defined twice: in .*config.toml and in .*dup"):
        read_sets(settings_with(config))


DEMO_SET = """
[scenarios.mixed]
"down 20, vol +15" = "spot -20% vol +15"
"rally, moneyness" = "spot +5% vol -3 moneyness"
"DEMOA alone" = "DEMOA spot -12%"
"next day" = "bdays 1 vol +2"
"""


def test_a_run_is_each_move_applied_alone_to_the_bit(demo_db: Path, tmp_path: Path) -> None:
    """Rows equal ``apply_move`` on a fresh valuation of the move alone, in either order: the
    demo's American options share solved boundaries, which an earlier move must not change."""
    mixed = find_set(read_sets(settings_with(write(tmp_path, DEMO_SET))), "mixed")
    run = run_set(valued(demo_db), mixed)
    backwards = replace(mixed, moves=mixed.moves[::-1])
    run_back = run_set(valued(demo_db), backwards)
    assert run is not None and run_back is not None
    assert [r.name for r in run.rows] == [m.name for m in mixed.moves]
    for row, back, m in zip(run.rows, run_back.rows[::-1], mixed.moves, strict=True):
        v = valued(demo_db)
        alone = apply_move(v, parse_move(m.text, v.book.underlyings.symbols))
        for r in (row, back):  # repr: every float to the bit, NaN equal to NaN
            assert repr(r.result.total.as_dict()) == repr(alone.total.as_dict())
            assert repr([u.as_dict() for u in r.result.by_underlying]) == repr(
                [u.as_dict() for u in alone.by_underlying]
            )
            assert r.result.full.tobytes() == alone.full.tobytes()


def test_the_worst_scenario_has_the_lowest_full_pnl(xyz_db: Path, tmp_path: Path) -> None:
    crash = find_set(read_sets(settings_with(write(tmp_path, SETS))), "crash")
    run = run_set(valued(xyz_db), crash)
    assert run is not None
    moves = [(-10.0, 8.0), (-3.0, 0.0), (5.0, -2.0), (-6.0, 0.0)]
    expected = [quantlib_pnl(s, v) for s, v in moves]
    fulls = [r.result.total.full for r in run.rows]
    assert fulls == pytest.approx(expected, rel=1e-7)
    lowest = int(np.argmin(expected))
    assert run.worst == {"USD": lowest} and run.worst_in(lowest) == ["USD"]
    assert fulls[lowest] == min(fulls)


def test_the_worst_is_found_per_currency() -> None:
    v = risk.value_book(make_book(TWO_CCY_ROWS, TWO_CCY, ref="USI"), two_ccy_market(), T0)
    lines = ["USX spot -10%", "EUX spot -10%", "spot +10%"]
    text = ScenarioSetText("mixed", tuple((x, x) for x in lines), "here")
    run = run_set(v, scenario_sets.parse_set(text))
    assert run is not None
    expected = []
    for line in lines:
        pct = {
            s: -10.0 if line.startswith(s) else (10.0 if line[0] == "s" else 0.0)
            for s in TWO_CCY_SPOTS
        }
        expected.append(
            ql_by_currency(
                [
                    two_ccy_ql(r, TWO_CCY_SPOTS[r.sym] * (1 + pct[r.sym] / 100)) - two_ccy_ql(r)
                    for r in TWO_CCY_ROWS
                ]
            )
        )
    for row, want in zip(run.rows, expected, strict=True):
        assert {r.currency: r.full for r in row.money_rows} == pytest.approx(want, rel=1e-7)
        assert math.isnan(row.result.total.full)
    worst = {c: min(range(len(lines)), key=lambda i, c=c: expected[i][c]) for c in ("USD", "EUR")}
    assert run.worst == worst == {"USD": 0, "EUR": 1}


def test_a_move_naming_an_unknown_underlying_runs_nothing(xyz_db: Path, tmp_path: Path) -> None:
    text = '[scenarios.a]\n"fine" = "spot -1%"\n"other book" = "ABC spot -5%"\n'
    sset = find_set(read_sets(settings_with(write(tmp_path, text))), "a")
    with pytest.raises(SetError, match=r"config.toml: scenario set 'a', move 'other book': .*ABC"):
        run_set(valued(xyz_db), sset)


def test_a_cancelled_run_stops(xyz_db: Path, tmp_path: Path) -> None:
    crash = find_set(read_sets(settings_with(write(tmp_path, SETS))), "crash")
    assert run_set(valued(xyz_db), crash, cancelled=lambda: True) is None
