"""What the app's own screens share: a title line, a message line, a footer, a way back, and
write actions that are not offered on a read-only book (and say so when their key is pressed).

A screen is given its host (``ui.host.DeskHost``, the app) when it is made and asks the app for
nothing else; its workers report to it by typed messages (``ui.messages.ScreenResult``).
"""

from __future__ import annotations

from typing import ClassVar

from rich.text import Text
from textual import events
from textual.screen import Screen
from textual.widgets import Static

from blotter.printable import printable
from blotter.ui.host import DeskHost
from blotter.ui.keys import KEYS

READ_ONLY_WORDS = "the book is open read-only: nothing can be written"
"""What a write key says on a read-only book."""


class DeskScreen(Screen[None]):
    """A full screen of the app; ``WHERE`` names its keys in ``keys.KEYS``."""

    WHERE: ClassVar[str] = ""
    WRITE_ACTIONS: ClassVar[frozenset[str]] = frozenset()
    """Actions that write to the store: hidden, and refused in words, when read-only."""

    def __init__(self, host: DeskHost, id: str | None = None) -> None:
        super().__init__(id=id)
        self.host = host

    def title_line(self, text: str) -> Static:
        return Static(Text(text, style="bold"), classes="desk-title")

    def say(self, words: str, bad: bool = False) -> None:
        """Put ``words`` on the screen's message line (reverse video when it is a refusal)."""
        line = self.query_one(".desk-message", Static)
        line.update(Text(printable(words), style="bold reverse" if bad else ""))

    def check_action(self, action: str, parameters: tuple[object, ...]) -> bool | None:
        if action in self.WRITE_ACTIONS and self.host.read_only:
            return False
        return True

    def on_key(self, event: events.Key) -> None:
        """A write key on a read-only book says why nothing happens."""
        if not self.host.read_only:
            return
        for spec in KEYS:
            if (
                spec.where == self.WHERE
                and spec.action in self.WRITE_ACTIONS
                and event.key in spec.keys.split(",")
            ):
                event.stop()
                self.say(READ_ONLY_WORDS, bad=True)
                self.notify(READ_ONLY_WORDS, severity="warning")
                return

    def action_back(self) -> None:
        self.dismiss()

    def store_changed(self) -> None:
        """The book file changed (this app's write or another process's): refresh what is shown."""
