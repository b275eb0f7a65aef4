"""What the desk screens and their modals need from the app, as a Protocol.

Screens and modals are given their host when they are made and reach the app only through it, so
nothing under ``blotter.ui.screens`` imports ``blotter.ui.app``: the app imports the screens, never
the other way round. A screen reports its own workers' results to itself by typed messages; a modal
returns its result with ``dismiss``.
"""

from __future__ import annotations

from collections.abc import Callable
from datetime import datetime
from typing import TYPE_CHECKING, Protocol
from zoneinfo import ZoneInfo

if TYPE_CHECKING:
    from blotter.desk.trials import TrialTrade
    from blotter.store import ContractRecord, Store
    from blotter.ui.data import BookState
    from blotter.ui.timings import Timings


class DeskHost(Protocol):
    """The open book and what may be asked of the app about it."""

    @property
    def read_only(self) -> bool:
        """True when nothing may be written (asked for, or the file is not writable)."""

    @property
    def tz(self) -> ZoneInfo:
        """The desk's time zone."""

    @property
    def clock(self) -> Callable[[], datetime]:
        """Gives the valuation time ("now", aware)."""

    @property
    def book_in_view(self) -> str | None:
        """The book the app shows (None: all books); the trade form defaults to it."""

    @property
    def state(self) -> BookState | None:
        """The book as last loaded and valued; None until the first load."""

    @property
    def trials(self) -> list[TrialTrade]:
        """The trial trades layered on the live book, oldest first."""

    @property
    def timings(self) -> Timings:
        """Where the bench's instants are stamped."""

    def open_store(self, read_only: bool = False) -> Store:
        """A store of the book file for the calling thread (read-only when the app is)."""

    def load_book(self) -> None:
        """Read and value the book again (after a write, or a change to the trials)."""

    def breaches(self) -> list[str]:
        """Every limit breach of the loaded book, in words."""

    def add_trial(self, contract: ContractRecord, quantity: int, price: float, book: str) -> None:
        """Layer a trial trade on the live book."""

    def remove_trial(self, trial_id: int) -> None:
        """Drop one trial trade."""

    def clear_trials(self, reload: bool = True) -> None:
        """Drop every trial trade (nothing was written for them)."""
