"""The Help screen: every key (as bound now, after the user's keymap), every unit, the what-if
grammar with examples, and the cautions."""

from __future__ import annotations

import inspect
from typing import ClassVar

from rich.table import Table
from rich.text import Text
from textual.app import ComposeResult
from textual.binding import BindingType
from textual.containers import VerticalScroll
from textual.screen import Screen
from textual.widgets import Footer, Static

from blotter.config import DESK_TZ_SOURCES
from blotter.ui.keys import KEYS, app_bindings, key_label

UNITS: tuple[tuple[str, str], ...] = (
    ("Spot", "price of the underlying, in its currency, to its tick (more if it carries more)"),
    ("P&L day", "P&L since the last close (new trades from their trade price), per underlying"),
    ("Value", "quantity × multiplier × price (futures hedges: 0, they settle daily)"),
    ("Δ $", "delta × spot: currency exposure to the underlying"),
    ("Γ 1%", "change in Δ sh for a 1% rise in spot (Γ × S × 0.01)"),
    ("Γ$ 1%", "change in Δ $ for a 1% rise in spot (Γ × S² × 0.01); adds across names"),
    ("k m bn", "after a header: the column's numbers are in thousands, millions, billions"),
    ("qty mark vol days", "a position's quantity, model value per unit, implied vol %, days left"),
    ("vega pt", "P&L for +1 vol point (0.01 of annualised vol, 30% → 31%)"),
    ("θ day", "P&L for one calendar day passing, nothing else moving"),
    ("Δ sh", "delta in shares (units) of the underlying"),
    ("ρ 1%", "P&L for +1 percentage point (100 bp) of rate"),
    ("vanna pt", "change in Δ sh for +1 vol point"),
    ("volga pt", "change in vega for +1 vol point"),
    ("βΔ $", "Δ $ × the underlying's beta to the book's reference index"),
    ("full", "Move pane: change in book value by full revaluation under the move (currency)"),
    ("Δ Γ vega volga vanna θ ρ", "Move pane: the estimate's terms, each in currency"),
    (
        "est 1 / est 2",
        "greeks' (Taylor) estimate, first order (Δ, vega, θ, ρ) or with Γ, volga, vanna",
    ),
    ("error", "full − estimate, in currency; err % = error as a share of |full|"),
    ("!", "error beyond the alert threshold (config: [alerts] error_pct, error_abs)"),
    (
        "Grid",
        "scenario grid: rows spot shocks in %, columns vol shocks in points, cells P&L in "
        "currency; one grid per currency",
    ),
    ("—", "no sum: share counts of several names, or money of several currencies (never added)"),
    ("NOT VALUED", "positions left out for want of a mark; totals are of the rest (w lists them)"),
    ("times", f"in the desk's time zone ({DESK_TZ_SOURCES}); expiries: the exchange's dates"),
)
"""Column headers and symbols with what they mean, as the help screen lists them."""

CAUTIONS = (
    "These figures are model estimates, not advice.",
    "Check every figure against your firm's official risk and P&L before acting on it.",
    "Follow your local rules and licensed practice.",
    "The demo book is invented, with fictitious underlyings.",
)

def grammar_text() -> str:
    """The what-if grammar with examples, as ``blotter.scenario`` documents it (``EXAMPLES`` and
    the closing paragraph of its package docstring on the vol rule and expiries)."""
    from blotter import scenario
    from blotter.scenario.grammar import EXAMPLES

    width = max(len(e) for e, _ in EXAMPLES) + 3
    lines = [f"{example:<{width}}{meaning}" for example, meaning in EXAMPLES]
    doc = inspect.getdoc(scenario) or ""
    rule = doc.rsplit("\n\n", 1)[-1] if "sticky" in doc.rsplit("\n\n", 1)[-1] else ""
    if rule:
        rule = rule.replace("``PIN_BAND_PCT``", f"{scenario.PIN_BAND_PCT:g}%")
        lines += ["", " ".join(rule.replace("``", "").split())]
    lines += [
        "",
        "Keywords are case-insensitive; parts combine in any order and apply together. "
        "A line that does not parse leaves the last good result on screen.",
    ]
    return "\n".join(lines)


def grammar_table() -> Table:
    """The grammar as two columns (example, meaning), then the notes under it."""
    table = Table(box=None, pad_edge=False, show_header=False)
    table.add_column(no_wrap=True)
    table.add_column()
    notes: list[str] = []
    for line in grammar_text().splitlines():
        example, sep, meaning = line.partition("   ")
        if sep and example.strip():
            table.add_row(Text(example.strip()), Text(meaning.strip()))
        elif line.strip():
            notes.append(line.strip())
    for note in notes:
        table.add_row(Text(""), Text(note))
    return table


def keys_table(bound: dict[str, str]) -> Table:
    """Every binding: the keys in force (``bound`` maps binding id -> keys), id and what it does."""
    table = Table(box=None, pad_edge=False, show_header=True, header_style="bold")
    table.add_column("keys", no_wrap=True)
    table.add_column("id", no_wrap=True)
    table.add_column("does")
    for spec in KEYS:
        keys = bound.get(spec.id, spec.keys)
        table.add_row(
            " ".join(key_label(k.strip()) for k in keys.split(",")), spec.id, spec.description
        )
    table.add_row("Tab", "", "Next field (book ↔ bar); Shift+Tab back")
    table.add_row("Enter", "", "Book: expand or collapse the row under the cursor")
    return table


class HelpScreen(Screen[None]):
    """Keys, units, grammar, cautions; any of its close keys goes back."""

    CSS_PATH = "help.tcss"
    BINDINGS: ClassVar[list[BindingType]] = list(app_bindings("help"))

    def __init__(self, bound: dict[str, str]) -> None:
        super().__init__(id="help")
        self.bound = bound

    def compose(self) -> ComposeResult:
        with VerticalScroll(id="help-body"):
            yield Static(Text("blotter help — keys", style="bold"), classes="help-heading")
            yield Static(keys_table(self.bound), id="help-keys")
            yield Static("Units", classes="help-heading")
            units = Table(box=None, pad_edge=False, show_header=False)
            units.add_column(no_wrap=True)
            units.add_column()
            for name, meaning in UNITS:
                units.add_row(Text(name), Text(meaning))
            yield Static(units, id="help-units")
            yield Static("What-if grammar (the bar; also `blotter whatif`)", classes="help-heading")
            yield Static(grammar_table(), id="help-grammar")
            yield Static("Cautions", classes="help-heading")
            yield Static(Text("\n".join(CAUTIONS)), id="help-cautions")
        yield Footer(compact=True)

    def action_close(self) -> None:
        self.dismiss()
