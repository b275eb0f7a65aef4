"""``blotter create`` and ``blotter underlying ...``: start a book file of your own.

A new file holds no underlyings, so no trade can be booked on it until ``underlying add`` has
named them with the defaults their contracts take (multiplier, exercise style, settlement) and
the facts the risk needs (kind, currency, dividend yield, beta, calendar, close time).
Underlyings are reference data: added once, never changed or removed (the store refuses it).
"""

from __future__ import annotations

import re

import click

from blotter import limits
from blotter.commands.common import (
    FINITE,
    check_option,
    check_output_flags,
    db_option,
    desk_zone,
    output_options,
    print_csv,
    print_json,
    print_table,
    read_only_source,
    shown,
)
from blotter.commands.store_cmds import _emit, _store, parse_decimal_or_percent
from blotter.limits import UNDERLYING_KINDS

_CURRENCY = re.compile(r"[A-Z]{3}\Z")
_CUTOFF = re.compile(r"([01]\d|2[0-3]):[0-5]\d\Z")
UNDERLYING_COLUMNS = (
    "symbol",
    "kind",
    "currency",
    "multiplier",
    "american",
    "cash_settled",
    "div_yield",
    "beta",
    "is_reference",
    "calendar",
    "time_zone",
    "cutoff_time",
    "description",
    "tick",
)
"""Columns of ``underlying list --csv`` / ``--json``; div_yield and beta are decimals, tick the
price precision per unit (the latest correction's, else the kind's default)."""


@click.command("create")
@click.argument("path", type=click.Path(dir_okay=False))
@click.option("--book", "book_name", help="Also start a first book (desk account) of this name.")
@click.option(
    "--base-currency",
    "base_currency",
    default="USD",
    show_default=True,
    help="ISO 4217 code the book's totals convert to at the marked FX spots; "
    "`blotter base-currency` changes it later.",
)
@click.option("--json", "as_json", is_flag=True, help="Print the new file's path as JSON.")
def create(path: str, book_name: str | None, base_currency: str, as_json: bool) -> None:
    """Create an empty book file at PATH (refused if anything is there).

    Then add underlyings (``blotter --db PATH underlying add``), log marks and book trades.
    """
    from blotter.store import StoreError, create_store

    _check_currency(base_currency, "--base-currency")
    if (source := read_only_source()) is not None:
        raise click.ClickException(
            f"read-only is on ({source}): create writes a new file, so nothing was written"
        )
    try:
        store = create_store(path, desk_tz=desk_zone(), base_currency=base_currency)
    except StoreError as exc:
        raise click.ClickException(str(exc)) from None
    try:
        if book_name is not None:
            store.add_book(book_name)
    except StoreError as exc:
        raise click.ClickException(
            f"{exc} (the file {shown(path)} was created, with no book)"
        ) from None
    finally:
        store.close()
    extra = f" with book {book_name!r}" if book_name else ""
    _emit(
        as_json,
        {"path": path, "book": book_name, "base_currency": base_currency},
        f"created {shown(path)}{extra}, base currency {base_currency}; "
        f"next: blotter --db {shown(path)} underlying add SYMBOL --kind ...",
    )


def _check_currency(currency: str, hint: str) -> None:
    """Refuse ``currency`` unless it is three capital letters (an ISO 4217 code)."""
    if not _CURRENCY.match(currency):
        raise click.BadParameter(f"{currency!r}: three capital letters, e.g. USD", param_hint=hint)


@click.command("base-currency")
@click.argument("currency", required=False)
@click.option("--json", "as_json", is_flag=True, help="Print the base currency and its history.")
@db_option
def base_currency(currency: str | None, as_json: bool, db_path: str | None) -> None:
    """Show the book's base currency, or record CURRENCY as the base from now on.

    Totals convert to the base at the marked FX spots (a pair such as EURUSD, an underlying of
    kind fx). A change is a new row, never an edit: the latest row is in force, and
    ``--json`` lists every base the book has had (the first, written with the book, has no time
    or who; a book made before base currencies starts with USD).
    """
    if currency is not None:
        _check_currency(currency, "CURRENCY")
    with _store(db_path, read_only=currency is None) as store:
        before = store.base_currency()
        if currency is not None and currency != before:
            store.set_base_currency(currency)
        history = store.base_currency_history()
        now = store.base_currency()
    if currency is None:
        words = f"base currency {now}"
    elif currency == before:
        words = f"base currency is {now} already; nothing recorded"
    else:
        words = f"base currency {now} from now on (was {before})"
    _emit(as_json, {"base_currency": now, "history": history}, words)


@click.group()
def underlying() -> None:
    """Add and list underlyings (reference data: added once, never changed)."""


@underlying.command("add")
@click.argument("symbol")
@click.option(
    "--kind",
    type=click.Choice(UNDERLYING_KINDS),
    required=True,
    help="stock, index, future (options on it are Black-76, carry 0) or fx.",
)
@click.option("--currency", required=True, help="ISO 4217 code of its prices, e.g. USD.")
@click.option(
    "--multiplier",
    type=FINITE,
    required=True,
    help="Default units of underlying per option contract, e.g. 100.",
)
@click.option(
    "--american/--european", default=True, help="Default exercise style of its options."
)
@click.option(
    "--cash-settled/--physical", default=False, help="Default settlement of its options."
)
@click.option(
    "--div-yield",
    default="0",
    help="Default dividend yield (stock, index) or foreign rate (fx), continuous: 0.015 or "
    "1.5%. A `mark divyield` overrides it.",
)
@click.option("--beta", type=FINITE, default=1.0, help="Beta to the reference index (beta delta).")
@click.option(
    "--reference", is_flag=True, help="It is the book's reference index (at most one)."
)
@click.option("--calendar", default="NYSE", help="Exchange holiday calendar, e.g. NYSE, CME, LSE.")
@click.option("--zone", default="America/New_York", help="Time zone of its close, IANA name.")
@click.option("--cutoff", default="16:00", help="Its close (expiry cut-off), HH:MM local time.")
@click.option("--description", default="", help="Free text shown beside the symbol.")
@click.option("--json", "as_json", is_flag=True, help="Print the new underlying id as JSON.")
@db_option
def underlying_add(
    symbol: str,
    kind: str,
    currency: str,
    multiplier: float,
    american: bool,
    cash_settled: bool,
    div_yield: str,
    beta: float,
    reference: bool,
    calendar: str,
    zone: str,
    cutoff: str,
    description: str,
    as_json: bool,
    db_path: str | None,
) -> None:
    """Add underlying SYMBOL with the defaults its contracts take."""
    from blotter.calendar import business_calendar

    _check_currency(currency, "--currency")
    check_option(limits.MULTIPLIER, multiplier, "--multiplier")
    q = parse_decimal_or_percent(div_yield, "dividend yield")
    check_option(limits.RATE, q, "--div-yield")
    check_option(limits.BETA, beta, "--beta")
    if not _CUTOFF.match(cutoff):
        raise click.BadParameter(f"{cutoff!r}: HH:MM, e.g. 16:00", param_hint="--cutoff")
    try:
        business_calendar(calendar)
    except ValueError as exc:
        raise click.BadParameter(str(exc), param_hint="--calendar") from None
    with _store(db_path) as store:
        uid = store.add_underlying(
            symbol,
            kind,
            currency,
            multiplier,
            description=description,
            american=american,
            cash_settled=cash_settled,
            div_yield=q,
            beta=beta,
            is_reference=reference,
            calendar=calendar,
            time_zone=zone,
            cutoff_time=cutoff,
        )
    style = "American" if american else "European"
    _emit(
        as_json,
        {"underlying_id": uid, "symbol": symbol},
        f"underlying {symbol} added (id {uid}): {kind}, {currency}, {multiplier:g} per contract, "
        f"{style}, {'cash' if cash_settled else 'physical'}",
    )


@underlying.command("list")
@output_options
@db_option
def underlying_list(as_json: bool, as_csv: bool, db_path: str | None) -> None:
    """List the underlyings with their contract defaults."""
    check_output_flags(as_json, as_csv)
    with _store(db_path, read_only=True) as store:
        rows = store.underlying_records()
    data = [[r[c] for c in UNDERLYING_COLUMNS] for r in rows]
    if as_json:
        print_json([dict(zip(UNDERLYING_COLUMNS, d, strict=True)) for d in data])
    elif as_csv:
        print_csv(UNDERLYING_COLUMNS, data)
    else:
        table = [
            [
                r["symbol"],
                r["kind"],
                r["currency"],
                f"{r['multiplier']:g}",
                "American" if r["american"] else "European",
                "cash" if r["cash_settled"] else "physical",
                f"{100 * r['div_yield']:.2f}",
                f"{r['beta']:g}",
                "yes" if r["is_reference"] else "",
                r["calendar"],
                f"{r['cutoff_time']} {r['time_zone']}",
                f"{r['tick']:g}",
            ]
            for r in rows
        ]
        print_table(
            ["symbol", "kind", "ccy", "multiplier", "exercise", "settle", "q %", "beta", "ref",
             "calendar", "close", "tick"],
            table,
            title=f"{len(rows)} underlyings",
        )


@underlying.command("correct")
@click.argument("symbol")
@click.option("--reason", required=True, help="Why the reference data was wrong (recorded).")
@click.option("--description", default=None, help="The right description.")
@click.option(
    "--multiplier", type=FINITE, default=None,
    help="The right default units per contract (for contracts created from now on).",
)
@click.option("--beta", type=FINITE, default=None, help="The right beta to the reference index.")
@click.option("--calendar", default=None, help="The right exchange holiday calendar, e.g. CME.")
@click.option(
    "--tick", type=FINITE, default=None,
    help="The price tick, per unit (0.01 shows prices to 2 decimals, 0.00001 to 5).",
)
@click.option("--json", "as_json", is_flag=True, help="Print the correction's id as JSON.")
@db_option
def underlying_correct(
    symbol: str,
    reason: str,
    description: str | None,
    multiplier: float | None,
    beta: float | None,
    calendar: str | None,
    tick: float | None,
    as_json: bool,
    db_path: str | None,
) -> None:
    """Record a correction of SYMBOL's reference data.

    The underlying's row is never changed: the correction is a new row, and for each field the
    latest correction that sets it is the one in force. Fields not given keep their value.
    """
    from blotter.calendar import business_calendar

    if multiplier is not None:
        check_option(limits.MULTIPLIER, multiplier, "--multiplier")
    if beta is not None:
        check_option(limits.BETA, beta, "--beta")
    if tick is not None:
        check_option(limits.TICK, tick, "--tick")
    if calendar is not None:
        try:
            business_calendar(calendar)
        except ValueError as exc:
            raise click.BadParameter(str(exc), param_hint="--calendar") from None
    fields = {
        "description": description,
        "multiplier": multiplier,
        "beta": beta,
        "calendar": calendar,
        "tick": tick,
    }
    given = {k: v for k, v in fields.items() if v is not None}
    if not given:
        raise click.UsageError(
            "give at least one of --description, --multiplier, --beta, --calendar, --tick"
        )
    with _store(db_path) as store:
        cid = store.correct_underlying(symbol, reason, given)
    words = ", ".join(
        f"{k} {v:g}" if isinstance(v, float) else f"{k} {v!r}" for k, v in given.items()
    )
    _emit(
        as_json,
        {"correction_id": cid, "symbol": symbol, **given},
        f"underlying {symbol} corrected (correction {cid}): {words}",
    )


COMMANDS = [create, underlying, base_currency]
