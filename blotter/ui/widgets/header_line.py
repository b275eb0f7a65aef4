"""The header line: book, valuation time, marks as of and their age in words, file, read-only,
alerts, and the currencies when there are several."""

from __future__ import annotations

from datetime import datetime
from pathlib import Path
from typing import Any

from rich.text import Text
from textual.widgets import Static

from blotter.printable import printable
from blotter.ui.data import BookState


class HeaderLine(Static):
    """One or two lines at the top (it wraps on narrow terminals)."""

    def __init__(self) -> None:
        super().__init__("blotter: opening the book…", id="header-line")

    def show(self, state: BookState, now: datetime, tz: Any, alerts: list[str],
             first: str = "") -> None:
        """Describe ``state`` as of ``now`` (desk time zone ``tz``); ``alerts`` are words;
        ``first``, when given, leads the line (so a narrow terminal never cuts it off)."""
        desk = state.session
        age = desk.marks_age(now, tz)
        text = Text()
        if first:
            text.append(f"{first} │ ", style="bold")
        text.append(f"Book: {printable(desk.book_name)}", style="bold")
        if state.read_only:  # first, so a narrow terminal never cuts it off
            text.append(" │ ")
            text.append("READ-ONLY", style="bold reverse")
        text.append(f" │ valued {desk.valuation_time.astimezone(tz):%Y-%m-%d %H:%M %Z}")
        when = f"{desk.marks_as_of.astimezone(tz):%Y-%m-%d %H:%M}"
        marked = state.valuation.market.has_marks
        if not marked:
            text.append(" │ no marks yet: m opens Marks")
        elif age.words.startswith("dated after"):
            text.append(f" │ {desk.mark_kind} marks {when}, ")
            text.append("AFTER the valuation time", style="bold")
        else:
            text.append(f" │ {desk.mark_kind} marks {when} ({age.words} old)")
        if age.stale and marked:
            text.append(f" {age.stale_words(tz)}", style="bold reverse")
        text.append(f" │ {printable(Path(state.db_path).name)}")
        for alert in alerts:
            text.append(" │ ")
            text.append(f"! {alert}", style="bold")
        currencies = state.valuation.currencies
        if len(currencies) > 1:  # money is never added across them
            text.append(f" │ totals per currency: {', '.join(currencies)}")
        self.update(text)
        self.tooltip = Text(printable(state.db_path))

    def show_error(self, reason: str) -> None:
        """Loading failed: say why in the header."""
        self.update(Text(f"✗ {printable(reason)}", style="bold"))
