"""Messages the app's and the screens' thread workers post back, one class per kind of result.

Workers never touch widgets or reactives: they compute, then post one of these to the app or to
their own screen. All are ``WorkerResult``s, which the app drops once it has begun to exit (its
panes may be gone); the app's results keep only the newest of their kind in the queue, and a
screen's results (``ScreenResult``) stay with the screen that posted them.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any, ClassVar

from textual.message import Message

from blotter.desk.limits import LadderBreaches

if TYPE_CHECKING:
    from blotter.desk.close_review import ClosedSet, MarksView
    from blotter.desk.entry import TradeSheet
    from blotter.desk.hedge import Refs
    from blotter.desk.limits import WeekExpiries
    from blotter.desk.scenario_sets import SetRun
    from blotter.scenario import Explain, ExplainInBase, Ladder, Move, MoveResult
    from blotter.store import ContractRecord, MarkSetInfo
    from blotter.ui.data import BookState, ProfileData


class WorkerResult(Message):
    """A thread worker's result for the app or a screen, dropped if it arrives as they close.

    The app drops it from the moment it is asked to exit; a popped screen refuses new messages.
    """


@dataclass
class BookLoaded(WorkerResult):
    """The book, marks and base valuation, read and computed in a worker; ``stream`` when the
    load followed others' commits or the clock (not the trader), whose Grid and Reval panes
    wait for ``pane_refresh_s``."""

    state: BookState
    stream: bool = False
    explain_due: bool = False  # P&L today is to be explained from the close again (a worker)

    def can_replace(self, message: Message) -> bool:
        return isinstance(message, BookLoaded)


@dataclass
class PnlExplained(WorkerResult):
    """P&L today explained from the close again for the load ``book_seq``: the app's new base
    to move it on from (``ui.app.PnlBase``)."""

    book_seq: int
    base: Any

    def can_replace(self, message: Message) -> bool:
        return isinstance(message, PnlExplained)


@dataclass
class LoadProgress(WorkerResult):
    """The load finished step ``step`` of ``app.LOAD_STEPS`` (1-based count of steps done)."""

    step: int

    def can_replace(self, message: Message) -> bool:
        return isinstance(message, LoadProgress)


@dataclass
class LoadFailed(WorkerResult):
    """Reading or valuing the book failed; ``reason`` is for people."""

    reason: str


@dataclass(repr=False)
class MoveApplied(WorkerResult):
    """The result of the bar's move; ``seq`` counts the bar's edits, ``book_seq`` the loads."""

    seq: int
    book_seq: int
    text: str
    move: Move
    result: MoveResult

    def can_replace(self, message: Message) -> bool:
        return isinstance(message, MoveApplied)

    def __repr__(self) -> str:  # short: the result holds per-position arrays
        return f"MoveApplied(seq={self.seq}, text={self.text!r})"


@dataclass
class MoveFailed(WorkerResult):
    """Applying a parsed move failed in the worker (a move that parses but cannot be applied)."""

    seq: int
    reason: str


@dataclass(repr=False)
class LadderReady(WorkerResult):
    """The spot × vol ladders for the bar's day roll, one per currency of the book."""

    book_seq: int
    days: float
    ladder: list[Ladder]
    breaches: LadderBreaches = field(default_factory=LadderBreaches)
    state: BookState | None = None  # the load the ladders were worked out on

    def can_replace(self, message: Message) -> bool:
        return isinstance(message, LadderReady)

    def __repr__(self) -> str:
        return f"LadderReady(book_seq={self.book_seq}, days={self.days})"


@dataclass
class ProfileReady(WorkerResult):
    """Curves for the Reval pane; ``as_of`` the desk-local time of the store read they were
    worked out on (``10:04:05``)."""

    book_seq: int
    profile: ProfileData
    as_of: str = ""

    def can_replace(self, message: Message) -> bool:
        return isinstance(message, ProfileReady)


@dataclass(repr=False)
class HedgeRefsRead(WorkerResult):
    """The file's underlyings, for the Book pane's hedge (``desk.hedge.read_refs``),
    read for a book of the underlyings ``symbols``; ``refs`` None with ``reason`` when they could
    not be read."""

    symbols: tuple[str, ...]
    refs: Refs | None
    reason: str = ""

    def can_replace(self, message: Message) -> bool:
        return isinstance(message, HedgeRefsRead)

    def __repr__(self) -> str:
        return f"HedgeRefsRead(symbols={len(self.symbols)}, reason={self.reason!r})"


@dataclass(repr=False)
class HedgeStaged(WorkerResult):
    """A hedge made a trial (``desk.hedge.stage``) in ``book``, or ``reason`` why not."""

    words: str
    contract: ContractRecord | None = None
    quantity: int = 0
    price: float = 0.0
    book: str = ""
    reason: str = ""

    def __repr__(self) -> str:
        return f"HedgeStaged(words={self.words!r}, reason={self.reason!r})"


@dataclass
class StoreChanged(WorkerResult):
    """Another process committed to the book file; ``data_version`` is SQLite's counter."""

    data_version: int

    def can_replace(self, message: Message) -> bool:
        return isinstance(message, StoreChanged)


class ValuationDue(WorkerResult):
    """The clock passed into a new minute since the book was valued: value it again."""

    def can_replace(self, message: Message) -> bool:
        return isinstance(message, ValuationDue)


class ScreenResult(WorkerResult):
    """A desk screen's (or modal's) worker result, handled by the screen that posted it."""

    bubble: ClassVar[bool] = False


@dataclass
class ScreenFailed(ScreenResult):
    """A screen's read or write failed; ``words`` say why, for people."""

    words: str


@dataclass(repr=False)
class MarksRead(ScreenResult):
    """The mark points in force beside the last close; ``review`` when a close review asked."""

    view: MarksView
    review: bool = False

    def __repr__(self) -> str:
        return f"MarksRead(points={len(self.view.points)}, review={self.review})"


@dataclass
class MarkWritten(ScreenResult):
    """A typed mark was written; ``words`` say what."""

    words: str


@dataclass
class CloseWritten(ScreenResult):
    """The close set was written."""

    closed: ClosedSet


@dataclass(repr=False)
class TradesRead(ScreenResult):
    """The file's trades and what a typed trade is checked against."""

    sheet: TradeSheet

    def __repr__(self) -> str:
        return f"TradesRead(trades={len(self.sheet.trades)})"


@dataclass
class TradeWritten(ScreenResult):
    """A trade ticket (or the promoted trials, ``promoted``) was written; ``words`` say what."""

    words: str
    promoted: bool = False


@dataclass(repr=False)
class ExplainReady(ScreenResult):
    """P&L explained between two closes (or a close and now); ``closes`` in force, oldest first;
    ``in_base`` the same in the file's base currency with its FX translation."""

    closes: list[MarkSetInfo]
    result: Explain
    in_base: ExplainInBase | None = None

    def __repr__(self) -> str:
        return f"ExplainReady(closes={len(self.closes)})"


@dataclass(repr=False)
class WeekReady(ScreenResult):
    """What expires by the end of Sunday."""

    week: WeekExpiries

    def __repr__(self) -> str:
        return f"WeekReady(expiring={len(self.week.expiring)})"


@dataclass(repr=False)
class SetRan(ScreenResult):
    """A scenario set was run on the book."""

    run: SetRun

    def __repr__(self) -> str:
        return f"SetRan({self.run.scenario_set.name!r}, moves={len(self.run.rows)})"
