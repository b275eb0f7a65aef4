"""P&L explain between two mark sets, on an in-memory stand-in for the store (``FakeStore``: the
members of ``ExplainSource`` and nothing more), and the store itself giving the same members.

Sources: QuantLib 1.44 values the held option at both marks (actual P&L); the terms are the
start's greeks times each input's change (the risk-based explain of PRACTICE.md §2, common
practice); new trades' P&L = (end mark − trade price) × quantity × multiplier (common practice).
"""

from __future__ import annotations

import inspect
from collections.abc import Callable
from dataclasses import dataclass, replace
from datetime import UTC, date, datetime, timedelta
from pathlib import Path

import numpy as np
import pytest
from books import RATE, SPOTS, Row, make_book, make_market, ql_price

from blotter import calendar as cal
from blotter.book import Book
from blotter.market import Market
from blotter.scenario import explain
from blotter.scenario.pnl_explain import ExplainMarkSet, ExplainSource, ExplainTrade
from blotter.store import open_store

FRI = datetime(2026, 12, 4, 21, 0, tzinfo=UTC)
MON = FRI + timedelta(days=3)


@dataclass(frozen=True)
class SetInfo:
    id: int
    kind: str
    marked_at: datetime
    who: str = "test"
    note: str = ""
    corrects: int | None = None
    superseded_by: int | None = None
    business_date: date | None = None
    seq: int = 0  # the set's place in the store's order: 10 × its id unless given


@dataclass(frozen=True)
class TradeInfo:
    trade_id: int
    contract_id: int
    trade_time: datetime
    seq: int
    cancel_seq: int | None = None


class FakeStore:
    """``ExplainSource`` over fixed books and markets: ``held`` was written before every set;
    each row of ``trades`` is one trade dealt at ``trade_time`` and written at place
    ``trade_seq`` of the store's order (between sets 2 and 3 unless given)."""

    def __init__(
        self,
        sets: list[SetInfo],
        markets: dict[int, Market],
        held: Book,
        trades: Book,
        prices: np.ndarray,
        now_market: Market | None = None,
        trade_time: datetime = FRI + timedelta(days=1),
        trade_seq: int = 25,
    ) -> None:
        self.sets = [s if s.seq else replace(s, seq=10 * s.id) for s in sets]
        self.markets, self.held, self.trade_book, self.prices = markets, held, trades, prices
        self.now_market = now_market
        self.trade_time = trade_time
        self.trade_seq = trade_seq
        self.asked: list[tuple[str, object]] = []

    def mark_sets(self) -> list[SetInfo]:
        return list(self.sets)

    def last_seq(self) -> int:
        return max([self.trade_seq, *(s.seq for s in self.sets)])

    def load_market(self, mark_set_id: int | None = None) -> Market:
        self.asked.append(("market", mark_set_id))
        return self.now_market if mark_set_id is None else self.markets[mark_set_id]

    def load_book(self, *, before_seq: int) -> Book:
        self.asked.append(("book", before_seq))
        if before_seq <= self.trade_seq:
            return self.held
        return self.held.with_trials(self.trade_book)  # distinct contract ids, one row each

    def new_trades(self, after_seq: int, before_seq: int | None = None) -> tuple[Book, np.ndarray]:
        self.asked.append(("trades", (after_seq, before_seq)))
        if after_seq < self.trade_seq < (before_seq or self.last_seq() + 1):
            return self.trade_book, self.prices
        return self.trade_book.take([]), self.prices[:0]

    def trades(self) -> list[TradeInfo]:
        b = self.trade_book
        return [
            TradeInfo(100 + i, int(b.contract_ids[i]), self.trade_time, self.trade_seq)
            for i in range(len(b))
        ]


def _market(spots: dict[str, float], vols: dict[str, float], marked: datetime) -> Market:
    m = make_market(spots=spots, vols=vols)
    return Market(
        version=1, marks_as_of=marked, spots=m.spots, surfaces=m.surfaces, curves=m.curves
    )


VOL0 = {"IDX": 0.20, "STK": 0.35, "FUT": 0.30, "FXA": 0.10}
VOL1 = {"IDX": 0.21, "STK": 0.34, "FUT": 0.30, "FXA": 0.10}
SPOT1 = dict(SPOTS, IDX=4455.0, STK=121.2)


def _store(**kw: object) -> FakeStore:
    # Expiries count from the Friday close: the IDX call has 30 days, the STK put 60.
    held = _book_at(
        FRI,
        [Row("IDX", 10, 4500, 30, True), Row("STK", -20, 115, 60, False), Row("STK", 500, mult=1)],
    )
    trades = _book_at(FRI, [Row("IDX", 2, 4400, 30, False)], first_id=100)
    sets = [
        SetInfo(1, "close", FRI - timedelta(days=1)),
        SetInfo(2, "close", FRI),
        SetInfo(3, "intraday", FRI + timedelta(days=1)),
        SetInfo(4, "close", MON),
    ]
    markets = {
        1: _market(SPOTS, VOL0, sets[0].marked_at),
        2: _market(SPOTS, VOL0, FRI),
        4: _market(SPOT1, VOL1, MON),
    }
    args: dict[str, object] = dict(
        sets=sets, markets=markets, held=held, trades=trades, prices=np.array([60.0])
    )
    args.update(kw)
    return FakeStore(**args)  # type: ignore[arg-type]


def _book_at(t: datetime, rows: list[Row], first_id: int = 1) -> Book:
    b = make_book(rows)
    shift = cal.to_instant(t) - np.datetime64("2026-12-04T20:00:00", "s")
    return Book(
        name=b.name,
        underlyings=b.underlyings,
        reference_index=b.reference_index,
        contract_ids=b.contract_ids + (first_id - 1),
        labels=b.labels,
        underlying_idx=b.underlying_idx,
        is_option=b.is_option,
        is_call=b.is_call,
        american=b.american,
        strikes=b.strikes,
        expiries=b.expiries + shift,
        multipliers=b.multipliers,
        quantities=b.quantities,
    )


def test_default_is_the_last_two_closes_and_actual_matches_quantlib() -> None:
    store = _store()
    ex = explain(store)
    assert (ex.from_set.id, ex.to_set.id) == (2, 4)
    assert ex.from_time == cal.to_instant(FRI) and ex.to_time == cal.to_instant(MON)
    idx0 = ql_price(True, 4500.0, 4500, 30, RATE, 0.015, 0.20)
    idx1 = ql_price(True, 4455.0, 4500, 27, RATE, 0.015, 0.21)
    stk0 = ql_price(False, 120.0, 115, 60, RATE, 0.02, 0.35)
    stk1 = ql_price(False, 121.2, 115, 57, RATE, 0.02, 0.34)
    idx_actual = 1000 * (idx1 - idx0)
    stk_actual = -2000 * (stk1 - stk0) + 500 * 1.2
    rows = {r.underlying: r for r in ex.by_underlying}
    assert rows["IDX"].actual == pytest.approx(idx_actual, rel=1e-8)
    assert rows["STK"].actual == pytest.approx(stk_actual, rel=1e-8)
    assert ex.total.actual == pytest.approx(idx_actual + stk_actual, rel=1e-8)


def test_terms_use_the_start_greeks_and_the_rest_is_unexplained() -> None:
    ex = explain(_store())
    g, u = ex.start.greeks, ex.start.units
    ds = np.array([-45.0, 1.2, 1.2])
    dv = np.array([0.01, -0.01, 0.0])
    dt = 3 / 365
    assert ex.total.terms["delta"] == pytest.approx(float(np.sum(g.delta * u * ds)))
    assert ex.total.terms["gamma"] == pytest.approx(float(np.sum(0.5 * g.gamma * u * ds**2)))
    assert ex.total.terms["vega"] == pytest.approx(float(np.sum(g.vega * u * dv)))
    assert ex.total.terms["vanna"] == pytest.approx(float(np.sum(g.vanna * u * ds * dv)))
    assert ex.total.terms["theta"] == pytest.approx(float(np.sum(g.theta * u * dt)))
    assert ex.total.terms["rho"] == 0.0
    assert ex.total.explained == pytest.approx(sum(ex.total.terms.values()))
    assert ex.total.unexplained == pytest.approx(ex.total.actual - ex.total.explained)
    # A 1% spot move and one vol point over a weekend: the greeks explain most of it.
    assert abs(ex.total.unexplained) < 0.05 * abs(ex.total.actual)


def test_new_trades_are_shown_apart() -> None:
    ex = explain(_store())
    mark = ql_price(False, 4455.0, 4400, 27, RATE, 0.015, 0.21)
    assert ex.total.new_trades == pytest.approx((mark - 60.0) * 200, rel=1e-8)
    rows = {r.underlying: r for r in ex.by_underlying}
    assert rows["IDX"].new_trades == pytest.approx(ex.total.new_trades)
    assert rows["STK"].new_trades == 0.0
    assert ex.total.total == pytest.approx(ex.total.actual + ex.total.new_trades)


def test_explicit_sets_now_and_corrections() -> None:
    store = _store(now_market=_market(SPOT1, VOL1, MON))
    ex = explain(store, from_set=1, to_set=4)
    assert ex.from_set.id == 1
    ex = explain(store, to_set="now")
    assert ex.to_set == "now" and ex.from_set.id == 4
    # Close 2 corrected by close 5 (marked later, standing for Friday's close).
    sets = (
        store.sets[:1]
        + [SetInfo(2, "close", FRI, superseded_by=5)]
        + store.sets[2:]
        + [SetInfo(5, "close", MON + timedelta(hours=2), corrects=2)]
    )
    store = _store(sets=sets, markets={**store.markets, 5: store.markets[2]})
    ex = explain(store)
    assert (ex.from_set.id, ex.to_set.id) == (5, 4)
    assert ex.from_time == cal.to_instant(FRI)


def test_refusals() -> None:
    store = _store()
    with pytest.raises(ValueError, match="no mark set"):
        explain(store, from_set=99)
    with pytest.raises(ValueError, match="older"):
        explain(store, from_set=4, to_set=2)
    one = _store(sets=[SetInfo(2, "close", FRI)])
    with pytest.raises(ValueError, match="two close"):
        explain(one)


def test_a_dividend_yield_mark_change_is_the_carry_term() -> None:
    # The STK dividend yield mark goes from 2% (the underlying's default) to 3% over the weekend;
    # spots and vols stay. A higher yield lowers the carry b = r − q and raises the put's value,
    # so the desk, short 20 puts, loses: the start's carry rho times db = −1% is the carry term,
    # and it, not "unexplained", takes that P&L. Actual from
    # QuantLib 1.44 (BSM process, flat curves) at both marks.
    store = _store()
    m2, m4 = store.markets[2], store.markets[4]
    store.markets[4] = Market(
        version=1, marks_as_of=MON, spots=m2.spots, surfaces=m2.surfaces, curves=m4.curves,
        div_yields={"STK": 0.03},
    )
    ex = explain(store)
    rows = {r.underlying: r for r in ex.by_underlying}
    stk0 = ql_price(False, 120.0, 115, 60, RATE, 0.02, 0.35)
    stk1 = ql_price(False, 120.0, 115, 57, RATE, 0.03, 0.35)
    assert rows["STK"].actual == pytest.approx(-2000 * (stk1 - stk0), rel=1e-8)
    g, u = ex.start.greeks, ex.start.units
    stk = ex.start.book.underlying_idx == ex.start.book.underlyings.index_of("STK")
    want = float(np.sum((g.carry_rho * u * -0.01)[stk & ex.start.book.is_option]))
    assert rows["STK"].terms["carry"] == pytest.approx(want, rel=1e-12)
    # Against QuantLib: the P&L of the yield change alone (60 days both sides) is the carry
    # term to first order in dq = 1%.
    ql_q = -2000 * (ql_price(False, 120.0, 115, 60, RATE, 0.03, 0.35) - stk0)
    assert rows["STK"].terms["carry"] == pytest.approx(ql_q, rel=0.03)
    assert rows["STK"].terms["carry"] < 0.0        # theta over the weekend outweighs it in actual
    assert rows["STK"].terms["rho"] == 0.0 and rows["IDX"].terms["carry"] == 0.0
    # What is left unexplained is theta's and the second-order carry's share, small next to it.
    assert abs(rows["STK"].unexplained) < 0.1 * abs(rows["STK"].terms["carry"])


def _accepts_the_calls_of(method: Callable[..., object], member: Callable[..., object]) -> None:
    """``method`` takes every argument the protocol's ``member`` declares, by position or by
    keyword as declared, and needs no other."""
    params = [p for p in inspect.signature(member).parameters.values() if p.name != "self"]
    positional = [p for p in params if p.kind is p.POSITIONAL_OR_KEYWORD]
    keywords = [p for p in params if p.kind is p.KEYWORD_ONLY]
    have = inspect.signature(method)
    have.bind(*(0 for _ in positional), **{p.name: 0 for p in keywords})
    have.bind(
        *(0 for p in positional if p.default is p.empty),
        **{p.name: 0 for p in keywords if p.default is p.empty},
    )


@pytest.mark.parametrize("which", ["stand-in", "store"])
def test_the_stand_in_and_the_store_give_what_explain_reads(which: str, demo_db: Path) -> None:
    source = _store() if which == "stand-in" else open_store(demo_db, read_only=True)
    assert isinstance(source, ExplainSource)
    members = [
        n for n, v in vars(ExplainSource).items() if inspect.isfunction(v) and n[0] != "_"
    ]
    assert sorted(members) == [
        "last_seq", "load_book", "load_market", "mark_sets", "new_trades", "trades"
    ]
    for name in members:
        _accepts_the_calls_of(getattr(source, name), getattr(ExplainSource, name))
    sets, trades = source.mark_sets(), source.trades()
    assert sets and trades
    assert all(isinstance(s, ExplainMarkSet) for s in sets)
    assert all(isinstance(t, ExplainTrade) for t in trades)
    ex = explain(source)
    assert ex.total.total == pytest.approx(ex.total.actual + ex.total.new_trades)
