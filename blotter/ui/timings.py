"""Instants the bench reads from the running app, in one bounded place.

The app and its screens stamp an instant (``time.perf_counter``) when something the bench times
happens: the Move pane repainted with a keystroke's result, the first full screen, the key that
confirms a close, the Marks screen repainted saying the close was written, the Book pane
repainted with a load. Only the last ``KEPT`` stamps of each kind are held, so a long session
does not grow them.
"""

from __future__ import annotations

import time
from collections import deque
from dataclasses import dataclass
from enum import StrEnum

KEPT = 64
"""Stamps kept per kind; the bench reads the newest one after each step."""


class Timing(StrEnum):
    """What a stamp marks."""

    MOVE_PAINTED = "move painted"  # tag: the bar's edit count (``BlotterApp.move_seq``)
    FIRST_PAINT = "first paint"
    CLOSE_KEY = "close key"
    CLOSE_PAINTED = "close painted"
    BOOK_PAINTED = "book painted"  # tag: the newest mark id the shown book is valued on


@dataclass(frozen=True)
class Stamp:
    """One instant: ``at`` in ``time.perf_counter`` seconds, ``tag`` what it belongs to."""

    tag: int
    at: float


class Timings:
    """The last ``KEPT`` stamps of each kind, and how many there have been."""

    def __init__(self) -> None:
        self._stamps: dict[Timing, deque[Stamp]] = {kind: deque(maxlen=KEPT) for kind in Timing}
        self._counts: dict[Timing, int] = dict.fromkeys(Timing, 0)

    def stamp(self, kind: Timing, tag: int = 0) -> None:
        """Stamp ``kind`` now."""
        self._stamps[kind].append(Stamp(tag, time.perf_counter()))
        self._counts[kind] += 1

    def count(self, kind: Timing) -> int:
        """How many stamps of ``kind`` there have been (all of them, not only those kept)."""
        return self._counts[kind]

    def last(self, kind: Timing) -> Stamp | None:
        """The newest stamp of ``kind``, or None before the first."""
        kept = self._stamps[kind]
        return kept[-1] if kept else None
