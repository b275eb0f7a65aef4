"""One book at a time: a name checked against the file's books, and the app's book cycle."""

from __future__ import annotations

import pytest

from blotter.desk.books import UnknownBook, book_words, check_book, next_book


class _Books:
    def book_names(self) -> list[str]:
        return ["index-vol", "equity-vol"]


def test_a_known_name_passes_and_none_is_all_books() -> None:
    assert check_book(_Books(), "index-vol") == "index-vol"
    assert check_book(_Books(), None) is None
    assert book_words(None) == "all books" and book_words("x") == "book x"


def test_an_unknown_name_lists_the_books() -> None:
    with pytest.raises(UnknownBook, match=r"no book named 'nope' \(books: index-vol, equity-vol\)"):
        check_book(_Books(), "nope")


def test_the_cycle_is_all_books_then_each_by_name() -> None:
    books = _Books().book_names()
    seen = [None]
    for _ in range(3):
        seen.append(next_book(books, seen[-1]))
    assert seen == [None, "equity-vol", "index-vol", None]
    assert next_book(books, "gone") is None  # a book no longer there: back to all books
