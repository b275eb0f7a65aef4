"""The action list: Textual's command palette, listing every action the screen offers by its words.

Each entry is a binding of ``keys.KEYS`` active where the list was opened (the app's, the
screen's, the focused widget's), with its description as the words to search and its keys as
the help line; choosing one runs the binding's action, as its key would.
"""

from __future__ import annotations

from collections.abc import Iterator
from typing import ClassVar

from textual.app import SystemCommand
from textual.binding import Binding, BindingType
from textual.command import CommandPalette
from textual.dom import DOMNode
from textual.screen import Screen

from blotter.ui.keys import KEYS, key_label

PALETTE_ACTION = "command_palette"
"""The action that opens the list; not listed in it."""


class ActionList(CommandPalette):
    """Textual's palette with the app's way back (F10) beside its own Escape."""

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("f10", "escape", "Close the action list", show=False),
    ]


def action_commands(screen: Screen[object]) -> Iterator[SystemCommand]:
    """One command per action bound on ``screen`` (in ``KEYS`` order): its words and keys."""
    order = {k.id: i for i, k in enumerate(KEYS)}
    found: dict[tuple[str, int], tuple[int, Binding, DOMNode, list[str]]] = {}
    for key, active in screen.active_bindings.items():
        b = active.binding
        if b.action == PALETTE_ACTION or not active.enabled or b.id not in order:
            continue
        entry = found.setdefault((b.action, id(active.node)), (order[b.id], b, active.node, []))
        entry[3].append(key_label(key))
    for _, b, node, labels in sorted(found.values(), key=lambda f: f[0]):
        keys = " or ".join(labels)
        words = b.tooltip or b.description

        async def run(action: str = b.action, where: DOMNode = node) -> None:
            await screen.app.run_action(action, where)

        yield SystemCommand(words, f"key: {keys}", run)
