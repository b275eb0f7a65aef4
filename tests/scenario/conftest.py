"""Fixtures of the risk-layer tests; books and the QuantLib pricer are in ``scenario_books``."""

from __future__ import annotations

import pytest

from blotter.book import Book

from .scenario_books import make_book, mixed_rows


@pytest.fixture
def mixed_book() -> Book:
    """Options on all four kinds of underlying plus a stock and a futures hedge."""
    return make_book(mixed_rows())
