"""Messages the app's thread workers post back; each keeps only the newest of its kind in the queue.

Workers never touch widgets or reactives: they compute, then post one of these to the app. All
are ``WorkerResult``s, which the app drops once it has begun to exit (its panes may be gone).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

from textual.message import Message

from blotter.desk.limits import LadderBreaches

if TYPE_CHECKING:
    from blotter.scenario import Ladder
    from blotter.ui.data import BookState, ProfileData


class WorkerResult(Message):
    """A thread worker's result for the app or a screen, dropped if it arrives as they close.

    The app drops it from the moment it is asked to exit; a popped screen refuses new messages.
    """


@dataclass
class BookLoaded(WorkerResult):
    """The book, marks and base valuation, read and computed in a worker."""

    state: BookState

    def can_replace(self, message: Message) -> bool:
        return isinstance(message, BookLoaded)


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
    move: Any
    result: Any
    seconds: float  # time spent in apply_move, for the bench

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

    def can_replace(self, message: Message) -> bool:
        return isinstance(message, LadderReady)

    def __repr__(self) -> str:
        return f"LadderReady(book_seq={self.book_seq}, days={self.days})"


@dataclass
class ProfileReady(WorkerResult):
    """Curves for the Profile pane."""

    book_seq: int
    profile: ProfileData

    def can_replace(self, message: Message) -> bool:
        return isinstance(message, ProfileReady)


@dataclass(repr=False)
class Done(WorkerResult):
    """A screen's worker finished: ``ok`` with words for people, ``payload`` what it produced."""

    what: str
    ok: bool
    words: str
    payload: Any = None

    def __repr__(self) -> str:
        return f"Done({self.what!r}, ok={self.ok}, words={self.words!r})"


@dataclass
class StoreChanged(WorkerResult):
    """Another process committed to the book file; ``data_version`` is SQLite's counter."""

    data_version: int

    def can_replace(self, message: Message) -> bool:
        return isinstance(message, StoreChanged)
