"""The what-if grammar: every form issue 4 requires, our extensions, and malformed lines.

The meanings checked (a 2-point vol move takes 0.30 to 0.32, -10% takes it to 0.27, 25 bp is
0.0025) are the desk conventions of PRACTICE.md §1 (common practice).
"""

from __future__ import annotations

from pathlib import Path

import pytest
from click.testing import CliRunner

from blotter.cli import main
from blotter.scenario import Move, MoveSyntaxError, SpotShift, VolShift, parse_move
from blotter.scenario.grammar import EXAMPLES, MOVE_WORDS, SYMBOL_PATTERN

SYMBOLS = ("IDX", "STK", "FUT", "FXA")


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("spot -3%", Move("spot -3%", spot=(SpotShift(None, -3.0, "%"),))),
        ("spot +2.5", Move("spot +2.5", spot=(SpotShift(None, 2.5, "abs"),))),
        ("IDX spot -5%", Move("IDX spot -5%", spot=(SpotShift("IDX", -5.0, "%"),))),
        ("spot -3% beta", Move("spot -3% beta", spot=(SpotShift(None, -3.0, "%", beta=True),))),
        ("vol +2", Move("vol +2", vol=(VolShift(None, 2.0, "pts"),))),
        ("vol -10%", Move("vol -10%", vol=(VolShift(None, -10.0, "%"),))),
        (
            "vol +2 weighted",
            Move("vol +2 weighted", vol=(VolShift(None, 2.0, "pts", weighted=True),)),
        ),
        ("days 3", Move("days 3", days=3.0)),
        ("bdays 1", Move("bdays 1", bdays=1)),
        ("rate +25bp", Move("rate +25bp", rate_bp=25.0)),
        (
            "spot -3% vol +2 days 1",
            Move(
                "spot -3% vol +2 days 1",
                spot=(SpotShift(None, -3.0, "%"),),
                vol=(VolShift(None, 2.0, "pts"),),
                days=1.0,
            ),
        ),
    ],
)
def test_issue_forms_parse(text: str, expected: Move) -> None:
    assert parse_move(text) == expected
    assert parse_move(text, SYMBOLS) == expected


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        (
            "SPOT -3%  VOL +2",
            Move(
                "SPOT -3%  VOL +2",
                spot=(SpotShift(None, -3.0, "%"),),
                vol=(VolShift(None, 2.0, "pts"),),
            ),
        ),
        ("IDX spot =4480", Move("IDX spot =4480", spot=(SpotShift("IDX", 4480.0, "level"),))),
        ("STK vol +3", Move("STK vol +3", vol=(VolShift("STK", 3.0, "pts"),))),
        ("rate -0.5%", Move("rate -0.5%", rate_bp=-50.0)),
        ("days 0.5", Move("days 0.5", days=0.5)),
        (
            "days 2 rate +10bp spot +1%",
            Move(
                "days 2 rate +10bp spot +1%",
                spot=(SpotShift(None, 1.0, "%"),),
                days=2.0,
                rate_bp=10.0,
            ),
        ),
        (
            "spot -2% IDX spot -5%",
            Move(
                "spot -2% IDX spot -5%",
                spot=(SpotShift(None, -2.0, "%"), SpotShift("IDX", -5.0, "%")),
            ),
        ),
        ("spot +.5%", Move("spot +.5%", spot=(SpotShift(None, 0.5, "%"),))),
    ],
)
def test_extensions_parse(text: str, expected: Move) -> None:
    assert parse_move(text, SYMBOLS) == expected


def test_symbol_case_is_resolved_to_the_books_spelling() -> None:
    assert parse_move("idx spot -1%", SYMBOLS).spot[0].symbol == "IDX"


def test_describe_round_trips() -> None:
    for text in (
        "spot -3% beta vol +2 weighted bdays 1 rate +25bp",
        "IDX spot =4480 STK vol -10% days 3",
    ):
        move = parse_move(text, SYMBOLS)
        assert parse_move(move.describe(), SYMBOLS) == Move(
            move.describe(), move.spot, move.vol, move.days, move.bdays, move.rate_bp
        )


@pytest.mark.parametrize(
    ("text", "word", "fragment"),
    [
        ("", "", "empty move"),
        ("   ", "", "empty move"),
        ("spot", None, "needs an amount"),
        ("spot 3%", "3%", "give a sign"),
        ("spot -3bp", "-3bp", "not a unit for spot"),
        ("spot -three", "-three", "not an amount"),
        ("spot -120%", "-120%", "100%"),
        ("vol +2% weighted", "weighted", "points"),
        ("vol -100%", "-100%", "100%"),
        ("spot +2 beta", "beta", "% spot move"),
        ("IDX spot -3% beta", "beta", "every spot"),
        ("beta", "beta", "must follow"),
        ("weighted vol +2", "weighted", "must follow"),
        ("foo +2", "foo", "unknown part"),
        ("spot -3% bananas", "bananas", "unknown word"),
        ("+3%", "+3%", "needs a part"),
        ("days -1", "-1", "forward"),
        ("days 3%", "3%", "not a number of days"),
        ("bdays 1.5", "1.5", "whole number"),
        ("days 1 bdays 1", "bdays", "one day roll"),
        ("rate +25", "+25", "bp"),
        ("rate +25bp rate +5bp", "rate", "twice"),
        ("spot -3% spot +1%", "spot", "twice"),
        ("XYZ spot -3%", "XYZ", "unknown underlying"),
        ("spot =4480", "=4480", "needs an underlying"),
        ("spot -3% vol", None, "needs an amount"),
    ],
)
def test_malformed_lines_point_at_the_word(text: str, word: str | None, fragment: str) -> None:
    with pytest.raises(MoveSyntaxError) as info:
        parse_move(text, SYMBOLS)
    err = info.value
    assert fragment in err.message
    if word:
        assert text[err.start : err.end] == word
    elif word is None:  # missing word: the pointer sits just past the text
        assert err.start == len(text.rstrip())
    lines = err.pointer().splitlines()
    assert lines[0] == text and "^" in lines[1] or not text.strip()


def test_error_is_a_value_error() -> None:
    assert issubclass(MoveSyntaxError, ValueError)


def test_moneyness_rule_word() -> None:
    move = parse_move("spot -5% moneyness vol +1", SYMBOLS)
    assert move.vol_rule == "sticky moneyness" and move.vol == (VolShift(None, 1.0, "pts"),)
    assert parse_move("spot -5%").vol_rule == "sticky strike"
    assert "moneyness" in move.describe()
    with pytest.raises(MoveSyntaxError, match="twice"):
        parse_move("moneyness spot -1% moneyness")


def test_describe_keeps_each_amount_as_typed() -> None:
    """A move's words keep every digit typed: -99.9999999% is a legal move, -100% is not, so
    the heading must not round one into the other."""
    from blotter.scenario import parse_move

    move = parse_move("spot -99.9999999% vol +2.5 days 3 rate +25bp")
    assert move.describe() == "spot -99.9999999% vol +2.5 days 3 rate +25bp"
    assert parse_move(move.describe()).spot[0].amount == move.spot[0].amount


@pytest.mark.parametrize("word", MOVE_WORDS)
def test_a_grammar_word_is_never_read_as_a_symbol(word: str) -> None:
    """Why the store refuses these words as symbols: typed before ``spot``, each is read as the
    grammar's own word (or refused), never as the name of an underlying."""
    try:
        move = parse_move(f"{word} spot -3%", [word, *SYMBOLS])
    except MoveSyntaxError:
        return
    assert all(part.symbol is None for part in move.spot)


@pytest.mark.parametrize("symbol", [*SYMBOLS, "BRK.B", "EUR/USD", "ES_F", "X-1"])
def test_symbols_of_the_pattern_name_an_underlying(symbol: str) -> None:
    assert SYMBOL_PATTERN.match(symbol)
    move = parse_move(f"{symbol} spot -3%", [symbol])
    assert move.spot == (SpotShift(symbol, -3.0, "%"),)


README = Path(__file__).resolve().parents[2] / "README.md"

DEMO_SYMBOLS = ("DEMOIX", "DEMOA", "DEMOB", "DEMOC", "DEMOFU")
"""The demo book's underlyings (invented), which the examples name."""


def _example_lines() -> list[str]:
    return [f"{example:<24} {meaning}" for example, meaning in EXAMPLES]


def test_every_example_parses_on_the_demo_book() -> None:
    for example, _meaning in EXAMPLES:
        assert not parse_move(example, DEMO_SYMBOLS).is_empty


def test_the_readme_lists_the_examples_as_the_grammar_gives_them() -> None:
    """The README cannot import the list, so it holds a copy that must stay the same."""
    section = README.read_text(encoding="utf-8").split("### What-if moves", 1)[1]
    block = section.split("```\n", 2)[1]
    assert block.splitlines() == _example_lines()


def test_whatif_help_shows_every_example_within_80_columns() -> None:
    out = CliRunner().invoke(main, ["whatif", "--help"], catch_exceptions=False).output
    for line in _example_lines():
        assert line in out
    assert max(len(line) for line in out.splitlines()) <= 80
