"""The Marks screen: each mark point in force beside the last close, edited by typing; the close.

Spot per underlying, then its dividend yield and vol points by expiry (ATM and smile strikes),
then rates. Enter (or typing a digit) edits the cell under the cursor: a number is the new mark;
in a vol cell ``$12.35`` is an option price (``$12.35c`` a call, ``$12.35p`` a put, else the
out-of-the-money one) whose implied vol (``engine.implied_vol``) becomes the mark once the solved
vol has been shown beside the one in force and Enter pressed again; a typed vol far from the one
in force or very low (``desk.entry.mark_question``) asks the same way. A point no position can
use (an expired or weekend expiry, an unknown currency) is refused by ``desk.entry``, and the
store checks every value; a refusal is shown beside the cell and the typed text stays. A typed
mark is otherwise written at once as an intraday mark; "close" reviews what changed since
the last close, what is missing and what has not moved for over a day (``desk.close_review``);
the review writes the close itself and returns the set it wrote with ``dismiss``.
"""

from __future__ import annotations

from typing import ClassVar

from rich.text import Text
from textual import events, on, work
from textual.app import ComposeResult
from textual.binding import BindingType
from textual.containers import VerticalScroll
from textual.screen import ModalScreen
from textual.widgets import DataTable, Footer, Input, Static
from textual.worker import get_current_worker

from blotter.desk import close_review, entry
from blotter.ui.host import DeskHost
from blotter.ui.keys import app_bindings
from blotter.ui.messages import CloseWritten, MarksRead, MarkWritten, ScreenFailed
from blotter.ui.screens.base import READ_ONLY_WORDS, DeskScreen
from blotter.ui.timings import Timing

COLUMNS = (
    ("point", "mark point", 24),
    ("value", f"in force\n{entry.VOL_CONVENTION}", 11),
    ("close", "last close", 11),
    ("change", "change", 11),
    ("when", "marked", 11),
)
"""(key, header, width) of the marks table; the value's header says how a vol, a rate or a yield
is typed (a spot is a price)."""


class MarksScreen(DeskScreen):
    """See the module docstring."""

    CSS_PATH = "desk.tcss"
    WHERE = "marks"
    WRITE_ACTIONS = frozenset({"edit", "commit_close"})
    BINDINGS: ClassVar[list[BindingType]] = list(app_bindings("marks"))

    def __init__(self, host: DeskHost) -> None:
        super().__init__(host, id="marks")
        self.view: close_review.MarksView | None = None
        self.editing: close_review.MarkPoint | None = None
        self.asked: tuple[str, str] | None = None  # (point key, text) a question was asked of

    def compose(self) -> ComposeResult:
        yield self.title_line("Marks: in force beside the last close")
        table: DataTable[str | Text] = DataTable(
            id="marks-table",
            classes="desk-table",
            cursor_type="row",
            zebra_stripes=True,
            header_height=2,
        )
        yield table
        yield Input(
            id="marks-edit",
            classes="desk-input",
            select_on_focus=False,
            placeholder=(
                "read-only: marks cannot be typed"
                if self.host.read_only
                else "type a number on a row to edit its mark"
            ),
            disabled=self.host.read_only,
        )
        yield Static("", classes="desk-message")
        yield Footer(compact=True)

    def on_mount(self) -> None:
        table = self.query_one("#marks-table", DataTable)
        for key, header, width in COLUMNS:
            table.add_column(header, key=key, width=width)
        table.focus()
        self.say(
            "Read-only: marks are shown, not typed."
            if self.host.read_only
            else "Type on a row: a vol or rate 0.25 or 25%, a spot its price; "
            "$12.40c or $12.40p in a vol cell solves the call's or put's vol."
        )
        self.load()

    # -- reading ---------------------------------------------------------------------------------
    def load(self, review: bool = False) -> None:
        """Read the marks in force and the last close in a worker; with ``review`` the close
        review follows (its own worker group, so a refresh cannot cancel it)."""
        if review:
            self._read_review()
        else:
            self._read()

    @work(thread=True, exclusive=True, group="marks-load", exit_on_error=False)
    def _read(self) -> None:
        self._read_marks(False)

    @work(thread=True, exclusive=True, group="marks-review", exit_on_error=False)
    def _read_review(self) -> None:
        self._read_marks(True)

    def _read_marks(self, review: bool) -> None:
        """In a worker thread: read the marks in this thread's own store and post them."""
        worker = get_current_worker()
        try:
            with self.host.open_store(read_only=True) as st:
                view = close_review.marks_view(st, st.load_book())
        except Exception as exc:  # noqa: BLE001 - shown to the user
            if not worker.is_cancelled:
                self.post_message(ScreenFailed(f"cannot read the marks: {exc}"))
            return
        if not worker.is_cancelled:
            self.post_message(MarksRead(view, review))

    def on_marks_read(self, message: MarksRead) -> None:
        self.show(message.view)
        if message.review:
            self.say("")
            review = close_review.close_review(message.view, self.host.clock(), self.host.tz)
            self.app.push_screen(CloseReviewScreen(self.host, review), self._close_reviewed)

    def on_screen_failed(self, message: ScreenFailed) -> None:
        self.say(message.words, bad=True)

    def show(self, view: close_review.MarksView) -> None:
        """Fill the table with ``view`` keeping the cursor on the same point."""
        table = self.query_one("#marks-table", DataTable)
        tz = self.host.tz
        cursor = self.cursor_point()
        table.clear()
        for p in view.points:
            when = f"{p.observed_at.astimezone(tz):%m-%d %H:%M}" if p.observed_at else ""
            value = Text(p.shown(p.value), justify="right")
            if p.value is None:
                value.stylize("bold reverse")
            table.add_row(
                p.label,
                value,
                Text(p.shown(p.close_value) if p.close_value is not None else "—", justify="right"),
                Text(p.change(), justify="right"),
                when,
                key=p.key,
            )
        self.view = view
        close = (
            f"last close: set {view.last_close_id}, "
            f"{view.last_close_at.astimezone(tz):%Y-%m-%d %H:%M}"
            if view.last_close_id is not None and view.last_close_at is not None
            else "no close yet"
        )
        self.query_one(".desk-title", Static).update(
            Text(
                f"Marks: {sum(p.value is not None for p in view.points)} points in force"
                f"{self._missing_words(view)} │ {close}",
                style="bold",
            )
        )
        keys = [p.key for p in view.points]
        if cursor is not None and cursor.key in keys:
            table.move_cursor(row=keys.index(cursor.key), animate=False)

    @staticmethod
    def _missing_words(view: close_review.MarksView) -> str:
        """``, 3 missing`` when positions need points nobody marked, else nothing."""
        missing = sum(p.needed and p.value is None for p in view.points)
        return f", {missing} missing" if missing else ""

    def cursor_point(self) -> close_review.MarkPoint | None:
        """The mark point under the cursor."""
        if self.view is None or not self.view.points:
            return None
        row = self.query_one("#marks-table", DataTable).cursor_row
        return self.view.points[row] if 0 <= row < len(self.view.points) else None

    def store_changed(self) -> None:
        self.load()

    # -- editing ---------------------------------------------------------------------------------
    def action_edit(self, first: str = "") -> None:
        point = self.cursor_point()
        if point is None:
            return
        self.editing = point
        box = self.query_one("#marks-edit", Input)
        box.border_title = f"{point.label.strip()} ({point.unit()}); Enter writes, F10 leaves"
        box.value = first
        box.cursor_position = len(first)
        self.set_focus(box)  # at once, so the rest of a typed burst lands in the box

    def on_key(self, event: events.Key) -> None:
        """A digit, ".", "-" or "$" typed on the table starts editing the cell with it."""
        if not event.character:
            return
        table = self.query_one("#marks-table", DataTable)
        if self.host.read_only:
            if self.focused is table and (event.character.isdigit() or event.character in ".-$"):
                event.stop()
                self.say(READ_ONLY_WORDS, bad=True)
            return
        box = self.query_one("#marks-edit", Input)
        if self.focused is table and (event.character.isdigit() or event.character in ".-$"):
            event.stop()
            self.action_edit(event.character)
        elif self.focused is box and self.editing is not None and event.is_printable:
            # Keys of a fast burst were queued for the table before the focus moved (the box
            # handles its own keys, so a printable key reaching here came that way).
            event.stop()
            box.insert_text_at_cursor(event.character)

    @on(DataTable.RowSelected, "#marks-table")
    async def _enter_on_row(self, event: DataTable.RowSelected) -> None:
        """Enter on the table edits the cell (the table takes Enter before the screen's keys)."""
        event.stop()
        if self.host.read_only:
            self.say(READ_ONLY_WORDS, bad=True)
            return
        box = self.query_one("#marks-edit", Input)
        if self.focused is box and self.editing is not None:
            await box.action_submit()  # Enter at the end of a burst that was queued for the table
            return
        self.action_edit()

    def action_back(self) -> None:
        """From the edit line back to the table (what was typed is dropped), else to the book."""
        if self.focused is self.query_one("#marks-edit", Input):
            self._close_editor()
            return
        self.dismiss()

    def _close_editor(self) -> None:
        box = self.query_one("#marks-edit", Input)
        box.value = ""
        box.border_title = ""
        self.editing = None
        self.asked = None
        self.set_focus(self.query_one("#marks-table", DataTable))

    @on(Input.Submitted, "#marks-edit")
    def _typed(self, event: Input.Submitted) -> None:
        point = self.editing
        if point is None:
            return
        try:
            typed = entry.parse_mark(point.kind, event.value)
        except ValueError as exc:
            self.say(f"✗ refused: {exc}; nothing written", bad=True)
            return
        x, words = typed.number, ""
        if typed.what == "price":
            state = self.host.state
            if state is None:
                self.say("✗ the book is still loading", bad=True)
                return
            vol, words, _ = entry.solve_vol(
                state.valuation, point.symbol or "", point.expiry, point.strike, x, typed.is_call
            )
            if vol is None:
                self.say(f"✗ {words}; nothing written", bad=True)
                return
            x = vol
        question = entry.mark_question(point.kind, point.value, x, words)
        asked = (point.key, event.value.strip())
        if question and self.asked != asked:
            self.asked = asked
            self.say(f"? {question}: Enter again writes it, F10 leaves", bad=True)
            return
        self.asked = None
        self.write_mark(point, x, words)

    @work(thread=True, exclusive=True, group="marks-write", exit_on_error=False)
    def write_mark(self, point: close_review.MarkPoint, value: float, words: str) -> None:
        """Log ``value`` at ``point`` as an intraday mark through the store, which checks it."""
        from blotter import store

        try:
            with self.host.open_store() as st:
                entry.write_mark(
                    st,
                    point.kind,
                    value,
                    symbol=point.symbol,
                    currency=point.currency,
                    expiry=point.expiry,
                    strike=point.strike,
                    tenor_days=point.tenor_days,
                    now=self.host.clock(),
                )
        except (store.StoreError, ValueError, KeyError) as exc:
            self.post_message(ScreenFailed(f"✗ refused: {exc}; what you typed is kept"))
            return
        shown = point.shown(value)
        self.post_message(
            MarkWritten(
                f"✓ {point.label.strip()} marked {shown}" + (f" ({words})" if words else "")
            )
        )

    def on_mark_written(self, message: MarkWritten) -> None:
        self.say(message.words)
        self._close_editor()
        self._written()

    def _written(self) -> None:
        """After a write: read the marks again, and the book (its valuation uses them)."""
        self.load()
        self.host.load_book()

    # -- the close ---------------------------------------------------------------------------------
    def action_commit_close(self) -> None:
        """Read the marks afresh (the last typed one may still be on its way), then review."""
        self.say("reading the marks for the close…")
        self.load(review=True)

    def _close_reviewed(self, closed: close_review.ClosedSet | None) -> None:
        """The review is gone: say which close set it wrote (None: it wrote none)."""
        if closed is None:
            return
        self.say(f"✓ {closed.words}")
        timings = self.host.timings
        self.call_after_refresh(lambda: timings.stamp(Timing.CLOSE_PAINTED))
        self._written()


class CloseReviewScreen(ModalScreen[close_review.ClosedSet | None]):
    """What the close will record: changes since the last close, missing and stale marks.

    Confirming writes the close here (``desk.close_review.commit_close``); a refusal is said on
    this screen, which stays, and a written close set is the screen's result.
    """

    CSS_PATH = "desk.tcss"
    BINDINGS: ClassVar[list[BindingType]] = list(app_bindings("review"))

    def __init__(self, host: DeskHost, review: close_review.CloseReview) -> None:
        super().__init__(id="close-review")
        self.host = host
        self.review = review

    def compose(self) -> ComposeResult:
        r = self.review
        text = Text()
        text.append(
            f"Commit close: {r.n_points} mark points in force become one close set.\n", style="bold"
        )
        if r.corrects is not None:
            text.append(
                f"{r.close_day} is closed already (set {r.corrects}): this close corrects it, "
                "and explain uses the correction in its place.\n",
                style="bold",
            )

        def part(title: str, lines: tuple[str, ...], limit: int = 12) -> None:
            text.append(f"\n{title} ({len(lines)})\n", style="bold")
            for line in lines[:limit]:
                text.append(f"  {line}\n")
            if len(lines) > limit:
                text.append(f"  … {len(lines) - limit} more\n")
            if not lines:
                text.append("  none\n")

        part("Changed since the last close", r.changed)
        part("MISSING: a position needs these and nobody marked them", r.missing)
        part("Unchanged for more than a day", r.stale)
        what = "the correction" if r.corrects is not None else "the close set"
        text.append(f"\ny or F5 writes {what}; n, q or F10 goes back without writing.")
        with VerticalScroll(classes="desk-body"):
            yield Static(text, id="review-text")
        yield Static("", classes="desk-message", id="review-message")
        yield Footer(compact=True)

    def say(self, words: str) -> None:
        self.query_one("#review-message", Static).update(Text(words, style="bold reverse"))

    def action_confirm(self) -> None:
        self.say("writing the close set…")
        self.host.timings.stamp(Timing.CLOSE_KEY)
        self.write_close()

    @work(thread=True, exclusive=True, group="close-write", exit_on_error=False)
    def write_close(self) -> None:
        """Write the marks in force as one close set (a correction when the day is closed)."""
        from blotter import store

        try:
            with self.host.open_store() as st:
                closed = close_review.commit_close(st, self.review)
        except (store.StoreError, ValueError) as exc:
            self.post_message(ScreenFailed(f"✗ close not written: {exc}"))
            return
        self.post_message(CloseWritten(closed))

    def on_close_written(self, message: CloseWritten) -> None:
        self.dismiss(message.closed)

    def on_screen_failed(self, message: ScreenFailed) -> None:
        self.say(message.words)

    def action_back(self) -> None:
        self.dismiss(None)

    def check_action(self, action: str, parameters: tuple[object, ...]) -> bool | None:
        return not (action == "confirm" and self.host.read_only)
