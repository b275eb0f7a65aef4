"""``blotter hedge``: the delta hedge of every underlying and of the book, in whole lots."""

from __future__ import annotations

from typing import TYPE_CHECKING

import click

from blotter.commands.common import (
    FiniteRange,
    check_output_flags,
    db_option,
    output_options,
    print_csv,
    print_json,
    print_table,
)
from blotter.commands.report import _at_option, _book_option, _header, _iso, _open, _value

if TYPE_CHECKING:
    from blotter.desk.hedge import Hedge, Refusal

CSV_COLUMNS = (
    "target", "instrument", "kind", "currency", "spot", "beta_weighted", "delta_units",
    "lot_units", "side", "lots", "quantity", "units", "residual_units", "residual_cash", "refused",
)
"""The CSV's columns: a hedge's fields (``Hedge.as_dict``), and the words of a refused one."""


def _table_row(h: Hedge | Refusal) -> list[str]:
    from blotter.desk.hedge import TRADE_UNITS, Refusal, signed

    if isinstance(h, Refusal):
        return [h.target, "", "", "not hedged: see below", "", "", "", ""]
    ins = h.instrument
    counts = TRADE_UNITS.get(ins.kind, "units")
    lots = "none" if h.lots == 0 else f"{h.side} {abs(h.lots):,}"
    return [
        "book (β)" if h.beta_weighted else h.target,
        signed(h.delta_units),
        f"{ins.lot_units:,g}",
        lots,
        f"{h.quantity:+,d} {ins.symbol + ' ' if h.beta_weighted else ''}{counts}",
        signed(h.residual_units),
        signed(h.residual_cash, 0),
        h.currency,
    ]


@click.command()
@db_option
@_book_option
@click.option(
    "--lot", "lot_units", type=FiniteRange(min=0.0, min_open=True), default=None,
    metavar="UNITS",
    help="Lot size in units of the underlying for every hedge, a whole number of contracts "
    "(default: common practice per kind: 100 shares, 1 index unit, 1 FX unit, 1 contract).",
)
@_at_option
@output_options
def hedge(
    db_path: str | None,
    book: str | None,
    lot_units: float | None,
    at: str | None,
    as_json: bool,
    as_csv: bool,
) -> None:
    """The delta hedge of each underlying, and of the book as beta-weighted index units.

    Each underlying is hedged with a trade in itself (shares or units of a stock, index or FX
    pair; contracts of a future, each its multiplier in units), the book with its reference
    index on the beta-weighted delta (Σ Δ $ × β ÷ the index's spot, in index units). The trade
    is rounded to whole lots (--lot UNITS, else common practice: a US round lot of 100 shares,
    1 index unit, 1 unit of an FX pair, 1 futures contract); what rounding leaves is the delta
    after, in units and in currency. A hedge that cannot be worked out (no reference index, an
    unmarked one, positions in another currency than the index, positions without marks, a lot
    that is not whole contracts) is listed with the reason.
    """
    from blotter.desk import hedge as desk_hedge

    check_output_flags(as_json, as_csv)
    st = _open(db_path)
    v = _value(st, at, book=book)
    refs = desk_hedge.read_refs(st)
    rows = desk_hedge.every_hedge(v, refs.underlyings, lot_units)
    if as_json:
        print_json(
            _header(v)
            | {
                "book": book,
                "reference_index": v.book.reference_index,
                "lot_override_units": lot_units,
                "rounding": desk_hedge.ROUNDING,
                "hedges": [r.as_dict() for r in rows],
            }
        )
        return
    if as_csv:
        dicts = [r.as_dict() for r in rows]
        print_csv(CSV_COLUMNS, ([d.get(c) for c in CSV_COLUMNS] for d in dicts))
        return
    click.echo(
        f"delta hedges at {_iso(v.valuation_time)} · marks "
        + (_iso(v.market.marks_as_of) if v.market.has_marks else "none yet")
        + f" · {'book ' + book if book else 'every book'}"
    )
    click.echo("")
    print_table(
        ["hedge of", "Δ units", "lot", "lots", "trade", "left units", "left cash", "ccy"],
        [_table_row(r) for r in rows],
        right=[False, True, True, False, True, True, True, False],
    )
    click.echo("")
    lots = {
        h.instrument.symbol: h.instrument.lot_words
        for h in rows
        if isinstance(h, desk_hedge.Hedge)
    }
    for symbol, words in lots.items():
        click.echo(f"lot of {symbol}: {words}")
    click.echo(
        f"rounded {desk_hedge.ROUNDING}; Δ in units of the hedge instrument, left: the Δ the "
        "trade leaves, in units and in currency"
    )
    for h in rows:
        if isinstance(h, desk_hedge.Hedge) and h.beta_weighted:
            click.echo(
                f"book (β): beta-weighted delta in {h.instrument.symbol} units "
                f"(Σ Δ $ × β ÷ {h.instrument.symbol} spot {h.spot:,.2f}); a unit of "
                f"{h.instrument.symbol} traded moves it by its beta {h.instrument_beta:g}"
            )
        elif isinstance(h, desk_hedge.Refusal):
            click.echo(f"{h.target}: not hedged: {h.words}")


COMMANDS = [hedge]
