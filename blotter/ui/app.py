"""The blotter terminal app: header, Book pane, Move/Grid/Reval panes, what-if bar, footer.

``make_app(db_path, settings, clock=None)`` builds it; the CLI and the tests use the same factory.
All reading, valuing and revaluing runs in thread workers (exclusive per group) that post
messages back; handlers on the event loop only format and lay out what they receive. The only
timer-like activity when idle is the store's change check (``Settings.watch_interval_s``), which
also asks for the book to be valued again once the clock passes into a new minute.
"""

from __future__ import annotations

import os
import threading
import time
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import TYPE_CHECKING, Any, ClassVar

import numpy as np
from textual import on, work
from textual.app import App, ComposeResult, SystemCommand
from textual.binding import BindingType
from textual.containers import Container
from textual.events import Paste, Resize
from textual.message import Message
from textual.screen import Screen
from textual.timer import Timer
from textual.widgets import DataTable, Footer, Input, ProgressBar, Static
from textual.worker import Worker, WorkerCancelled, WorkerState, get_current_worker

from blotter.config import Settings
from blotter.desk import books, limits, session
from blotter.desk import hedge as desk_hedge
from blotter.desk import pnl_today as pnl
from blotter.desk.trials import Trials, TrialTrade
from blotter.printable import printable
from blotter.ui import data
from blotter.ui.host import DeskHost
from blotter.ui.keys import KEYS, app_bindings
from blotter.ui.messages import (
    BookLoaded,
    HedgeRefsRead,
    HedgeStaged,
    LadderReady,
    LoadFailed,
    LoadProgress,
    MoveApplied,
    MoveFailed,
    PnlExplained,
    ProfileReady,
    StoreChanged,
    ValuationDue,
    WorkerResult,
)
from blotter.ui.screens.base import DeskScreen
from blotter.ui.screens.confirm import ConfirmScreen
from blotter.ui.screens.explain import ExplainScreen
from blotter.ui.screens.help import HelpScreen
from blotter.ui.screens.marks import MarksScreen
from blotter.ui.screens.palette import ActionList, action_commands
from blotter.ui.screens.scenario_sets import ScenarioSetsScreen
from blotter.ui.screens.trades import TradesScreen
from blotter.ui.screens.watch import WatchScreen
from blotter.ui.timings import Timing, Timings
from blotter.ui.widgets.book_table import BookTable
from blotter.ui.widgets.grid_pane import GridPane
from blotter.ui.widgets.header_line import HeaderLine
from blotter.ui.widgets.move_pane import MovePane
from blotter.ui.widgets.reval_pane import RevalPane
from blotter.ui.widgets.whatif_bar import MoveInput, WhatIfBar

if TYPE_CHECKING:
    from blotter.book import Book
    from blotter.market import Market
    from blotter.risk import BookValuation, ExposureRow
    from blotter.scenario import Move, MoveResult
    from blotter.store import ContractRecord, Store

Clock = Callable[[], datetime]
Loader = Callable[[], "tuple[Book, Market, int]"]
"""Gives (book, market, data_version) instead of the file: the bench's random books use it."""

COMPILE_NOTE_AFTER_S = 1.0
"""Loading the compiled kernels from numba's cache takes a fraction of a second; still not ready
after this, they are being compiled, and the header says so."""

COMPILE_POLL_S = 0.5
"""How often the app checks whether the kernels being compiled are ready."""

COMPILING_ALERT = "compiling pricing kernels (first start only; slower meanwhile)"
"""Leads the header while American valuations run on the NumPy mirror of the kernels."""

LOWER_BOUND_NOTE_S = 20.0
"""Seconds the note about American positions valued at a lower bound stays on screen."""

PROGRESS_AFTER_S = 0.5
"""A load still running after this long shows a progress bar (steps: read, value, lay out)."""

LOAD_STEPS = ("reading the book and marks", "valuing the book", "laying out the book")
"""The load's steps, as the progress bar names them."""

MIN_WIDTH, MIN_HEIGHT = 60, 18
"""Below this size the app shows one line saying what size it needs."""

WIDE_WIDTH = 140
"""From this width the Grid and Reval panes sit beside the Book and Move panes."""

PANES = ("move", "grid", "reval")
"""Panes the pane key cycles through on narrow terminals."""

VERIFY_EVERY_S = 60.0
"""The whole book file is checked (``open_store``'s integrity check, SQLite's ``integrity_check``
of a snapshot) by the load worker's open at the first load and whenever the file was replaced,
and else, in a worker beside the loads, at most this often: under a feed the file changes every
second, and the check reads all of it (86 ms a commit at 10k positions, about 0.7 s at 100k).
The screens' opens check as before."""

VERIFY_CPU_SHARE = 0.01
"""Share of a core the periodic check of the book file may take: it runs again no sooner than
its last run's time over this share (when that is above ``VERIFY_EVERY_S``), since its time
grows with the file (about 1 s a check for a 10k-position book holding 8 h of a feed)."""

PANES_BUSY_RETRY_S = 0.5
"""Under a stream of commits, a Grid or Reval refresh that finds the last one still running
looks again after this long instead of cancelling it (so a slow grid still finishes)."""

GREEKS = (
    ("pnl", "P&L", "value"),
    ("delta", "Δ $", "delta_cash"),
    ("gamma", "Γ 1%", "gamma_1pct"),
    ("vega", "vega", "vega_pt"),
    ("theta", "θ day", "theta_day"),
)
"""Reval pane choices: (id, label, risk field); P&L is the change in value by full revaluation."""


TEXTUAL_THEMES = {"dark": "textual-dark", "light": "textual-light"}
"""The Textual theme drawing each of ``config.THEMES``."""


def _utc_now() -> datetime:
    return datetime.now(UTC)


def _pnl_note(tree: data.BookTree) -> str:
    """The Book pane's note on its P&L day column: since which close, or why it is blank."""
    if np.asarray(tree.book.is_trial).any():
        return "P&L day: live book only, blank under trials"
    pnl_words = tree.pnl.words
    return f"P&L day {pnl_words}" if tree.pnl.close_id is not None else f"P&L day: {pnl_words}"


PNL_EXPLAIN_EVERY = timedelta(minutes=1)
"""P&L today is explained from the close again at least this often, even with no trade between
(moving it on is exact, this bounds any rounding it gathers)."""


@dataclass(frozen=True)
class PnlBase:
    """The last P&L today explained from the close, and what it was explained for: the book in
    view and the store's place in history of trades and closes (``Store.positions_seq``), the
    positions' marked values then, and when."""

    key: tuple[str | None, tuple[int, int]]
    pnl: pnl.PnlToday
    values: dict[str, float]
    explained_at: datetime


class BlotterApp(App[None]):
    """The app; see the module docstring. ``clock`` gives the valuation time (UTC, aware)."""

    CSS_PATH = "app.tcss"
    TITLE = "blotter"
    ENABLE_COMMAND_PALETTE = True  # the action list, on the "actions" keys of keys.KEYS
    COMMAND_PALETTE_BINDING = "colon"
    HORIZONTAL_BREAKPOINTS = [  # noqa: RUF012 - Textual's own class attribute
        (0, "-narrow"),
        (WIDE_WIDTH, "-wide"),
    ]
    BINDINGS: ClassVar[list[BindingType]] = list(app_bindings("app"))

    def __init__(
        self,
        db_path: str,
        settings: Settings | None = None,
        clock: Clock | None = None,
        read_only: bool | None = None,
        loader: Loader | None = None,
    ) -> None:
        super().__init__()
        self.loader = loader
        self.settings = settings or Settings()
        self.db_path = str(db_path)
        self.read_only = self.settings.read_only if read_only is None else read_only
        self.clock: Clock = clock or _utc_now
        self.tz = self.settings.tz
        self.animation_level = "none"
        self.state: data.BookState | None = None
        self.book_seq = 0
        self.move_seq = 0
        self.move_text = ""  # the text of the last move that parsed
        self.move: Move | None = None  # its parsed move
        self.result: MoveResult | None = None  # its result (the last good one)
        self.pane = "move"
        self.greek = "pnl"
        self.axis = "spot"
        self.scope = "book"
        self._profile_row = -1
        self.data_version: int | None = None
        self.timings = Timings()  # instants the bench reads
        self._load_seq = 0  # counts loads started, so a late progress timer knows it is stale
        self._loading = False  # a load runs: a new request waits for it (``load_book``)
        self.pnl_base: PnlBase | None = None  # the last P&L today explained from the close
        self._load_again = False  # a load was asked for while one ran
        self._again_by_trader = False  # ... and the trader asked for it (not only the stream)
        self._panes_started = -float("inf")  # monotonic time the Grid and Reval were last redone
        self._panes_timer: Timer | None = None  # a stream's Grid and Reval refresh, waiting
        self._ladder_seq = -1  # book_seq of the grid last started: only its result is shown
        self._profile_seq = -1  # the same for the Reval pane's curves
        self._profile_behind = False  # the Reval pane, hidden, skipped a stream's refresh
        self._read: session.Loaded | None = None  # the load worker's last read (book kept)
        self._verified: tuple[tuple[int, int], float] | None = None  # file id, monotonic time
        self._verify_s = 0.0  # seconds the last check of the file took
        self._stop_watch = threading.Event()
        self._compiling = False
        self._lower_notes: list[str] = []
        self._compile_poll: Timer | None = None
        self._revalue_asked = -1  # book_seq of the valuation a minute's revaluation was asked for
        self.trial_trades = Trials()
        self.hedge_refs: HedgeRefsRead | None = None  # the file's underlyings, for the hedge
        self._hedge_staging = False  # a staged hedge not yet in a loaded book
        self.book_in_view: str | None = None  # one book's trades, or None for all books
        self.startup_notice = ""  # shown once the screen is up (e.g. why it opened read-only)
        self.ladder_breaches = limits.LadderBreaches()  # of the last ladder shown
        self._actions: list[SystemCommand] = []  # the action list's entries as it opened
        if self.settings.keymap:
            self.set_keymap(self.settings.keymap)
        self.theme = TEXTUAL_THEMES[self.settings.theme]

    # -- layout ---------------------------------------------------------------------------------
    def compose(self) -> ComposeResult:
        yield HeaderLine()
        yield ProgressBar(total=len(LOAD_STEPS), show_eta=False, id="load-progress")
        yield Static("", id="too-small")
        with Container(id="body"):
            with Container(id="book-pane", classes="pane"):
                yield BookTable()
                yield Static("", id="fx-delta", markup=False)
                yield Static("", id="book-hedge", markup=False)
            yield GridPane()
            yield MovePane(self.settings.alerts, self.settings.estimate_order)
            yield RevalPane()
        yield WhatIfBar()
        yield Footer(compact=True)

    def on_mount(self) -> None:
        self.query_one("#load-progress", ProgressBar).display = False
        self._book_title()
        self._show_pane()
        self.query_one(BookTable).focus()
        from blotter import engine

        if not engine.kernels_ready():
            engine.warm_up(background=True)
            self.set_timer(COMPILE_NOTE_AFTER_S, self._note_compiling)
        self.load_book()
        if self.settings.watch_interval_s > 0:
            self.watch_store(self.settings.watch_interval_s)
        if self.startup_notice:
            notice = printable(self.startup_notice)
            self.notify(notice, title="Read-only", severity="warning", markup=False)

    def _note_compiling(self) -> None:
        """While the American kernels compile (the first start after an install), say so in the
        header, since valuations run on their slower NumPy mirror meanwhile; clear it when ready."""
        from blotter import engine

        if engine.kernels_ready():
            return
        self._compiling = True
        if self.state is None:
            self.query_one(HeaderLine).update(
                "blotter: opening the book… compiling the American pricing kernels "
                "(the first start after an install only; some seconds)"
            )
        else:
            self._refresh_header()
        self._compile_poll = self.set_interval(COMPILE_POLL_S, self._check_compiled)

    def _check_compiled(self) -> None:
        """Drop the compiling note once the kernels are ready (later valuations use them)."""
        from blotter import engine

        if not engine.kernels_ready():
            return
        self._compiling = False
        if self._compile_poll is not None:
            self._compile_poll.stop()
            self._compile_poll = None
        self._refresh_header()

    def on_unmount(self) -> None:
        self._stop_watch.set()

    def is_exiting(self) -> bool:
        """True from the moment the app is asked to exit, by any path, until it is gone."""
        return not self.is_running or self.return_code is not None or self._stop_watch.is_set()

    async def _on_message(self, message: Message) -> None:
        """Deliver ``message`` unless it is a worker's result arriving while the app exits.

        Textual's one dispatch point for messages, so a late result of any kind is dropped here
        rather than in each handler; while the app exits its panes are being unmounted.
        """
        if isinstance(message, WorkerResult) and self.is_exiting():
            return
        await super()._on_message(message)

    def on_resize(self, event: Resize) -> None:
        if self._profile_behind and event.size.width >= WIDE_WIDTH:
            self.start_profile()
        small = event.size.width < MIN_WIDTH or event.size.height < MIN_HEIGHT
        self.screen.set_class(small, "-too-small")
        if small:
            self.query_one("#too-small", Static).update(
                f"blotter needs at least {MIN_WIDTH}×{MIN_HEIGHT}; this terminal is "
                f"{event.size.width}×{event.size.height}."
            )

    def _show_pane(self) -> None:
        for name in PANES:
            self.query_one(f"#{name}-pane").set_class(name == self.pane, "-current")

    # -- loading --------------------------------------------------------------------------------
    def load_book(self, stream: bool = False) -> None:
        """Start reading and valuing the book; a progress bar shows if it takes over 0.5 s.

        While a load runs, a new request does not cancel it (under a feed committing every
        second, a load slower than a second would never finish): the running load is shown
        when done and one more load, of everything asked for meanwhile, follows it. ``stream``:
        others' commits or the clock asked for it, not the trader (see ``_panes_after_load``)."""
        if self._loading:
            self._load_again = True
            self._again_by_trader |= not stream
            return
        self._loading = True
        self._load_again = False
        self._again_by_trader = False
        self._load_seq += 1
        seq = self._load_seq
        self._load_worker(stream)
        self.set_timer(PROGRESS_AFTER_S, lambda: self._show_progress(seq))

    def _show_progress(self, seq: int) -> None:
        if seq == self._load_seq and any(
            w.group == "load" and not w.is_finished for w in self.workers
        ):
            bar = self.query_one("#load-progress", ProgressBar)
            bar.add_class("-shown")
            bar.display = True

    def on_load_progress(self, message: LoadProgress) -> None:
        bar = self.query_one("#load-progress", ProgressBar)
        bar.update(progress=message.step)
        bar.tooltip = LOAD_STEPS[min(message.step, len(LOAD_STEPS) - 1)]

    def _hide_progress(self) -> None:
        bar = self.query_one("#load-progress", ProgressBar)
        bar.remove_class("-shown")
        bar.display = False
        bar.update(progress=0)

    @work(
        thread=True,
        exclusive=True,
        group="load",
        exit_on_error=False,
        description="read and value the book",
    )
    def _load_worker(self, stream: bool) -> None:
        """Read the book and marks in this thread's own Store, value them, post ``BookLoaded``.

        ``desk.session`` reads and values; the trial trades held in memory are layered on.
        """
        worker = get_current_worker()
        name = self.book_in_view
        trials = [t for t in self.trial_trades.all() if name is None or t.book == name]
        names: tuple[str, ...] = ()
        today = pnl.NO_CLOSE
        explain_due = False
        shown = self.state
        previous = shown.valuation.boundaries if shown is not None else None
        now = self.clock()
        at = session.valuation_instant(shown.session if shown is not None else None, now)
        try:
            if self.loader is not None:
                loaded = session.Loaded(*self.loader())
                self.post_message(LoadProgress(1))
                valued = session.value(loaded, at, self.tz, trials=trials, boundaries=previous)
            else:
                file_id, verify, _ = self._verify_due()
                began = time.monotonic()
                with self.open_store(verify=verify) as st:
                    if verify:
                        self._verified = (file_id, time.monotonic())
                        self._verify_s = self._verified[1] - began
                    names = tuple(st.book_names())
                    loaded = session.read_again(st, books.check_book(st, name), self._read)
                    self._read = loaded
                    self.post_message(LoadProgress(1))
                    valued = session.value(
                        loaded,
                        at,
                        self.tz,
                        trials=trials,
                        boundaries=previous,
                        previous=shown.session if shown is not None else None,
                    )
                    today, explain_due = self._pnl_today(st, name, valued.valuation)
            self.post_message(LoadProgress(2))
            ages = session.spot_ages(loaded.market, now, self.settings.spot_stale_s)
            tree = data.BookTree(
                valued.valuation,
                self.tz,
                self._row_alert,
                today,
                base=loaded.base_currency,
                spot_ages=ages,
            )
        except Exception as exc:  # noqa: BLE001 - any failure is shown to the user, not raised
            if not worker.is_cancelled:
                self.post_message(LoadFailed(f"cannot open {self.db_path}: {exc}"))
            return
        state = data.BookState(
            book_seq=0,
            db_path=self.db_path,
            read_only=self.read_only,
            session=valued,
            tree=tree,
            books=names,
            read_at=now,
        )
        if not worker.is_cancelled:
            self.post_message(BookLoaded(state, stream, explain_due))

    def _pnl_today(
        self, st: Store, name: str | None, valuation: BookValuation
    ) -> tuple[pnl.PnlToday, bool]:
        """P&L today of the book in view, and whether it is due to be explained again from the
        close (``PNL_EXPLAIN_EVERY``) in a worker of its own (``_explain_pnl``); a failure is
        said in the P&L's words, never raised, so the rest of the book still loads.

        Explained here from the close when a trade, cancel or close was written since the last
        one (or marks are missing); else moved on from the last one by the change of the
        positions' marked values (``pnl.advanced``), which under a feed saves an explain (a
        revaluation at the close, 0.7 s at 10k positions) in the load of every commit."""
        at_time = self.clock()
        at = valuation.valuation_time  # explained to the instant the book is valued at
        try:
            key = (name, st.positions_seq())
            values = pnl.marked_values(valuation)
            base = self.pnl_base
            if base is not None and base.key == key and not valuation.partial:
                due = at_time - base.explained_at >= PNL_EXPLAIN_EVERY
                return pnl.advanced(base.pnl, base.values, values), due
            today = pnl.pnl_today(st, at, name)
            self.pnl_base = PnlBase(key, today, values, at_time)
            return today, False
        except Exception as exc:  # noqa: BLE001 - shown beside the book, not raised
            self.pnl_base = None
            return pnl.PnlToday(None, words=f"P&L today not worked out: {exc}"), False

    @work(
        thread=True,
        exclusive=True,
        group="pnl",
        exit_on_error=False,
        description="explain P&L today from the close",
    )
    def _explain_pnl(self, name: str | None, state: data.BookState) -> None:
        """P&L today of ``state``'s book explained from the close again (``desk.pnl_today``),
        posted as the new base to move it on from (``PnlExplained``); dropped when a trade,
        cancel or close was written since the load, whose next load explains it anyway."""
        base = self.pnl_base
        if base is None:
            return
        try:
            with self.open_store(read_only=True, verify=False) as st:
                if (name, st.positions_seq()) != base.key:
                    return
                if self._read is not None and self._read.marks_cache is not None:
                    st.marks_cache = self._read.marks_cache  # the marks in force read on
                today = pnl.pnl_today(st, state.valuation.valuation_time, name)
        except Exception:  # noqa: BLE001 - the advanced P&L stays; the next load tries again
            return
        values = pnl.marked_values(state.valuation)
        self.post_message(
            PnlExplained(state.book_seq, PnlBase(base.key, today, values, self.clock()))
        )

    def on_pnl_explained(self, message: PnlExplained) -> None:
        """Take the new explain as the base to move P&L today on from, and show the shown load's
        P&L from it at once (moved on to that load's values when it is a later one)."""
        base = self.pnl_base = message.base
        state = self.state
        if state is None or state.valuation.partial or state.tree.pnl.close_id is None:
            return
        today = base.pnl
        if message.book_seq != state.book_seq:
            today = pnl.advanced(base.pnl, base.values, pnl.marked_values(state.valuation))
        old = state.tree
        state.tree = data.BookTree(
            state.valuation,
            self.tz,
            self._row_alert,
            today,
            base=old.base,
            spot_ages=old.spot_ages,
        )
        self.query_one(BookTable).show(state.tree)
        self.query_one("#book-pane").border_subtitle = _pnl_note(state.tree)

    def _row_alert(self, row: ExposureRow) -> str:
        """Limit breaches of a Book row in words (``desk.limits.exposure_breach``)."""
        return limits.exposure_breach(
            self.settings.alerts, row, self.ladder_breaches.by_underlying
        )

    def breaches(self) -> list[str]:
        """Every limit breach in words: the book's, then each underlying's."""
        if self.state is None:
            return []
        return limits.breaches(self.state.valuation, self.settings.alerts, self.ladder_breaches)

    def _load_done(self) -> None:
        """A load ended: start the one asked for while it ran, if any."""
        self._loading = False
        if self._load_again:
            self.load_book(stream=not self._again_by_trader)

    def on_worker_state_changed(self, event: Worker.StateChanged) -> None:
        """A load worker ended (done, failed or cancelled): after its result was shown, start
        the load asked for while it ran (``load_book``)."""
        if event.worker.group == "load" and event.state in (
            WorkerState.SUCCESS,
            WorkerState.ERROR,
            WorkerState.CANCELLED,
        ):
            self._load_done()

    def on_book_loaded(self, message: BookLoaded) -> None:
        self._hide_progress()
        self.book_seq += 1
        state = message.state
        state.book_seq = self.book_seq
        self.state = state
        self.data_version = state.data_version
        self.query_one(BookTable).show(state.tree)
        self.query_one("#book-pane").border_subtitle = _pnl_note(state.tree)
        fx_line = state.tree.fx_delta_words()
        fx_delta = self.query_one("#fx-delta", Static)
        fx_delta.update(fx_line)
        fx_delta.display = bool(fx_line)
        self._refresh_header()
        self._note_lower_bounds(state.valuation.notes)
        text = self.query_one(MoveInput).value
        if text.strip():
            self._submit_move(text, force=True)
        self._panes_after_load(message.stream)
        if message.explain_due and not any(
            w.group == "pnl" and not w.is_finished for w in self.workers
        ):
            self._explain_pnl(self.book_in_view, state)
        if self.timings.count(Timing.FIRST_PAINT) == 0:
            self.call_after_refresh(lambda: self.timings.stamp(Timing.FIRST_PAINT))
        version = state.valuation.market.version
        self.call_after_refresh(lambda: self.timings.stamp(Timing.BOOK_PAINTED, version))

    def _note_lower_bounds(self, notes: tuple[str, ...]) -> None:
        """Tell the user, once per change, which American positions are valued at a lower bound
        (negative rates on both sides, or a boundary that did not converge)."""
        from blotter.risk import LOWER_BOUND_WORDS

        lower = [n for n in notes if LOWER_BOUND_WORDS in n]
        if lower and lower != self._lower_notes:
            self.notify(printable("; ".join(lower)), title="Lower bounds", severity="warning",
                        markup=False, timeout=LOWER_BOUND_NOTE_S)
        self._lower_notes = lower

    def _refresh_header(self) -> None:
        if self.state is None:
            return
        alerts = self.breaches()
        if len(alerts) > 2:
            alerts = [*alerts[:1], f"{len(alerts) - 1} more limit breaches (w lists them)"]
        n_trials = int(np.count_nonzero(self.state.valuation.book.is_trial))
        if n_trials:
            alerts.insert(0, f"TRIALS {n_trials} (not in the store)")
        stale_spots = session.stale_spot_words(self.state.tree.spot_ages)
        if stale_spots:
            alerts.insert(0, stale_spots)
        unvalued = self.state.valuation.unvalued
        if unvalued:
            n = session.unvalued_count(unvalued)
            names = session.missing_by_name(unvalued, most=2)
            alerts.insert(0, f"NOT VALUED {n} ({names}): w lists")
        first = COMPILING_ALERT if self._compiling else ""
        self.query_one(HeaderLine).show(self.state, self.clock(), self.tz, alerts, first)

    def on_load_failed(self, message: LoadFailed) -> None:
        self._hide_progress()
        self.query_one(HeaderLine).show_error(message.reason)
        self.notify(
            printable(message.reason),
            title="Book not loaded",
            severity="error",
            timeout=10,
            markup=False,
        )

    # -- the store's change check ---------------------------------------------------------------
    @work(
        thread=True,
        exclusive=True,
        group="watch",
        exit_on_error=False,
        description="watch the book file for commits",
    )
    def watch_store(self, interval_s: float) -> None:
        """Every ``interval_s`` take the book's change counter (``Store.changes``) through this
        thread's own Store."""
        from blotter import store

        worker = get_current_worker()
        try:
            st = store.open_store(self.db_path, read_only=True)
        except Exception:  # noqa: BLE001 - no watching without a readable file; loading says why
            return
        try:
            ticks = st.changes(self._stop_watch, interval_s)
            # The baseline is taken at once, so a commit before the first tick is still seen;
            # None (a busy file): the first tick takes the baseline.
            last = next(ticks, None)
            for version in ticks:
                if worker.is_cancelled:
                    break
                if version is None:  # a busy or vanished file: try again next time
                    continue
                if last is not None and version != last:
                    self.post_message(StoreChanged(version))
                elif self._revalue_due():
                    self.post_message(ValuationDue())
                last = version
        finally:
            close = getattr(st, "close", None)
            if close is not None:
                close()

    def _revalue_due(self) -> bool:
        """In the watcher: the clock has passed into a minute after the shown valuation's, and no
        load is asked for yet (``desk.session.revalue_due``)."""
        state = self.state
        if state is None or self._revalue_asked == state.book_seq:
            return False
        if not session.revalue_due(state.session.valuation_time, self.clock()):
            return False
        self._revalue_asked = state.book_seq
        return True

    def on_valuation_due(self, message: ValuationDue) -> None:
        """Value the book again at the clock's time (marks and trades read afresh)."""
        self.load_book(stream=True)

    def on_store_changed(self, message: StoreChanged) -> None:
        self.load_book(stream=True)
        for screen in self.screen_stack:
            if isinstance(screen, DeskScreen):
                screen.store_changed()

    # -- the what-if bar ------------------------------------------------------------------------
    @on(Input.Changed, "#whatif-input")
    def _bar_changed(self, event: Input.Changed) -> None:
        self._submit_move(event.value)

    @on(Input.Submitted, "#whatif-input")
    def _bar_submitted(self, event: Input.Submitted) -> None:
        """Enter keeps a line that parses in the bar's history and goes back to the book pane
        (a line that does not parse keeps the focus, to be put right)."""
        from blotter import scenario

        symbols = self.state.valuation.book.underlyings.symbols if self.state else None
        try:
            scenario.parse_move(event.value, symbols)
        except scenario.MoveSyntaxError:
            return
        self.query_one(MoveInput).remember(event.value)
        self.action_focus_book()  # so the next command key is a command, not bar text

    def _submit_move(self, text: str, force: bool = False) -> None:
        """Parse ``text`` here (cheap), apply it in a worker; a bad line keeps the last result."""
        from blotter import scenario

        bar = self.query_one(WhatIfBar)
        self.move_seq += 1
        if not text.strip():
            bar.clear_message()
            self.query_one(MovePane).mark_stale(False)
            return
        symbols = self.state.valuation.book.underlyings.symbols if self.state else None
        try:
            move = scenario.parse_move(text, symbols)
        except scenario.MoveSyntaxError as exc:
            bar.show_error(text, exc.message, exc.start, exc.end)
            self.query_one(MovePane).mark_stale(True)
            return
        self.query_one(MovePane).mark_stale(False)
        if self.state is None:
            bar.show_ok(move.describe() + " (waiting for the book)")
            return
        if (
            not force
            and self.move is not None
            and self.result is not None
            and move.describe() == self.move.describe()
        ):
            # the same move as shown (spacing, case): keep it, and its warning
            bar.show_ok(move.describe(), text, self.query_one(MovePane).warning)
            return
        # Debounce on the trailing edge only: a keystroke with no revaluation in flight is
        # applied at once; one that arrives mid-revaluation waits, so a burst collapses to one.
        busy = any(w.group == "move" and not w.is_finished for w in self.workers)
        self.apply_move(
            self.move_seq,
            self.state,
            text,
            move,
            self.settings.debounce_ms / 1000.0 if busy else 0.0,
        )

    @work(
        thread=True,
        exclusive=True,
        group="move",
        exit_on_error=False,
        description="revalue under the bar's move",
    )
    def apply_move(
        self, seq: int, state: data.BookState, text: str, move: Move, wait_s: float
    ) -> None:
        """Wait ``wait_s`` (debounce), then revalue under ``move`` unless a newer key came."""
        from blotter import scenario

        worker = get_current_worker()
        if wait_s:
            time.sleep(wait_s)
        if worker.is_cancelled:
            return
        try:
            result = scenario.apply_move(state.valuation, move)
        except (scenario.MoveError, ValueError, KeyError) as exc:
            if not worker.is_cancelled:
                self.post_message(MoveFailed(seq, str(exc)))
            return
        if not worker.is_cancelled:
            self.post_message(MoveApplied(seq, state.book_seq, text, move, result))

    def on_move_applied(self, message: MoveApplied) -> None:
        if message.seq != self.move_seq or self.state is None or message.book_seq != self.book_seq:
            return
        previous_days = self._roll_days(self.move)
        self.move_text, self.move, self.result = message.text, message.move, message.result
        said = session.move_words(self.state.valuation, message.move)
        self.query_one(MovePane).show(message.text, said.words, message.result, said.warning)
        self.query_one(WhatIfBar).show_ok(message.move.describe(), message.text, said.warning)
        self._stamp_move_painted()
        days = self._roll_days(message.move)
        if days != previous_days or self.query_one(GridPane).ladder is None:
            self.start_ladder(self.state, days)
            self.start_profile()

    def _stamp_move_painted(self) -> None:
        """Stamp the Move pane's repaint for the bench, once it is on screen."""
        seq = self.move_seq
        self.call_after_refresh(lambda: self.timings.stamp(Timing.MOVE_PAINTED, seq))

    def on_move_failed(self, message: MoveFailed) -> None:
        if message.seq != self.move_seq:
            return
        text = self.query_one(MoveInput).value
        self.query_one(WhatIfBar).show_error(text, message.reason, 0, len(text))

    def _roll_days(self, move: Move | None) -> float:
        """Calendar days of the move's roll (``desk.session.roll_days``)."""
        if self.state is None:
            return 0.0
        return session.roll_days(self.state.valuation, move)

    # -- ladder and profile ---------------------------------------------------------------------
    def _panes_after_load(self, stream: bool) -> None:
        """Work the Grid and Reval panes out again for the book just loaded: at once after a load
        the trader asked for; after others' commits or the clock (``stream``, e.g. a feed) at
        most once every ``pane_refresh_s``, the last commit of a burst included, so a feed does
        not recompute them every second (their titles say the time their numbers are as of)."""
        if self._panes_timer is not None:
            if stream:
                return  # the waiting refresh will take the newest book
            self._panes_timer.stop()
            self._panes_timer = None
        wait = self.settings.pane_refresh_s - (time.monotonic() - self._panes_started)
        busy = stream and self._panes_busy()
        if not stream or (wait <= 0 and not busy):
            self._refresh_panes(stream)
        else:
            self._panes_timer = self.set_timer(
                max(wait, PANES_BUSY_RETRY_S if busy else 0.0), self._panes_due
            )

    def _panes_busy(self) -> bool:
        return any(w.group in ("ladder", "profile") and not w.is_finished for w in self.workers)

    def _panes_due(self) -> None:
        """A stream's waiting refresh of the Grid and Reval panes (``_panes_after_load``)."""
        self._panes_timer = None
        self._panes_after_load(stream=True)

    def _refresh_panes(self, stream: bool) -> None:
        """Start the grid (with the bar's day roll) and the Reval curves on the shown book; under
        a stream the Reval pane is left until it is shown when it is hidden."""
        if self.state is None:
            return
        self._panes_started = time.monotonic()
        bar_move = self.move if self.query_one(MoveInput).value.strip() else None
        self.start_ladder(self.state, self._roll_days(bar_move))
        if stream and not self._reval_shown():
            self._profile_behind = True
        else:
            self.start_profile()

    def _reval_shown(self) -> bool:
        """Whether the Reval pane is on screen: the current pane, or a wide terminal's."""
        return self.pane == "reval" or self.size.width >= WIDE_WIDTH

    def _as_of(self, state: data.BookState) -> str:
        """The desk-local time (``10:04:05``) of the store read ``state`` was loaded from: the
        Grid and Reval titles lead with it, since under a stream they may lag the Book pane."""
        return f"{state.read_at.astimezone(self.tz):%H:%M:%S}"

    def start_ladder(self, state: data.BookState, days: float) -> None:
        self._ladder_seq = state.book_seq
        self.compute_ladder(state, days)

    @work(
        thread=True,
        exclusive=True,
        group="ladder",
        exit_on_error=False,
        description="spot × vol grid",
    )
    def compute_ladder(self, state: data.BookState, days: float) -> None:
        """The spot × vol ladder with the bar's day roll."""
        from blotter import scenario

        worker = get_current_worker()
        try:
            grids = scenario.ladders(
                state.valuation,
                self.settings.ladder_spot_pcts,
                self.settings.ladder_vol_pts,
                days=days,
            )
        except (ValueError, KeyError) as exc:
            if not worker.is_cancelled:
                self.post_message(LoadFailed(f"grid: {exc}"))
            return
        breaches = limits.ladder_breaches(
            state.valuation,
            grids,
            self.settings.alerts,
            self.settings.ladder_spot_pcts,
            self.settings.ladder_vol_pts,
            days,
            cancelled=lambda: worker.is_cancelled,
        )
        if breaches is not None and not worker.is_cancelled:
            self.post_message(LadderReady(state.book_seq, days, grids, breaches, state))

    def on_ladder_ready(self, message: LadderReady) -> None:
        """Show the grid last started (under a stream it may be of an earlier load than the
        Book pane's, and its title says when it is as of)."""
        if message.book_seq == self._ladder_seq:
            state = message.state or self.state
            partial = state is not None and state.valuation.partial
            as_of = self._as_of(state) if state is not None else ""
            self.query_one(GridPane).show(message.ladder, message.days, partial, as_of)
            before, self.ladder_breaches = self.ladder_breaches, message.breaches
            if message.breaches.by_underlying != before.by_underlying or message.breaches.book:
                self.query_one(BookTable).show()
            self._refresh_header()

    def start_profile(self) -> None:
        if self.state is None:
            return
        self._profile_seq = self.state.book_seq
        self._profile_behind = False
        rows = None
        label = "the valued book" if self.state.valuation.partial else "book"
        if self.scope == "row":
            key = self.query_one(BookTable).cursor_row_key()
            if key and key != "total":
                rows = self.state.tree.rows_of(key)
                row = self.query_one(BookTable).row(key)
                label = row.label if row else key
        self.compute_profile(
            self.state, self._roll_days(self.move), self.greek, self.axis, rows, label
        )

    @work(
        thread=True,
        exclusive=True,
        group="profile",
        exit_on_error=False,
        description="profile curves",
    )
    def compute_profile(
        self,
        state: data.BookState,
        days: float,
        greek: str,
        axis: str,
        rows: np.ndarray | None,
        label: str,
    ) -> None:
        """Curves for the Reval pane (see ``data.profile``)."""
        worker = get_current_worker()
        try:
            profile = data.profile(state.valuation, self.settings, greek, axis, days, rows, label)
        except (ValueError, KeyError) as exc:
            if not worker.is_cancelled:
                self.post_message(LoadFailed(f"profile: {exc}"))
            return
        if not worker.is_cancelled:
            self.post_message(ProfileReady(state.book_seq, profile, self._as_of(state)))

    def on_profile_ready(self, message: ProfileReady) -> None:
        """Show the curves last started (as for the grid, ``on_ladder_ready``)."""
        if message.book_seq == self._profile_seq:
            self.query_one(RevalPane).show(message.profile, message.as_of)

    # -- actions ---------------------------------------------------------------------------------
    def check_action(self, action: str, parameters: tuple[object, ...]) -> bool | None:
        """On the help screen only its own keys (and help, quit) apply; on the other screens only
        their own keys and help; the footer shows what applies."""
        if isinstance(self.screen, HelpScreen) and action not in ("help", "quit", "close"):
            return False
        if self.screen is not self.screen_stack[0] and action not in ("help",):
            return not any(k.action == action and k.where == "app" for k in KEYS)
        return True

    # -- the desk screens ------------------------------------------------------------------------
    def host(self) -> DeskHost:
        """This app as the desk screens see it (``ui.host.DeskHost``)."""
        return self

    def open_store(self, read_only: bool = False, verify: bool = True) -> Store:
        """A store of the book file for the calling thread (read-only when the app is);
        ``verify``: with ``open_store``'s integrity check (see ``VERIFY_EVERY_S``)."""
        from blotter import store

        return store.open_store(
            self.db_path, read_only=read_only or self.read_only, desk_tz=self.tz, verify=verify
        )

    def _verify_due(self) -> tuple[tuple[int, int], bool, bool]:
        """The book file's (device, inode); whether the load worker's open is to check it (the
        first load, or the file replaced: checked before it is valued); and whether the periodic
        check is due (``VERIFY_EVERY_S``, ``VERIFY_CPU_SHARE``), which ``_verify_file`` runs
        beside the loads so that none waits on it."""
        try:
            st = os.stat(self.db_path)
        except OSError:
            return (-1, -1), True, True  # the open says why it cannot read the file
        file_id = (st.st_dev, st.st_ino)
        last = self._verified
        if last is None or last[0] != file_id:
            return file_id, True, True
        wait = max(VERIFY_EVERY_S, self._verify_s / VERIFY_CPU_SHARE)
        return file_id, False, time.monotonic() - last[1] >= wait

    @on(BookLoaded)
    def _verify_after_load(self, message: BookLoaded) -> None:
        """Start the periodic check of the book file when it is due and none is running."""
        if self.loader is None and self._verify_due()[2] and not any(
            w.group == "verify" and not w.is_finished for w in self.workers
        ):
            self._verify_file()

    @work(
        thread=True,
        exclusive=True,
        group="verify",
        exit_on_error=False,
        description="check the book file",
    )
    def _verify_file(self) -> None:
        """``open_store``'s integrity check of the book file in this thread; a damaged file is
        said as a failed load."""
        file_id, _, due = self._verify_due()
        if not due:
            return
        began = time.monotonic()
        try:
            with self.open_store(read_only=True):
                pass
        except Exception as exc:  # noqa: BLE001 - said beside the book, never raised
            self.post_message(LoadFailed(f"cannot open {self.db_path}: {exc}"))
        done = time.monotonic()
        self._verified, self._verify_s = (file_id, done), done - began

    def action_marks(self) -> None:
        self.push_screen(MarksScreen(self.host()))

    def action_trades(self) -> None:
        self.push_screen(TradesScreen(self.host()))

    def action_explain(self) -> None:
        self.push_screen(ExplainScreen(self.host()))

    def action_watch_list(self) -> None:
        self.push_screen(WatchScreen(self.host(), id="watch-list"))

    def action_scenario_sets(self) -> None:
        self.push_screen(ScenarioSetsScreen(self.host(), self.settings))

    def action_vega_unit(self) -> None:
        table = self.query_one(BookTable)
        table.set_vega_unit("vol" if table.vega_unit == "pt" else "pt")
        self.notify(
            "vega per 1.00 of vol (100 vol points)"
            if table.vega_unit == "vol"
            else "vega per vol point (0.01 of vol)",
            timeout=3,
        )

    # -- trial trades ----------------------------------------------------------------------------
    def add_trial(
        self, contract: ContractRecord, quantity: int, price: float, book: str
    ) -> None:
        """Layer a trial trade of ``contract`` (a ``store.ContractRecord``) on the live book."""
        self.trial_trades.add(contract, quantity, price, book)
        self.load_book()

    def remove_trial(self, trial_id: int) -> None:
        self.trial_trades.remove(trial_id)
        self.load_book()

    def clear_trials(self, reload: bool = True) -> None:
        """Drop every trial trade (nothing was written for them)."""
        n = self.trial_trades.clear()
        if reload:
            self.load_book()
            if n:
                self.notify(f"{n} trial trade(s) cleared; the store is untouched", timeout=3)

    @property
    def trials(self) -> list[TrialTrade]:
        """The trial trades layered on the live book, oldest first (a copy)."""
        return self.trial_trades.all()

    def action_clear_trials(self) -> None:
        if not self.trial_trades:
            self.notify("no trial trades to clear", timeout=3)
            return
        self.clear_trials()

    # -- delta hedges ----------------------------------------------------------------------------
    @on(BookLoaded)
    def _hedge_after_load(self, message: BookLoaded) -> None:
        """After ``on_book_loaded`` has laid the book out: the hedge of the cursor's row, with the
        file's underlyings read again when the book has others (not on every commit)."""
        self._hedge_staging = False
        symbols = message.state.valuation.book.underlyings.symbols
        if self.hedge_refs is None or self.hedge_refs.symbols != symbols:
            self._read_hedge_refs(symbols)  # started here, so a wait for the workers sees it
        self.call_later(self._show_hedge)

    @on(LoadFailed)
    def _hedge_after_failed_load(self, message: LoadFailed) -> None:
        self._hedge_staging = False

    @on(DataTable.CellHighlighted, "#book-table")
    def _hedge_follows_cursor(self, event: DataTable.CellHighlighted) -> None:
        self._show_hedge()

    @work(
        thread=True,
        exclusive=True,
        group="hedge",
        exit_on_error=False,
        description="read the underlyings for the hedge",
    )
    def _read_hedge_refs(self, symbols: tuple[str, ...]) -> None:
        """The file's underlyings (``desk.hedge.read_refs``) in this thread's store."""
        worker = get_current_worker()
        try:
            if self.loader is not None:
                raise ValueError("this book is not read from a file")
            with self.open_store(read_only=True) as st:
                refs = desk_hedge.read_refs(st)
        except Exception as exc:  # noqa: BLE001 - said beside the book, never raised
            if not worker.is_cancelled:
                self.post_message(HedgeRefsRead(symbols, None, str(exc)))
            return
        if not worker.is_cancelled:
            self.post_message(HedgeRefsRead(symbols, refs))

    def on_hedge_refs_read(self, message: HedgeRefsRead) -> None:
        self.hedge_refs = message
        self._show_hedge()

    def cursor_hedge(self) -> desk_hedge.Hedge | str:
        """The delta hedge of the Book row under the cursor (``desk.hedge``), or why there is
        none in words: the total row hedges the book with its reference index, any row of one
        underlying hedges its positions with that underlying."""
        if self.state is None:
            return "the book is not loaded yet"
        refs = self.hedge_refs
        if refs is None:
            return "reading the underlyings…"
        if refs.refs is None:
            return f"the underlyings could not be read: {refs.reason}"
        key = self.query_one(BookTable).cursor_row_key()
        v = self.state.valuation
        try:
            if key == "total":
                return desk_hedge.book_hedge(v, refs.refs.underlyings)
            if key is None or key == "total-live" or key.startswith("c|") or key.endswith("more"):
                raise desk_hedge.HedgeRefused(
                    "no hedge for this row: the total row (Σ) hedges the book, an "
                    "underlying's row that underlying"
                )
            return desk_hedge.rows_hedge(v, self.state.tree.rows_of(key), refs.refs.underlyings)
        except desk_hedge.HedgeRefused as exc:
            return str(exc)

    def _show_hedge(self) -> None:
        """The cursor row's hedge on the line under the Book pane."""
        h = self.cursor_hedge()
        if isinstance(h, str):
            words = f"hedge: {h}"
        else:
            what = " book β" if h.beta_weighted else ""
            words = f"hedge{what}: {h.short_words()}" + (" · d stages" if h.quantity else "")
        self.query_one("#book-hedge", Static).update(words)

    def action_stage_hedge(self) -> None:
        """Stage the cursor row's delta hedge as a trial trade (the store is untouched)."""
        h = self.cursor_hedge()
        if isinstance(h, str):
            self.notify(f"no hedge: {h}", severity="warning", timeout=5, markup=False)
            return
        if self._hedge_staging:
            self.notify("the last hedge is still being staged", timeout=3)
            return
        if h.quantity == 0:
            self.notify(
                f"nothing to stage: the delta is within half a lot ({h.words()})",
                timeout=5,
                markup=False,
            )
            return
        assert self.hedge_refs is not None and self.hedge_refs.refs is not None
        self._hedge_staging = True
        self._stage_hedge(h, self.hedge_refs.refs, self.trial_trades.all(), self.book_in_view)

    @work(
        thread=True,
        exclusive=True,
        group="hedge-stage",
        exit_on_error=False,
        description="stage a hedge as a trial",
    )
    def _stage_hedge(
        self,
        h: desk_hedge.Hedge,
        refs: desk_hedge.Refs,
        trials: list[TrialTrade],
        book_in_view: str | None,
    ) -> None:
        """The trial of ``h`` and the book it goes to: the book in view, else ``stage_book``'s
        (``desk.hedge``)."""
        from blotter import store

        try:
            book = book_in_view
            if book is None:
                with self.open_store(read_only=True) as st:
                    book = desk_hedge.stage_book(st, h.instrument.symbol)
            contract, quantity, price = desk_hedge.stage(h, refs, trials)
        except (desk_hedge.HedgeRefused, store.StoreError, ValueError) as exc:
            self.post_message(HedgeStaged(h.words(), reason=str(exc)))
            return
        self.post_message(HedgeStaged(h.words(), contract, quantity, price, book))

    def on_hedge_staged(self, message: HedgeStaged) -> None:
        if message.contract is None:
            self._hedge_staging = False
            self.notify(
                f"hedge not staged: {message.reason}", severity="warning", timeout=6, markup=False
            )
            return
        self.add_trial(message.contract, message.quantity, message.price, message.book)
        self.notify(
            f"trial in book {message.book} at {message.price:,.2f} per unit: {message.words} "
            "(not in the store; c clears, Trades p books it)",
            title="Hedge staged",
            timeout=6,
            markup=False,
        )

    def action_help(self) -> None:
        if isinstance(self.screen, HelpScreen):
            return
        bound = {k.id: self._keymap.get(k.id, k.keys) for k in KEYS}
        self.push_screen(HelpScreen(bound))

    def action_focus_bar(self) -> None:
        # A priority binding, handled as the key reaches the app and focusing at once, so that
        # "/spot -3%" arriving in one burst (fast typing, SSH, tmux) all lands in the bar.
        self.screen.set_focus(self.query_one(MoveInput))

    def on_paste(self, event: Paste) -> None:
        """Text pasted anywhere but the bar goes into the bar (a leading "/" dropped)."""
        bar = self.query_one(MoveInput)
        if self.focused is bar:
            return
        event.stop()
        self.screen.set_focus(bar)
        bar.insert_text_at_cursor(event.text.lstrip("/").replace("\n", " ").strip())

    def action_next_book(self) -> None:
        """Show the next book of the cycle all books, then each book by name."""
        if self.loader is not None or self.state is None:
            self.notify("no other book to show", timeout=3)
            return
        self.book_in_view = books.next_book(self.state.books, self.book_in_view)
        self.notify(f"showing {books.book_words(self.book_in_view)}", timeout=2)
        self.load_book()

    def action_focus_book(self) -> None:
        self.screen.set_focus(self.query_one(BookTable))

    def action_next_pane(self) -> None:
        self.pane = PANES[(PANES.index(self.pane) + 1) % len(PANES)]
        self._show_pane()
        if self._profile_behind and self._reval_shown():
            self.start_profile()

    def action_toggle_row(self) -> None:
        self.query_one(BookTable).toggle()

    def action_toggle_group(self) -> None:
        table = self.query_one(BookTable)
        table.set_group("expiry" if table.group == "underlying" else "underlying")
        self._book_title()

    def action_sort_column(self) -> None:
        self.query_one(BookTable).sort_by_cursor()
        self._book_title()

    def _book_title(self) -> None:
        """The Book pane's title says how it is grouped and sorted."""
        table = self.query_one(BookTable)
        title = "Book by " + ("expiry bucket" if table.group == "expiry" else "underlying")
        column, reverse = table.sort_column, table.sort_reverse
        if column == "label":
            title += " ─ sorted by name" + (" (Z→A)" if reverse else "")
        elif column is not None:
            title += f" ─ sorted by {dict(data.TABLE_COLUMNS)[column]} " + (
                "↓ largest first" if reverse else "↑ smallest first"
            )
        self.query_one("#book-pane").border_title = title

    def action_toggle_order(self) -> None:
        self.query_one(MovePane).toggle_order()
        if self.result is not None:
            self._stamp_move_painted()

    def action_next_grid(self) -> None:
        self.query_one(GridPane).next_grid()

    def action_next_greek(self) -> None:
        ids = [g[0] for g in GREEKS]
        self.greek = ids[(ids.index(self.greek) + 1) % len(ids)]
        self.start_profile()

    def action_toggle_axis(self) -> None:
        self.axis = "days" if self.axis == "spot" else "spot"
        self.start_profile()

    def action_toggle_scope(self) -> None:
        self.scope = "row" if self.scope == "book" else "book"
        self.start_profile()

    @on(DataTable.CellHighlighted, "#book-table")
    def _book_cursor_moved(self, event: DataTable.CellHighlighted) -> None:
        """With the profile on the selected row, it follows the cursor to another row."""
        if self.scope == "row" and event.coordinate.row != self._profile_row:
            self._profile_row = event.coordinate.row
            self.start_profile()

    def action_reload(self) -> None:
        self.load_book()

    async def action_quit(self) -> None:
        """Quit; with trial trades held (never written) ask first, so one key too many does
        not drop them."""
        question = self.trial_trades.quit_question()
        if not question:
            self._quit()
            return
        self.push_screen(ConfirmScreen(question), self._quit_answered)

    def _quit_answered(self, yes: bool | None) -> None:
        if yes:
            self._quit()

    def _quit(self) -> None:
        self._stop_watch.set()
        self.exit()

    def get_system_commands(self, screen: Screen[Any]) -> Iterator[SystemCommand]:
        """The action list's entries: every action bound where it was opened, by its words
        (read as it opens: once it is up, the screen below no longer has the app's keys)."""
        return iter(self._actions) if self._actions else action_commands(screen)

    def action_command_palette(self) -> None:
        """Open the action list (Textual's palette, F10 or Escape to close)."""
        if not isinstance(self.screen, ActionList):
            self._actions = list(action_commands(self.screen))
            placeholder = "Type words of an action (F10 or Escape closes)…"
            self.push_screen(ActionList(id="--command-palette", placeholder=placeholder))

    # -- for tests and the bench ----------------------------------------------------------------
    async def settle(self) -> None:
        """Wait until every worker but the store watcher is done (tests and the bench)."""
        busy = [w for w in self.workers if w.group != "watch" and not w.is_finished]
        for w in busy:
            try:
                await w.wait()
            except WorkerCancelled:
                continue  # replaced by a newer worker of its group, which is waited for next


def make_app(
    db_path: str | Path, settings: Settings | None = None, clock: Clock | None = None
) -> BlotterApp:
    """The app on ``db_path`` with ``settings`` (defaults when None); ``clock`` fixes "now"."""
    return BlotterApp(str(db_path), settings, clock)
