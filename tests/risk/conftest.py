"""Fixtures of the risk tests; the books and the QuantLib pricer are in ``tests/books.py``."""

from __future__ import annotations

from books import mixed_book  # noqa: F401  (a fixture: pytest finds it where it is imported)
