"""A yes-or-no question over the current screen: y or F5 answers yes; n, q, F10 or Esc no.

The question comes in words from the caller (what will happen, and why it asks); the answer is
the screen's result, so one key too many never does the thing asked about.
"""

from __future__ import annotations

from typing import ClassVar

from rich.text import Text
from textual.app import ComposeResult
from textual.binding import BindingType
from textual.screen import ModalScreen
from textual.widgets import Footer, Static

from blotter.ui.keys import app_bindings


class ConfirmScreen(ModalScreen[bool]):
    """See the module docstring."""

    CSS_PATH = "desk.tcss"
    BINDINGS: ClassVar[list[BindingType]] = list(app_bindings("confirm"))

    def __init__(self, question: str) -> None:
        super().__init__(id="confirm")
        self.question = question

    def compose(self) -> ComposeResult:
        text = Text(self.question, style="bold")
        text.append("\n\ny or F5: yes; n, q, F10 or Esc: no", style="")
        yield Static(text, classes="desk-body", id="confirm-text")
        yield Footer(compact=True)

    def action_yes(self) -> None:
        self.dismiss(True)

    def action_no(self) -> None:
        self.dismiss(False)
