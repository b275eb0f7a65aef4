"""The Trades screen (the blotter proper): every trade with its state, filtered by typing.

Add a trade or a trial from one keyboard form (the contract picked by symbol, expiry, strike and
call/put; a contract the store does not know is created after a confirmation, or for a trial
built in memory with the underlying's defaults), cancel with a reason, amend. Each change is a
new row in the store. Trials live in the app's memory only: they are layered on the live book
everywhere, marked ``T``, and written only when promoted. The form checks what was typed
(``desk.entry``), writes it itself and returns what it did with ``dismiss``: the words of a
written change, or a trial for the app to layer on.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, ClassVar

from rich.text import Text
from textual import events, on, work
from textual.app import ComposeResult
from textual.binding import BindingType
from textual.containers import Horizontal, VerticalScroll
from textual.screen import ModalScreen
from textual.widgets import DataTable, Footer, Input, Label, Static
from textual.widgets.data_table import ColumnKey
from textual.worker import get_current_worker

from blotter.desk import entry, session, trials
from blotter.printable import printable
from blotter.ticks import price_text, tick_decimals
from blotter.ui import data, fmt
from blotter.ui.host import DeskHost
from blotter.ui.keys import app_bindings
from blotter.ui.messages import ScreenFailed, TradesRead, TradeWritten
from blotter.ui.screens.base import READ_ONLY_WORDS, DeskScreen

if TYPE_CHECKING:
    from blotter.store import ContractRecord, TradeRecord

COLUMNS = (
    ("id", "id", 4),
    ("time", "time", 11),
    ("contract", "contract", 25),
    ("qty", "qty", 5),
    ("price", "price", 9),
    ("state", "state", 9),
    ("book", "book", 11),
    ("who", "who", 8),
    ("source", "source", 7),
)
"""(key, header, width) of the trades table; at 80 columns the last ones scroll into view."""

NO_TRADES = entry.TradeSheet((), (), (), (), {})
"""The sheet until the first read: no trades, and any symbol passes the form (the store checks)."""


@dataclass(frozen=True)
class Booked:
    """The form wrote its change to the store; ``words`` say what."""

    words: str


@dataclass(frozen=True)
class NewTrial:
    """The form's trial, for the app to layer on the live book (``new``: a contract the store
    does not have, built from the underlying's defaults)."""

    contract: ContractRecord
    quantity: int
    price: float
    book: str
    new: bool

    def words(self) -> str:
        where = "a new contract, not in the store" if self.new else "not in the store"
        return f"trial {self.contract.label} ×{self.quantity:+d} added ({where})"


FormResult = Booked | NewTrial
"""What the trade form returns when it is done (None when left without booking)."""


class TradesScreen(DeskScreen):
    """See the module docstring."""

    CSS_PATH = "desk.tcss"
    WHERE = "trades"
    WRITE_ACTIONS = frozenset({"add", "amend", "cancel_trade", "promote"})
    BINDINGS: ClassVar[list[BindingType]] = list(app_bindings("trades"))

    def __init__(self, host: DeskHost) -> None:
        super().__init__(host, id="trades")
        self.sheet = NO_TRADES
        self.shown_ids: list[str] = []

    @property
    def records(self) -> tuple[TradeRecord, ...]:
        """The store's trades as last read, in the store's listing order."""
        return self.sheet.trades

    def compose(self) -> ComposeResult:
        yield self.title_line("Trades")
        yield Input(placeholder="filter: type words of the row (/ or F2)", id="trades-filter")
        yield DataTable(
            id="trades-table", classes="desk-table", cursor_type="row", zebra_stripes=True
        )
        yield Static("", classes="desk-message")
        yield Footer(compact=True)

    def on_mount(self) -> None:
        table = self.query_one("#trades-table", DataTable)
        for key, header, width in COLUMNS:
            right = key in ("qty", "price")
            table.add_column(
                Text(header, justify="right" if right else "left"), key=key, width=width
            )
        table.focus()
        self.load()

    @work(thread=True, exclusive=True, group="trades-load", exit_on_error=False)
    def load(self) -> None:
        """Every trade, the contracts and the book names, read in this thread's own store."""
        worker = get_current_worker()
        try:
            with self.host.open_store(read_only=True) as st:
                sheet = entry.read_trade_sheet(st)
        except Exception as exc:  # noqa: BLE001 - shown to the user
            if not worker.is_cancelled:
                self.post_message(ScreenFailed(f"cannot read the trades: {exc}"))
            return
        if not worker.is_cancelled:
            self.post_message(TradesRead(sheet))

    def on_resize(self, event: events.Resize) -> None:
        self.show()  # the contract column takes the width that the whole columns leave

    def on_trades_read(self, message: TradesRead) -> None:
        self.sheet = message.sheet
        self.show()

    def on_screen_failed(self, message: ScreenFailed) -> None:
        self.say(message.words, bad=True)

    def store_changed(self) -> None:
        self.load()

    def show(self) -> None:
        """Trials first, then the store's trades newest first, filtered by the filter line."""
        table = self.query_one("#trades-table", DataTable)
        query = self.query_one("#trades-filter", Input).value
        tz = self.host.tz
        cursor = self.cursor_key()
        table.clear()
        self.shown_ids = []
        shown: list[tuple[tuple[str, ...], str]] = []
        for t in self.host.trials:
            c = t.contract
            cells: tuple[str, ...] = (
                f"T{t.trial_id}",
                "",
                c.label,
                f"{t.quantity:+,d}",
                price_text(t.price, self._decimals(c.symbol)),
                "TRIAL",
                printable(t.book),
                "",
                "trial",
            )
            if data.matches(cells, query):
                shown.append((cells, "bold"))
        for r in reversed(self.records):
            cells = data.trade_text(r, tz, self._decimals(r.symbol))
            if data.matches(cells, query):
                shown.append((cells, ""))
        self._fit_columns(table, [cells for cells, _ in shown])
        for cells, style in shown:
            table.add_row(*self._cells(cells, style), key=cells[0])
            self.shown_ids.append(cells[0])
        n_live = sum(r.state == "live" for r in self.records)
        self.query_one(".desk-title", Static).update(
            Text(
                f"Trades: {len(self.shown_ids)} shown │ {len(self.records)} in the store "
                f"({n_live} live) │ trials {len(self.host.trials)}"
                + (" │ READ-ONLY" if self.host.read_only else ""),
                style="bold",
            )
        )
        if cursor in self.shown_ids:
            table.move_cursor(row=self.shown_ids.index(cursor), animate=False)

    def _decimals(self, symbol: str) -> int:
        """Decimals of a price of ``symbol``: its tick's (two when the sheet does not know it)."""
        record = self.sheet.underlyings.get(symbol)
        return tick_decimals(float(record["tick"])) if record and "tick" in record else 2

    @staticmethod
    def _fit_columns(table: DataTable[Any], rows: list[tuple[str, ...]]) -> None:
        """Make every column as wide as its widest cell, so no quantity or price is cut, and
        widen the contract column so the last column on screen is whole."""
        widths = [
            fmt.column_width(header, [r[i] for r in rows], least)
            for i, (_key, header, least) in enumerate(COLUMNS)
        ]
        pad = 2 * table.cell_padding
        bar = table.styles.scrollbar_size_vertical if table.show_vertical_scrollbar else 0
        room = table.size.width - bar
        lead = sum(w + pad for w in widths[:3])
        if room > 0:
            widths[2] += fmt.fill_first_column(lead, [w + pad for w in widths[3:]], room) - lead
        changed = False
        for (key, _header, _least), width in zip(COLUMNS, widths, strict=True):
            column = table.columns[ColumnKey(key)]
            if column.width != width:
                column.width, changed = width, True
        if changed:
            table.refresh()

    @staticmethod
    def _cells(cells: tuple[str, ...], style: str = "") -> list[Text]:
        """Quantity and price right-aligned (columns 3 and 4)."""
        return [
            Text(x, style=style, justify="right" if i in (3, 4) else "left")
            for i, x in enumerate(cells)
        ]

    def cursor_key(self) -> str | None:
        table = self.query_one("#trades-table", DataTable)
        if not self.shown_ids or not 0 <= table.cursor_row < len(self.shown_ids):
            return None
        return self.shown_ids[table.cursor_row]

    def cursor_trade(self) -> Any | None:
        key = self.cursor_key()
        if key is None or key.startswith("T"):
            return None
        return next((r for r in self.records if str(r.trade_id) == key), None)

    @on(Input.Changed, "#trades-filter")
    def _filter(self, event: Input.Changed) -> None:
        self.show()

    @on(Input.Submitted, "#trades-filter")
    def _filter_done(self, event: Input.Submitted) -> None:
        self.query_one("#trades-table", DataTable).focus()

    def action_filter(self) -> None:
        self.query_one("#trades-filter", Input).focus()

    def action_add(self) -> None:
        self._form("trade")

    def action_add_trial(self) -> None:
        self._form("trial")

    def action_amend(self) -> None:
        trade = self.cursor_trade()
        if trade is None or trade.state != "live":
            self.say("✗ put the cursor on a live trade to amend it", bad=True)
            return
        self._form("amend", trade)

    def action_cancel_trade(self) -> None:
        key = self.cursor_key()
        if key is not None and key.startswith("T"):
            self.host.remove_trial(int(key[1:]))
            self.say(f"trial {key} removed (the store is untouched)")
            self.show()
            return
        trade = self.cursor_trade()
        if trade is None or trade.state != "live":
            self.say("✗ put the cursor on a live trade to cancel it", bad=True)
            return
        self._form("cancel", trade)

    def _form(self, kind: str, trade: TradeRecord | None = None) -> None:
        self.app.push_screen(TradeForm(self.host, self.sheet, kind, trade), self._form_done)

    def _form_done(self, result: FormResult | None) -> None:
        """The form is gone: say what it booked, or layer its trial on the book."""
        if isinstance(result, Booked):
            self.say(result.words)
            self._written()
        elif isinstance(result, NewTrial):
            self.host.add_trial(result.contract, result.quantity, result.price, result.book)
            self.say(result.words())
            self.show()

    def action_promote(self) -> None:
        if not self.host.trials:
            self.say("no trials to promote")
            return
        self.promote(self.host.trials)

    @work(thread=True, exclusive=True, group="trades-write", exit_on_error=False)
    def promote(self, trial_trades: list[trials.TrialTrade]) -> None:
        """Book every trial as a real trade through the store (``desk.trials.promote``)."""
        from blotter import store

        try:
            with self.host.open_store() as st:
                ids = trials.promote(st, trial_trades)
        except (store.StoreError, ValueError, KeyError) as exc:
            self.post_message(ScreenFailed(f"✗ not written: {exc}"))
            return
        words = f"✓ {len(ids)} trial(s) booked as trades {', '.join(map(str, ids))}"
        self.post_message(TradeWritten(words, promoted=True))

    def on_trade_written(self, message: TradeWritten) -> None:
        self.say(message.words)
        if message.promoted:
            self.host.clear_trials(reload=False)
        self._written()

    def _written(self) -> None:
        """After a write: read the trades again, and the book (it holds them)."""
        self.load()
        self.host.load_book()


FIELDS = {
    "trade": (
        ("book", "book"),
        ("symbol", "symbol"),
        ("expiry", "expiry"),
        ("strike", "strike"),
        ("cp", "call/put"),
        ("qty", "quantity"),
        ("price", "price"),
        ("note", "note"),
    ),
    "amend": (("qty", "quantity"), ("price", "price"), ("reason", "reason")),
    "cancel": (("reason", "reason"),),
}
"""Fields of the form per kind (a trial uses the trade's fields)."""


class TradeForm(ModalScreen[FormResult | None]):
    """The keyboard form: Tab between fields, Enter on the last (or F5) books it.

    It writes what was typed itself and stays up, saying why, when the store refuses it.
    """

    CSS_PATH = "desk.tcss"
    BINDINGS: ClassVar[list[BindingType]] = list(app_bindings("form"))

    def __init__(
        self,
        host: DeskHost,
        sheet: entry.TradeSheet,
        kind: str,
        trade: TradeRecord | None = None,
    ) -> None:
        super().__init__(id="trade-form")
        self.host = host
        self.sheet = sheet
        self.kind = kind  # trade, trial, amend or cancel
        self.trade = trade
        self.confirm_new: entry.ContractTerms | None = None
        self.confirm_price: tuple[entry.ContractTerms, float] | None = None  # asked of, once

    def _fields(self) -> tuple[tuple[str, str], ...]:
        return FIELDS["trade" if self.kind in ("trade", "trial") else self.kind]

    def compose(self) -> ComposeResult:
        yield Static("", classes="desk-title", id="form-title")
        with VerticalScroll(classes="desk-body"):
            for key, label in self._fields():
                with Horizontal(classes="form-row"):
                    yield Label(label)
                    yield Input(id=f"form-{key}")
        yield Static("", classes="desk-message", id="form-message")
        yield Footer(compact=True)

    def on_mount(self) -> None:
        self._title()
        t = self.trade
        if self.kind in ("trade", "trial"):
            books = self.sheet.books
            shown = self.host.book_in_view
            default = shown if shown in books else (books[0] if books else "main")
            self.query_one("#form-book", Input).value = printable(default)
            self.query_one("#form-book", Input).placeholder = printable(", ".join(books))
            symbol = self.query_one("#form-symbol", Input)
            # A hint never reads as a value: "one of …", "e.g. …"; a book of one name fills it.
            symbol.placeholder = "one of " + " ".join(self.sheet.symbols)
            if len(self.sheet.symbols) == 1:
                symbol.value = self.sheet.symbols[0]
            expiry = self.query_one("#form-expiry", Input)
            expiry.placeholder = "e.g. 2027-03-19; blank: the underlying itself"
            self.query_one("#form-cp", Input).placeholder = "C or P"
            (expiry if symbol.value else symbol).focus()
        elif self.kind == "amend" and t is not None:
            self.query_one("#form-qty", Input).value = str(t.quantity)
            self.query_one("#form-price", Input).value = f"{t.price:.12g}"
            self.query_one("#form-qty", Input).focus()
        else:
            self.query_one("#form-reason", Input).focus()

    def _title(self) -> None:
        t = self.trade
        title = {
            "trade": "Add a trade (written to the store)",
            "trial": "Add a TRIAL trade (in memory only; F6 makes it a real trade)",
            "amend": f"Amend trade {t.trade_id if t else ''}: {t.contract if t else ''}",
            "cancel": (
                f"Cancel trade {t.trade_id if t else ''}: {t.contract if t else ''} "
                f"×{t.quantity if t else ''}"
            ),
        }[self.kind]
        self.query_one("#form-title", Static).update(Text(title, style="bold"))

    def say(self, words: str) -> None:
        self.query_one("#form-message", Static).update(Text(words, style="bold reverse"))

    def value(self, key: str) -> str:
        return self.query_one(f"#form-{key}", Input).value

    def action_toggle_kind(self) -> None:
        if self.kind in ("trade", "trial"):
            if self.kind == "trial" and self.host.read_only:
                self.say(READ_ONLY_WORDS)
                return
            self.kind = "trial" if self.kind == "trade" else "trade"
            self._title()

    def action_back(self) -> None:
        self.dismiss(None)

    def action_next_field(self) -> None:
        self.focus_next()

    def action_previous_field(self) -> None:
        self.focus_previous()

    @on(Input.Submitted)
    def _enter(self, event: Input.Submitted) -> None:
        ids = [f"form-{k}" for k, _ in self._fields()]
        required = ids[:-1] if self.kind in ("trade", "trial") else ids  # the note is optional
        if event.input.id in ids[len(required) - 1 :]:
            self.action_submit()
        else:
            self.focus_next()

    def action_submit(self) -> None:
        """Check the fields here, then write it in a worker (or return the trial)."""
        if self.host.read_only and self.kind != "trial":
            self.say(READ_ONLY_WORDS)
            return
        fields = {key: self.value(key) for key, _ in self._fields()}
        try:
            if self.kind == "cancel" and self.trade is not None:
                reason = entry.parse_reason(fields["reason"], "a cancel")
                self.write(entry.Cancel(self.trade.trade_id, reason))
                return
            if self.kind == "amend" and self.trade is not None:
                qty = entry.parse_quantity(fields["qty"])
                price = entry.parse_price(fields["price"])
                reason = entry.parse_reason(fields["reason"], "an amend")
                if not self._price_asked(session.terms_of(self.trade), price):
                    self.write(entry.Amend(self.trade.trade_id, qty, price, reason))
                return
            ticket = entry.parse_new_trade(fields, self.sheet.symbols)
        except ValueError as exc:
            self.say(f"✗ {exc}")
            return
        terms = ticket.terms
        contract = entry.find_contract(self.sheet.contracts, terms)
        if self.kind == "trial":
            new = contract is None
            if contract is None:
                try:
                    contract = trials.trial_contract(
                        self.sheet.underlyings, terms, self.host.trials
                    )
                except (ValueError, KeyError) as exc:
                    self.say(f"✗ {exc}")
                    return
            # a trial is promoted to a trade as staged: its price is asked about here
            if self._price_asked(terms, ticket.price, contract):
                return
            self.dismiss(NewTrial(contract, ticket.quantity, ticket.price, ticket.book, new))
            return
        if contract is None and self.confirm_new != terms:
            self.confirm_new = terms
            self.say(
                f"New contract {terms.label()} will be created: F5 (or Enter) again to confirm"
            )
            return
        if not self._price_asked(terms, ticket.price, contract):
            self.write(ticket)

    def _price_asked(
        self,
        terms: entry.ContractTerms,
        price: float,
        contract: ContractRecord | None = None,
    ) -> bool:
        """Ask (once for these terms and price) when ``price`` is far from the model value on
        the marks in force (``desk.entry.price_question``) or a new contract's expiry falls on a
        day the exchange is shut (``desk.entry.expiry_question``); True when it asked."""
        state = self.host.state
        if state is None or self.confirm_price == (terms, price):
            return False
        if contract is None:
            contract = entry.find_contract(self.sheet.contracts, terms)
        if contract is None:
            try:
                contract = trials.trial_contract(self.sheet.underlyings, terms, ())
            except ValueError:
                return False  # the store refuses it in its own words
        valuation = state.valuation
        model = session.model_price(
            valuation.book, valuation.market, contract, self.host.clock(), self.host.tz
        )
        known = entry.find_contract(self.sheet.contracts, terms) is not None
        asks = (
            "" if known else entry.expiry_question(terms, self.sheet.underlyings),
            entry.price_question(price, model, contract.label),
        )
        question = "; ".join(a for a in asks if a)
        if not question:
            return False
        self.confirm_price = (terms, price)
        self.say(f"{question}: F5 (or Enter) again to book it")
        return True

    @work(thread=True, exclusive=True, group="form-write", exit_on_error=False)
    def write(self, ticket: entry.Ticket) -> None:
        """Write ``ticket`` through the store (``desk.entry.write_ticket``; each a new row)."""
        from blotter import store

        try:
            with self.host.open_store() as st:
                words = entry.write_ticket(st, ticket)
        except (store.StoreError, ValueError, KeyError) as exc:
            self.post_message(ScreenFailed(f"✗ not written: {exc}"))
            return
        self.post_message(TradeWritten(f"✓ {words}"))

    def on_trade_written(self, message: TradeWritten) -> None:
        self.dismiss(Booked(message.words))

    def on_screen_failed(self, message: ScreenFailed) -> None:
        self.say(message.words)
