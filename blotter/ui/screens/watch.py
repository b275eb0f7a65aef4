"""The Flags screen: options expiring this week (pin risk flagged), and every limit breach."""

from __future__ import annotations

from datetime import datetime
from typing import ClassVar

from rich.text import Text
from textual import work
from textual.app import ComposeResult
from textual.binding import BindingType
from textual.containers import VerticalScroll
from textual.widgets import Footer, Static
from textual.worker import get_current_worker

from blotter.desk import limits, session
from blotter.ui import fmt
from blotter.ui.data import BookState
from blotter.ui.keys import app_bindings
from blotter.ui.messages import ScreenFailed, WeekReady
from blotter.ui.screens.base import DeskScreen


class WatchScreen(DeskScreen):
    """Expiring options come from ``scenario.apply_move`` rolled to the end of the week."""

    CSS_PATH = "desk.tcss"
    WHERE = "list"
    BINDINGS: ClassVar[list[BindingType]] = list(app_bindings("list"))

    def compose(self) -> ComposeResult:
        yield self.title_line("Flags: expiring this week, pin risk, limit breaches")
        with VerticalScroll(classes="desk-body"):
            yield Static("working it out…", id="watch-text")
        yield Static("", classes="desk-message")
        yield Footer(compact=True)

    def on_mount(self) -> None:
        state = self.host.state
        if state is not None:
            self.compute(state, self.host.clock())

    def store_changed(self) -> None:
        self.on_mount()

    @work(thread=True, exclusive=True, group="watch-list", exit_on_error=False)
    def compute(self, state: BookState, now: datetime) -> None:
        """What expires by the end of Sunday (``desk.limits.week_expiries``)."""
        worker = get_current_worker()
        try:
            week = limits.week_expiries(state.valuation, now, self.host.tz)
        except Exception as exc:  # noqa: BLE001 - shown to the user
            self.post_message(ScreenFailed(f"✗ {exc}"))
            return
        if not worker.is_cancelled:
            self.post_message(WeekReady(week))

    def on_screen_failed(self, message: ScreenFailed) -> None:
        self.say(message.words, bad=True)

    def on_week_ready(self, message: WeekReady) -> None:
        from blotter import scenario

        week = message.week
        days, expiring, pins = week.days, week.expiring, week.pin_risk
        text = Text()
        state = self.host.state
        unvalued = state.valuation.unvalued if state is not None else ()
        if unvalued:
            left_out = session.unvalued_words(unvalued)
            text.append(f"{left_out}: left out of every total\n", style="bold")
            for u in unvalued:
                for m in u.missing:
                    text.append(f"  {u.label}: {m.words()}\n    log it with: {m.command}\n")
            text.append("\n")
        breaches = self.host.breaches()
        text.append(f"Limit breaches ({len(breaches)})\n", style="bold")
        for b in breaches:
            text.append(f"  ! {b}\n")
        if not breaches:
            text.append("  none (limits: [alerts] in the config file)\n")
        text.append(
            f"\nOptions expiring by the end of Sunday (in {days:.1f} days): {len(expiring)}; "
            f"pin risk, within {scenario.PIN_BAND_PCT:g}% of the strike: {len(pins)}\n",
            style="bold",
        )
        for e in expiring:
            label = getattr(e, "label", "")
            dist = getattr(e, "distance_pct", float("nan"))
            flag = "  PIN RISK" if e.pin_risk else ""
            text.append(f"  {label:<28} spot {fmt.pct(dist)} from strike{flag}\n")
        if not expiring:
            text.append("  none\n")
        self.query_one("#watch-text", Static).update(text)
