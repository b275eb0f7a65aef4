"""Typed entry: one rule for a typed vol, rate and yield (the command line's, in its help), the
Marks screen's cells read by it, trade tickets checked field by field, and a typed option price
solved back to the vol QuantLib priced it at."""

from __future__ import annotations

import re
from datetime import UTC, date, datetime
from pathlib import Path
from typing import Any

import pytest
from click.testing import CliRunner

from blotter import risk, store
from blotter.calendar import desk_tz
from blotter.cli import main
from blotter.desk import entry

from .conftest import EXPIRY, SPOT, T0, quantlib_european


@pytest.mark.parametrize(
    "text,vol",
    [("0.25", 0.25), ("25%", 0.25), (" 24.5% ", 0.245), ("3", 3.0), ("300%", 3.0)],
)
def test_a_vol_is_a_decimal_or_a_percentage(text: str, vol: float) -> None:
    assert entry.parse_vol(text) == pytest.approx(vol)


@pytest.mark.parametrize(
    "text,words",
    [
        ("24.5", "'24.5' looks like a percentage: write 24.5% or 0.245"),
        ("abc", "'abc' is not a vol: write 0.25 or 25%"),
        ("", "'' is not a vol"),
        ("25 %%", "is not a vol"),
        ("inf", "'inf' is not a vol"),
        ("0", "a vol must be above 0% and at most 1,000%, got 0% (0)"),
        ("1500%", "a vol must be above 0% and at most 1,000%, got 1,500% (1500%)"),
        ("-5%", "got -5% (-5%)"),
    ],
)
def test_an_ambiguous_or_bad_vol_is_refused_in_words(text: str, words: str) -> None:
    with pytest.raises(ValueError, match=re.escape(words)):
        entry.parse_vol(text)


def test_a_rate_or_yield_is_a_decimal_or_a_percentage() -> None:
    assert entry.parse_decimal_or_percent("0.04", "rate") == pytest.approx(0.04)
    assert entry.parse_decimal_or_percent("4%", "rate") == pytest.approx(0.04)
    assert entry.parse_decimal_or_percent("-0.5%", "rate") == pytest.approx(-0.005)
    with pytest.raises(ValueError, match="'4,1' is not a dividend yield: write 0.04 or 4%"):
        entry.parse_decimal_or_percent("4,1", "dividend yield")
    with pytest.raises(ValueError, match=re.escape("a rate must be from -100% to 100%, got 150%")):
        entry.parse_decimal_or_percent("150%", "rate")


@pytest.mark.parametrize(
    "old,new,words",
    [
        (0.25, 0.30, ""),
        (0.25, 0.351, "35.10% is +10.10 vol points from the mark in force 25.00% (more than 10)"),
        (0.25, 0.149, "14.90% is -10.10 vol points from the mark in force 25.00% (more than 10)"),
        (None, 0.90, ""),
        (0.04, 0.029, "2.90% is under 3%"),
        (None, 0.02, "2.00% is under 3%"),
    ],
)
def test_a_vol_far_from_the_one_in_force_or_under_3_percent_is_questioned(
    old: float | None, new: float, words: str
) -> None:
    """The plausibility rule (common practice for listed options, not a limit): more than 10
    vol points from the mark in force, or under 3%; a solved vol is always shown beside it."""
    assert entry.implausible_vol(old, new) == words
    assert entry.mark_question("vol", old, new) == words
    assert entry.mark_question("rate", 0.04, 0.4) == ""
    assert entry.mark_question("spot", 180.67, 190.0) == ""
    assert entry.mark_question("spot", 180.67, 0.6) == (
        "0.6 is -99.7% from the spot in force 180.67 (more than 20%)"
    )
    solved = entry.mark_question("vol", 0.25, 0.2731, "put price 12.4 → implied vol 27.31%")
    assert solved == "put price 12.4 → implied vol 27.31% (in force 25.00%, +2.31 pt)"
    far = entry.mark_question("vol", 0.25, 0.02, "call price 0.01 → implied vol 2.00%")
    assert far == (
        "call price 0.01 → implied vol 2.00% (in force 25.00%, -23.00 pt), more than 10 pt away "
        "and under 3%"
    )


def test_the_command_line_reads_a_vol_by_the_same_rule(xyz_db: Path) -> None:
    """``mark vol`` refuses what ``parse_vol`` refuses, in its words, and writes nothing."""
    with pytest.raises(ValueError) as refused:
        entry.parse_vol("24.5")
    mark_vol = ["mark", "vol", "XYZ", str(EXPIRY), "--db", str(xyz_db)]
    run = CliRunner().invoke(main, [*mark_vol, "24.5"])
    assert run.exit_code == 2 and str(refused.value) in run.output
    run = CliRunner().invoke(main, [*mark_vol, "24.5%"])
    assert run.exit_code == 0, run.output
    with store.open_store(xyz_db, read_only=True) as st:
        assert [m.value for m in st.marks() if m.kind == "vol"] == [pytest.approx(0.245)]


def test_a_mark_cell_is_read_by_its_kind() -> None:
    assert entry.parse_mark("spot", " 1,234.5 ") == ("value", 1234.5, None)
    assert entry.parse_mark("vol", "24.5%") == ("value", pytest.approx(0.245), None)
    assert entry.parse_mark("vol", "$12.35") == ("price", 12.35, None)
    assert entry.parse_mark("vol", "$12.35c") == ("price", 12.35, True)
    assert entry.parse_mark("vol", "$1,212.5 P") == ("price", 1212.5, False)
    assert entry.parse_mark("rate", "4.5%") == ("value", pytest.approx(0.045), None)
    assert entry.parse_mark("div_yield", "0.012") == ("value", pytest.approx(0.012), None)
    for kind, text, words in (
        ("spot", "", "type a number"),
        ("spot", "abc", "'abc' is not a number (price in the underlying's currency)"),
        ("vol", "24.5", "looks like a percentage"),
        ("vol", "$x", "'x' is not a price: write $12.40, $12.40c (a call) or $12.40p (a put)"),
        ("vol", "$12.4q", "'12.4q' is not a price"),
        ("vol", "$-1", "price must be from 0"),
        ("rate", "4.5x", "is not a rate"),
    ):
        with pytest.raises(ValueError, match=re.escape(words)):
            entry.parse_mark(kind, text)


@pytest.mark.parametrize(
    "fields,words",
    [
        ({"qty": "0"}, "quantity: must not be zero"),
        ({"qty": "1.5"}, "quantity: '1.5' is not a whole number"),
        ({"price": "x"}, "price: 'x' is not a number"),
        ({"expiry": "2027-13-40"}, "expiry: '2027-13-40' is not an ISO date"),
        ({"strike": "4e-9"}, "strike must be from 1e-06"),
        ({"cp": "x"}, "call/put: type C or P"),
        ({"symbol": "NOPE"}, "symbol: NOPE is not an underlying of this file"),
    ],
)
def test_a_trade_ticket_names_its_first_wrong_field(fields: dict[str, str], words: str) -> None:
    good = {"book": "desk", "symbol": "xyz", "expiry": "2027-01-15", "strike": "1,105",
            "cp": "c", "qty": "-1,000", "price": "3.25", "note": "n"}
    ticket = entry.parse_new_trade(good, ["XYZ"])
    assert ticket == entry.NewTrade(
        entry.ContractTerms("XYZ", EXPIRY, 1105.0, True), "desk", -1000, 3.25, "n"
    )
    with pytest.raises(ValueError, match=words):
        entry.parse_new_trade(good | fields, ["XYZ"])
    with pytest.raises(ValueError, match="reason: an amend needs a reason"):
        entry.parse_reason("  ", "an amend")


def test_tickets_write_through_the_store(xyz_db: Path) -> None:
    with store.open_store(xyz_db) as st:
        terms = entry.ContractTerms("XYZ", None, None, None)
        said = entry.write_ticket(st, entry.NewTrade(terms, "desk", 200, 99.5))
        new_id = st.trades()[-1].trade_id
        assert said == f"trade {new_id} booked: XYZ (the underlying) ×+200 at 99.5"
        said = entry.write_ticket(st, entry.Amend(new_id, 300, 99.5, "wrong size"))
        amended = st.trades()[-1]
        assert said == f"trade {new_id} amended: now trade {amended.trade_id}"
        assert (amended.quantity, amended.price) == (300, 99.5)
        said = entry.write_ticket(st, entry.Cancel(amended.trade_id, "test"))
        assert said == f"trade {amended.trade_id} cancelled: test"
        assert st.trades()[-1].state == "cancelled"
        assert entry.find_contract(st.contracts(), terms) is not None
        unknown = entry.ContractTerms("XYZ", EXPIRY, 96.0, False)
        assert entry.find_contract(st.contracts(), unknown) is None


@pytest.mark.parametrize("strike,call", [(105.0, True), (95.0, False), (None, True)])
def test_a_typed_price_solves_to_the_vol_quantlib_priced_it_at(
    xyz_db: Path, strike: float | None, call: bool
) -> None:
    """QuantLib values the out-of-the-money option at 27.5% vol; that price typed in the vol cell
    solves back to 27.5% (ATM, no strike: the option struck at the spot, a call)."""
    with store.open_store(xyz_db, read_only=True) as st:
        valuation = risk.value_book(st.load_book(), st.load_market(), T0, tz=desk_tz())
    price = quantlib_european(call, SPOT if strike is None else strike, vol=0.275)
    solved = entry.solve_vol(valuation, "XYZ", EXPIRY, strike, price)
    assert solved.is_call is call and solved.vol == pytest.approx(0.275, abs=1e-7)
    assert solved.words.endswith("→ implied vol 27.50%")


def test_a_price_with_no_vol_is_refused_in_words(xyz_db: Path) -> None:
    with store.open_store(xyz_db, read_only=True) as st:
        valuation = risk.value_book(st.load_book(), st.load_market(), T0, tz=desk_tz())
    below = entry.solve_vol(valuation, "XYZ", EXPIRY, 95.0, 0.0)
    assert below.vol is None and below.words.startswith("put price 0 refused: ")
    assert entry.solve_vol(valuation, "ABC", EXPIRY, 95.0, 1.0).words == "ABC is not in the book"
    other_day = entry.solve_vol(valuation, "XYZ", EXPIRY.replace(day=16), 95.0, 1.0)
    assert other_day.vol is None and "no live position at this expiry" in other_day.words


@pytest.mark.parametrize("strike,call", [(105.0, False), (95.0, True)])
def test_a_typed_call_or_put_price_solves_that_option(
    xyz_db: Path, strike: float, call: bool
) -> None:
    """``$price c``/``p`` names the option: the in-the-money one QuantLib priced at 27.5% solves
    back to 27.5% (left to itself the solver would take the out-of-the-money one)."""
    with store.open_store(xyz_db, read_only=True) as st:
        valuation = risk.value_book(st.load_book(), st.load_market(), T0, tz=desk_tz())
    price = quantlib_european(call, strike, vol=0.275)
    solved = entry.solve_vol(valuation, "XYZ", EXPIRY, strike, price, call)
    assert solved.is_call is call and solved.vol == pytest.approx(0.275, abs=1e-7)
    assert solved.words.startswith("call price" if call else "put price")


NOW = datetime(2026, 12, 1, 21, 0, tzinfo=UTC)
"""16:00 New York, Tuesday 2026-12-01."""


@pytest.mark.parametrize(
    "kind,point,words",
    [
        ("vol", {"symbol": "XYZ", "expiry": "2026-11-27"}, "XYZ 2026-11-27 has expired"),
        ("vol", {"symbol": "XYZ", "expiry": date(2026, 12, 1)}, "cut-off 2026-12-01 16:00 EST"),
        ("vol", {"symbol": "XYZ", "expiry": "2027-01-16"}, "2027-01-16 is a Saturday"),
        ("vol", {"symbol": "XYZ", "expiry": "2027-01-17"}, "is a Sunday on XYZ's NYSE calendar"),
        # NYSE holidays as the `holidays` package lists them (Good Friday 2027 is March 26)
        ("vol", {"symbol": "XYZ", "expiry": "2027-03-26"}, "is Good Friday, an exchange holiday"),
        ("vol", {"symbol": "XYZ", "expiry": "2026-12-25"}, "Christmas Day, an exchange holiday"),
        ("rate", {"currency": "EUR"}, "EUR is not a currency of this file"),
    ],
)
def test_marks_no_position_can_use_are_refused_in_words(
    xyz_db: Path, kind: str, point: dict[str, Any], words: str
) -> None:
    with store.open_store(xyz_db) as st:
        with pytest.raises(ValueError, match=re.escape(words)):
            entry.refuse_mark_point(st, kind, NOW, **point)
        n = len(st.mark_sets())
        with pytest.raises(ValueError, match=re.escape(words)):
            entry.write_mark(st, kind, 0.25, now=NOW, **point)
        assert len(st.mark_sets()) == n
        entry.refuse_mark_point(st, "vol", NOW, symbol="XYZ", expiry=EXPIRY)  # a Friday ahead
        entry.refuse_mark_point(st, "rate", NOW, currency="USD")


def test_a_vol_on_a_shut_day_a_contract_of_the_file_expires_on_is_written(xyz_db: Path) -> None:
    """An XYZ option the file holds expiring on Good Friday 2027 (booked with --force, imported
    or copied in) needs a vol at its own expiry: the app and ``mark vol`` write it, while a shut
    day no XYZ contract expires on is still refused."""
    from blotter.store import use_clock

    with use_clock(lambda: NOW):
        with store.open_store(xyz_db) as st:
            st.add_trade("desk", "XYZ", 2, 4.0, "2027-03-26", 100.0, True)
            entry.write_mark(st, "vol", 0.31, symbol="XYZ", expiry=date(2027, 3, 26), now=NOW)
            assert entry.mark_in_force(st, "vol", "XYZ", "2027-03-26") == pytest.approx(0.31)
            with pytest.raises(ValueError, match="is Christmas Day, an exchange holiday"):
                entry.refuse_mark_point(st, "vol", NOW, symbol="XYZ", expiry="2026-12-25")
        args = ["--db", str(xyz_db), "mark", "vol", "XYZ", "2027-03-26", "32%"]
        result = CliRunner().invoke(main, args)
    assert result.exit_code == 0, result.output
    with store.open_store(xyz_db, read_only=True) as st:
        assert entry.mark_in_force(st, "vol", "XYZ", "2027-03-26") == pytest.approx(0.32)


def test_the_command_line_refuses_the_same_marks_and_asks_for_force(xyz_db: Path) -> None:
    """``mark vol`` and ``mark rate`` refuse what the app refuses, in words, writing nothing;
    a vol or a spot far from the one in force needs --force."""
    from blotter.store import use_clock

    def run(*args: str) -> Any:
        return CliRunner().invoke(main, ["--db", str(xyz_db), "mark", *args])

    with use_clock(lambda: NOW):
        with store.open_store(xyz_db, read_only=True) as st:
            before = (len(st.marks()), len(st.mark_sets()))
        for args, words in (
            (("vol", "XYZ", "2026-11-27", "25%"), "XYZ 2026-11-27 has expired"),
            (("vol", "XYZ", "2027-01-16", "25%"), "2027-01-16 is a Saturday"),
            (("rate", "EUR", "365", "3%"), "EUR is not a currency of this file"),
            (("vol", "XYZ", str(EXPIRY), "45%"), "+15.00 vol points from the mark in force 30.00%"),
            (("vol", "XYZ", str(EXPIRY), "2%"), "2.00% is -28.00 vol points"),
            (("spot", "XYZ", "10"), "10 is -90.0% from the spot in force 100 (more than 20%)"),
        ):
            result = run(*args)
            assert result.exit_code == 1 and words in result.output, result.output
            assert "nothing written" in result.output
        with store.open_store(xyz_db, read_only=True) as st:
            assert (len(st.marks()), len(st.mark_sets())) == before
        forced = run("vol", "XYZ", str(EXPIRY), "45%", "--force")
        assert forced.exit_code == 0, forced.output
        with store.open_store(xyz_db, read_only=True) as st:
            assert entry.mark_in_force(st, "vol", "XYZ", EXPIRY) == pytest.approx(0.45)
            assert entry.mark_in_force(st, "spot", "XYZ") == pytest.approx(100.0)
            assert entry.mark_in_force(st, "vol", "XYZ", EXPIRY, 105.0) is None
