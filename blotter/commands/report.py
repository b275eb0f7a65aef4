"""``blotter risk``, ``whatif``, ``grid``, ``explain``: risk reports for people and scripts.

Each command opens the book read-only, values it once at the valuation time (``--at``, default
now) and prints an aligned table, or ``--json`` / ``--csv``. Money is in each underlying's
currency and never added across currencies without an FX spot (totals are per currency; ``risk``
adds one in the base currency), unrounded in JSON and CSV, rounded in tables. Positions a
missing mark leaves out are listed with the command that logs it.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

import click

from blotter import limits
from blotter.commands.common import (
    DESK_ZONE_HELP,
    FiniteRange,
    check_option,
    check_output_flags,
    db_option,
    desk_zone,
    note_first_compile,
    open_for_reading,
    output_options,
    print_json,
    print_table,
    resolve_db,
    shown,
)
from blotter.commands.xlsx import table_out, wants_xlsx, xlsx_option
from blotter.scenario.grammar import EXAMPLES
from blotter.scenario.taylor import FIRST_ORDER, SECOND_ORDER, TERM_NAMES

if TYPE_CHECKING:
    from blotter.desk.scenario_sets import ScenarioSet, SetRun
    from blotter.desk.session import MoveWords
    from blotter.risk import BookValuation, ExposureRow, UnvaluedPosition
    from blotter.scenario import MoveResult


RULE_NOTES = {
    "sticky strike": "vols sticky strike: each option keeps the vol of its strike and expiry",
    "sticky moneyness": "vols sticky moneyness: each option takes the marked vol at its K/S "
    "on the moved spot",
}
"""Said under every grid and what-if output, by vol rule."""


def _rule_note(rule: str) -> str:
    return RULE_NOTES.get(rule, f"vols {rule}")


def _book_words(book: str | None) -> str:
    from blotter.desk.books import book_words

    return book_words(book)


def _money(x: float, places: int = 0) -> str:
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return "—"
    if abs(x) < 0.5 * 10**-places:
        x = 0.0
    return f"{x:,.{places}f}"


def _finite(x: float | None) -> float | None:
    """``x``, or None when it is NaN or missing (an empty CSV cell)."""
    return x if x is not None and math.isfinite(x) else None


def _days(n: float) -> str:
    """``1 calendar day``, ``3 calendar days``, ``0.5 calendar days``."""
    return f"{n:g} calendar day" + ("" if n == 1 else "s")


def _pct(x: float) -> str:
    if not math.isfinite(x):
        return "—"
    return "0.0%" if abs(x) < 0.05 else f"{x:+.1f}%"


def _at_option(func: Callable[..., Any]) -> Callable[..., Any]:
    return click.option(
        "--at",
        "at",
        default=None,
        metavar="TIME",
        help=f"Valuation time, ISO-8601; without an offset, local time in {DESK_ZONE_HELP}. "
        "Default: now.",
    )(func)


def _book_option(func: Callable[..., Any]) -> Callable[..., Any]:
    return click.option(
        "--book",
        "book",
        default=None,
        metavar="NAME",
        help="Only this book's trades (the marks are the file's). Default: all books.",
    )(func)


def _check_book(store: Any, book: str | None) -> str | None:
    """``book`` when the file holds it; a ``ClickException`` listing the books when not."""
    from blotter.desk.books import UnknownBook, check_book

    try:
        return check_book(store, book)
    except UnknownBook as exc:
        raise click.ClickException(str(exc)) from None


def _open(db_path: str | None) -> Any:
    path, _ = resolve_db(db_path)
    from blotter.store import StoreError

    try:
        return open_for_reading(path)
    except click.ClickException:
        raise  # a settings error: the book is not at fault
    except StoreError as exc:  # the store's own errors name the file and the problem
        raise click.ClickException(str(exc)) from None
    except Exception as exc:  # noqa: BLE001 - anything else is said, never a traceback
        raise click.ClickException(f"cannot open {shown(path)}: {exc}") from exc


def _value(
    store: Any, at: str | None, vega_unit: str = "pt", book: str | None = None
) -> BookValuation:
    """The book of ``store`` (``book`` alone when given) valued at ``--at`` as a desk session
    (``desk.session``)."""
    from blotter import calendar as cal
    from blotter.desk import session

    tz = desk_zone()
    try:
        t = cal.valuation_time(at, tz)
    except ValueError as exc:
        raise click.BadParameter(str(exc), param_hint="--at") from exc
    from blotter.store import StoreError

    book = _check_book(store, book)
    try:
        loaded = session.read(store, book)
        if loaded.book.american.any():
            note_first_compile()
        valuation = session.value(loaded, t, tz, vega_unit=vega_unit).valuation
    except (KeyError, ValueError, StoreError) as exc:
        raise click.ClickException(_with_hint(str(exc.args[0] if exc.args else exc))) from exc
    _warn_stale(valuation)
    return valuation


MARK_HINTS = {
    "no spot mark for ": "blotter mark spot {sym} PRICE",
    "no vol surface for ": "blotter mark vol {sym} YYYY-MM-DD VOL",
    "no rate curve for ": "blotter mark rate {sym} DAYS RATE",
}
"""How to log the mark a valuation found missing, by the start of the engine's message."""


def _with_hint(message: str) -> str:
    """``message``, with the command that logs the missing mark when it names one."""
    for start, command in MARK_HINTS.items():
        if message.startswith(start):
            sym = message[len(start):].strip("'\"")
            return f"{message}; log it with: {command.format(sym=sym)}"
    return message


STALE_MARKS_DAYS = 1.0
"""Marks older than this (calendar days) at the valuation time get a warning on stderr."""


def _warn_stale(v: BookValuation) -> None:
    """Warn on stderr when the marks are far from the valuation time (stdout stays clean)."""
    from blotter import calendar as cal

    if not v.market.has_marks:
        return
    age_days = (
        float(cal.year_fraction(cal.to_instant(v.market.marks_as_of), v.valuation_time)) * 365
    )
    if age_days > STALE_MARKS_DAYS:
        click.echo(
            f"blotter: the marks are {age_days:.1f} days older than the valuation time "
            f"{_iso(v.valuation_time)}; --at {_iso(v.market.marks_as_of)} values at the marks",
            err=True,
        )
    elif age_days < -1 / 24:
        click.echo(
            f"blotter: the marks ({_iso(v.market.marks_as_of)}) are later than the "
            f"valuation time {_iso(v.valuation_time)}",
            err=True,
        )


def _iso(t: Any) -> str:
    from blotter import calendar as cal

    return cal.iso(cal.to_instant(t) if not hasattr(t, "dtype") else t)


def _header(v: BookValuation) -> dict[str, Any]:
    marks = _iso(v.market.marks_as_of) if v.market.has_marks else None
    return {"as_of": _iso(v.valuation_time), "marks_as_of": marks}


UNVALUED_SHOWN = 20
"""Positions listed by name under a table when marks are missing; JSON lists every one."""


def _unvalued_json(unvalued: Sequence[UnvaluedPosition]) -> dict[str, Any]:
    """``partial`` and the ``unvalued`` list of a report's JSON."""
    return {"partial": bool(unvalued), "unvalued": [u.as_dict() for u in unvalued]}


def _total_label(unvalued: Sequence[UnvaluedPosition]) -> str:
    """The total row's label in a table: it says so when some positions are left out."""
    return "total of valued" if unvalued else "total"


def _fix(u: UnvaluedPosition, command: str) -> str:
    """``command``, and for a mark a written close lacks, the correction that mends that close."""
    mend = "; ".join(f"blotter mark close --corrects {c}" for c in u.closes)
    return f"{command}, then {mend}" if mend else command


def _say_unvalued(unvalued: Sequence[UnvaluedPosition], table: bool) -> None:
    """List the positions left out for want of a mark, each with the command that logs it: under
    the table on stdout, or on stderr when stdout carries CSV."""
    if not unvalued:
        return
    n = len({u.contract_id for u in unvalued})
    head = (
        f"{n} position{'' if n == 1 else 's'} not valued for want of a mark: every total "
        f"{'above ' if table else ''}is of the valued positions"
    )
    if not table:
        click.echo(f"blotter: {head}", err=True)
        for u in unvalued:
            for m in u.missing:
                where = f" at the {u.where}" if u.where else ""
                click.echo(
                    f"  {u.label}: {m.words()}{where}; log it with: {_fix(u, m.command)}", err=True
                )
        return
    rows = []
    for k, u in enumerate(unvalued[:UNVALUED_SHOWN]):
        same = k > 0 and unvalued[k - 1].contract_id == u.contract_id
        for j, m in enumerate(u.missing):
            where = f"{u.where}: " if u.where else ""
            rows.append(
                [u.label if j == 0 and not same else "", where + m.words(), _fix(u, m.command)]
            )
    click.echo("")
    click.echo(head)
    print_table(["not valued", "missing", "log it with"], rows)
    if len(unvalued) > UNVALUED_SHOWN:
        click.echo(f"… and {len(unvalued) - UNVALUED_SHOWN} more (--json lists them all)")


SHARE_KEYS = ("delta_shares", "gamma_1pct", "vanna_pt")
"""Exposures in shares of one underlying: a sum over several names means nothing, so a group
holding more than one underlying shows them blank (null in JSON)."""


def _row_dict(row: ExposureRow, mixed: bool = False) -> dict[str, float | None]:
    """A row's exposure keys (``risk.EXPOSURE_FIELDS``, the JSON keys outside checks read, then
    ``weighted_vega_pt``); with ``mixed`` (several underlyings) the share-unit keys are None."""
    from blotter.risk import EXPOSURE_FIELDS

    out: dict[str, float | None] = {k: getattr(row, k) for k in EXPOSURE_FIELDS}
    if mixed:
        out.update(dict.fromkeys(SHARE_KEYS))
    return out


def _mixed_buckets(v: BookValuation) -> set[int]:
    """Expiry bucket codes whose positions have more than one underlying."""
    import numpy as np

    pairs = np.unique(np.stack([v.bucket_codes, v.book.underlying_idx]), axis=1)
    codes, counts = np.unique(pairs[0], return_counts=True)
    return {int(c) for c, k in zip(codes, counts, strict=True) if k > 1}


def _position_dicts(v: BookValuation) -> list[dict[str, Any]]:
    from blotter import calendar as cal
    from blotter.risk import aggregate

    book = v.book
    out = []
    for row in aggregate(v, "position"):
        i = row.index
        assert i is not None
        opt = bool(book.is_option[i])
        out.append(
            {
                "underlying": row.underlying,
                "spot": row.spot,
                "contract": book.labels[i],
                "contract_id": int(book.contract_ids[i]),
                "is_call": bool(book.is_call[i]) if opt else None,
                "american": bool(book.american[i]) if opt else None,
                "strike": float(book.strikes[i]) if opt else None,
                # The contract's expiry date as listed, and the instant it stops (its cut-off
                # in its exchange's zone, as UTC): a Los Angeles 16:00 cut-off of 2027-01-15 is
                # 2027-01-16T00:00Z.
                "expiry": str(book.expiry_dates[i]) if opt else None,
                "cutoff": cal.iso(book.expiries[i]) if opt else None,
                "years": float(v.years[i]) if opt else None,
                "rate": float(v.rate[i]) if opt else None,
                "carry": float(v.carry[i]) if opt else None,
                "vol": float(v.vol[i]) if opt else None,
                # The mark price per unit of underlying: the model's option value on the marks,
                # a hedge's spot; and calendar days to the cut-off.
                "mark_price": float(v.greeks.price[i]) if opt else float(v.spot[i]),
                "days_to_expiry": float(v.years[i]) * 365.0 if opt else None,
                "quantity": float(book.quantities[i]),
                "multiplier": float(book.multipliers[i]),
                "is_trial": bool(book.is_trial[i]),
                **_row_dict(row),
                "currency": row.currency,
            }
        )
    return out


def _money_note(currencies: Sequence[str]) -> str:
    """A report's first line on money: ``money in USD``, or per currency when there are several."""
    if len(currencies) == 1:
        return f"money in {currencies[0]}"
    if not currencies:
        return "money in each underlying's currency"
    return (
        f"money in each underlying's currency ({', '.join(currencies)}): totals per currency, "
        "never summed across them unconverted"
    )


def _ccy_cell(row: Any, several: bool) -> list[str]:
    """The table's currency cell of ``row`` when the report holds several currencies (``all``
    on a total across them), else nothing."""
    if not several:
        return []
    return [row.currency or "all"]


def _per_ccy(rows: Sequence[Any], amount: Callable[[Any], float], unit: str = "") -> str:
    """One amount per currency in words: ``-5 USD/pt``, or ``-3 USD/pt, -2 EUR/pt``."""
    if not rows:
        return _money(0.0)  # nothing valued: no currency to name
    return ", ".join(f"{_money(amount(r))} {r.currency}{unit}" for r in rows)


def _currency_json(row: Any, per_currency: Sequence[Any]) -> dict[str, Any]:
    """The currency keys of a total's JSON: its ``currency`` (null across several, when its money
    keys are null too) and ``by_currency``, each currency's money keys by ISO code."""
    from blotter.risk import MONEY_FIELDS

    return {
        "currency": row.currency,
        "by_currency": {
            r.currency: {k: getattr(r, k) for k in MONEY_FIELDS} for r in per_currency
        },
    }


def _labelled(
    rows: Sequence[Any], per_currency: Sequence[Any], total: Any, label: str
) -> list[tuple[str, Any]]:
    """(label, row) of a table's rows: ``rows``, then each currency's total when there are
    several currencies, then the total (whose money is NaN, shown "—", across several)."""
    out = [(str(r.label), r) for r in rows]
    if len(per_currency) > 1:
        out += [(label, r) for r in per_currency]
    out.append((label, total))
    return out


def _csv_labelled(
    rows: Sequence[Any], per_currency: Sequence[Any], total: Any
) -> list[tuple[str, Any]]:
    """(label, row) of a CSV: ``rows``, then one ``total`` row per currency (the plain total
    when nothing is valued)."""
    return [(str(r.label), r) for r in rows] + [("total", r) for r in per_currency or [total]]


def _bucket_rows(v: BookValuation, row: ExposureRow) -> Any:
    """Position rows (index array) of the expiry bucket ``row``."""
    import numpy as np

    return np.flatnonzero(v.bucket_codes == row.index)


def _pnl_today(store: Any, v: BookValuation, book: str | None) -> Any:
    """P&L today (``desk.pnl_today``) at the valuation time; its words say why when none."""
    from blotter.desk import pnl_today

    try:
        return pnl_today.pnl_today(store, v.valuation_time, book)
    except (KeyError, ValueError) as exc:
        return pnl_today.PnlToday(None, words=f"P&L today not worked out: {exc}")


def _pnl_words(pnl: Any) -> str:
    """One line: P&L today per currency since the close it counts from, or why there is none."""
    if pnl.close_id is None:
        return str(pnl.words)
    amounts = ", ".join(f"{_money(x)} {c}" for c, x in pnl.by_currency.items()) or "0"
    return f"P&L today ({pnl.words}, new trades from their trade price): {amounts}"


def _spot(v: BookValuation, row: ExposureRow) -> str:
    """The spot of ``row`` to its underlying's tick (more decimals when it carries more)."""
    from blotter.ticks import price_text, tick_decimals

    und = v.book.underlyings
    tick = und.tick_of(row.underlying) if row.underlying else 0.01
    return price_text(row.spot, tick_decimals(tick)) if row.spot is not None else "—"


def _risk_groups(v: BookValuation, by: str) -> list[tuple[str, str, ExposureRow, bool]]:
    """(label, second cell, row, share counts blank) of each row of ``risk --by``; a bucket of
    several currencies comes as one row per currency."""
    from blotter.risk import aggregate, currency_totals

    if by == "underlying":
        return [(r.label, _spot(v, r), r, False) for r in aggregate(v)]
    if by == "position":
        return [(r.label, _spot(v, r), r, False) for r in aggregate(v, "position")]
    mixed = _mixed_buckets(v)
    out = []
    for r in aggregate(v, "expiry"):
        if r.currency is None and r.n_positions:
            out += [
                (r.label, str(c.n_positions), c, c.underlying is None)
                for c in currency_totals(v, _bucket_rows(v, r))
            ]
        else:
            out.append((r.label, str(r.n_positions), r, r.index in mixed))
    return out


@dataclass(frozen=True)
class _InBase:
    """The base-currency side of ``risk``: the book's total and FX delta in the base currency,
    and whether the book has anything outside the base (else the rows add nothing)."""

    fx: Any
    total: Any
    delta: Any
    shown: bool

    def missing(self) -> tuple[Any, ...]:
        """The FX spots the total or the FX delta lack, one per pair."""
        return tuple(dict.fromkeys([*self.fx.missing_marks(), *self.delta.missing]))

    def json(self) -> dict[str, Any]:
        """``base_currency``, ``total_in_base`` and ``fx_delta`` of ``risk --json``."""
        from blotter.risk import FX_PCT

        def marks(found: Sequence[Any]) -> list[dict[str, str]]:
            return [{"mark": m.kind, "of": m.name, "command": m.command} for m in found]

        base = self.fx.base
        return {
            "base_currency": base,
            "total_in_base": _row_dict(self.total, True)
            | {
                "currency": base,
                "fx_rates": self.fx.rates,
                "missing": marks(self.fx.missing_marks()),
            },
            "fx_delta": {
                "currency": base,
                "per_pct": FX_PCT,
                "by_currency": self.delta.by_currency,
                "missing": marks(self.delta.missing),
                "unread_pairs": list(self.delta.unread),
            },
        }

    def words(self) -> list[str]:
        """The FX delta line and what the base-currency figures lack, for the table."""
        base = self.fx.base
        entries = ", ".join(
            f"{c} {_money(x)}" for c, x in self.delta.by_currency.items()
        ) or "none (nothing outside " + base + ")"
        out = [f"FX delta ({base} per +1% of each currency against {base}): {entries}"]
        out += [
            f"{m.words()}: the {base} figures that need it show —; log it with: {m.command}"
            for m in self.missing()
        ]
        out += [
            f"fx underlying {sym}: its symbol is not the two legs' ISO codes with the quote its "
            "currency (EURUSD in USD), so the FX delta shows —"
            for sym in self.delta.unread
        ]
        return out


def _in_base(store: Any, v: BookValuation) -> _InBase:
    """The base-currency total and FX delta of ``v``, in the base currency ``store`` holds."""
    from blotter.risk import base_total, fx_delta, valuation_fx_rates

    fx = valuation_fx_rates(v, store.base_currency())
    delta = fx_delta(v, fx)
    shown = bool(set(v.currencies) - {fx.base} or delta.by_currency)
    return _InBase(fx, base_total(v, fx, f"total in {fx.base}"), delta, shown)


_RISK_COLUMNS = (
    "value",
    "Δ sh",
    "Δ $",
    "Γ 1% (Δ sh)",
    "vega $/pt",
    "θ $/day",
    "ρ $/1%",
    "vanna Δ sh/pt",
    "volga vega/pt",
    "βΔ $",
    "Γ $ 1% (Δ $)",
)


def _risk_cells(row: ExposureRow, vega_scale: float) -> list[str]:
    return [
        _money(row.value),
        _money(row.delta_shares, 1),
        _money(row.delta_cash),
        _money(row.gamma_1pct, 1),
        _money(row.vega_pt * vega_scale),
        _money(row.theta_day),
        _money(row.rho_pct),
        _money(row.vanna_pt, 1),
        _money(row.volga_pt, 1),
        _money(row.beta_delta_cash),
        _money(row.gamma_cash_1pct),
    ]


@click.command()
@db_option
@click.option(
    "--by",
    "by",
    type=click.Choice(["underlying", "expiry", "position"]),
    default="underlying",
    show_default=True,
    help="Group the rows by this.",
)
@click.option(
    "--vega-unit",
    type=click.Choice(["pt", "vol"]),
    default="pt",
    show_default=True,
    help="Table vega per vol point (pt) or per 1.00 of vol; JSON is always per point.",
)
@_at_option
@_book_option
@output_options
@xlsx_option
def risk(
    db_path: str | None,
    by: str,
    vega_unit: str,
    at: str | None,
    book: str | None,
    as_json: bool,
    as_csv: bool,
) -> None:
    """The book's exposures in desk units, per underlying and in total.

    Units: value and Δ $ in currency; Δ sh in shares (units) of the underlying; Γ 1% the change
    in Δ sh for a 1% rise in spot; Γ $ 1% the change in Δ $ for a 1% rise (Γ × S² / 100 per
    unit, so it adds across names of one currency; the P&L of a 1% move is about Γ $ 1% / 200);
    vega the P&L for +1 vol point (0.01 of vol); θ the P&L for one
    calendar day; ρ the P&L for +1% of rate (stock, index and FX: rho + carry rho; futures
    options: rho alone); vanna the change in Δ sh per vol point; volga the change in vega per vol
    point; βΔ $ the delta in currency times the underlying's beta to the reference index. Stock and
    futures hedges count with delta 1 per unit and no other greek. --by expiry groups into this
    week, this month, then months, then years; Δ sh, Γ 1% and vanna are share counts of one
    name, so they are left blank in any bucket holding more than one underlying (null in JSON,
    empty in CSV) and in the table's total (the JSON and CSV total keep the plain sum). Money is
    in each underlying's currency: with several currencies the totals are per currency and the
    total across them shows "—" (null in JSON, beside "by_currency"; CSV has a row per currency).
    Beside them, the total in the book's base currency (`blotter base-currency`), converted at
    the marked FX spots ("—" and the missing pair named when one has no spot), and the FX delta:
    the base-currency P&L for a 1% rise of each other currency against the base.
    """
    from blotter.risk import (
        EXPOSURE_FIELDS,
        aggregate,
        beta_delta_index_units,
        currency_totals,
        total,
    )

    check_output_flags(as_json, as_csv)
    store = _open(db_path)
    v = _value(store, at, vega_unit, book)
    under = aggregate(v, "underlying")
    tot = total(v)
    per_ccy = currency_totals(v)
    in_base = _in_base(store, v)
    if as_json:
        out: dict[str, Any] = _header(v) | {"book": book}
        out["by_underlying"] = [
            {"underlying": r.underlying, "spot": r.spot, "currency": r.currency, **_row_dict(r)}
            for r in under
        ]
        # Share counts of several names do not add: null in a total of more than one.
        out["total"] = _row_dict(tot, len(under) > 1) | _currency_json(tot, per_ccy)
        out["reference_index"] = v.book.reference_index
        out["beta_delta_index_units"] = beta_delta_index_units(v)
        out["t_ref_days"] = v.t_ref_days
        if by == "expiry":
            mixed = _mixed_buckets(v)
            out["by_expiry"] = [
                {
                    "bucket": r.label,
                    "positions": r.n_positions,
                    **_row_dict(r, r.index in mixed),
                    **_currency_json(r, currency_totals(v, _bucket_rows(v, r))),
                }
                for r in aggregate(v, "expiry")
            ]
        if by == "position":
            out["by_position"] = _position_dicts(v)
        pnl = _pnl_today(store, v, book)
        out["pnl_today"] = {
            "close_id": pnl.close_id,
            "by_underlying": {
                u: {"pnl": x, "currency": pnl.currency_of.get(u)}
                for u, x in pnl.by_underlying.items()
            },
            "by_currency": pnl.by_currency,
            "words": pnl.words,
        }
        out |= in_base.json()
        out["notes"] = list(v.notes)
        print_json(out | _unvalued_json(v.unvalued))
        return
    if as_csv or wants_xlsx():
        _say_unvalued(v.unvalued, table=False)
        for m in in_base.missing():
            click.echo(f"blotter: {m.words()}; log it with: {m.command}", err=True)
        if by == "position":
            dicts = _position_dicts(v)
            cols = list(dicts[0]) if dicts else ["contract", *EXPOSURE_FIELDS, "currency"]
            table_out(cols, ([d.get(c) for c in cols] for d in dicts), "risk by position")
            return
        cols = [by, "spot", *EXPOSURE_FIELDS, "currency", "fx_delta_1pct", "fx_of"]
        data = [
            [label, r.spot, *_row_dict(r, shares_blank).values(), r.currency]
            for label, _, r, shares_blank in _risk_groups(v, by)
        ]
        data += [
            ["total", None, *_row_dict(r, r.underlying is None and len(under) > 1).values(),
             r.currency]
            for r in per_ccy or [tot]
        ]
        if in_base.shown:  # money in the base currency; NaN (no FX spot) printed empty
            base = in_base.fx.base
            money = [_finite(x) for x in _row_dict(in_base.total, True).values()]
            data.append(["total in base", None, *money, base])
            data += [
                ["fx delta", None, *[None] * len(EXPOSURE_FIELDS), base, _finite(x), c]
                for c, x in in_base.delta.by_currency.items()
            ]
        # every row as wide as the header (the FX columns are filled on the FX delta rows only)
        table_out(cols, [[*row, *[None] * (len(cols) - len(row))] for row in data], f"risk by {by}")
        return
    scale = v.vega_scale
    first = {
        "underlying": ["underlying", "spot"],
        "expiry": ["expiry", "positions"],
        "position": ["position", "spot"],
    }[by]
    several = len(v.currencies) > 1 or in_base.shown
    groups = _risk_groups(v, by)
    label = _total_label(v.unvalued)
    if several:
        groups += [(label, "", r, r.underlying is None) for r in per_ccy]
    groups.append((label, "", tot, len(under) > 1))  # share counts of several names do not add
    if in_base.shown:
        groups.append((in_base.total.label, "", in_base.total, True))

    def cells_of(r: ExposureRow, shares_blank: bool) -> list[str]:
        out = _risk_cells(r, scale)
        if shares_blank:  # several names: share counts do not add
            out[1] = out[3] = out[7] = ""
        return out

    cols = list(_RISK_COLUMNS)
    if vega_unit == "vol":
        cols[4] = "vega $/1.00 vol"
    click.echo(
        f"risk of {_book_words(book)} at {_iso(v.valuation_time)} · marks "
        + (_iso(v.market.marks_as_of) if v.market.has_marks else "none yet")
        + f" · {_money_note(v.currencies)}"
    )
    ccy_head = ["ccy"] if several else []
    for block in ((0, 1, 2, 3, 10, 9), (4, 5, 6, 7, 8)):
        table = [
            [a, *_ccy_cell(r, several), b, *(cells_of(r, blank)[i] for i in block)]
            for a, b, r, blank in groups
        ]
        click.echo("")
        print_table(
            [first[0], *ccy_head, first[1], *(cols[i] for i in block)],
            table,
            right=[False, *([False] * len(ccy_head)), True] + [True] * len(block),
        )
    click.echo("")
    from blotter.scenario import apply_move, parse_move

    roll = apply_move(v, parse_move("bdays 1"))
    lines = [
        f"weighted vega (√({v.t_ref_days:g}d/T)): "
        + _per_ccy(per_ccy, lambda r: r.weighted_vega_pt, "/pt"),
        f"roll to the next business day ({_days(roll.roll_years * 365)}, nothing else "
        f"moving): full revaluation {_per_ccy(roll.by_currency, lambda r: r.full)}"
        f"{'; ' if several else ', '}"
        f"θ × days {_per_ccy(roll.by_currency, lambda r: r.terms['theta'])}",
    ]
    bw = beta_delta_index_units(v)
    if bw is not None:
        lines.append(
            f"beta-weighted delta: {_per_ccy(per_ccy, lambda r: r.beta_delta_cash)} = "
            f"{bw:,.1f} {v.book.reference_index} units"
        )
    elif several and v.index_spot() is not None:
        lines.append(
            f"beta-weighted delta: {_per_ccy(per_ccy, lambda r: r.beta_delta_cash)} (no index "
            "units: they would add currencies)"
        )
    lines.append(_pnl_words(_pnl_today(store, v, book)))
    if in_base.shown:
        lines += in_base.words()
    for line in [*lines, *v.notes]:
        click.echo(line)
    if by == "position":
        _position_table(v)
    _say_unvalued(v.unvalued, table=True)


def _position_table(v: BookValuation) -> None:
    """Each position's quantity, mark price (the model value on the marks, to two decimals past
    its underlying's tick), implied vol and days to expiry, under ``risk --by position``."""
    from blotter.ticks import tick_decimals

    und = v.book.underlyings
    rows = []
    for d in _position_dicts(v):
        decimals = tick_decimals(und.tick_of(d["underlying"]))
        rows.append(
            [
                d["contract"],
                f"{d['quantity']:+,.0f}",
                f"{d['multiplier']:,g}",
                f"{d['mark_price']:,.{decimals + 2}f}",
                d["currency"] or "",
                f"{100 * d['vol']:.2f}" if d["vol"] is not None else "",
                f"{d['days_to_expiry']:,.1f}" if d["days_to_expiry"] is not None else "",
            ]
        )
    click.echo("")
    print_table(
        ["position", "qty", "multiplier", "mark price", "ccy", "vol %", "days"],
        rows,
        right=[False, True, True, True, False, True, True],
    )


_WHATIF_HELP = (
    """Revalue the book under one what-if MOVE: full revaluation against the greeks' estimate.

\b
MOVE is one line of parts, combined and applied together:
"""
    + "\n".join(f"  {ex:<24} {what}" for ex, what in EXAMPLES)
    + """

Keywords are case-insensitive; a named part overrides an every-underlying part for that name.
Vols are sticky strike (each option keeps its strike's vol) unless the line says moneyness (each
option takes the marked vol at its K/S on the moved spot); a day roll keeps each contract's vol
and rate. Options expiring inside the
roll settle at intrinsic on the moved spot, are listed, and flagged as pin risk within 1% of the
strike. Columns: full revaluation change, estimate 1st order ({first}) and 2nd
order (+ {second}), error = full - estimate in currency and as % of |full|.
Quote the move so the shell passes it as one argument: blotter whatif "spot -3% vol +2".
""".format(
        first=", ".join(t for t in FIRST_ORDER if t in TERM_NAMES), second=", ".join(SECOND_ORDER)
    )
)


def _move_row_cells(r: Any) -> list[str]:
    flag = " *" if r.n_through_expiry else ""
    return [
        _money(r.full),
        _money(r.estimate_1),
        _money(r.error_1),
        _pct(r.error_1_pct),
        _money(r.estimate_2),
        _money(r.error_2) + flag,
        _pct(r.error_2_pct),
    ]


MOVE_CSV_COLUMNS = (
    "full",
    "estimate_1",
    "estimate_2",
    "error_1",
    "error_2",
    "error_1_pct",
    "error_2_pct",
    *TERM_NAMES,
    "through_expiry",
    "currency",
)
"""The money columns of a what-if's CSV, after the row's label (``underlying`` or ``total``)."""


def _move_csv_rows(res: MoveResult) -> list[list[Any]]:
    """A what-if's CSV rows: each underlying, then each currency's total."""
    return [
        [
            label,
            r.full,
            r.estimate_1,
            r.estimate_2,
            r.error_1,
            r.error_2,
            r.error_1_pct,
            r.error_2_pct,
            *(r.terms[t] for t in TERM_NAMES),
            r.n_through_expiry,
            r.currency,
        ]
        for label, r in _csv_labelled(res.by_underlying, res.by_currency, res.total)
    ]


def _move_json(res: MoveResult, ccy_of: dict[str, str], said: MoveWords) -> dict[str, Any]:
    """A what-if's JSON keys after the header: the move (and ``said``, in words with units and
    the large-move warning), the totals, each underlying, expiring options (``ccy_of``: each
    symbol's currency), the vol rule and the notes."""
    from blotter import calendar as cal

    return {
        "after": cal.iso(res.time_after),
        "roll_years": res.roll_years,
        "move": res.move.as_dict(),
        "move_words": said.words,
        "warning": said.warning or None,
        "total": res.total.as_dict()
        | {"by_currency": {r.currency: r.as_dict() for r in res.by_currency}},
        "by_underlying": [r.as_dict() for r in res.by_underlying],
        "expiring": [e.as_dict() | {"currency": ccy_of[e.underlying]} for e in res.expiring],
        "vol_rule": res.move.vol_rule,
        "notes": list(res.notes),
    }


def _executor_options(what: str) -> Callable[[Callable[..., Any]], Callable[..., Any]]:
    """``--workers`` and ``--cluster``: where ``what`` runs (``scenario.sharded.grid_executor``)."""

    def add(f: Callable[..., Any]) -> Callable[..., Any]:
        f = click.option(
            "--cluster",
            metavar="ADDRESS",
            envvar="BLOTTER_CLUSTER",
            default=None,
            help=f"Run {what} on the Dask cluster at ADDRESS (tcp://host:port; "
            '$BLOTTER_CLUSTER); needs pip install "blotter[cluster]".',
        )(f)
        return click.option(
            "--workers",
            type=click.IntRange(min=1, max=1024),
            default=None,
            help=f"Processes to share {what} (default: one per core from 1,000,000 positions, "
            "else this process alone).",
        )(f)

    return add


@click.command(help=_WHATIF_HELP, context_settings={"ignore_unknown_options": True})
@db_option
@click.argument("move", nargs=-1)
@_at_option
@_book_option
@click.option(
    "--set",
    "set_name",
    metavar="NAME",
    help="Run every move of the scenario set NAME as one table, its worst marked.",
)
@click.option("--sets", "list_sets", is_flag=True, help="List the scenario sets and their moves.")
@click.option(
    "--file",
    "sets_file",
    type=click.Path(dir_okay=False, path_type=Path),
    help="Read the scenario sets from this TOML file alone (default: [scenarios] in the "
    "settings, then the scenarios_file setting's file).",
)
@_executor_options("a scenario set's moves")
@output_options
@xlsx_option
def whatif(
    db_path: str | None,
    move: tuple[str, ...],
    at: str | None,
    book: str | None,
    as_json: bool,
    as_csv: bool,
    set_name: str | None = None,
    list_sets: bool = False,
    sets_file: Path | None = None,
    workers: int | None = None,
    cluster: str | None = None,
) -> None:
    from blotter import calendar as cal
    from blotter.scenario import MoveError, MoveSyntaxError, apply_move, parse_move

    check_output_flags(as_json, as_csv)
    if set_name is not None or list_sets or sets_file is not None:
        _whatif_sets(
            db_path, move, at, book, as_json, as_csv, set_name, sets_file, (workers, cluster)
        )
        return
    given = click.get_current_context().get_parameter_source("cluster")
    if workers is not None or given is click.core.ParameterSource.COMMANDLINE:
        raise click.UsageError(
            "--workers and --cluster share out a scenario set's moves: give --set NAME"
        )
    if not move:
        raise click.UsageError("give a MOVE, or --set NAME to run a scenario set (--sets lists)")
    text = " ".join(move)
    try:
        parse_move(text)
    except MoveSyntaxError as exc:
        raise click.UsageError(
            f"{exc.message}\n  {exc.pointer().replace(chr(10), chr(10) + '  ')}"
        ) from exc
    store = _open(db_path)
    v = _value(store, at, book=book)
    try:
        mv = parse_move(text, symbols=v.book.underlyings.symbols)
        res = apply_move(v, mv)
    except MoveSyntaxError as exc:
        raise click.UsageError(
            f"{exc.message}\n  {exc.pointer().replace(chr(10), chr(10) + '  ')}"
        ) from exc
    except MoveError as exc:
        raise click.ClickException(str(exc)) from exc
    from blotter.desk import session

    und = v.book.underlyings
    ccy_of = dict(zip(und.symbols, und.currencies, strict=True))
    several = len(res.by_currency) > 1
    said = session.move_words(v, mv)
    if said.warning:
        click.echo(f"blotter: warning: {said.warning}", err=True)
    if as_json:
        print_json(_header(v) | _move_json(res, ccy_of, said) | _unvalued_json(v.unvalued))
        return
    if as_csv or wants_xlsx():
        _say_unvalued(v.unvalued, table=False)
        table_out(["underlying", *MOVE_CSV_COLUMNS], _move_csv_rows(res), "whatif")
        return
    shown = _labelled(res.by_underlying, res.by_currency, res.total, _total_label(v.unvalued))
    ccy_head = ["ccy"] if several else []
    rows = [[label, *_ccy_cell(r, several), *_move_row_cells(r)] for label, r in shown]
    click.echo(f"what-if: {said.words} · {_money_note(v.currencies)} · vols {mv.vol_rule}")
    click.echo("")
    print_table(
        ["underlying", *ccy_head, "full", "est 1", "err 1", "err 1 %", "est 2", "err 2", "err 2 %"],
        rows,
        right=[False] * (1 + len(ccy_head)) + [True] * 7,
    )
    click.echo("")
    terms = [
        [label, *_ccy_cell(r, several), *(_money(r.terms[t]) for t in TERM_NAMES)]
        for label, r in shown
    ]
    print_table(
        ["estimate terms", *ccy_head, *TERM_NAMES],
        terms,
        right=[False] * (1 + len(ccy_head)) + [True] * len(TERM_NAMES),
    )
    if res.expiring:
        ex = [
            [
                e.label,
                _money(e.spot_after, 2),
                _pct(e.distance_pct),
                _money(e.settlement) + (f" {ccy_of[e.underlying]}" if several else ""),
                _money(e.delivered_units, 0),
                "PIN RISK" if e.pin_risk else "",
            ]
            for e in res.expiring
        ]
        click.echo("")
        print_table(
            ["expiring in the roll", "spot after", "vs strike", "settles at", "delivers", ""],
            ex,
            right=[False, True, True, True, True, False],
        )
    click.echo(
        f"{_rule_note(mv.vol_rule)}; valued at {_iso(v.valuation_time)}, "
        f"after the move {cal.iso(res.time_after)}"
    )
    if any(r.n_through_expiry for r in res.by_underlying):
        click.echo("* includes options expiring inside the roll: their estimate is not meaningful")
    for note in res.notes:
        click.echo(note)
    _say_unvalued(v.unvalued, table=True)


WORST_WORDS = "▼ WORST"
"""How a set's table marks each currency's worst scenario: a symbol and a word."""


def _whatif_sets(
    db_path: str | None,
    move: tuple[str, ...],
    at: str | None,
    book: str | None,
    as_json: bool,
    as_csv: bool,
    set_name: str | None,
    sets_file: Path | None,
    where: tuple[int | None, str | None] = (None, None),
) -> None:
    """``whatif --set NAME`` (run a scenario set on ``--book`` or every book) or ``--sets`` (list
    them), from the settings' sets or ``--file``'s; a bad set is refused before any valuing.
    ``where``: (``--workers``, ``--cluster``), the executor the set's moves are sharded over
    (``scenario.sharded.grid_executor``; None, None: this process for books under 1,000,000
    positions)."""
    from blotter.config import ConfigError, load_settings
    from blotter.desk import scenario_sets
    from blotter.scenario.sharded import ClusterUnavailable, grid_executor

    if move:
        raise click.UsageError("give a MOVE or a scenario set (--set NAME, --sets), not both")
    try:
        sets = scenario_sets.read_sets(load_settings(), sets_file)
    except ConfigError as exc:
        raise click.ClickException(f"settings: {exc}") from None
    except scenario_sets.SetError as exc:
        raise click.ClickException(str(exc)) from None
    if set_name is None:
        _list_sets(sets, as_json, as_csv)
        return
    try:
        chosen = scenario_sets.find_set(sets, set_name)
    except scenario_sets.SetError as exc:
        raise click.ClickException(str(exc)) from None
    v = _value(_open(db_path), at, book=book)
    try:
        with grid_executor(len(v), *where) as executor:
            run = scenario_sets.run_set(v, chosen, executor=executor)
    except (scenario_sets.SetError, ClusterUnavailable) as exc:
        raise click.ClickException(str(exc)) from None
    assert run is not None  # never cancelled here
    _show_set_run(v, run, as_json, as_csv)


def _list_sets(sets: Sequence[ScenarioSet], as_json: bool, as_csv: bool) -> None:
    """``whatif --sets``: each set's moves, by name, as written and as read."""
    if as_json:
        print_json(
            {
                "sets": [
                    {
                        "name": s.name,
                        "source": s.source,
                        "moves": [
                            {"name": m.name, "text": m.text, "move": m.move.as_dict()}
                            for m in s.moves
                        ],
                    }
                    for s in sets
                ]
            }
        )
        return
    rows = [
        [s.name if j == 0 else "", m.name, m.text, m.move.describe()]
        for s in sets
        for j, m in enumerate(s.moves)
    ]
    if as_csv or wants_xlsx():
        table_out(
            ["set", "scenario", "move", "source"],
            [[s.name, m.name, m.text, s.source] for s in sets for m in s.moves],
            "scenario sets",
        )
        return
    if not sets:
        click.echo(
            "no scenario sets: add [scenarios.NAME] tables of \"move name\" = \"move line\" to "
            "the settings file, or give a file with --file (README: Scenario sets)"
        )
        return
    print_table(["set", "scenario", "move as written", "read as"], rows)
    click.echo("")
    for source in dict.fromkeys(s.source for s in sets):
        names = ", ".join(s.name for s in sets if s.source == source)
        click.echo(f"from {source}: {names}")


def _show_set_run(v: BookValuation, run: SetRun, as_json: bool, as_csv: bool) -> None:
    """A scenario set's table, JSON or CSV: each move's full change, estimate and error per
    currency, as ``whatif`` gives them for the move alone, each currency's worst marked."""
    from blotter.desk import session

    und = v.book.underlyings
    ccy_of = dict(zip(und.symbols, und.currencies, strict=True))
    s = run.scenario_set
    if as_json:
        out = _header(v) | {
            "set": s.name,
            "source": s.source,
            "scenarios": [
                {"name": row.name, "text": row.text, "worst": run.worst_in(i)}
                | _move_json(row.result, ccy_of, session.move_words(v, row.result.move))
                for i, row in enumerate(run.rows)
            ],
            "worst": {ccy: run.rows[i].name for ccy, i in run.worst.items()},
        }
        print_json(out | _unvalued_json(v.unvalued))
        return
    if as_csv or wants_xlsx():
        _say_unvalued(v.unvalued, table=False)
        rows = [
            [row.name, row.text, *cells, int(cells[0] == "total" and cells[-1] in run.worst_in(i))]
            for i, row in enumerate(run.rows)
            for cells in _move_csv_rows(row.result)
        ]
        table_out(["scenario", "move", "underlying", *MOVE_CSV_COLUMNS, "worst"], rows, "whatif")
        return
    several = len(v.currencies) > 1
    table = []
    for i, row in enumerate(run.rows):
        worst = run.worst_in(i)
        for r in row.money_rows:
            mark = WORST_WORDS if r.currency in worst else ""
            table.append(
                [row.name, row.result.move.describe(), *_ccy_cell(r, several)]
                + _move_row_cells(r)
                + [mark]
            )
    ccy_head = ["ccy"] if several else []
    click.echo(
        f"scenario set {s.name!r} from {s.source}: {len(run.rows)} moves · "
        f"{_money_note(v.currencies)}"
    )
    click.echo("")
    print_table(
        ["scenario", "move", *ccy_head, "full", "est 1", "err 1", "err 1 %", "est 2", "err 2",
         "err 2 %", "worst"],
        table,
        right=[False] * (2 + len(ccy_head)) + [True] * 7 + [False],
    )
    click.echo("")
    for ccy, i in run.worst.items():
        r = next(m for m in run.rows[i].money_rows if m.currency == ccy)
        click.echo(
            f"{WORST_WORDS} in {ccy}: {run.rows[i].name!r} ({run.rows[i].text}), "
            f"full revaluation {_money(r.full)} {ccy}"
        )
    for rule in dict.fromkeys(row.result.move.vol_rule for row in run.rows):
        click.echo(_rule_note(rule))
    click.echo(
        f"valued at {_iso(v.valuation_time)}; each move applied on its own to this valuation"
    )
    if any(r.n_through_expiry for row in run.rows for r in row.money_rows):
        click.echo("* includes options expiring inside the roll: their estimate is not meaningful")
    for row in run.rows:
        for note in row.result.notes:
            click.echo(f"{row.name}: {note}")
    _say_unvalued(v.unvalued, table=True)


def _float_list(text: str | None, default: Sequence[float], name: str) -> list[float]:
    if text is None:
        return list(default)
    out = []
    for part in text.replace(" ", "").split(","):
        if not part:
            continue
        try:
            out.append(float(part.rstrip("%")))
        except ValueError:
            raise click.BadParameter(
                f"{part!r} is not a number (give e.g. -5,-2,0,2,5)", param_hint=name
            ) from None
    if not out:
        raise click.BadParameter("give at least one number", param_hint=name)
    return out


@click.command("grid")
@db_option
@click.option(
    "--spot",
    "spot_list",
    metavar="LIST",
    default=None,
    help="Spot moves in % of every spot, comma-separated. Default -10,-5,-2,-1,0,1,2,5,10.",
)
@click.option(
    "--vol",
    "vol_list",
    metavar="LIST",
    default=None,
    help="Vol moves in vol points, comma-separated. Default -5,-2,0,2,5.",
)
@click.option(
    "--days",
    type=FiniteRange(min=0, max=3660),
    default=0.0,
    show_default=True,
    help="Calendar days to roll forward in every cell.",
)
@click.option(
    "--rule",
    type=click.Choice(["strike", "moneyness"]),
    default="strike",
    show_default=True,
    help="How vols follow spot: sticky strike, or sticky moneyness (the smile moves with spot).",
)
@_executor_options("the grid")
@_at_option
@_book_option
@output_options
@xlsx_option
def grid(
    db_path: str | None,
    spot_list: str | None,
    vol_list: str | None,
    days: float,
    rule: str,
    workers: int | None,
    cluster: str | None,
    at: str | None,
    book: str | None,
    as_json: bool,
    as_csv: bool,
) -> None:
    """Scenario grid: spot × vol table of the book's P&L, full revaluation, greeks' estimate, error.

    Rows move every spot by the same %, columns every vol by the same points; vols are sticky
    strike (each option keeps its strike's vol) unless --rule moneyness. The estimate is second
    order (delta, gamma, vega, volga, vanna, theta). The worst cell is the lowest full P&L. Money
    in the underlyings' currency; a book of several currencies gets one grid per currency.
    """
    from blotter import calendar as cal
    from blotter.scenario import DEFAULT_SPOT_PCTS, DEFAULT_VOL_PTS

    check_output_flags(as_json, as_csv)
    sp = _float_list(spot_list, DEFAULT_SPOT_PCTS, "--spot")
    vp = _float_list(vol_list, DEFAULT_VOL_PTS, "--vol")
    for x in sp:
        check_option(limits.MOVE_SPOT_PCT, x, "--spot", signed=True)
    for x in vp:
        check_option(limits.MOVE_VOL_PTS, x, "--vol", signed=True)
    store = _open(db_path)
    v = _value(store, at, book=book)
    lads = _run_grid(v, sp, vp, days, f"sticky {rule}", workers, cluster)
    lad = lads[0]
    if as_json:
        grids = {g.currency: _ladder_grids(g, sp, vp) for g in lads if g.currency}
        one = _ladder_grids(lad, sp, vp) if len(lads) == 1 else dict.fromkeys(LADDER_GRIDS)
        print_json(
            _header(v)
            | {
                "rule": lad.rule,
                "days": lad.days,
                "after": cal.iso(lad.time_after),
                "spot_pcts": sp,
                "vol_pts": vp,
                **one,
                "through_expiry": sum(g.n_through_expiry for g in lads),
                "currency": lad.currency if len(lads) == 1 else None,
                "by_currency": grids,
            }
            | _unvalued_json(v.unvalued)
        )
        return
    if as_csv or wants_xlsx():
        _say_unvalued(v.unvalued, table=False)
        table_out(
            ["spot_pct", "vol_pts", "full", "estimate", "error", "rule", "currency"],
            (
                [sp[a], vp[b], g.full[a, b], g.estimate[a, b], g.error[a, b], g.rule, g.currency]
                for g in lads
                for a in range(len(sp))
                for b in range(len(vp))
            ),
            "grid",
        )
        return
    heads = ["spot % \\ vol pts", *(f"{x:+g}" for x in vp)]
    after = f" · after {_days(days)}" if days else ""
    of_valued = " of the valued positions" if v.unvalued else ""
    for g in lads:
        i, j = g.worst
        for title, grid in (
            ("full revaluation P&L", g.full),
            ("estimate (2nd order)", g.estimate),
            ("error = full − estimate", g.error),
        ):
            rows = [
                [
                    f"{sp[a]:+g}%",
                    *(
                        _money(grid[a, b]) + ("◀" if (a, b) == (i, j) and grid is g.full else "")
                        for b in range(len(vp))
                    ),
                ]
                for a in range(len(sp))
            ]
            click.echo(f"{title}{of_valued} · {g.rule}{after} · {g.currency or 'no positions'}")
            print_table(heads, rows, right=[True] * len(heads))
            click.echo("")
    for g in lads:
        worst = _ladder_grids(g, sp, vp)["worst"]
        which = f" in {g.currency}" if len(lads) > 1 else ""
        click.echo(
            f"worst cell{which}: spot {worst['spot_pct']:+g}% vol {worst['vol_pts']:+g} pts: "
            f"{_money(worst['full'])} (estimate {_money(worst['estimate'])}, error "
            f"{_money(worst['error'])}) ◀"
        )
    click.echo(f"{_rule_note(lad.rule)}; valued at {_iso(v.valuation_time)}")
    _say_unvalued(v.unvalued, table=True)


LADDER_GRIDS = ("full", "estimate", "estimate_1", "error", "worst")
"""The JSON keys of one currency's ladder (null at the top level when there are several)."""


def _ladder_grids(lad: Any, sp: Sequence[float], vp: Sequence[float]) -> dict[str, Any]:
    """One ladder's ``LADDER_GRIDS`` keys: the grids as nested lists and its worst cell."""
    i, j = lad.worst
    return {
        "full": lad.full.tolist(),
        "estimate": lad.estimate.tolist(),
        "estimate_1": lad.estimate_1.tolist(),
        "error": lad.error.tolist(),
        "worst": {
            "spot_pct": sp[i],
            "vol_pts": vp[j],
            "full": float(lad.full[i, j]),
            "estimate": float(lad.estimate[i, j]),
            "error": float(lad.error[i, j]),
        },
    }


def _set_dict(s: Any) -> Any:
    if s == "now":
        return "now"
    day = getattr(s, "business_date", None)
    return {
        "id": s.id,
        "kind": s.kind,
        "marked_at": _iso(s.marked_at),
        "business_date": day.isoformat() if day else None,
        "corrects": getattr(s, "corrects", None),
        "who": s.who,
        "note": s.note,
    }


def _set_words(s: Any, t: Any) -> str:
    """``set 7 (close of 2026-12-03, correcting set 5; 2026-12-03T21:30:00+00:00)``."""
    day = getattr(s, "business_date", None)
    fixes = getattr(s, "corrects", None)
    words = [f"close of {day}"] if day else []
    words += [f"correcting set {fixes}"] if fixes is not None else []
    return f"set {s.id} ({', '.join(words) + '; ' if words else ''}{_iso(t)})"


@click.command()
@db_option
@click.option(
    "--from",
    "from_set",
    type=int,
    default=None,
    metavar="SET",
    help="Start mark set id. Default: the close before the end set.",
)
@click.option(
    "--to",
    "to_set",
    default=None,
    metavar="SET",
    help="End mark set id, or 'now' for the marks in force now. Default: the last close.",
)
@_book_option
@output_options
@xlsx_option
def explain(
    db_path: str | None,
    from_set: int | None,
    to_set: str | None,
    book: str | None,
    as_json: bool,
    as_csv: bool,
) -> None:
    """P&L explain between two mark sets (default: the last two closes) against the start's greeks.

    For the positions held over the period (trades dealt by the start close, as the book stands
    at the end: cancels and amends entered in the period count, late bookings too): actual P&L
    (full revaluation) split into delta, gamma, vega, volga, vanna, theta, rho and carry terms
    (carry: a dividend yield or foreign rate mark change times carry rho), and the unexplained
    rest. Trades dealt in the period are shown apart as new-trade P&L (end mark
    against trade price). When late bookings or corrections changed the held book, a line shows
    how much of actual they account for ("corrections"). Money in each underlying's currency;
    totals per currency, then in the book's base currency: each currency's P&L at the start's FX
    spots, and an "FX translation" line, (end spot − start spot) × the value held at the end.
    """
    from blotter.scenario import EXPLAIN_TERMS, explain_in_base
    from blotter.scenario import explain as run_explain
    from blotter.store import StoreError

    check_output_flags(as_json, as_csv)
    if to_set is not None and to_set.lower() != "now":
        try:
            int(to_set)
        except ValueError:
            raise click.BadParameter(
                f"{to_set!r}: give a mark set id or 'now'", param_hint="--to"
            ) from None
    store = _open(db_path)
    source = store
    if _check_book(store, book) is not None:
        from blotter.desk.books import OneBook

        source = OneBook(store, str(book))
    try:
        ex = run_explain(source, from_set, to_set)
    except (KeyError, ValueError, StoreError) as exc:
        raise click.ClickException(_with_hint(str(exc.args[0] if exc.args else exc))) from exc
    base = explain_in_base(ex, store.base_currency())
    base_shown = bool({str(r.currency) for r in ex.by_currency} - {base.base})
    if as_json:
        print_json(
            {
                "book": book,
                "from": _set_dict(ex.from_set),
                "to": _set_dict(ex.to_set),
                "from_time": _iso(ex.from_time),
                "to_time": _iso(ex.to_time),
                "by_underlying": [r.as_dict() for r in ex.by_underlying],
                "total": ex.total.as_dict()
                | {"by_currency": {r.currency: r.as_dict() for r in ex.by_currency}},
                "late_trades": list(ex.late_trades),
                "corrected_trades": list(ex.corrected_trades),
                "notes": list(ex.notes),
                "base_currency": base.base,
                "in_base": _explain_base_json(base, ex.end_values),
            }
            | _unvalued_json(ex.unvalued)
        )
        return
    cols = [
        "underlying",
        "actual",
        *EXPLAIN_TERMS,
        "explained",
        "unexplained",
        "new_trades",
        "total",
        "corrections",
        "currency",
    ]
    if as_csv or wants_xlsx():
        data = [
            [
                label,
                r.actual,
                *(r.terms[t] for t in EXPLAIN_TERMS),
                r.explained,
                r.unexplained,
                r.new_trades,
                r.total,
                r.corrections,
                r.currency,
            ]
            for label, r in _csv_labelled(ex.by_underlying, ex.by_currency, ex.total)
        ]
        if base_shown:  # the base currency's rows; NaN (an FX spot missing) printed empty
            r = base.at_start_rates
            data.append(
                [
                    "total in base at start rates",
                    *(_finite(x) for x in (r.actual, *(r.terms[t] for t in EXPLAIN_TERMS))),
                    *(_finite(x) for x in (r.explained, r.unexplained, r.new_trades, r.total)),
                    _finite(r.corrections),
                    base.base,
                ]
            )
            empty = [None] * (len(cols) - 4)  # every column before "total"
            data.append(["fx translation", *empty, _finite(base.translation), None, base.base])
            data.append(["total in base", *empty, _finite(base.pnl), None, base.base])
        _say_unvalued(ex.unvalued, table=False)
        for where, m in base.missing:
            click.echo(f"blotter: {m.words()} at the {where}; log it with: {m.command}", err=True)
        table_out(cols, data, "explain")
        return
    frm = ex.from_set
    to = ex.to_set
    currencies = [str(r.currency) for r in ex.by_currency]
    several = len(currencies) > 1
    ccy_head = ["ccy"] if several else []
    shown = _labelled(ex.by_underlying, ex.by_currency, ex.total, _total_label(ex.unvalued))
    if base_shown:
        several = True
        ccy_head = ["ccy"]
        shown.append((f"{base.at_start_rates.label} at start rates", base.at_start_rates))
    click.echo(
        f"P&L explain of {_book_words(book)}: {_set_words(frm, ex.from_time)} → "
        + ("marks now" if to == "now" else _set_words(to, ex.to_time))
        + f" · {_money_note(currencies)} · greeks of the start set"
    )
    click.echo("")
    summary = [
        [
            label,
            *_ccy_cell(r, several),
            _money(r.actual),
            _money(r.explained),
            _money(r.unexplained),
            _pct(100 * r.unexplained / abs(r.actual)) if r.actual else "—",
            _money(r.new_trades),
            _money(r.total),
        ]
        for label, r in shown
    ]
    if base_shown:
        blank = [""] * 5
        summary.append(["FX translation", base.base, *blank, _money(base.translation)])
        summary.append([f"P&L in {base.base}", base.base, *blank, _money(base.pnl)])
    left = [False] * (1 + len(ccy_head))
    print_table(
        ["underlying", *ccy_head, "actual", "explained", "unexplained", "unexpl %",
         "new trades", "total"],
        summary,
        right=left + [True] * 6,
    )
    click.echo("")
    terms = [
        [label, *_ccy_cell(r, several), *(_money(r.terms[t]) for t in EXPLAIN_TERMS)]
        for label, r in shown
    ]
    print_table(
        ["explained by", *ccy_head, *EXPLAIN_TERMS], terms, right=left + [True] * len(EXPLAIN_TERMS)
    )
    if ex.late_trades or ex.corrected_trades:
        click.echo("")
        print_table(
            ["late bookings and corrections (in actual)", *ccy_head, "P&L"],
            [[label, *_ccy_cell(r, several), _money(r.corrections)] for label, r in shown],
            right=[*left, True],
        )
        click.echo(
            f"late-booked trade ids: {', '.join(map(str, ex.late_trades)) or 'none'}; "
            f"cancelled or amended in the period: "
            f"{', '.join(map(str, ex.corrected_trades)) or 'none'}"
        )
    if base_shown:
        click.echo("")
        click.echo(
            f"in {base.base}: each currency's P&L at the start's FX spots, then FX translation "
            f"= (end spot − start spot) × what is held at the end"
        )
        for where, m in base.missing:
            click.echo(
                f"{m.words()} at the {where}: the {base.base} figures that need it show —; "
                f"log it with: {m.command}"
            )
    for note in ex.notes:
        click.echo(note)
    _say_unvalued(ex.unvalued, table=True)


def _explain_base_json(base: Any, end_values: dict[str, float]) -> dict[str, Any]:
    """The ``in_base`` key of ``explain --json``: the P&L at the start rates, the FX
    translation, their sum, the rates and end values used and the FX spots missing."""
    return {
        "currency": base.base,
        "at_start_rates": base.at_start_rates.as_dict(),
        "fx_translation": base.translation,
        "total": base.pnl,
        "start_rates": base.start_rates.rates,
        "end_rates": base.end_rates.rates,
        "end_values": end_values,
        "missing": [
            {"mark": m.kind, "of": m.name, "command": m.command, "where": where}
            for where, m in base.missing
        ],
    }



def _run_grid(
    v: Any,
    sp: list[float],
    vp: list[float],
    days: float,
    rule: str,
    workers: int | None,
    cluster: str | None,
) -> list[Any]:
    """The grids of valuation ``v``: in this process, or sharded over a local process pool or a
    Dask cluster (``scenario.sharded.grid_executor``)."""
    from blotter.scenario import ladders
    from blotter.scenario.sharded import ClusterUnavailable, grid_executor, sharded_ladders

    try:
        with grid_executor(len(v), workers, cluster) as executor:
            if executor is None:
                return ladders(v, sp, vp, days=days, rule=rule)
            return sharded_ladders(v, executor, sp, vp, days, rule)
    except ClusterUnavailable as exc:
        raise click.ClickException(str(exc)) from None


def _old_name(command: click.Command, old: str, until: str) -> click.Command:
    """``command`` under its ``old`` name, hidden from help, saying on stderr what it is now."""

    def callback(**kwargs: Any) -> Any:
        click.echo(
            f"blotter {old} is now blotter {command.name}; the old name goes in {until}.", err=True
        )
        assert command.callback is not None
        return command.callback(**kwargs)

    return click.Command(
        old,
        params=command.params,
        callback=callback,
        help=f"Old name of `blotter {command.name}`, kept until {until}.",
        hidden=True,
        context_settings=command.context_settings,
    )


ladder = _old_name(grid, "ladder", "the next release")
"""``blotter ladder``: the grid's old name, hidden, working for one more release."""

COMMANDS = [risk, whatif, grid, ladder, explain]
