"""The what-if bar: one input line for a move, its history, and the parser's message beside it.

The history is kept on disk by ``blotter.desk.move_history`` (loaded when the bar is mounted,
saved on each move that parsed), so ↑ recalls moves of earlier sessions too.
"""

from __future__ import annotations

from typing import ClassVar

from rich.text import Text
from textual import events
from textual.app import ComposeResult
from textual.binding import BindingType
from textual.containers import Horizontal
from textual.widgets import Input, Static

from blotter.desk import move_history
from blotter.desk.move_history import HISTORY_SIZE
from blotter.ui.keys import app_bindings

__all__ = ["HISTORY_SIZE", "MoveInput", "WhatIfBar"]


class MoveInput(Input):
    """The bar's input line, with up/down recalling earlier moves."""

    BINDINGS: ClassVar[list[BindingType]] = list(app_bindings("bar"))

    def __init__(self) -> None:
        super().__init__(
            placeholder="what-if: spot -3% vol +2 days 1   (? help)",
            id="whatif-input",
            select_on_focus=False,
        )
        self.cursor_blink = False  # a blinking cursor is a timer; idle means none
        self.history: list[str] = []
        self._recall: int | None = None
        self._history_path = move_history.history_path()
        self._save_failed = False

    def on_mount(self) -> None:
        """Load the history of earlier sessions; a file that cannot be used is noted, not fatal."""
        self.history, note = move_history.load_history(self._history_path)
        if note:
            self.notify(note, title="What-if history", severity="warning", markup=False)

    async def on_key(self, event: events.Key) -> None:
        """Run a key bound on the bar itself (editing, Enter, history) now, in order with typing.

        Textual types a printable key where it lands but runs a bound key only once the key has
        bubbled up to the app, so in a burst the text after an edit key would overtake it
        (Textualize/textual#6605); a key bound elsewhere still bubbles as usual.
        """
        if event.is_printable:
            return
        active = self.screen.active_bindings.get(event.key)
        if active is None or active.node is not self or active.binding.priority:
            return
        if not active.enabled:
            return
        event.stop()
        event.prevent_default()
        await self.app.run_action(active.binding.action, self)

    def remember(self, text: str) -> None:
        """Put a move that parsed at the end of the history (no repeats back to back)."""
        before = self.history
        self.history = move_history.remember(self.history, text)
        self._recall = None
        if self.history == before:
            return
        try:
            move_history.save_history(self._history_path, self.history)
        except OSError as exc:
            if not self._save_failed:  # said once a session, not on every move
                self._save_failed = True
                self.notify(
                    f"the what-if history cannot be saved to {self._history_path} "
                    f"({exc.strerror or exc}); it is kept for this session only",
                    title="What-if history",
                    severity="warning",
                    markup=False,
                )

    def action_history(self, step: int) -> None:
        """Recall the previous (``step`` −1) or next (+1) move from the history."""
        if not self.history:
            return
        if self._recall is None:
            self._recall = len(self.history)
        self._recall = max(0, min(len(self.history), self._recall + step))
        self.value = self.history[self._recall] if self._recall < len(self.history) else ""
        self.cursor_position = len(self.value)


class WhatIfBar(Horizontal):
    """Input and message side by side; the message says what is wrong with a bad line."""

    def compose(self) -> ComposeResult:
        yield MoveInput()
        yield Static("", id="whatif-message")

    def show_ok(self, summary: str, text: str = "", warning: str = "") -> None:
        """A move parsed and applied: say what it was read as when that differs from ``text``,
        or ``warning`` (words) when there is one to check."""
        same = " ".join(text.split()).lower() == summary.lower()
        if warning:
            self.query_one("#whatif-message", Static).update(Text("⚠ check: " + warning))
            self.add_class("-bad")
            return
        self.query_one("#whatif-message", Static).update(
            Text("✓ applied" if same else "✓ read as " + summary)
        )
        self.remove_class("-bad")

    def show_error(self, text: str, message: str, start: int, end: int) -> None:
        """A bad line: the message, and the offending word picked out by ``^`` marks."""
        word = text[start:end] if 0 <= start < end <= len(text) else ""
        out = Text("✗ ")
        out.append(message)
        if word and word not in message:
            out.append(" at ")
            out.append(f"«{word}»", style="reverse")
        self.query_one("#whatif-message", Static).update(out)
        self.add_class("-bad")

    def clear_message(self) -> None:
        """An empty bar: no message."""
        self.query_one("#whatif-message", Static).update("")
        self.remove_class("-bad")
