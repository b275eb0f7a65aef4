"""The Scenario sets screen: choose a named set of moves, run it on the book as one table.

The sets and the run come from ``blotter.desk.scenario_sets`` (as ``blotter whatif --set``):
per move the full revaluation, the greeks' estimate and the error between them, per currency,
each currency's worst move marked ``▼ WORST``.
"""

from __future__ import annotations

from typing import ClassVar

from rich.text import Text
from textual import on, work
from textual.app import ComposeResult
from textual.binding import BindingType
from textual.widgets import DataTable, Footer, OptionList, Static
from textual.widgets.option_list import Option
from textual.worker import get_current_worker

from blotter.config import Settings
from blotter.desk import scenario_sets
from blotter.desk.scenario_sets import WORST_MARK, ScenarioSet, SetRun
from blotter.printable import printable
from blotter.ui import fmt
from blotter.ui.data import BookState
from blotter.ui.host import DeskHost
from blotter.ui.keys import app_bindings
from blotter.ui.messages import ScreenFailed, SetRan
from blotter.ui.screens.base import DeskScreen

NO_SETS_WORDS = (
    "no scenario sets: add [scenarios.NAME] tables of \"move name\" = \"move line\" to the "
    "settings file (README: Scenario sets)"
)
"""What the screen says when the settings hold no set."""


class ScenarioSetsScreen(DeskScreen):
    """The list of sets above the table of the last one run (fits 80×24)."""

    CSS_PATH = "desk.tcss"
    WHERE = "sets"
    BINDINGS: ClassVar[list[BindingType]] = list(app_bindings("sets"))

    def __init__(self, host: DeskHost, settings: Settings) -> None:
        super().__init__(host, id="scenario-sets")
        self.settings = settings
        self.sets: tuple[ScenarioSet, ...] = ()
        self.run: SetRun | None = None

    def compose(self) -> ComposeResult:
        yield self.title_line("Scenario sets: Enter runs the set under the cursor")
        yield OptionList(id="sets-list")
        yield DataTable(id="sets-table", classes="desk-table", cursor_type="row")
        yield Static("", classes="desk-message")
        yield Footer(compact=True)

    def on_mount(self) -> None:
        """Read the sets (every move parsed); a bad file is refused in words, nothing runs."""
        listing = self.query_one("#sets-list", OptionList)
        try:
            self.sets = scenario_sets.read_sets(self.settings)
        except scenario_sets.SetError as exc:
            self.say(f"✗ {exc}", bad=True)
            self.notify(printable(str(exc)), title="Scenario sets", severity="error", markup=False)
            return
        for s in self.sets:
            n = len(s.moves)
            listing.add_option(Option(Text(f"{s.name}  ({n} move{'' if n == 1 else 's'})")))
        if not self.sets:
            self.say(NO_SETS_WORDS)
            return
        listing.highlighted = 0
        listing.focus()
        self.say("choose a set: Enter (or r) runs it on the book as it stands, trials included")

    @on(OptionList.OptionSelected, "#sets-list")
    def _chosen(self, event: OptionList.OptionSelected) -> None:
        self.run_set_at(event.option_index)

    def action_run_set(self) -> None:
        index = self.query_one("#sets-list", OptionList).highlighted
        if index is not None and self.sets:
            self.run_set_at(index)

    def run_set_at(self, index: int) -> None:
        """Run the ``index``-th set in a worker on the book as last valued."""
        state = self.host.state
        if state is None:
            self.say("the book is still loading: try again in a moment", bad=True)
            return
        sset = self.sets[index]
        self.say(f"running {sset.name!r} ({len(sset.moves)} moves)…")
        self.compute(state, sset)

    @work(thread=True, exclusive=True, group="scenario-set", exit_on_error=False)
    def compute(self, state: BookState, sset: ScenarioSet) -> None:
        """``desk.scenario_sets.run_set`` on the valuation of ``state``."""
        worker = get_current_worker()
        try:
            run = scenario_sets.run_set(state.valuation, sset, lambda: worker.is_cancelled)
        except Exception as exc:  # noqa: BLE001 - shown to the user
            if not worker.is_cancelled:
                self.post_message(ScreenFailed(f"✗ {exc}"))
            return
        if run is not None and not worker.is_cancelled:
            self.post_message(SetRan(run))

    def on_screen_failed(self, message: ScreenFailed) -> None:
        self.say(message.words, bad=True)

    def on_set_ran(self, message: SetRan) -> None:
        self.run = message.run
        self.show(message.run)

    def show(self, run: SetRun) -> None:
        """One row per move (per currency when the book holds several), worst marked."""
        order = self.settings.estimate_order
        currencies = list(dict.fromkeys(r.currency for row in run.rows for r in row.money_rows))
        several = len(currencies) > 1
        table = self.query_one("#sets-table", DataTable)
        table.clear(columns=True)
        table.add_column("", key="worst", width=len(WORST_MARK))
        table.add_column("scenario", key="name", width=20)
        if several:
            table.add_column("ccy", key="ccy", width=3)
        for key, head, width in (
            ("full", "full", 11),
            ("est", f"est {order}", 11),
            ("err", f"err {order}", 10),
            ("pct", f"err {order} %", 8),
            ("move", "move", 30),
        ):
            table.add_column(
                Text(head, justify="left" if key == "move" else "right"), key=key, width=width
            )
        for i, row in enumerate(run.rows):
            worst = run.worst_in(i)
            for r in row.money_rows:
                estimate = r.estimate_2 if order == 2 else r.estimate_1
                error = r.error_2 if order == 2 else r.error_1
                error_pct = r.error_2_pct if order == 2 else r.error_1_pct
                table.add_row(
                    WORST_MARK if r.currency in worst else "",
                    printable(row.name),
                    *([str(r.currency)] if several else []),
                    fmt.money(r.full, 11),
                    fmt.money(estimate, 11),
                    fmt.money(error, 10),
                    fmt.pct(error_pct, 8),
                    printable(row.result.move.describe()),
                )
        s = run.scenario_set
        money = f"money in {currencies[0]}" if len(currencies) == 1 else "money per currency"
        self.query_one(".desk-title", Static).update(
            Text(f"Scenario set {s.name!r}: {len(run.rows)} moves · {money}", style="bold")
        )
        worst_words = "; ".join(
            f"{WORST_MARK} in {ccy}: {run.rows[i].name!r} "
            f"({fmt.money(next(r.full for r in run.rows[i].money_rows if r.currency == ccy))} "
            f"{ccy})"
            for ccy, i in run.worst.items()
        )
        self.say(
            f"{worst_words or 'nothing valued'}. err = full − estimate ({order}"
            f"{'st' if order == 1 else 'nd'} order); from {s.source}"
        )
