"""A session: the book and marks read once, the trial trades layered on, valued at one instant.

``read`` takes the book, the marks in force and the file's data version from a store (or any
``BookSource``); ``value`` layers the trials and values it all at the valuation time
(``risk.value_book``). The app's load worker and the report commands both go through these two,
so a report and the app's Book pane value the same book alike. Also here: the calendar days of a
move's roll, how old the marks are, and the words for positions left out of a valuation.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, replace
from datetime import UTC, datetime, timedelta
from typing import TYPE_CHECKING, Protocol
from zoneinfo import ZoneInfo

import numpy as np

from blotter import calendar as cal
from blotter import risk
from blotter.desk.trials import TrialTrade, trial_book

if TYPE_CHECKING:
    from blotter.book import Book
    from blotter.desk.entry import ContractTerms
    from blotter.engine import BoundaryCache
    from blotter.market import Market
    from blotter.scenario import Move
    from blotter.store import ContractRecord, InForceMarks, Store, TradeRecord


class BookSource(Protocol):
    """Where a session reads from: a ``store.Store`` (anything with these four reads)."""

    def load_book(self, book: str | None = None) -> Book: ...

    def load_market(self) -> Market: ...

    def data_version(self) -> int: ...

    def base_currency(self) -> str: ...


@dataclass(frozen=True, repr=False)
class Loaded:
    """The live book, the marks in force, the file's data version and the book's base currency
    (totals convert to it at the marked FX spots), as read together."""

    book: Book
    market: Market
    data_version: int
    base_currency: str = "USD"
    book_version: tuple[int, ...] = ()  # ``Store.book_version`` before the book was read
    asked: str | None = None  # the book asked for (None: every book)
    marks_cache: InForceMarks | None = None  # the store's marks in force, for the next read

    def __repr__(self) -> str:  # short: the arrays inside are large
        return f"Loaded(positions={len(self.book)}, data_version={self.data_version})"


def read(source: BookSource, book: str | None = None) -> Loaded:
    """The book (``book`` alone, or every book when None), the marks in force, the data version
    and the base currency of ``source``."""
    return Loaded(
        source.load_book(book),
        source.load_market(),
        int(source.data_version()),
        str(source.base_currency()),
        asked=book,
    )


def read_again(st: Store, book: str | None, previous: Loaded | None) -> Loaded:
    """``read`` from the store ``st``, keeping ``previous``'s book (the same object) when it was
    of the same ``book`` and ``Store.book_version`` is unchanged: under a feed only marks move,
    so only they, the data version and the base currency are read afresh. The marks in force
    are read on from ``previous``'s (``Store.marks_cache``), so a store opened per read takes
    only the marks written since."""
    if previous is not None and previous.marks_cache is not None:
        st.marks_cache = previous.marks_cache
    version = st.book_version()
    if previous is not None and previous.asked == book and previous.book_version == version:
        return replace(
            previous,
            market=st.load_market(),
            data_version=int(st.data_version()),
            base_currency=str(st.base_currency()),
            marks_cache=st.marks_cache,
        )
    return replace(read(st, book), book_version=version, marks_cache=st.marks_cache)


@dataclass(frozen=True, repr=False)
class Session:
    """One valued load: the valuation (trials layered on) and where its inputs came from."""

    valuation: risk.BookValuation
    data_version: int
    valuation_time: datetime  # aware, UTC

    @property
    def book_name(self) -> str:
        return self.valuation.book.name

    @property
    def marks_as_of(self) -> datetime:
        """When the marks in force were marked, aware (UTC when the market left it naive)."""
        t = self.valuation.market.marks_as_of
        return t.replace(tzinfo=UTC) if t.tzinfo is None else t

    @property
    def mark_set_id(self) -> int | None:
        return self.valuation.market.mark_set_id

    @property
    def mark_kind(self) -> str:
        return self.valuation.market.mark_kind

    def marks_age(self, now: datetime, tz: ZoneInfo) -> MarksAge:
        """How old the marks in force are at ``now``, point by point (``marks_age``)."""
        market = self.valuation.market
        return marks_age(self.marks_as_of, now, tz, observed=market.observed_at)

    def __repr__(self) -> str:  # short: the arrays inside are large
        return f"Session(positions={len(self.valuation)}, data_version={self.data_version})"


def value(
    loaded: Loaded,
    at: datetime | np.datetime64,
    tz: ZoneInfo,
    *,
    trials: Sequence[TrialTrade] = (),
    vega_unit: str = "pt",
    boundaries: BoundaryCache | None = None,
    previous: Session | None = None,
) -> Session:
    """Value ``loaded`` with ``trials`` layered on at ``at`` in the desk zone ``tz``.

    ``at`` is an aware datetime (valued to the whole second) or a UTC ``datetime64``.
    ``boundaries`` are an earlier valuation's American boundaries, reused where the inputs
    are the same (they are keyed by exact inputs, so a mark that changed only misses).
    ``previous``, a session of the same book object valued at the same instant with every
    position valued, is moved on instead (``risk.revalue``: only the positions of names whose
    marks moved are valued again; the same numbers).
    """
    t: np.datetime64
    if isinstance(at, datetime):
        t = np.datetime64(at.astimezone(UTC).replace(tzinfo=None), "s")
        when = at
    else:
        t, when = at, cal.to_datetime(at)
    book = trial_book(loaded.book, trials)
    prior = previous.valuation if previous is not None else None
    if (
        prior is not None
        and prior.book is book
        and prior.valuation_time == t
        and prior.vega_unit == vega_unit
        and prior.tz == tz
    ):
        valuation = risk.revalue(prior, loaded.market)
    else:
        valuation = risk.value_book(
            book, loaded.market, t, vega_unit=vega_unit, tz=tz, boundaries=boundaries
        )
    return Session(valuation, loaded.data_version, when)


REVALUE_EVERY = timedelta(minutes=1)
"""How often an idle app values the book again at the clock's time, so "valued 10:04" is current."""


def revalue_due(valued_at: datetime, now: datetime) -> bool:
    """True when ``now`` is in a later minute than ``valued_at`` (the shown time is whole
    minutes), so a watcher asks for one revaluation a minute and none in between."""
    step = REVALUE_EVERY.total_seconds()
    return int(now.timestamp() // step) > int(valued_at.timestamp() // step)


def valuation_instant(previous: Session | None, now: datetime) -> datetime:
    """The instant a new load of the book is valued at: ``previous``'s while ``now`` is still in
    its minute (``revalue_due``), else ``now``.

    Screens show the valuation time in whole minutes, so within one the picture is the same;
    and at the same instant every time to expiry and rate is the same to the bit, so a load
    under a feed finds every American boundary solved (``BoundaryCache`` keys hold them
    exactly) instead of solving them all again each second."""
    if previous is None:
        return now
    held = previous.valuation_time
    if held <= now and not revalue_due(held, now):
        return held
    return now


def model_price(
    live: Book, market: Market, contract: ContractRecord, at: datetime, tz: ZoneInfo
) -> float | None:
    """The model value of one unit of ``contract`` on ``market`` at ``at`` (``risk.value_book``
    on a one-row book; an underlying or a future: its spot), None when it cannot be valued."""
    if contract.option_type == "U":
        return market.spots.get(contract.symbol)
    trial = TrialTrade(0, contract, 1, 0.0, live.name)
    try:
        one = trial_book(live.take([]), [trial])
        t = np.datetime64(at.astimezone(UTC).replace(tzinfo=None), "s")
        valued = risk.value_book(one, market, t, tz=tz)
    except (ValueError, KeyError):
        return None
    if len(valued.book) != 1 or not bool(valued.live[0]):
        return None  # left out for a missing mark, or expired
    return float(valued.value[0] / valued.units[0])


def price_question(
    st: Store,
    terms: ContractTerms,
    price: float,
    at: datetime,
    tz: ZoneInfo,
    new_contract: bool = False,
) -> str:
    """``entry.price_question`` for booking ``terms`` at ``price`` in the book file ``st``,
    valued on its marks in force at ``at`` (a contract new to the file on its defaults), and
    ``entry.expiry_question`` when the trade makes a ``new_contract``; empty when neither asks."""
    from blotter.desk import entry
    from blotter.desk.trials import trial_contract

    records = {r["symbol"]: r for r in st.underlying_records()}
    off_day = entry.expiry_question(terms, records) if new_contract else ""
    contract = entry.find_contract(st.contracts(), terms)
    if contract is None:
        try:
            contract = trial_contract(records, terms, ())
        except ValueError:
            return off_day  # the store refuses it in its own words
    model = model_price(st.load_book(), st.load_market(), contract, at, tz)
    asks = (off_day, entry.price_question(price, model, contract.label))
    return "; ".join(a for a in asks if a)


def terms_of(trade: TradeRecord) -> ContractTerms:
    """The contract terms of a booked trade, as a typed ticket gives them."""
    from blotter.desk.entry import ContractTerms

    if trade.option_type == "U":
        return ContractTerms(trade.symbol, None, None, None)
    return ContractTerms(trade.symbol, trade.expiry, trade.strike, trade.option_type == "C")


def roll_days(valuation: risk.BookValuation, move: Move | None) -> float:
    """Calendar days of ``move``'s day roll from the valuation time (business days through
    ``scenario.roll_time``); 0 without a move."""
    if move is None:
        return 0.0
    if not move.bdays:
        return float(move.days)
    from blotter import scenario

    t0 = valuation.valuation_time
    t1 = scenario.roll_time(valuation, move)
    return float((t1 - t0) / np.timedelta64(1, "s")) / 86400.0


ABS_SPOT_WARN = 0.10
"""An absolute spot move larger than this fraction (10%) of a spot it moves is warned about: a
slip for a relative move (``spot -3`` for ``spot -3%``) is the likely cause."""


@dataclass(frozen=True)
class MoveWords:
    """A move in words with every amount's unit, and a warning (empty: none) about it."""

    words: str
    warning: str = ""


def _amount(x: float) -> str:
    """A signed amount to cents, or to six digits when smaller than a cent."""
    return f"{x:+,.2f}" if x == 0 or abs(x) >= 0.01 else f"{x:+.6g}"


def move_words(valuation: risk.BookValuation, move: Move) -> MoveWords:
    """``move`` said with units (``every spot -3.00 USD``, ``DEMOA spot +2.50%``, ``vol +2.00
    pts``) for the valuation's book, and a warning when an absolute spot move is more than
    ``ABS_SPOT_WARN`` of a spot it moves (``-3.00 USD is -13.0% of DEMOC 23.14``)."""
    unders = valuation.book.underlyings
    spots = valuation.market.spots
    symbols = [s for s in unders.symbols if s in spots]
    ccy = dict(zip(unders.symbols, unders.currencies, strict=True))
    words: list[str] = []
    large: list[tuple[float, str, float]] = []  # (fraction of spot, symbol, spot)
    for shift in move.spot:
        who = f"{shift.symbol} spot" if shift.symbol else "every spot"
        moved = [shift.symbol] if shift.symbol else symbols
        units = sorted({ccy[s] for s in moved if s in ccy})
        money = units[0] if len(units) == 1 else "in its own currency"
        if shift.unit == "%":
            text = f"{who} {shift.amount:+.2f}%"
        elif shift.unit == "level":
            text = f"{who} set to {shift.amount:,.6g} {money}"
        else:
            text = f"{who} {_amount(shift.amount)} {money}"
            for s in moved:
                if s in spots and abs(shift.amount) > ABS_SPOT_WARN * spots[s]:
                    large.append((shift.amount / spots[s], s, spots[s]))
        words.append(text + (" × beta" if shift.beta else ""))
    for v in move.vol:
        where = f"{v.symbol} vol" if v.symbol else "vol"
        amount = f"{v.amount:+.2f} pts" if v.unit == "pts" else f"{v.amount:+.2f}% of itself"
        words.append(f"{where} {amount}" + (" weighted by √T" if v.weighted else ""))
    if move.days:
        words.append(f"{move.days:g} calendar day{'s' if move.days != 1 else ''} on")
    if move.bdays:
        words.append(f"{move.bdays} business day{'s' if move.bdays != 1 else ''} on")
    if move.rate_bp:
        words.append(f"rates {move.rate_bp:+g} bp")
    from blotter.scenario.grammar import STICKY_RULE

    if move.vol_rule != STICKY_RULE:
        words.append(f"vols {move.vol_rule}")
    warning = ""
    if large:
        frac, sym, spot = max(large, key=lambda t: abs(t[0]))
        more = f" (and {len(large) - 1} more)" if len(large) > 1 else ""
        warning = (  # short: the bar's message and the title are narrow at 80 columns
            f"{_amount(frac * spot)} {ccy.get(sym, '')} is {frac * 100:+.1f}% of {sym} "
            f"{spot:,.6g}{more}"
        )
    return MoveWords(", ".join(words) or "no move", warning)


def age_words(age: timedelta) -> str:
    """How old something is, in words: ``"35 min"``, ``"3 h 10 min"``, ``"2 days 4 h"``."""
    seconds = int(age.total_seconds())
    if seconds < 0:
        return "dated after the valuation time:"
    minutes, _ = divmod(seconds, 60)
    hours, minutes = divmod(minutes, 60)
    days, hours = divmod(hours, 24)
    if days:
        return f"{days} day{'s' if days != 1 else ''} {hours} h"
    if hours:
        return f"{hours} h {minutes} min"
    return f"{minutes} min"


@dataclass(frozen=True)
class MarksAge:
    """How old the marks are, in words, and whether they predate the last business day's close.

    ``points`` and ``stale_points`` count the mark points in force and those observed before that
    close (both 0 when the points' own times are not known), so one fresh mark cannot make a
    book of old marks look fresh.
    """

    words: str
    stale: bool
    last_close: datetime | None
    points: int = 0
    stale_points: int = 0

    def stale_words(self, tz: ZoneInfo) -> str:
        """``STALE: 420 of 421 marked before 12-02 16:00 close`` (empty when fresh); short, so
        the file name still fits the header at 80 columns."""
        if not self.stale:
            return ""
        closed = f"{self.last_close.astimezone(tz):%m-%d %H:%M}" if self.last_close else "last"
        if self.points:
            n = f"{self.stale_points} of {self.points}"
            return f"STALE: {n} marked before {closed} close"
        return f"STALE: older than the {closed} close"


STALE_SLACK = timedelta(minutes=1)
"""A mark observed this close to the close still counts as of that close."""


def last_close_at(now: datetime, tz: ZoneInfo, calendar_name: str = "NYSE") -> datetime:
    """The last business day's close at or before ``now`` (the default cut-off in ``tz``)."""
    local_now = now.astimezone(tz)
    day: np.datetime64 = np.datetime64(local_now.date(), "D")
    close_today = datetime.combine(local_now.date(), cal.DEFAULT_CUTOFF, tzinfo=tz)
    if not (bool(cal.is_business_day(day, calendar_name)) and local_now >= close_today):
        day = np.datetime64(str(cal.add_business_days(day, -1, calendar_name)), "D")
    return datetime.combine(day.astype(object), cal.DEFAULT_CUTOFF, tzinfo=tz)


@dataclass(frozen=True)
class SpotAge:
    """How long ago a spot in force was observed, and whether that makes it stale."""

    seconds: float
    stale: bool

    def words(self) -> str:
        """``12s``, ``4m``, ``3h`` or ``2d``, with ``stale`` before it when stale."""
        return ("stale " if self.stale else "") + short_age(self.seconds)


def short_age(seconds: float) -> str:
    """An age in its largest whole unit: ``12s``, ``4m``, ``3h``, ``2d`` (``0s`` for a spot
    stamped a moment after ``now``, as a clock a little ahead can)."""
    s = max(0.0, seconds)
    for unit, size in (("d", 86_400), ("h", 3_600), ("m", 60)):
        if s >= size:
            return f"{int(s // size)}{unit}"
    return f"{int(s)}s"


def spot_ages(market: Market, now: datetime, stale_s: float) -> dict[str, SpotAge]:
    """The age of each spot in force at ``now``, by symbol (``Market.spot_observed``).

    A spot from an intraday mark (typed, imported or fed) is stale once older than ``stale_s``
    seconds (0: never), which is how a feed that stopped shows; a spot of a close is as old as
    that close, and the marks' staleness (``marks_age``) speaks for it.
    """
    now64 = np.datetime64(now.astimezone(UTC).replace(tzinfo=None), "us")
    out = {}
    for symbol, seen in market.spot_observed.items():
        seconds = float((now64 - seen) / np.timedelta64(1, "s"))
        intraday = symbol in market.spot_intraday
        out[symbol] = SpotAge(seconds, bool(stale_s > 0 and intraday and seconds > stale_s))
    return out


def stale_spot_words(ages: Mapping[str, SpotAge], most: int = 3) -> str:
    """``SPOT STALE: DEMOA 7m, DEMOB 9m`` for the stale spots (oldest first, at most ``most``
    named, then how many more); empty when none is stale."""
    stale = sorted(
        ((a.seconds, s) for s, a in ages.items() if a.stale), key=lambda t: t[0], reverse=True
    )
    if not stale:
        return ""
    named = ", ".join(f"{s} {short_age(sec)}" for sec, s in stale[:most])
    more = f" +{len(stale) - most}" if len(stale) > most else ""
    return f"SPOT STALE: {named}{more}"


def marks_age(
    marks_as_of: datetime,
    now: datetime,
    tz: ZoneInfo,
    calendar_name: str = "NYSE",
    observed: np.ndarray | None = None,
) -> MarksAge:
    """Age of the marks at ``now``; stale when older than the last business-day close.

    ``observed`` are the mark points' own observation instants (UTC ``datetime64``, as
    ``Market.observed_at``): given, the marks are stale while any point predates that close and
    the count says how many; else the newest mark (``marks_as_of``) decides.
    """
    age = now - marks_as_of
    last_close = last_close_at(now, tz, calendar_name)
    cut = last_close - STALE_SLACK
    if observed is not None and len(observed):
        cut_utc = np.datetime64(cut.astimezone(UTC).replace(tzinfo=None), "us")
        n_stale = int(np.count_nonzero(np.asarray(observed, dtype="datetime64[us]") < cut_utc))
        return MarksAge(age_words(age), n_stale > 0, last_close, len(observed), n_stale)
    return MarksAge(words=age_words(age), stale=marks_as_of < cut, last_close=last_close)


def missing_by_name(unvalued: Sequence[risk.UnvaluedPosition], most: int = 8) -> str:
    """The marks the left-out positions lack, by symbol or currency: ``CCC: spot, vol; EUR: rate``
    (at most ``most`` names, then how many more)."""
    kinds: dict[str, list[str]] = {}
    for u in unvalued:
        for m in u.missing:
            seen = kinds.setdefault(m.name, [])
            if m.kind not in seen:
                seen.append(m.kind)
    parts = [f"{name}: {', '.join(k)}" for name, k in kinds.items()]
    more = f"; {len(parts) - most} more" if len(parts) > most else ""
    return "; ".join(parts[:most]) + more


def unvalued_count(unvalued: Sequence[risk.UnvaluedPosition]) -> int:
    """How many positions (contracts) a valuation left out."""
    return len({u.contract_id for u in unvalued})


def unvalued_words(unvalued: Sequence[risk.UnvaluedPosition]) -> str:
    """The positions a valuation left out, in a few words: ``2 positions not valued (CCC: spot,
    vol; EUR: rate)``; empty when there are none."""
    if not unvalued:
        return ""
    n = unvalued_count(unvalued)
    return f"{n} position{'' if n == 1 else 's'} not valued ({missing_by_name(unvalued)})"
