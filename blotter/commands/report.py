"""``blotter risk``, ``whatif``, ``ladder``, ``explain``: risk reports for people and scripts.

Each command opens the book read-only, values it once at the valuation time (``--at``, default
now) and prints an aligned table, or ``--json`` / ``--csv``. Money is in the book's currency,
unrounded in JSON and CSV, rounded in tables.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from typing import TYPE_CHECKING, Any

import click

from blotter.commands.common import (
    DESK_ZONE_HELP,
    check_output_flags,
    db_option,
    desk_zone,
    open_for_reading,
    output_options,
    print_csv,
    print_json,
    print_table,
    resolve_db,
)

if TYPE_CHECKING:
    from blotter.risk import BookValuation, ExposureRow


RULE_NOTES = {
    "sticky strike": "vols sticky strike: each option keeps the vol of its strike and expiry",
    "sticky moneyness": "vols sticky moneyness: each option takes the marked vol at its K/S "
    "on the moved spot",
}
"""Said under every ladder and what-if output, by vol rule."""


def _rule_note(rule: str) -> str:
    return RULE_NOTES.get(rule, f"vols {rule}")


def _money(x: float, places: int = 0) -> str:
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return "—"
    if abs(x) < 0.5 * 10**-places:
        x = 0.0
    return f"{x:,.{places}f}"


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


def _open(db_path: str | None) -> Any:
    path, _ = resolve_db(db_path)
    try:
        return open_for_reading(path)
    except Exception as exc:  # the store's own errors name the file and the problem
        raise click.ClickException(f"cannot open {path}: {exc}") from exc


def _value(store: Any, at: str | None, vega_unit: str = "pt") -> BookValuation:
    from blotter import calendar as cal
    from blotter.risk import value_book

    tz = desk_zone()
    try:
        t = cal.valuation_time(at, tz)
    except ValueError as exc:
        raise click.BadParameter(str(exc), param_hint="--at") from exc
    from blotter.store import StoreError

    try:
        book = store.load_book()
        market = store.load_market()
        valuation = value_book(book, market, t, vega_unit=vega_unit, tz=tz)
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
                "expiry": cal.iso(book.expiries[i]) if opt else None,
                "years": float(v.years[i]) if opt else None,
                "rate": float(v.rate[i]) if opt else None,
                "carry": float(v.carry[i]) if opt else None,
                "vol": float(v.vol[i]) if opt else None,
                "quantity": float(book.quantities[i]),
                "multiplier": float(book.multipliers[i]),
                "is_trial": bool(book.is_trial[i]),
                **_row_dict(row),
            }
        )
    return out


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
@output_options
def risk(
    db_path: str | None, by: str, vega_unit: str, at: str | None, as_json: bool, as_csv: bool
) -> None:
    """The book's exposures in desk units, per underlying and in total.

    Units: value and Δ $ in currency; Δ sh in shares (units) of the underlying; Γ 1% the change
    in Δ sh for a 1% rise in spot; vega the P&L for +1 vol point (0.01 of vol); θ the P&L for one
    calendar day; ρ the P&L for +1% of rate (stock, index and FX: rho + carry rho; futures
    options: rho alone); vanna the change in Δ sh per vol point; volga the change in vega per vol
    point; βΔ $ the delta in currency times the underlying's beta to the reference index. Stock and
    futures hedges count with delta 1 per unit and no other greek. --by expiry groups into this
    week, this month, then months, then years; Δ sh, Γ 1% and vanna are share counts of one
    name, so they are left blank in any bucket holding more than one underlying (null in JSON,
    empty in CSV) and in the table's total (the JSON and CSV total keep the plain sum).
    """
    from blotter.risk import EXPOSURE_FIELDS, aggregate, beta_delta_index_units, total

    check_output_flags(as_json, as_csv)
    store = _open(db_path)
    v = _value(store, at, vega_unit)
    under = aggregate(v, "underlying")
    tot = total(v)
    if as_json:
        out: dict[str, Any] = _header(v)
        out["by_underlying"] = [
            {"underlying": r.underlying, "spot": r.spot, **_row_dict(r)} for r in under
        ]
        out["total"] = _row_dict(tot)
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
                }
                for r in aggregate(v, "expiry")
            ]
        if by == "position":
            out["by_position"] = _position_dicts(v)
        out["notes"] = list(v.notes)
        print_json(out)
        return
    if as_csv:
        if by == "position":
            dicts = _position_dicts(v)
            cols = list(dicts[0]) if dicts else ["contract", *EXPOSURE_FIELDS]
            print_csv(cols, ([d.get(c) for c in cols] for d in dicts))
            return
        rows = under if by == "underlying" else aggregate(v, "expiry")
        mixed = _mixed_buckets(v) if by == "expiry" else set()
        cols = [by, "spot", *EXPOSURE_FIELDS]
        data = [[r.label, r.spot, *(_row_dict(r, r.index in mixed).values())] for r in rows]
        data.append(["total", None, *_row_dict(tot).values()])
        print_csv(cols, data)
        return
    scale = v.vega_scale
    if by == "underlying":
        groups = [(r.label, _money(r.spot or float("nan"), 2), r) for r in under]
        first = ["underlying", "spot"]
    elif by == "expiry":
        groups = [(r.label, str(r.n_positions), r) for r in aggregate(v, "expiry")]
        first = ["expiry", "positions"]
    else:
        groups = [(r.label, _money(r.spot or float("nan"), 2), r) for r in aggregate(v, "position")]
        first = ["position", "spot"]
    multi = len(under) > 1
    tot_cells = _risk_cells(tot, scale)
    if multi:  # share counts of different underlyings do not add
        tot_cells[1] = tot_cells[3] = tot_cells[7] = ""
    mixed_rows = _mixed_buckets(v) if by == "expiry" else set()

    def cells_of(r: ExposureRow) -> list[str]:
        out = _risk_cells(r, scale)
        if r.index in mixed_rows:  # a bucket of several names: share counts do not add
            out[1] = out[3] = out[7] = ""
        return out

    cols = list(_RISK_COLUMNS)
    if vega_unit == "vol":
        cols[4] = "vega $/1.00 vol"
    click.echo(
        f"risk at {_iso(v.valuation_time)} · marks "
        + (_iso(v.market.marks_as_of) if v.market.has_marks else "none yet")
        + " · money in book currency"
    )
    for block in ((0, 1, 2, 3, 9), (4, 5, 6, 7, 8)):
        table = [[a, b, *(cells_of(r)[i] for i in block)] for a, b, r in groups]
        table.append(["total", "", *(tot_cells[i] for i in block)])
        click.echo("")
        print_table(
            [*first, *(cols[i] for i in block)], table, right=[False, True] + [True] * len(block)
        )
    click.echo("")
    from blotter.scenario import apply_move, parse_move

    roll = apply_move(v, parse_move("bdays 1"))
    lines = [
        f"weighted vega (√({v.t_ref_days:g}d/T)): {_money(tot.weighted_vega_pt)} $/pt",
        f"roll to the next business day ({_days(roll.roll_years * 365)}, nothing else "
        f"moving): full revaluation {_money(roll.total.full)} $, "
        f"θ × days {_money(roll.total.terms['theta'])} $",
    ]
    bw = beta_delta_index_units(v)
    if bw is not None:
        lines.append(
            f"beta-weighted delta: {_money(tot.beta_delta_cash)} $ = {bw:,.1f} "
            f"{v.book.reference_index} units"
        )
    for line in [*lines, *v.notes]:
        click.echo(line)


_WHATIF_HELP = (
    """Revalue the book under one what-if MOVE: full revaluation against the greeks' estimate.

\b
MOVE is one line of parts, combined and applied together:
"""
    + "\n".join(
        f"  {ex:<24} {what}"
        for ex, what in (
            ("spot -3%", "every underlying's spot down 3%"),
            ("spot +2.5", "every spot up 2.5 currency units"),
            ("IDX spot -5%", "one underlying (any symbol of the book)"),
            ("IDX spot =4480", "one underlying's spot set to a level"),
            ("spot -3% beta", "each underlying moves beta x 3% (index-equivalent)"),
            ("vol +2", "every vol up 2 vol points (0.30 -> 0.32)"),
            ("vol -10%", "every vol times 0.9"),
            ("vol +2 weighted", "each expiry's vol up 2 x sqrt(30d/T) pts, T >= 7d"),
            ("IDX vol +3", "one underlying's vols up 3 points"),
            ("days 3", "three calendar days pass"),
            ("bdays 1", "to the next business day (Friday -> Monday)"),
            ("rate +25bp", "every rate up 25 basis points"),
            ("spot -3% vol +2 days 1", "parts combine"),
            ("spot -5% moneyness", "vols sticky moneyness instead of sticky strike"),
        )
    )
    + """

Keywords are case-insensitive; a named part overrides an every-underlying part for that name.
Vols are sticky strike (each option keeps its strike's vol) unless the line says moneyness (each
option takes the marked vol at its K/S on the moved spot); a day roll keeps each contract's vol
and rate. Options expiring inside the
roll settle at intrinsic on the moved spot, are listed, and flagged as pin risk within 1% of the
strike. Columns: full revaluation change, estimate 1st order (delta, vega, theta, rho) and 2nd
order (+ gamma, volga, vanna), error = full - estimate in currency and as % of |full|.
Quote the move so the shell passes it as one argument: blotter whatif "spot -3% vol +2".
"""
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


@click.command(help=_WHATIF_HELP, context_settings={"ignore_unknown_options": True})
@db_option
@click.argument("move", nargs=-1, required=True)
@_at_option
@output_options
def whatif(
    db_path: str | None, move: tuple[str, ...], at: str | None, as_json: bool, as_csv: bool
) -> None:
    from blotter import calendar as cal
    from blotter.scenario import TERM_NAMES, MoveError, MoveSyntaxError, apply_move, parse_move

    check_output_flags(as_json, as_csv)
    text = " ".join(move)
    try:
        parse_move(text)
    except MoveSyntaxError as exc:
        raise click.UsageError(
            f"{exc.message}\n  {exc.pointer().replace(chr(10), chr(10) + '  ')}"
        ) from exc
    store = _open(db_path)
    v = _value(store, at)
    try:
        mv = parse_move(text, symbols=v.book.underlyings.symbols)
        res = apply_move(v, mv)
    except MoveSyntaxError as exc:
        raise click.UsageError(
            f"{exc.message}\n  {exc.pointer().replace(chr(10), chr(10) + '  ')}"
        ) from exc
    except MoveError as exc:
        raise click.ClickException(str(exc)) from exc
    if as_json:
        out = _header(v) | {
            "after": cal.iso(res.time_after),
            "roll_years": res.roll_years,
            "move": mv.as_dict(),
            "total": res.total.as_dict(),
            "by_underlying": [r.as_dict() for r in res.by_underlying],
            "expiring": [e.as_dict() for e in res.expiring],
            "vol_rule": mv.vol_rule,
            "notes": list(res.notes),
        }
        print_json(out)
        return
    if as_csv:
        cols = [
            "underlying",
            "full",
            "estimate_1",
            "estimate_2",
            "error_1",
            "error_2",
            "error_1_pct",
            "error_2_pct",
            *TERM_NAMES,
            "through_expiry",
        ]
        rows = [
            [
                r.label,
                r.full,
                r.estimate_1,
                r.estimate_2,
                r.error_1,
                r.error_2,
                r.error_1_pct,
                r.error_2_pct,
                *(r.terms[t] for t in TERM_NAMES),
                r.n_through_expiry,
            ]
            for r in [*res.by_underlying, res.total]
        ]
        print_csv(cols, rows)
        return
    rows = [[r.label, *_move_row_cells(r)] for r in [*res.by_underlying, res.total]]
    click.echo(f"what-if: {mv.describe()} · money in book currency · vols {mv.vol_rule}")
    click.echo("")
    print_table(
        ["underlying", "full", "est 1", "err 1", "err 1 %", "est 2", "err 2", "err 2 %"],
        rows,
        right=[False] + [True] * 7,
    )
    click.echo("")
    terms = [
        [r.label, *(_money(r.terms[t]) for t in TERM_NAMES)]
        for r in [*res.by_underlying, res.total]
    ]
    print_table(["estimate terms", *TERM_NAMES], terms, right=[False] + [True] * len(TERM_NAMES))
    if res.expiring:
        ex = [
            [
                e.label,
                _money(e.spot_after, 2),
                _pct(e.distance_pct),
                _money(e.settlement),
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


@click.command()
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
    type=click.FloatRange(min=0, max=3660),
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
@_at_option
@output_options
def ladder(
    db_path: str | None,
    spot_list: str | None,
    vol_list: str | None,
    days: float,
    rule: str,
    at: str | None,
    as_json: bool,
    as_csv: bool,
) -> None:
    """Spot × vol ladder of the book's P&L: full revaluation, the greeks' estimate and the error.

    Rows move every spot by the same %, columns every vol by the same points; vols are sticky
    strike (each option keeps its strike's vol) unless --rule moneyness. The estimate is second
    order (delta, gamma, vega, volga, vanna, theta). The worst cell is the lowest full P&L. Money
    in the book's currency.
    """
    from blotter import calendar as cal
    from blotter.scenario import DEFAULT_SPOT_PCTS, DEFAULT_VOL_PTS
    from blotter.scenario import ladder as run_ladder

    check_output_flags(as_json, as_csv)
    sp = _float_list(spot_list, DEFAULT_SPOT_PCTS, "--spot")
    vp = _float_list(vol_list, DEFAULT_VOL_PTS, "--vol")
    if any(x <= -100 for x in sp):
        raise click.BadParameter("a spot move must be above -100%", param_hint="--spot")
    store = _open(db_path)
    v = _value(store, at)
    lad = run_ladder(v, sp, vp, days=days, rule=f"sticky {rule}")
    i, j = lad.worst
    worst = {
        "spot_pct": sp[i],
        "vol_pts": vp[j],
        "full": float(lad.full[i, j]),
        "estimate": float(lad.estimate[i, j]),
        "error": float(lad.error[i, j]),
    }
    if as_json:
        print_json(
            _header(v)
            | {
                "rule": lad.rule,
                "days": lad.days,
                "after": cal.iso(lad.time_after),
                "spot_pcts": sp,
                "vol_pts": vp,
                "full": lad.full.tolist(),
                "estimate": lad.estimate.tolist(),
                "estimate_1": lad.estimate_1.tolist(),
                "error": lad.error.tolist(),
                "worst": worst,
                "through_expiry": lad.n_through_expiry,
            }
        )
        return
    if as_csv:
        print_csv(
            ["spot_pct", "vol_pts", "full", "estimate", "error", "rule"],
            (
                [sp[a], vp[b], lad.full[a, b], lad.estimate[a, b], lad.error[a, b], lad.rule]
                for a in range(len(sp))
                for b in range(len(vp))
            ),
        )
        return
    heads = ["spot % \\ vol pts", *(f"{x:+g}" for x in vp)]
    for title, grid in (
        ("full revaluation P&L", lad.full),
        ("estimate (2nd order)", lad.estimate),
        ("error = full − estimate", lad.error),
    ):
        rows = [
            [
                f"{sp[a]:+g}%",
                *(
                    _money(grid[a, b]) + ("◀" if (a, b) == (i, j) and grid is lad.full else "")
                    for b in range(len(vp))
                ),
            ]
            for a in range(len(sp))
        ]
        after = f" · after {_days(days)}" if days else ""
        click.echo(f"{title} · {lad.rule}{after} · book currency")
        print_table(heads, rows, right=[True] * len(heads))
        click.echo("")
    click.echo(
        f"worst cell: spot {sp[i]:+g}% vol {vp[j]:+g} pts: {_money(worst['full'])} "
        f"(estimate {_money(worst['estimate'])}, error {_money(worst['error'])}) ◀"
    )
    click.echo(f"{_rule_note(lad.rule)}; valued at {_iso(v.valuation_time)}")


def _set_dict(s: Any) -> Any:
    if s == "now":
        return "now"
    return {
        "id": s.id,
        "kind": s.kind,
        "marked_at": _iso(s.marked_at),
        "who": s.who,
        "note": s.note,
    }


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
@output_options
def explain(
    db_path: str | None, from_set: int | None, to_set: str | None, as_json: bool, as_csv: bool
) -> None:
    """P&L explain between two mark sets (default: the last two closes) against the start's greeks.

    For the positions held over the period (trades dealt by the start close, as the book stands
    at the end: cancels and amends entered in the period count, late bookings too): actual P&L
    (full revaluation) split into delta, gamma, vega, volga, vanna, theta, rho and carry terms
    (carry: a dividend yield or foreign rate mark change times carry rho), and the unexplained
    rest. Trades dealt in the period are shown apart as new-trade P&L (end mark
    against trade price). When late bookings or corrections changed the held book, a line shows
    how much of actual they account for ("corrections"). Money in the book's currency.
    """
    from blotter.scenario import EXPLAIN_TERMS
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
    try:
        ex = run_explain(store, from_set, to_set)
    except (KeyError, ValueError, StoreError) as exc:
        raise click.ClickException(_with_hint(str(exc.args[0] if exc.args else exc))) from exc
    if as_json:
        print_json(
            {
                "from": _set_dict(ex.from_set),
                "to": _set_dict(ex.to_set),
                "from_time": _iso(ex.from_time),
                "to_time": _iso(ex.to_time),
                "by_underlying": [r.as_dict() for r in ex.by_underlying],
                "total": ex.total.as_dict(),
                "late_trades": list(ex.late_trades),
                "corrected_trades": list(ex.corrected_trades),
                "notes": list(ex.notes),
            }
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
    ]
    data = [
        [
            r.label,
            r.actual,
            *(r.terms[t] for t in EXPLAIN_TERMS),
            r.explained,
            r.unexplained,
            r.new_trades,
            r.total,
            r.corrections,
        ]
        for r in [*ex.by_underlying, ex.total]
    ]
    if as_csv:
        print_csv(cols, data)
        return
    frm = ex.from_set
    to = ex.to_set
    click.echo(
        f"P&L explain: set {frm.id} ({_iso(ex.from_time)}) → "
        + ("marks now" if to == "now" else f"set {to.id} ({_iso(ex.to_time)})")
        + " · money in book currency · greeks of the start set"
    )
    click.echo("")
    summary = [
        [
            r.label,
            _money(r.actual),
            _money(r.explained),
            _money(r.unexplained),
            _pct(100 * r.unexplained / abs(r.actual)) if r.actual else "—",
            _money(r.new_trades),
            _money(r.total),
        ]
        for r in [*ex.by_underlying, ex.total]
    ]
    print_table(
        ["underlying", "actual", "explained", "unexplained", "unexpl %", "new trades", "total"],
        summary,
        right=[False] + [True] * 6,
    )
    click.echo("")
    terms = [
        [r.label, *(_money(r.terms[t]) for t in EXPLAIN_TERMS)]
        for r in [*ex.by_underlying, ex.total]
    ]
    print_table(
        ["explained by", *EXPLAIN_TERMS], terms, right=[False] + [True] * len(EXPLAIN_TERMS)
    )
    if ex.late_trades or ex.corrected_trades:
        click.echo("")
        print_table(
            ["late bookings and corrections (in actual)", "P&L"],
            [[r.label, _money(r.corrections)] for r in [*ex.by_underlying, ex.total]],
            right=[False, True],
        )
        click.echo(
            f"late-booked trade ids: {', '.join(map(str, ex.late_trades)) or 'none'}; "
            f"cancelled or amended in the period: "
            f"{', '.join(map(str, ex.corrected_trades)) or 'none'}"
        )
    for note in ex.notes:
        click.echo(note)


COMMANDS = [risk, whatif, ladder, explain]
