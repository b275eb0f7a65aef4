"""Every key of the app, declared once: binding id, action, plain key, alias, description.

The table is plain data; ``app_bindings`` turns it into Textual ``Binding`` objects. Each action
has a plain key that arrives over SSH and inside tmux, plus a function-key or Ctrl alias that also
works while the what-if bar has focus (printable keys type text there). The ids a keymap may name
and the keys no binding may use live below the UI in ``blotter.keymap``, where the settings check
a user's keymap.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

from blotter.keymap import FORBIDDEN_KEYS, check_keymap

if TYPE_CHECKING:
    from textual.binding import Binding

__all__ = ["FORBIDDEN_KEYS", "KEYS", "KeySpec", "app_bindings", "check_keymap", "key_label", "spec"]


@dataclass(frozen=True)
class KeySpec:
    """One action: ``keys`` is Textual's comma-separated key list, plain key first."""

    id: str
    action: str
    keys: str
    description: str
    short: str = ""  # footer label; empty keeps the action out of the footer
    where: str = "app"  # "app", "bar", "book", "help", or a screen: "marks", "review", "trades",
    # "form", "explain", "list", "sets"
    priority: bool = False  # handled when the key reaches the app, before the focused widget
    # Esc ("escape") is only ever a last extra key of an action that closes Help or a modal: it
    # may arrive late or merged over SSH, and closing is harmless, so it is never the only key.


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
        "book-switch",
        "next_book",
        "n,ctrl+u",
        "Show the next book: all books, then each book by name",
        short="Book",
    ),
    KeySpec(
        "pane", "next_pane", "v,f7", "Show the next pane (Move, Grid, Reval)", short="Pane"
    ),
    KeySpec(
        "expand",
        "toggle_row",
        "e,ctrl+o",
        "Expand or collapse the row (Enter too)",
        where="book",
    ),
    KeySpec(
        "hedge",
        "app.stage_hedge",
        "d,ctrl+d",
        "Book: stage the delta hedge of the row under the cursor as a trial trade",
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
        "order", "toggle_order", "o,f6", "Move pane: first- or second-order estimate"
    ),
    KeySpec("grid", "next_grid", "x,f8", "Grid: full P&L, greeks' estimate or error"),
    KeySpec(
        "greek", "next_greek", "k,f9", "Reval: P&L (full vs estimate), Δ $, Γ 1%, vega or θ day"
    ),
    KeySpec("axis", "toggle_axis", "a,ctrl+t", "Reval: across spot or over days forward"),
    KeySpec("scope", "toggle_scope", "p,ctrl+g", "Reval: whole book or the selected row"),
    KeySpec("reload", "reload", "r,ctrl+r", "Reload the book and marks from the file"),
    KeySpec(
        "marks",
        "marks",
        "m,ctrl+f",
        "Marks: spot and vols in force, edit, commit close",
        short="Marks",
    ),
    KeySpec(
        "trades",
        "trades",
        "t,ctrl+y",
        "Trades: the blotter; add, cancel, amend, trials",
        short="Trades",
    ),
    KeySpec(
        "explain",
        "explain",
        "l,ctrl+l",
        "Explain: P&L since the last close, term by term",
        short="Explain",
    ),
    KeySpec("vega-unit", "vega_unit", "u,ctrl+k", "Book: vega per vol point or per 1.00 of vol"),
    KeySpec(
        "clear-trials",
        "clear_trials",
        "c,ctrl+x",
        "Clear every trial trade (the store is untouched)",
    ),
    KeySpec(
        "watch-list",
        "watch_list",
        "w,ctrl+backslash",
        "Flags: options expiring this week, pin risk and limit breaches",
    ),
    KeySpec(
        "actions",
        "command_palette",
        "colon,ctrl+e",
        "List every action by its words; type some to find one",
    ),
    KeySpec(
        "scenario-sets",
        "scenario_sets",
        "z,ctrl+underscore",
        "Scenario sets: run a named set of moves as one table, worst marked",
    ),
    KeySpec("quit", "quit", "q,f10", "Quit", short="Quit"),
    KeySpec("history-back", "history(-1)", "up,ctrl+p", "Bar: previous move", where="bar"),
    KeySpec("history-forward", "history(1)", "down,ctrl+n", "Bar: next move", where="bar"),
    KeySpec(
        "marks-edit",
        "edit",
        "e,f2",
        "Marks: edit the cell (Enter too, or just type the number; $price solves the vol)",
        short="Edit",
        where="marks",
    ),
    KeySpec(
        "marks-close",
        "commit_close",
        "c,f5",
        "Marks: review and commit the close set",
        short="Close",
        where="marks",
    ),
    KeySpec(
        "marks-back",
        "back",
        "q,m,f10,escape",
        "Marks: back to the book",
        short="Back",
        where="marks",
    ),
    KeySpec(
        "close-confirm",
        "confirm",
        "y,f5",
        "Close review: write the close set",
        short="Write",
        where="review",
    ),
    KeySpec(
        "close-cancel",
        "back",
        "n,q,f10,escape",
        "Close review: back without writing",
        short="Back",
        where="review",
    ),
    KeySpec(
        "trades-filter",
        "filter",
        "slash,f2",
        "Trades: filter by typing (any words of the row)",
        short="Filter",
        where="trades",
    ),
    KeySpec(
        "trades-add",
        "add",
        "a,f3",
        "Trades: add a trade from the form",
        short="Add",
        where="trades",
    ),
    KeySpec(
        "trades-trial",
        "add_trial",
        "i,f4",
        "Trades: add a trial trade from the form",
        short="Trial",
        where="trades",
    ),
    KeySpec(
        "trades-amend",
        "amend",
        "e,f6",
        "Trades: amend the trade under the cursor",
        short="Amend",
        where="trades",
    ),
    KeySpec(
        "trades-cancel",
        "cancel_trade",
        "x,f8",
        "Trades: cancel the trade under the cursor (asks why)",
        short="Cancel",
        where="trades",
    ),
    KeySpec(
        "trades-promote",
        "promote",
        "p,f7",
        "Trades: book every trial as a real trade",
        short="Promote",
        where="trades",
    ),
    KeySpec(
        "trades-back",
        "back",
        "q,t,f10,escape",
        "Trades: back to the book",
        short="Back",
        where="trades",
    ),
    KeySpec(
        "form-next",
        "next_field",
        "tab,ctrl+n",
        "Form: next field (at once, so fast typing lands in the right field)",
        where="form",
        priority=True,
    ),
    KeySpec(
        "form-previous",
        "previous_field",
        "shift+tab,ctrl+p",
        "Form: previous field",
        where="form",
        priority=True,
    ),
    KeySpec(
        "form-submit",
        "submit",
        "f5,ctrl+y",
        "Form: book it (Enter on the last field too)",
        short="Book",
        where="form",
    ),
    KeySpec(
        "form-kind",
        "toggle_kind",
        "f6,ctrl+l",
        "Form: switch between a trade and a trial",
        short="Trade/trial",
        where="form",
    ),
    KeySpec(
        "form-back",
        "back",
        "f10,ctrl+o,escape",
        "Form: back without booking",
        short="Back",
        where="form",
    ),
    KeySpec(
        "explain-from",
        "earlier_start",
        "f,f3",
        "Explain: start at the close before",
        short="Start",
        where="explain",
    ),
    KeySpec(
        "explain-to",
        "next_end",
        "o,f4",
        "Explain: end now or at a close",
        short="End",
        where="explain",
    ),
    KeySpec(
        "explain-back",
        "back",
        "q,l,f10,escape",
        "Explain: back to the book",
        short="Back",
        where="explain",
    ),
    KeySpec(
        "list-back", "back", "q,w,f10,escape", "Flags: back to the book", short="Back", where="list"
    ),
    KeySpec(
        "sets-run",
        "run_set",
        "r,f5",
        "Scenario sets: run the set under the cursor (Enter on the list too)",
        short="Run",
        where="sets",
    ),
    KeySpec(
        "sets-back",
        "back",
        "q,z,f10",
        "Scenario sets: back to the book",
        short="Back",
        where="sets",
    ),
    KeySpec(
        "help-close",
        "close",
        "q,question_mark,f1,f10,escape",
        "Help: back to the book",
        short="Back",
        where="help",
    ),
    KeySpec("confirm-yes", "yes", "y,f5", "Question: yes", short="Yes", where="confirm"),
    KeySpec(
        "confirm-no", "no", "n,q,f10,escape", "Question: no, back", short="No", where="confirm"
    ),
)
"""All bindings of the app, in the order the help screen lists them."""

KEY_NAMES = {
    "question_mark": "?",
    "slash": "/",
    "up": "↑",
    "down": "↓",
    "enter": "Enter",
    "tab": "Tab",
    "shift+tab": "Shift+Tab",
    "backslash": "\\",
    "colon": ":",
    "escape": "Esc",
    "underscore": "_",
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
