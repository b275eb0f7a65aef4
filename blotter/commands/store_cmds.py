"""``blotter trade ...`` and ``blotter mark ...``: book trades and log marks in the store.

Every command takes ``--db PATH`` (or the group's ``--db`` / ``$BLOTTER_DB``), exits 0 only on
success, and turns a ``StoreError`` into a one-line (or, for imports, a per-problem) message.
Commands that print rows take ``--json`` or ``--csv``; the CSV of ``trade list`` and
``mark list`` is the import format, so it imports back unchanged.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator
from contextlib import contextmanager
from datetime import datetime
from typing import Any

import click

from blotter.commands.common import (
    DESK_ZONE_HELP,
    FINITE,
    check_output_flags,
    db_option,
    desk_zone,
    open_for_reading,
    output_options,
    print_csv,
    print_json,
    print_table,
    read_only_source,
    resolve_db,
    shown,
)
from blotter.commands.progress import Progress, progress
from blotter.printable import printable
from blotter.ticks import price_text, tick_decimals

STDIN_NAME = "stdin"
"""The name an import read from standard input (``-``) goes by in messages and the import log."""


@contextmanager
def _import_file(file: str) -> Iterator[str]:
    """The path of the CSV to import: ``file`` itself, or for ``-`` standard input copied whole
    into a private temporary file named ``STDIN_NAME`` (the store checks a file's every row
    before writing, and records its content's digest, so it reads a file, not a stream)."""
    if file != "-":
        yield file
        return
    import sys
    import tempfile
    from pathlib import Path

    data = sys.stdin.buffer.read()
    with tempfile.TemporaryDirectory(prefix="blotter-import-") as folder:
        path = Path(folder) / STDIN_NAME
        path.write_bytes(data)
        yield str(path)


@contextmanager
def _import_bar(path: str) -> Iterator[Progress]:
    """Progress of importing ``path``, in rows written of its lines (``commands.progress``)."""
    from pathlib import Path

    try:
        with open(path, "rb") as f:
            lines = sum(1 for line in f if line.strip())
    except OSError:
        lines = 0  # the import says why it cannot read the file
    with progress(f"importing {Path(path).name}", max(lines - 1, 0)) as bar:
        yield bar


@contextmanager
def _store(db_path: str | None, read_only: bool = False) -> Iterator[Any]:
    """The book for a command, closed afterwards; ``StoreError`` becomes a ``ClickException``.

    ``read_only=False`` is a command that writes: under read-only (``read_only_source``) it is
    refused before the book is opened."""
    from blotter.store import StoreError, open_store

    path, _explicit = resolve_db(db_path)
    source = read_only_source()
    if not read_only and source is not None:
        raise click.ClickException(
            f"read-only is on ({source}): nothing was written to {shown(path)}"
        )
    try:
        if read_only and source is None:
            store = open_for_reading(path)
        else:
            store = open_store(path, read_only=read_only, desk_tz=desk_zone())
    except StoreError as exc:
        raise click.ClickException(str(exc)) from None
    try:
        yield store
    except StoreError as exc:
        raise click.ClickException(str(exc)) from None
    finally:
        store.close()


TIME_HELP = f"ISO-8601; with Z or an offset, else local time in {DESK_ZONE_HELP}"
"""How every time option of these commands is read (as ``risk --at`` reads it)."""


def _time_option(value: str | None, option: str = "--time") -> datetime | None:
    """An aware UTC time from ``option``: ISO-8601 with ``Z`` or an offset as given, or without
    one as local time in the desk's zone (``desk_zone``), at the store's precision (µs)."""
    from blotter import limits
    from blotter.store import StoreError, parse_time

    if value is None:
        return None
    try:
        typed = datetime.fromisoformat(value.strip())
    except ValueError:
        typed = None  # not ISO-8601: parse_time says so below
    try:
        if typed is not None and typed.tzinfo is None:
            first, end = limits.FIRST_INSTANT, limits.END_INSTANT
            if not first.year <= typed.year < end.year:
                # Said before a zone is put on it: a year-1 New York time reads -04:56:02.
                raise StoreError(
                    f"time must be from {first:%Y-%m-%d} to before {end:%Y-%m-%d}, "
                    f"got {value.strip()}"
                )
            return parse_time(typed.replace(tzinfo=desk_zone()))
        return parse_time(value)
    except (StoreError, ValueError) as exc:
        raise click.BadParameter(str(exc), param_hint=option) from None


def parse_vol(text: str) -> float:
    """A vol by the desk's one rule (``desk.entry.parse_vol``: ``0.25`` or ``25%``)."""
    from blotter.desk import entry

    try:
        return entry.parse_vol(text)
    except ValueError as exc:
        raise click.BadParameter(str(exc)) from None


def parse_decimal_or_percent(text: str, what: str) -> float:
    """A decimal (``0.04``) or a percentage (``4%``), by ``desk.entry``'s rule."""
    from blotter.desk import entry

    try:
        return entry.parse_decimal_or_percent(text, what)
    except ValueError as exc:
        raise click.BadParameter(str(exc)) from None


def _emit(as_json: bool, payload: dict[str, Any], text: str) -> None:
    """``payload`` as JSON, or ``text`` for people with control characters escaped."""
    if as_json:
        print_json(payload)
    else:
        click.echo(printable(text))


# ---------------------------------------------------------------------------------------------
# trade


@click.group()
def trade() -> None:
    """Book, cancel, amend, import and list trades (every change is a new row)."""


@trade.command("add")
@click.argument("symbol")
@click.option(
    "--qty",
    "quantity",
    type=int,
    required=True,
    help="Signed quantity: contracts for an option or a future, shares (units) for a stock, "
    "index or FX underlying.",
)
@click.option(
    "--price",
    type=FINITE,
    required=True,
    help="Price per unit of underlying as quoted (option premium per share).",
)
@click.option("--expiry", help="Option expiry date, YYYY-MM-DD (leave out for the underlying).")
@click.option("--strike", type=FINITE, help="Option strike, in the underlying's price units.")
@click.option("--call/--put", "is_call", default=None, help="Call or put (options only).")
@click.option(
    "--book",
    help="Book (desk account); it must exist. Default: the file's only book (required when the "
    "file has several).",
)
@click.option(
    "--new-book", is_flag=True, help="Start --book as a new book (else an unknown book is refused)."
)
@click.option(
    "--time", "trade_time", help=f"When it was dealt, {TIME_HELP}; default now."
)
@click.option("--note", default="", help="Free note kept with the trade.")
@click.option(
    "--american/--european", default=None, help="Exercise style (default: the underlying's)."
)
@click.option(
    "--multiplier",
    type=FINITE,
    help="Units per contract (default: the underlying's for options and futures, 1 for a "
    "stock, index or FX hedge).",
)
@click.option(
    "--cash-settled/--physical",
    "cash_settled",
    default=None,
    help="Settlement (default: the underlying's).",
)
@click.option(
    "--force",
    is_flag=True,
    help="Book a price more than half its model value (and over 0.05) away from it, or a new "
    "contract expiring on a weekend or holiday of its exchange, which are otherwise refused as "
    "likely typos.",
)
@click.option("--json", "as_json", is_flag=True, help="Print the new trade id as JSON.")
@db_option
def trade_add(
    symbol: str,
    quantity: int,
    price: float,
    expiry: str | None,
    strike: float | None,
    is_call: bool | None,
    book: str | None,
    new_book: bool,
    trade_time: str | None,
    note: str,
    american: bool | None,
    multiplier: float | None,
    cash_settled: bool | None,
    force: bool,
    as_json: bool,
    db_path: str | None,
) -> None:
    """Book a trade in SYMBOL: an option (--expiry, --strike, --call/--put) or SYMBOL itself.

    The book must exist (--new-book starts one); with no --book, the file's only book is used.
    """
    from blotter.desk import entry

    when = _time_option(trade_time)
    if new_book and book is None:
        raise click.UsageError("--new-book needs --book NAME (the book to start)")
    with _store(db_path) as store:
        if book is None:
            books = store.book_names()
            if len(books) != 1:
                raise click.UsageError(
                    f"give --book: this file has {len(books)} books "
                    f"({', '.join(books) if books else 'none yet; start one with --new-book'})"
                )
            book = books[0]
        terms = None if force else _typed_terms(symbol, expiry, strike, is_call)
        new_contract = terms is not None and terms.expiry is not None and (
            entry.find_contract(store.contracts(), terms) is None
        )
        with store.atomic():  # the store's checks first; a refused price writes nothing
            tid = store.add_trade(
                book,
                symbol,
                quantity,
                price,
                expiry,
                strike,
                is_call,
                trade_time=when,
                note=note,
                american=american,
                multiplier=multiplier,
                cash_settled=cash_settled,
                create_book=new_book,
            )
            if not force:
                _refuse_far_price(store, terms, price, new_contract)
    _emit(as_json, {"trade_id": tid, "book": book}, f"booked trade {tid} in book {book}")


def _refuse_far_price(st: Any, terms: Any, price: float, new_contract: bool = False) -> None:
    """A price far from the model value, or a new contract's expiry on a day its exchange is
    shut (``desk.session.price_question``), as a refusal."""
    from blotter.desk import session

    if terms is None:
        return
    question = session.price_question(st, terms, price, st.now(), desk_zone(), new_contract)
    if question:
        raise click.ClickException(f"{question}: nothing written (--force books it)")


def _typed_terms(
    symbol: str, expiry: str | None, strike: float | None, is_call: bool | None
) -> Any:
    """``desk.entry.ContractTerms`` of a ``trade add``; None when they do not read (the store
    then says what is wrong)."""
    from blotter.desk import entry

    if expiry is None and strike is None and is_call is None:
        return entry.ContractTerms(symbol, None, None, None)
    try:
        return entry.parse_terms(
            symbol,
            expiry or "",
            "" if strike is None else repr(strike),
            "" if is_call is None else ("C" if is_call else "P"),
        )
    except ValueError:
        return None


@trade.command("cancel")
@click.argument("trade_id", type=int)
@click.option("--reason", required=True, help="Why it is cancelled (kept on record).")
@click.option("--json", "as_json", is_flag=True, help="Print the cancel's id as JSON.")
@db_option
def trade_cancel(trade_id: int, reason: str, as_json: bool, db_path: str | None) -> None:
    """Cancel trade TRADE_ID: a new row naming it and the reason; the trade stays on record."""
    with _store(db_path) as store:
        cid = store.cancel_trade(trade_id, reason)
    _emit(as_json, {"cancel_id": cid, "trade_id": trade_id}, f"cancelled trade {trade_id}")


@trade.command("amend")
@click.argument("trade_id", type=int)
@click.option("--reason", required=True, help="Why it is amended (kept on record).")
@click.option("--qty", "quantity", type=int, help="New signed quantity.")
@click.option("--price", type=FINITE, help="New price per unit of underlying.")
@click.option("--time", "trade_time", help=f"New deal time, {TIME_HELP}.")
@click.option("--note", help="New note.")
@click.option("--book", help="Move to this book (it must exist).")
@click.option(
    "--force", is_flag=True, help="Amend to a price far from the model value (see trade add)."
)
@click.option("--json", "as_json", is_flag=True, help="Print the new trade id as JSON.")
@db_option
def trade_amend(
    trade_id: int,
    reason: str,
    quantity: int | None,
    price: float | None,
    trade_time: str | None,
    note: str | None,
    book: str | None,
    force: bool,
    as_json: bool,
    db_path: str | None,
) -> None:
    """Amend trade TRADE_ID: cancel it and book a replacement that names it."""
    from blotter.desk import session

    when = _time_option(trade_time)
    with _store(db_path) as store, store.atomic():
        new_id = store.amend_trade(
            trade_id,
            reason=reason,
            quantity=quantity,
            price=price,
            trade_time=when,
            note=note,
            book=book,
        )
        old = next((t for t in store.trades() if t.trade_id == trade_id), None)
        if old is not None and price is not None and not force:
            _refuse_far_price(store, session.terms_of(old), price)
    _emit(
        as_json,
        {"trade_id": new_id, "replaces": trade_id},
        f"amended trade {trade_id}: replaced by trade {new_id}",
    )


@trade.command("import")
@click.argument("file", type=click.Path(dir_okay=False, allow_dash=True))
@click.option(
    "--new-books",
    is_flag=True,
    help="Let the file start books it names (else a row naming an unknown book is a problem).",
)
@click.option("--json", "as_json", is_flag=True, help="Print what was imported as JSON.")
@db_option
def trade_import(file: str, new_books: bool, as_json: bool, db_path: str | None) -> None:
    """Import trades from a CSV FILE (the `trade list --csv` format; - reads standard input):
    every row or none.

    Each row's book must exist unless --new-books; a row whose trade_id is already in the book
    (an export of this book) is refused, since importing it again would double the position.
    """
    with _store(db_path) as store, _import_file(file) as path, _import_bar(path) as bar:
        rep = store.import_trades_csv(path, bar.update, new_books=new_books)
    _emit(
        as_json,
        {
            "rows": rep.rows,
            "import_id": rep.import_id,
            "first_trade_id": rep.first_id,
            "last_trade_id": rep.last_id,
        },
        f"imported {rep.rows} trade{'' if rep.rows == 1 else 's'} from {rep.path.name} "
        f"(trades {rep.first_id}-{rep.last_id})",
    )


TRADE_TABLE = (
    "id",
    "book",
    "contract",
    "qty",
    "price",
    "traded (UTC)",
    "state",
    "who",
    "source",
    "note",
)
"""Columns of the ``trade list`` table (price per unit of underlying)."""


@trade.command("list")
@click.option("--book", help="Only this book.")
@click.option("--since", help=f"Only trades dealt after this instant ({TIME_HELP}).")
@click.option("--until", help=f"Only trades dealt at or before this instant ({TIME_HELP}).")
@click.option(
    "--all",
    "show_all",
    is_flag=True,
    help="Include cancelled and amended trades (the CSV then cannot be re-imported).",
)
@output_options
@db_option
def trade_list(
    book: str | None,
    since: str | None,
    until: str | None,
    show_all: bool,
    as_json: bool,
    as_csv: bool,
    db_path: str | None,
) -> None:
    """List trades, oldest first: live ones, or every row with --all."""
    from blotter.store import TRADE_COLUMNS, TRADE_INFO_COLUMNS, trade_csv_row

    check_output_flags(as_json, as_csv)
    lo, hi = _time_option(since, "--since"), _time_option(until, "--until")
    with _store(db_path, read_only=True) as store:
        if book is not None and book not in (books := store.book_names()):
            raise click.ClickException(
                f"no book named {book!r} (books: {', '.join(books) if books else 'none yet'})"
            )
        rows = store.trades(book=book, since=lo, until=hi, live_only=not show_all)
        ticks = {r["symbol"]: float(r["tick"]) for r in store.underlying_records()}
    if as_csv:
        print_csv(TRADE_COLUMNS + TRADE_INFO_COLUMNS, (trade_csv_row(t) for t in rows))
    elif as_json:
        print_json(
            [
                dict(zip(TRADE_COLUMNS + TRADE_INFO_COLUMNS, trade_csv_row(t), strict=False))
                | {
                    "quantity": t.quantity,
                    "price": t.price,
                    "strike": t.strike,
                    "multiplier": t.multiplier,
                    "replaces": t.replaces,
                    "replaced_by": t.replaced_by,
                    "cancel_reason": t.cancel_reason,
                }
                for t in rows
            ]
        )
    else:
        print_table(
            TRADE_TABLE,
            [
                (
                    t.trade_id,
                    t.book,
                    t.contract,
                    f"{t.quantity:+,d}",
                    price_text(t.price, tick_decimals(ticks.get(t.symbol, 0.01))),
                    t.trade_time.strftime("%Y-%m-%d %H:%M:%S"),
                    t.state,
                    t.who,
                    t.source,
                    t.note,
                )
                for t in rows
            ],
            title=f"{len(rows)} trade{'' if len(rows) == 1 else 's'} "
            "(price per unit of underlying)",
            right=[True, False, False, True, True, False, False, False, False, False],
        )


# ---------------------------------------------------------------------------------------------
# mark


@click.group()
def mark() -> None:
    """Log marks (spot, vol, rate, dividend yield), import them, commit the close and list them."""


def _log(db_path: str | None, as_json: bool, action: Callable[[Any], int], what: str) -> None:
    with _store(db_path) as store:
        mark_id = action(store)
    _emit(as_json, {"mark_id": mark_id}, f"logged {what} (mark {mark_id})")


@mark.command("spot")
@click.argument("symbol")
@click.argument("price", type=FINITE)
@click.option("--note", help="Free note kept with the mark.")
@click.option(
    "--force",
    is_flag=True,
    help="Write a spot more than 20% from the one in force, otherwise refused as a likely typo.",
)
@click.option("--json", "as_json", is_flag=True, help="Print the mark id as JSON.")
@db_option
def mark_spot(
    symbol: str, price: float, note: str | None, force: bool, as_json: bool, db_path: str | None
) -> None:
    """Log the spot PRICE of SYMBOL (in its currency, per unit)."""
    from blotter.desk import entry

    def log(s: Any) -> int:
        odd = entry.implausible_spot(entry.mark_in_force(s, "spot", symbol), price)
        if odd and not force:
            raise click.ClickException(f"{odd}: nothing written (--force writes it)")
        return int(s.log_spot(symbol, price, note=note))

    _log(db_path, as_json, log, f"spot {symbol} {price:g}")


@mark.command("vol")
@click.argument("symbol")
@click.argument("expiry")
@click.argument("vol")
@click.option(
    "--strike",
    type=FINITE,
    help="Strike of the point; leave out for the ATM vol: the vol at the strike equal to the "
    "spot among the expiry's strike vols, or of every strike when it has none.",
)
@click.option(
    "--force",
    is_flag=True,
    help="Write a vol more than 10 vol points from the one in force, or under 3%, "
    "which is otherwise refused as a likely typo.",
)
@click.option("--json", "as_json", is_flag=True, help="Print the mark id as JSON.")
@db_option
def mark_vol(
    symbol: str,
    expiry: str,
    vol: str,
    strike: float | None,
    force: bool,
    as_json: bool,
    db_path: str | None,
) -> None:
    """Log the implied VOL (0.25 or 25%) of SYMBOL at EXPIRY (YYYY-MM-DD) and --strike (or ATM)."""
    from blotter.desk import entry

    v = parse_vol(vol)
    where = f" K={strike:g}" if strike is not None else " ATM"

    def log(s: Any) -> int:
        _refuse_point(s, "vol", symbol=symbol, expiry=expiry)
        odd = entry.implausible_vol(entry.mark_in_force(s, "vol", symbol, expiry, strike), v)
        if odd and not force:
            raise click.ClickException(f"{odd}: nothing written (--force writes it)")
        return int(s.log_vol(symbol, expiry, v, strike=strike))

    _log(db_path, as_json, log, f"vol {symbol} {expiry}{where} {v:.2%}")


def _refuse_point(st: Any, kind: str, **point: Any) -> None:
    """A point no position can use (``desk.entry.refuse_mark_point``) as a ``ClickException``."""
    from blotter.desk import entry

    try:
        entry.refuse_mark_point(st, kind, st.now(), **point)
    except ValueError as exc:
        raise click.ClickException(f"{exc}: nothing written") from None


@mark.command("rate")
@click.argument("currency")
@click.argument("tenor_days", type=int)
@click.argument("rate")
@click.option("--json", "as_json", is_flag=True, help="Print the mark id as JSON.")
@db_option
def mark_rate(
    currency: str, tenor_days: int, rate: str, as_json: bool, db_path: str | None
) -> None:
    """Log the zero RATE (0.04 or 4%, continuously compounded) of CURRENCY at TENOR_DAYS."""
    r = parse_decimal_or_percent(rate, "rate")

    def log(s: Any) -> int:
        _refuse_point(s, "rate", currency=currency)
        return int(s.log_rate(currency, tenor_days, r))

    _log(db_path, as_json, log, f"rate {currency} {tenor_days} d {r:.4%}")


@mark.command("divyield")
@click.argument("symbol")
@click.argument("q")
@click.option("--json", "as_json", is_flag=True, help="Print the mark id as JSON.")
@db_option
def mark_divyield(symbol: str, q: str, as_json: bool, db_path: str | None) -> None:
    """Log the dividend yield Q (0.02 or 2%, continuous) of SYMBOL, overriding its default."""
    v = parse_decimal_or_percent(q, "dividend yield")
    _log(db_path, as_json, lambda s: s.log_div_yield(symbol, v), f"dividend yield {symbol} {v:.4%}")


@mark.command("import")
@click.argument("file", type=click.Path(dir_okay=False, allow_dash=True))
@click.option("--json", "as_json", is_flag=True, help="Print what was imported as JSON.")
@db_option
def mark_import(file: str, as_json: bool, db_path: str | None) -> None:
    """Import marks from a CSV FILE (the `mark list --csv` format; - reads standard input) as one
    set: every row or none."""
    with _store(db_path) as store, _import_file(file) as path, _import_bar(path) as bar:
        rep = store.import_marks_csv(path, bar.update)
    _emit(
        as_json,
        {"rows": rep.rows, "import_id": rep.import_id, "mark_set_id": rep.first_id},
        f"imported {rep.rows} marks from {rep.path.name} (mark set {rep.first_id})",
    )


@mark.command("close")
@click.option("--note", help="Free note kept with the close set.")
@click.option(
    "--corrects",
    metavar="SET|DATE",
    help="The close this one corrects: its set id, or its business date (YYYY-MM-DD).",
)
@click.option("--json", "as_json", is_flag=True, help="Print the close set id as JSON.")
@db_option
def mark_close(note: str | None, corrects: str | None, as_json: bool, db_path: str | None) -> None:
    """Commit the marks in force now as today's close set (immutable once written).

    The set closes today's business date in the desk's time zone. A date closes once: a second
    close for it is refused unless it corrects the first (--corrects), and explain then uses the
    correction in its place.
    """
    with _store(db_path) as store:
        written = store.commit_close_info(note=note, corrects=corrects)
        set_id, count = written.id, written.marks
    day = written.business_date.isoformat() if written.business_date else None
    _emit(
        as_json,
        {"mark_set_id": set_id, "marks": count, "business_date": day, "corrects": written.corrects},
        f"committed close set {set_id} ({count} marks), the close of {day}"
        + (f", correcting set {written.corrects}" if written.corrects is not None else ""),
    )


MARK_TABLE = (
    "id",
    "set",
    "set kind",
    "marked (UTC)",
    "kind",
    "symbol/ccy",
    "expiry",
    "strike",
    "tenor d",
    "value",
    "unit",
)
"""Columns of the ``mark list`` table."""

_UNITS = {
    "spot": "price",
    "vol": "vol, decimal",
    "rate": "zero rate, cont., decimal",
    "div_yield": "yield, cont., decimal",
}


@mark.command("list")
@click.option("--set", "mark_set_id", type=int, help="Exactly this mark set, as recorded.")
@click.option(
    "--as-of", "as_of", help=f"Marks in force at this instant ({TIME_HELP})."
)
@click.option("--sets", "list_sets", is_flag=True, help="List the mark sets instead of marks.")
@output_options
@db_option
def mark_list(
    mark_set_id: int | None,
    as_of: str | None,
    list_sets: bool,
    as_json: bool,
    as_csv: bool,
    db_path: str | None,
) -> None:
    """List the marks in force (latest of each point), one set (--set), or the sets (--sets)."""
    from blotter.store import MARK_COLUMNS, MARK_INFO_COLUMNS, mark_csv_row, timestamp_text

    check_output_flags(as_json, as_csv)
    if mark_set_id is not None and as_of is not None:
        raise click.UsageError("choose one of --set and --as-of")
    when = _time_option(as_of, "--as-of")
    with _store(db_path, read_only=True) as store:
        if list_sets:
            sets = store.mark_sets()
        else:
            marks = store.marks(mark_set_id=mark_set_id, as_of=when)
    if list_sets:
        cols = (
            "id",
            "kind",
            "marked_at",
            "business_date",
            "who",
            "marks",
            "corrects",
            "superseded_by",
            "source",
            "note",
        )
        rows = [
            (
                s.id,
                s.kind,
                timestamp_text(s.marked_at),
                s.business_date.isoformat() if s.business_date else None,
                s.who,
                s.marks,
                s.corrects,
                s.superseded_by,
                s.source,
                s.note,
            )
            for s in sets
        ]
        if as_csv:
            print_csv(cols, rows)
        elif as_json:
            print_json([dict(zip(cols, r, strict=False)) for r in rows])
        else:
            print_table(cols, rows, title=f"{len(rows)} mark sets (times UTC)")
        return
    if as_csv:
        print_csv(MARK_COLUMNS + MARK_INFO_COLUMNS, (mark_csv_row(m) for m in marks))
    elif as_json:
        print_json(
            [
                dict(zip(MARK_COLUMNS + MARK_INFO_COLUMNS, mark_csv_row(m), strict=False))
                | {"value": m.value, "strike": m.strike}
                for m in marks
            ]
        )
    else:
        print_table(
            MARK_TABLE,
            [
                (
                    m.mark_id,
                    m.mark_set_id,
                    m.set_kind,
                    m.marked_at.strftime("%Y-%m-%d %H:%M:%S"),
                    m.kind,
                    m.symbol or m.currency,
                    m.expiry or "",
                    "ATM"
                    if m.kind == "vol" and m.strike is None
                    else ("" if m.strike is None else f"{m.strike:g}"),
                    m.tenor_days or "",
                    f"{m.value:.6g}",
                    _UNITS[m.kind],
                )
                for m in marks
            ],
            title=f"{len(marks)} marks",
            right=[True, True, False, False, False, False, False, True, True, True, False],
        )


COMMANDS = [trade, mark]
