"""The Explain screen: P&L since the last close (or between two closes), per underlying and in
total, term by term (``scenario.explain``) with the unexplained rest and new trades apart."""

from __future__ import annotations

from typing import Any, ClassVar

from rich.text import Text
from textual import work
from textual.app import ComposeResult
from textual.binding import BindingType
from textual.widgets import DataTable, Footer, Static
from textual.worker import get_current_worker

from blotter.desk import books, session
from blotter.ui import fmt
from blotter.ui.host import DeskHost
from blotter.ui.keys import app_bindings
from blotter.ui.messages import ExplainReady, ScreenFailed
from blotter.ui.screens.base import DeskScreen

TERM_LABELS = {
    "delta": "Δ · dS",
    "gamma": "½Γ · dS²",
    "vega": "vega · dσ",
    "volga": "½volga · dσ²",
    "vanna": "vanna · dS·dσ",
    "theta": "θ · dt",
    "rho": "ρ · dr",
    "carry": "carry ρ · dq",
}
"""Row labels of the Taylor terms (each in currency)."""


class ExplainScreen(DeskScreen):
    """Rows are the terms, columns the total and each underlying (fits 80 columns)."""

    CSS_PATH = "desk.tcss"
    WHERE = "explain"
    BINDINGS: ClassVar[list[BindingType]] = list(app_bindings("explain"))

    def __init__(self, host: DeskHost) -> None:
        super().__init__(host, id="explain")
        self.closes: list[Any] = []
        self.start_back = 0  # 0 = the last close before the end, 1 = the one before, ...
        self.end: int | str = "now"  # "now" or a close set id
        self.result: Any = None
        self.in_base: Any = None

    def compose(self) -> ComposeResult:
        yield self.title_line("Explain")
        yield DataTable(id="explain-table", classes="desk-table", cursor_type="row")
        yield Static("", classes="desk-message")
        yield Footer(compact=True)

    def on_mount(self) -> None:
        self.query_one("#explain-table", DataTable).focus()
        self.say("working out the explain…")
        self.compute(self.start_back, self.end)

    def store_changed(self) -> None:
        self.compute(self.start_back, self.end)

    @work(thread=True, exclusive=True, group="explain", exit_on_error=False)
    def compute(self, start_back: int, end: int | str) -> None:
        """``scenario.explain`` from the chosen close to ``end`` in this thread's own store."""
        from blotter import calendar as cal
        from blotter import scenario

        worker = get_current_worker()
        try:
            with self.host.open_store(read_only=True) as st:
                closes = scenario.closes_in_force(st.mark_sets())
                end_id = None if end == "now" else int(end)
                before = _before(closes, end_id)
                if not before:
                    raise ValueError("no close before the end: commit a close first")
                start = before[max(0, len(before) - 1 - start_back)]
                name = self.host.book_in_view
                source = st if name is None else books.OneBook(st, name)
                # "now" is the app's valuation time, as the Book pane's P&L today
                state = self.host.state
                at = None
                if end == "now":
                    at = (
                        state.valuation.valuation_time
                        if state is not None
                        else cal.valuation_time(self.host.clock())
                    )
                result = scenario.explain(
                    source, start.id, "now" if end == "now" else end_id, at=at
                )
                in_base = scenario.explain_in_base(result, st.base_currency())
        except Exception as exc:  # noqa: BLE001 - shown to the user
            if not worker.is_cancelled:
                self.post_message(ScreenFailed(f"✗ cannot explain: {exc}"))
            return
        if not worker.is_cancelled:
            self.post_message(ExplainReady(closes, result, in_base))

    def on_explain_ready(self, message: ExplainReady) -> None:
        self.closes, self.result = message.closes, message.result
        self.in_base = message.in_base
        self.show(self.result)

    def on_screen_failed(self, message: ScreenFailed) -> None:
        self.say(message.words, bad=True)

    def show(self, result: Any) -> None:
        table = self.query_one("#explain-table", DataTable)
        table.clear(columns=True)
        per_ccy = list(getattr(result, "by_currency", ()) or ())
        several = len(per_ccy) > 1
        cols = [result.total, *(per_ccy if several else []), *result.by_underlying]
        heads = []
        for row in cols:
            head = str(row.label)
            if several and row is not result.total:
                head = f"{row.label} {row.currency}" if row.underlying else f"Σ {row.currency}"
            heads.append(head)
        base = self.in_base
        foreign = base is not None and bool({str(r.currency) for r in per_ccy} - {base.base})
        if foreign:  # the book in the base currency: each currency at the start's FX spots
            cols.insert(1, base.at_start_rates)
            heads.insert(1, f"Σ in {base.base}")

        from blotter import scenario

        lines: list[tuple[str, list[float]]] = [
            (TERM_LABELS.get(name, name), [r.terms.get(name, 0.0) for r in cols])
            for name in scenario.EXPLAIN_TERMS
        ]
        lines += [
            ("= explained", [r.explained for r in cols]),
            ("unexplained", [r.unexplained for r in cols]),
            ("= held P&L", [r.actual for r in cols]),
            ("new trades", [r.new_trades for r in cols]),
            ("= total P&L", [r.total for r in cols]),
        ]

        def cell(r: Any, v: float) -> str:
            # "—": money of several currencies, or in the base without an FX spot to convert at
            if (several and r.currency is None) or (foreign and r is cols[1] and v != v):
                return fmt.NOT_ADDITIVE
            return fmt.whole(v)

        texts = [[cell(r, v) for r, v in zip(cols, values, strict=True)] for _, values in lines]
        if foreign:  # what the FX spots' move adds, in the base column only
            blank = [""] * (len(cols) - 2)
            for label, value in (
                ("FX translation", base.translation),
                (f"= P&L in {base.base}", base.pnl),
            ):
                lines.append((label, []))
                texts.append(["", cell(cols[1], value), *blank])
        # every cell is money: in the book's one currency, or in the column's when several
        money = "P&L" if several or not result.total.currency else f"P&L {result.total.currency}"
        table.add_column(money, key="label", width=13)
        for i, head in enumerate(heads):
            width = fmt.column_width(head, [row[i] for row in texts], 10)
            table.add_column(Text(head, justify="right"), key=f"c{i}", width=width)
        for (label, _), row in zip(lines, texts, strict=True):
            table.add_row(label, *[Text(t, justify="right") for t in row])
        book = self.host.book_in_view
        tz = self.host.tz
        frm = result.from_set
        to = result.to_set
        start = f"close {frm.id} ({frm.marked_at.astimezone(tz):%m-%d %H:%M})"
        end = (
            "marks in force now"
            if to == "now"
            else f"close {to.id} ({to.marked_at.astimezone(tz):%m-%d %H:%M})"
        )
        self.query_one(".desk-title", Static).update(
            Text(f"Explain P&L ({books.book_words(book)}): {start} → {end}", style="bold")
        )
        left_out = session.unvalued_words(getattr(result, "unvalued", ()))
        fx_missing = [f"{m.words()} at the {where}" for where, m in base.missing] if foreign else []
        notes = "; ".join(
            [*result.notes, *([f"{left_out}: left out"] if left_out else []), *fx_missing]
        )
        self.say(
            "Start greeks on the positions held at the start; new trades: end value − trade "
            "price. f: start earlier, o: end now / at a close." + (f" {notes}" if notes else "")
        )

    def action_earlier_start(self) -> None:
        end_id = None if self.end == "now" else int(self.end)
        n_before = len(_before(self.closes, end_id))
        self.start_back = (self.start_back + 1) % max(1, n_before)
        self.compute(self.start_back, self.end)

    def action_next_end(self) -> None:
        """End cycles: now, the latest close, the one before, ... (always after some close)."""
        ends: list[int | str] = ["now", *[s.id for s in reversed(self.closes[1:])]]
        i = ends.index(self.end) if self.end in ends else 0
        self.end = ends[(i + 1) % len(ends)]
        self.start_back = 0
        self.compute(self.start_back, self.end)


def _before(closes: list[Any], end_id: int | None) -> list[Any]:
    """The closes of ``closes`` (oldest first) before the close ``end_id`` (all for None)."""
    ids = [s.id for s in closes]
    return closes if end_id is None else closes[: ids.index(end_id) if end_id in ids else 0]
