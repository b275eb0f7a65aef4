"""A desk session: the book read once and valued at one instant, trial trades layered on; the
values are QuantLib's for the same options, and the calendar arithmetic is the calendar's."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta
from pathlib import Path
from zoneinfo import ZoneInfo

import numpy as np
import pytest

from blotter import risk, scenario, store
from blotter.desk import session
from blotter.desk.entry import ContractTerms
from blotter.desk.trials import Trials, promote, trial_contract

from .conftest import EXPIRY, NOW, T0, quantlib_european

NEW_YORK = ZoneInfo("America/New_York")


def test_a_session_values_the_book_as_quantlib_prices_it(xyz_db: Path) -> None:
    """+10 calls at 105 and -5 puts at 95, 100 per contract: QuantLib's values times those."""
    with store.open_store(xyz_db, read_only=True) as st:
        loaded = session.read(st)
        version = st.data_version()
    desk = session.value(loaded, NOW, NEW_YORK)
    expected = 100 * (10 * quantlib_european(True, 105.0) - 5 * quantlib_european(False, 95.0))
    assert risk.total(desk.valuation).value == pytest.approx(expected, rel=1e-9)
    assert desk.data_version == version and desk.book_name == loaded.book.name
    assert desk.valuation_time == NOW and desk.valuation.valuation_time == T0
    assert desk.marks_as_of.tzinfo is not None and desk.mark_kind == "intraday"


def test_an_instant_and_an_aware_time_value_alike(xyz_db: Path) -> None:
    """The command line passes a UTC ``datetime64``, the app an aware clock time."""
    with store.open_store(xyz_db, read_only=True) as st:
        loaded = session.read(st)
    by_clock = session.value(loaded, NOW.astimezone(NEW_YORK), NEW_YORK)
    by_instant = session.value(loaded, T0, NEW_YORK, vega_unit="vol")
    assert by_instant.valuation_time == NOW == by_clock.valuation_time
    np.testing.assert_array_equal(by_clock.valuation.value, by_instant.valuation.value)
    assert (by_instant.valuation.vega_unit, by_instant.valuation.vega_scale) == ("vol", 100.0)


def test_a_trial_on_a_new_contract_adds_its_quantlib_value_and_writes_nothing(
    xyz_db: Path,
) -> None:
    with store.open_store(xyz_db, read_only=True) as st:
        loaded = session.read(st)
        unders = {r["symbol"]: r for r in st.underlying_records()}
        n_trades = len(st.trades())
    trials = Trials()
    terms = ContractTerms("XYZ", EXPIRY, 100.0, True)
    contract = trial_contract(unders, terms, trials.all())
    assert contract.contract_id < 0 and (contract.american, contract.multiplier) == (False, 100.0)
    first = trials.add(contract, 7, 4.0, "desk")
    again = trial_contract(unders, terms, trials.all())
    assert again.contract_id == contract.contract_id  # one new contract, one id
    live = session.value(loaded, NOW, NEW_YORK)
    with_trial = session.value(loaded, NOW, NEW_YORK, trials=trials.all())
    added = risk.total(with_trial.valuation).value - risk.total(live.valuation).value
    assert added == pytest.approx(7 * 100 * quantlib_european(True, 100.0), rel=1e-9)
    assert int(with_trial.valuation.book.is_trial.sum()) == 1
    assert (first.trial_id, trials.add(contract, -2, 4.1, "desk").trial_id) == (1, 2)
    assert trials.remove(1) and not trials.remove(1)
    assert [t.trial_id for t in trials] == [2] and trials.clear() == 1 and len(trials) == 0
    with store.open_store(xyz_db, read_only=True) as st:
        assert len(st.trades()) == n_trades


def test_promoting_trials_books_them(xyz_db: Path) -> None:
    with store.open_store(xyz_db) as st:
        unders = {r["symbol"]: r for r in st.underlying_records()}
        trials = Trials()
        trials.add(trial_contract(unders, ContractTerms("XYZ", EXPIRY, 100.0, False), []), 3,
                   2.5, "desk")
        ids = promote(st, trials.all())
        last = st.trades()[-1]
    assert ids == [last.trade_id]
    assert (last.contract, last.quantity, last.price) == ("XYZ 2027-01-15 100 P", 3, 2.5)


def test_quitting_with_trials_held_is_a_question(xyz_db: Path) -> None:
    with store.open_store(xyz_db, read_only=True) as st:
        unders = {r["symbol"]: r for r in st.underlying_records()}
    trials = Trials()
    assert trials.quit_question() == ""
    contract = trial_contract(unders, ContractTerms("XYZ", EXPIRY, 100.0, False), [])
    trials.add(contract, 3, 2.5, "desk")
    trials.add(contract, -1, 2.6, "desk")
    assert trials.quit_question() == (
        "2 trial trades are not booked: quitting drops them (the store never had them). "
        "Quit anyway?"
    )


@pytest.mark.parametrize(
    "move,days",
    [
        ("bdays 3", 3.0),  # Tuesday 2026-12-01 16:00 New York to Friday 12-04 16:00
        ("bdays 4", 6.0),  # ... to Monday 12-07 over the weekend
        ("days 2.5", 2.5),
        ("spot -3%", 0.0),
    ],
)
def test_roll_days_are_calendar_days_of_the_roll(xyz_db: Path, move: str, days: float) -> None:
    with store.open_store(xyz_db, read_only=True) as st:
        valuation = session.value(session.read(st), NOW, NEW_YORK).valuation
    assert session.roll_days(valuation, scenario.parse_move(move)) == pytest.approx(days)
    assert session.roll_days(valuation, None) == 0.0


def test_marks_age_is_stale_once_a_business_day_close_has_passed() -> None:
    marked = datetime(2026, 11, 30, 21, 0, tzinfo=UTC)  # Monday 16:00 New York
    morning = session.marks_age(marked, datetime(2026, 12, 1, 15, 0, tzinfo=UTC), NEW_YORK)
    assert (morning.words, morning.stale) == ("18 h 0 min", False)
    evening = session.marks_age(marked, datetime(2026, 12, 1, 21, 30, tzinfo=UTC), NEW_YORK)
    assert evening.stale and evening.last_close == datetime(2026, 12, 1, 16, 0, tzinfo=NEW_YORK)
    friday = datetime(2026, 12, 4, 21, 0, tzinfo=UTC)  # Friday's close, seen on Sunday
    sunday = session.marks_age(friday, friday + timedelta(days=2), NEW_YORK)
    assert (sunday.words, sunday.stale) == ("2 days 0 h", False)
    assert session.age_words(timedelta(minutes=-1)) == "dated after the valuation time:"


def test_one_fresh_mark_does_not_make_old_points_fresh() -> None:
    """Staleness is per point: 420 of 421 points marked Monday, one marked Wednesday morning,
    seen Wednesday after Tuesday's close; the newest mark alone would say fresh."""
    monday = np.datetime64("2026-11-30T21:00:00", "us")  # 16:00 New York
    fresh = datetime(2026, 12, 2, 14, 30, tzinfo=UTC)  # Wednesday 09:30 New York
    observed = np.array([monday] * 420 + [np.datetime64(fresh.replace(tzinfo=None), "us")])
    now = fresh + timedelta(minutes=30)
    newest_only = session.marks_age(fresh, now, NEW_YORK)
    assert not newest_only.stale
    age = session.marks_age(fresh, now, NEW_YORK, observed=observed)
    assert (age.stale, age.points, age.stale_points) == (True, 421, 420)
    assert age.stale_words(NEW_YORK) == "STALE: 420 of 421 marked before 12-01 16:00 close"
    observed[:] = np.datetime64(fresh.replace(tzinfo=None), "us")  # every point marked again
    again = session.marks_age(fresh, now, NEW_YORK, observed=observed)
    assert (again.stale, again.stale_points, again.stale_words(NEW_YORK)) == (False, 0, "")


def test_a_close_carries_old_points_stale_into_the_session(tmp_path: Path) -> None:
    """Marks made Monday, a close written Tuesday evening with only the spot marked again: the
    session still counts the vol and rate as older than Tuesday's close (a close re-dates
    nothing)."""
    path = tmp_path / "book.db"
    monday = datetime(2026, 11, 30, 20, 0, tzinfo=UTC)
    clock = [monday]
    st = store.create_store(path, clock=lambda: clock[0])
    try:
        st.add_underlying("XYZ", "stock", "USD", 100.0, description="invented for the tests")
        st.log_spot("XYZ", 100.0)
        st.log_vol("XYZ", EXPIRY, 0.30)
        st.log_rate("USD", 365, 0.04)
        st.add_trade("desk", "XYZ", 10, 3.0, EXPIRY, 105.0, True, create_book=True)
        clock[0] = datetime(2026, 12, 1, 21, 10, tzinfo=UTC)  # Tuesday 16:10 New York
        st.log_spot("XYZ", 101.0)
        clock[0] = datetime(2026, 12, 1, 21, 30, tzinfo=UTC)  # 16:30: the close
        st.commit_close()
        desk = session.value(session.read(st), clock[0], NEW_YORK)
    finally:
        st.close()
    assert desk.mark_kind == "close" and desk.marks_as_of == clock[0]
    age = desk.marks_age(clock[0] + timedelta(hours=1), NEW_YORK)
    assert (age.points, age.stale_points) == (3, 2)
    assert age.stale_words(NEW_YORK) == "STALE: 2 of 3 marked before 12-01 16:00 close"


def test_left_out_positions_are_named_with_what_they_lack(xyz_db: Path) -> None:
    with store.open_store(xyz_db) as st:
        st.add_underlying("ABC", "stock", "EUR", 100.0, description="invented, never marked")
        st.add_trade("desk", "ABC", 1, 1.0, EXPIRY, 50.0, True)
        st.add_trade("desk", "ABC", 2, 1.0, EXPIRY, 55.0, True)
        loaded = session.read(st)
    unvalued = session.value(loaded, NOW, NEW_YORK).valuation.unvalued
    assert session.unvalued_count(unvalued) == 2
    assert session.unvalued_words(unvalued) == (
        "2 positions not valued (ABC: spot, vol; EUR: rate)"
    )
    assert session.missing_by_name(unvalued, most=1) == "ABC: spot, vol; 1 more"
    assert session.unvalued_words(()) == ""


@pytest.mark.parametrize(
    "text,words,warning",
    [
        ("spot -3%", "every spot -3.00%", ""),
        ("spot -3", "every spot -3.00 USD", ""),  # 3% of XYZ's 100: no warning
        (
            "spot -12",
            "every spot -12.00 USD",
            "-12.00 USD is -12.0% of XYZ 100",
        ),
        ("XYZ spot =101", "XYZ spot set to 101 USD", ""),
        ("spot -3% beta vol -10%", "every spot -3.00% × beta, vol -10.00% of itself", ""),
        (
            "vol +2 weighted days 1 rate +25bp moneyness",
            "vol +2.00 pts weighted by √T, 1 calendar day on, rates +25 bp, vols sticky moneyness",
            "",
        ),
        ("bdays 2", "2 business days on", ""),
    ],
)
def test_a_move_is_said_with_its_units_and_a_large_absolute_spot_move_is_warned(
    xyz_db: Path, text: str, words: str, warning: str
) -> None:
    """``spot -3`` (currency units) and ``spot -3%`` read apart in words; an absolute move over
    10% of a spot it moves is warned about (the slip for a relative move)."""
    with store.open_store(xyz_db, read_only=True) as st:
        desk = session.value(session.read(st), NOW, NEW_YORK)
    move = scenario.parse_move(text, ["XYZ"])
    said = session.move_words(desk.valuation, move)
    assert (said.words, said.warning) == (words, warning)


AT_T0 = datetime(2026, 12, 1, 21, 0, tzinfo=UTC)
"""``T0`` as an aware time: 16:00 New York, 45 days before ``EXPIRY``'s cut-off."""


@pytest.mark.parametrize("strike,call", [(105.0, True), (95.0, False), (110.0, False)])
def test_the_model_value_of_a_contract_is_quantlibs(
    xyz_db: Path, strike: float, call: bool
) -> None:
    """A contract booked or not (110 P is new to the file) is valued on the marks in force as
    QuantLib's analytic European engine values it; the underlying at its spot."""
    from blotter.desk import entry
    from blotter.desk.trials import trial_contract

    with store.open_store(xyz_db, read_only=True) as st:
        terms = ContractTerms("XYZ", EXPIRY, strike, call)
        contract = entry.find_contract(st.contracts(), terms) or trial_contract(
            {r["symbol"]: r for r in st.underlying_records()}, terms, ()
        )
        live, market = st.load_book(), st.load_market()
        assert session.model_price(live, market, contract, AT_T0, NEW_YORK) == pytest.approx(
            quantlib_european(call, strike), rel=1e-9
        )
        under = trial_contract(
            {"XYZ": st.underlying_records()[0]}, ContractTerms("XYZ", None, None, None), ()
        )
        assert session.model_price(live, market, under, AT_T0, NEW_YORK) == 100.0


@pytest.mark.parametrize(
    "price,asked",
    [(3.0, False), (1.0, True), (9.0, True), (0.1, True)],
)
def test_a_price_far_from_the_model_value_is_questioned(
    xyz_db: Path, price: float, asked: bool
) -> None:
    """The rule: off by more than half the model value and by more than 0.05 asks; the 105 C is
    worth about 2.37 by QuantLib, so 3.00 passes and 1.00, 9.00 and 0.10 ask."""
    model = quantlib_european(True, 105.0)
    with store.open_store(xyz_db, read_only=True) as st:
        terms = ContractTerms("XYZ", EXPIRY, 105.0, True)
        question = session.price_question(st, terms, price, AT_T0, NEW_YORK)
    assert bool(question) is asked
    if asked:
        assert question.startswith(f"price {price:g} for XYZ 2027-01-15 105 C is ")
        assert f"from its model value {model:,.6g} on the marks in force" in question


def test_the_price_rule_in_numbers() -> None:
    """More than 50% of the model value and more than 0.05 (five 0.01 ticks, common practice)."""
    from blotter.desk import entry

    assert entry.price_question(0.09, 0.05, "X") == ""  # 80% off, but only 0.04
    assert entry.price_question(0.11, 0.05, "X") != ""  # 120% off and 0.06
    assert entry.price_question(1.23, 4600.0, "F") == (
        "price 1.23 for F is -4,598.77 from its model value 4,600 on the marks in force "
        "(more than 50% of it)"
    )
    assert entry.price_question(1.23, None, "F") == ""  # not valued: nothing to compare with


def test_reading_again_keeps_the_book_until_something_it_is_read_from_changes(
    xyz_db: Path,
) -> None:
    """Under a feed only marks move: ``read_again`` keeps the book object and reads the marks
    afresh; a trade, an underlying's correction or another book's name reads the book again."""
    with store.open_store(xyz_db) as st:
        first = session.read_again(st, None, None)
        st.log_spot("XYZ", 101.0)
        marks_only = session.read_again(st, None, first)
        assert marks_only.book is first.book
        assert marks_only.market.spots["XYZ"] == 101.0
        st.add_trade("desk", "XYZ", 3, 3.0, EXPIRY, 105.0, True)
        traded = session.read_again(st, None, marks_only)
        assert traded.book is not marks_only.book
        assert sorted(traded.book.quantities.tolist()) == [-5, 13]
        st.correct_underlying("XYZ", "beta re-estimated", {"beta": 1.7})
        corrected = session.read_again(st, None, traded)
        assert corrected.book is not traded.book
        assert corrected.book.underlyings.betas.tolist() == [1.7]
        one_book = session.read_again(st, "desk", corrected)
        assert one_book.book is not corrected.book and one_book.asked == "desk"
        assert session.read_again(st, "desk", one_book).book is one_book.book


def test_reading_again_through_a_new_store_reads_only_the_marks_written_since(
    xyz_db: Path,
) -> None:
    """The app opens a store per load: ``read_again`` hands the previous read's marks in force
    to the new store, which reads on from them (no second full read) to the same market as a
    store reading everything."""
    with store.open_store(xyz_db) as st:
        first = session.read_again(st, None, None)
    assert first.marks_cache is not None and first.marks_cache.full_reads == 1
    with store.open_store(xyz_db) as writer:
        writer.log_spot("XYZ", 102.0)
    with store.open_store(xyz_db) as st:
        again = session.read_again(st, None, first)
    with store.open_store(xyz_db) as fresh:
        spots = fresh.load_market().spots
    assert again.marks_cache is first.marks_cache and first.marks_cache.full_reads == 1
    assert again.market.spots == spots and spots["XYZ"] == 102.0


def test_a_session_moved_on_to_one_name_s_new_spot_equals_one_valued_afresh(
    demo_db: Path,
) -> None:
    """Valued at the same instant with the last session given, only the moved name's positions
    are valued again (``risk.revalue``): the same numbers as a valuation from scratch."""
    at = datetime(2026, 12, 1, 15, 0, tzinfo=UTC)
    with store.open_store(demo_db) as st:
        first = session.read_again(st, None, None)
        before = session.value(first, at, NEW_YORK)
        st.log_spot("DEMOA", first.market.spots["DEMOA"] * 1.03)
        marks = session.read_again(st, None, first)
        moved = session.value(
            marks, at, NEW_YORK, boundaries=before.valuation.boundaries, previous=before
        )
        fresh = session.value(marks, at, NEW_YORK, boundaries=before.valuation.boundaries.copy())
    assert moved.valuation.market is marks.market and moved.data_version == marks.data_version
    for name in ("value", "delta_cash", "gamma_1pct", "vega_pt", "theta_day", "rho_pct"):
        np.testing.assert_array_equal(
            getattr(moved.valuation, name), getattr(fresh.valuation, name), err_msg=name
        )
    untouched = moved.valuation.book.underlying_idx != moved.valuation.book.underlyings.index_of(
        "DEMOA"
    )
    np.testing.assert_array_equal(
        moved.valuation.value[untouched], before.valuation.value[untouched]
    )
