"""One book at a time: a book name checked against the file's books, and a store seen through
one book, for the reports and the app alike.

``None`` is every book together ("all books"). A name the file does not hold is refused in
words that list the books it does.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING, Any, Protocol

if TYPE_CHECKING:
    import numpy as np

    from blotter.book import Book
    from blotter.market import Market

ALL_BOOKS = "all books"
"""What the app and the reports call every book together."""


class UnknownBook(ValueError):
    """A book name the file does not hold; its words list the books it does."""


class NamedBooks(Protocol):
    """Anything that lists a file's books (``store.Store`` does)."""

    def book_names(self) -> list[str]: ...


def check_book(source: NamedBooks, name: str | None) -> str | None:
    """``name`` when the file holds that book (``None``, all books, passes); ``UnknownBook``
    naming the books there are otherwise."""
    if name is None:
        return None
    known = source.book_names()
    if name not in known:
        listed = ", ".join(known) if known else "none yet"
        raise UnknownBook(f"no book named {name!r} (books: {listed})")
    return name


def next_book(books: Sequence[str], current: str | None) -> str | None:
    """The book after ``current`` in the cycle all books, then each book by name, then back."""
    cycle: list[str | None] = [None, *sorted(books)]
    if current not in cycle:
        return None
    return cycle[(cycle.index(current) + 1) % len(cycle)]


def book_words(name: str | None) -> str:
    """``all books``, or ``book NAME``."""
    return ALL_BOOKS if name is None else f"book {name}"


class OneBook:
    """A store as explain reads it (``scenario.ExplainSource``), holding only book ``name``'s
    trades; marks are the file's, shared by every book."""

    def __init__(self, store: Any, name: str) -> None:
        self._store = store
        self.name = name

    def mark_sets(self) -> Sequence[Any]:
        return self._store.mark_sets()  # type: ignore[no-any-return]

    def last_seq(self) -> int:
        return int(self._store.last_seq())

    def load_market(self, mark_set_id: int | None = None) -> Market:
        return self._store.load_market(mark_set_id)  # type: ignore[no-any-return]

    def load_book(self, *, before_seq: int) -> Book:
        return self._store.load_book(self.name, before_seq=before_seq)  # type: ignore[no-any-return]

    def new_trades(self, after_seq: int, before_seq: int | None = None) -> tuple[Book, np.ndarray]:
        return self._store.new_trades(after_seq, before_seq, book=self.name)  # type: ignore[no-any-return]

    def trades(self) -> Sequence[Any]:
        return self._store.trades(book=self.name)  # type: ignore[no-any-return]
