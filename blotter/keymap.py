"""What a user's keymap may say: the binding ids it may name and the keys no binding may use.

Plain data below the UI, so ``blotter.config`` checks a keymap from the settings without loading
the app; ``blotter.ui.keys`` declares each action under one of these ids (a test holds the two
lists equal).
"""

from __future__ import annotations

from collections.abc import Mapping

BINDING_IDS: tuple[str, ...] = (
    "help",
    "what-if",
    "book",
    "book-switch",
    "pane",
    "expand",
    "hedge",
    "group",
    "sort",
    "order",
    "grid",
    "greek",
    "axis",
    "scope",
    "reload",
    "marks",
    "trades",
    "explain",
    "vega-unit",
    "clear-trials",
    "watch-list",
    "actions",
    "scenario-sets",
    "quit",
    "history-back",
    "history-forward",
    "marks-edit",
    "marks-close",
    "marks-back",
    "close-confirm",
    "close-cancel",
    "trades-filter",
    "trades-add",
    "trades-trial",
    "trades-amend",
    "trades-cancel",
    "trades-promote",
    "trades-back",
    "form-next",
    "form-previous",
    "form-submit",
    "form-kind",
    "form-back",
    "explain-from",
    "explain-to",
    "explain-back",
    "list-back",
    "sets-run",
    "sets-back",
    "help-close",
    "confirm-yes",
    "confirm-no",
)
"""Every binding id of the app, in the order ``blotter.ui.keys.KEYS`` declares them."""

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
        "ctrl+j",
        "f11",
        "f12",
        "ctrl+c",
        "ctrl+z",
        "ctrl+left_square_bracket",
    }
)
"""Keys a binding may not use: flow control, terminal aliases of Backspace/Tab/Enter, lone Escape,
keys terminals or window managers keep, and Ctrl+C/Ctrl+Z (interrupt, suspend)."""


def check_keymap(keymap: Mapping[str, str]) -> list[str]:
    """Problems with a user's keymap (binding id -> comma-separated keys); empty when it is fine."""
    known = set(BINDING_IDS)
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
