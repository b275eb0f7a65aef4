"""Every key of the app, declared once: binding id, action, plain key, alias, description.

The table is plain data so ``blotter.config`` can check a user's keymap without loading Textual;
``app_bindings`` turns it into Textual ``Binding`` objects. Each action has a plain key that
arrives over SSH and inside tmux, plus a function-key or Ctrl alias that also works while the
what-if bar has focus (printable keys type text there).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from textual.binding import Binding


@dataclass(frozen=True)
class KeySpec:
    """One action: ``keys`` is Textual's comma-separated key list, plain key first."""

    id: str
    action: str
    keys: str
    description: str
    short: str = ""  # footer label; empty keeps the action out of the footer
    where: str = "app"  # "app", "bar" (what-if bar), "book" (book pane) or "help" (help screen)
    priority: bool = False  # handled when the key reaches the app, before the focused widget


KEYS: tuple[KeySpec, ...] = (
    KeySpec("help", "help", "question_mark,f1", "Help: keys, units, what-if grammar", short="Help"),
    KeySpec(
        "what-if",
        "focus_bar",
        "slash,f2",
        "Type a what-if move in the bar",
        short="What-if",
        priority=True,
    ),
    KeySpec("book", "focus_book", "b,f3", "Move to the book pane"),
    KeySpec(
        "pane", "next_pane", "v,f7", "Show the next pane (Move, Ladder, Profile)", short="Pane"
    ),
    KeySpec(
        "expand",
        "toggle_row",
        "e,ctrl+o",
        "Expand or collapse the row (Enter too)",
        short="Expand",
        where="book",
    ),
    KeySpec(
        "group",
        "toggle_group",
        "g,f4",
        "Group the book by underlying or by expiry bucket",
        short="Group",
    ),
    KeySpec(
        "sort", "sort_column", "s,f5", "Sort by the cursor's column; again to reverse", short="Sort"
    ),
    KeySpec(
        "order", "toggle_order", "o,f6", "Move pane: first- or second-order estimate", short="Order"
    ),
    KeySpec("grid", "next_grid", "x,f8", "Ladder: full P&L, estimate or error grid"),
    KeySpec("greek", "next_greek", "k,f9", "Profile: P&L, Δ $, Γ 1%, vega or θ day"),
    KeySpec("axis", "toggle_axis", "a,ctrl+t", "Profile: against spot or days forward"),
    KeySpec("scope", "toggle_scope", "p,ctrl+g", "Profile: whole book or the selected row"),
    KeySpec("reload", "reload", "r,ctrl+r", "Reload the book and marks from the file"),
    KeySpec("quit", "quit", "q,f10", "Quit", short="Quit"),
    KeySpec("history-back", "history(-1)", "up,ctrl+p", "Bar: previous move", where="bar"),
    KeySpec("history-forward", "history(1)", "down,ctrl+n", "Bar: next move", where="bar"),
    KeySpec(
        "help-close",
        "close",
        "q,question_mark,f1,f10",
        "Help: back to the book",
        short="Back",
        where="help",
    ),
)
"""All bindings of the app, in the order the help screen lists them."""

FORBIDDEN_KEYS = frozenset(
    {
        "ctrl+s",
        "ctrl+q",
        "ctrl+enter",
        "shift+enter",
        "escape",
        "ctrl+h",
        "ctrl+i",
        "ctrl+m",
        "f11",
        "f12",
        "ctrl+c",
        "ctrl+z",
        "ctrl+left_square_bracket",
    }
)
"""Keys a binding may not use: flow control, terminal aliases of Backspace/Tab/Enter, lone Escape,
keys terminals or window managers keep, and Ctrl+C/Ctrl+Z (interrupt, suspend)."""

KEY_NAMES = {
    "question_mark": "?",
    "slash": "/",
    "up": "↑",
    "down": "↓",
    "enter": "Enter",
}
"""How the help screen and footer write Textual key names."""


def spec(binding_id: str) -> KeySpec:
    """The ``KeySpec`` with this id; KeyError naming it when unknown."""
    for k in KEYS:
        if k.id == binding_id:
            return k
    raise KeyError(f"no binding with id {binding_id!r}")


def key_label(key: str) -> str:
    """A key name as people write it: ``question_mark`` -> ``?``, ``ctrl+o`` -> ``Ctrl+O``."""
    if key in KEY_NAMES:
        return KEY_NAMES[key]
    if key.startswith("ctrl+"):
        return "Ctrl+" + key_label(key[5:]).upper()
    if len(key) >= 2 and key[0] == "f" and key[1:].isdigit():
        return key.upper()
    return key


def check_keymap(keymap: dict[str, str]) -> list[str]:
    """Problems with a user's keymap (binding id -> comma-separated keys); empty when it is fine."""
    known = {k.id for k in KEYS}
    problems: list[str] = []
    for binding_id, keys in keymap.items():
        if binding_id not in known:
            problems.append(
                f"unknown binding id {binding_id!r} (known: {', '.join(sorted(known))})"
            )
            continue
        names = [k.strip().lower() for k in str(keys).split(",") if k.strip()]
        if not names:
            problems.append(f"binding {binding_id!r} has no keys")
        for name in names:
            if name in FORBIDDEN_KEYS or name.startswith("alt+"):
                problems.append(
                    f"binding {binding_id!r}: key {name!r} does not arrive reliably "
                    "over SSH/tmux or is kept by the terminal"
                )
    return problems


def app_bindings(where: str) -> list[Binding]:
    """Textual bindings for the specs of one place (``"app"``, ``"bar"`` or ``"book"``)."""
    from textual.binding import Binding

    return [
        Binding(
            k.keys,
            k.action,
            k.short or k.description,
            show=bool(k.short),
            id=k.id,
            key_display=key_label(k.keys.split(",")[0]),
            tooltip=k.description,
            priority=k.priority,
        )
        for k in KEYS
        if k.where == where
    ]
