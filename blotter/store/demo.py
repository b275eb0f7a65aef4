"""The invented demo book: a fictitious desk, its trade history and two days of close marks.

Everything here is made up: the underlyings (symbols starting ``DEMO``), their prices, the desk
and its trades. The book is deterministic for a seed, and every time in it is fixed relative to
``DEMO_AS_OF`` (the second close), so ``build_demo`` writes the same contents every run and the
shipped ``demo.db`` can be checked by rebuilding it. Trade prices come from the engine's
``price`` on the marked smile at the trade time, rounded to a cent.
"""

from __future__ import annotations

import math
import os
import sqlite3
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass
from datetime import UTC, date, datetime, time, timedelta
from pathlib import Path
from typing import Any, NamedTuple
from zoneinfo import ZoneInfo

import numpy as np

from blotter.store import db, pg
from blotter.store.api import Store, create_store, open_store
from blotter.store.errors import StoreError
from blotter.store.files import remove_book_files
from blotter.store.records import MarkPoint, NewContract, NewTrade

DEMO_SEED = 20261201
"""Seed of the shipped demo book."""

DEMO_POSITIONS = 150
"""Number of option positions in the shipped demo book."""

DEMO_AS_OF = date(2026, 11, 30)
"""Date of the demo's second (latest) close; the first close is the business day before."""

DEMO_TZ = ZoneInfo("America/New_York")
"""Exchange time zone of every demo underlying."""

DEMO_CLOSE_TIME = time(16, 30)
"""Local time the demo's close marks are committed."""

DEMO_WHO = "demo"
"""``who`` on every demo row (a fixed name rather than the OS user, so the file is reproducible)."""

FICTITIOUS_NOTE = (
    "This book is invented for demonstration. The desk, its books, the underlyings (every symbol "
    "starting DEMO), their prices, vols, rates and all trades are fictitious and describe no real "
    "company, index, market or person."
)
"""Desk note written into every demo book."""

HISTORY_DAYS = 90
"""Calendar days of trade history before the first close."""


@dataclass(frozen=True)
class _Und:
    symbol: str
    description: str
    kind: str
    multiplier: float
    american: bool
    cash_settled: bool
    div_yield: float
    beta: float
    spot: float
    base_vol: float
    strike_step: float
    is_reference: bool = False
    last_expiry: date | None = None  # options on a future expire no later than the future
    book: str = "equity-vol"
    hedge: int = 0  # hedge position in the underlying itself


UNDERLYINGS: tuple[_Und, ...] = (
    _Und(
        "DEMOIX",
        "Demo 500 index (fictitious, invented for the demo)",
        "index",
        100.0,
        False,
        True,
        0.014,
        1.0,
        4812.0,
        0.17,
        25.0,
        is_reference=True,
        book="index-vol",
    ),
    _Und(
        "DEMOA",
        "Demo Alpha Motors (fictitious company, invented for the demo)",
        "stock",
        100.0,
        True,
        False,
        0.005,
        1.15,
        182.40,
        0.31,
        2.5,
        hedge=-3000,
    ),
    _Und(
        "DEMOB",
        "Demo Bravo Foods (fictitious company, invented for the demo)",
        "stock",
        100.0,
        True,
        False,
        0.028,
        0.75,
        64.25,
        0.22,
        1.0,
        hedge=1500,
    ),
    _Und(
        "DEMOC",
        "Demo Charlie Software (fictitious company, invented for the demo)",
        "stock",
        100.0,
        True,
        False,
        0.0,
        1.6,
        23.10,
        0.46,
        0.5,
        hedge=-2000,
    ),
    _Und(
        "DEMOFU",
        "Demo 500 index future, March 2027 (fictitious, invented for the demo)",
        "future",
        50.0,
        True,
        False,
        0.0,
        1.0,
        4838.0,
        0.175,
        25.0,
        last_expiry=date(2027, 3, 19),
        book="index-vol",
        hedge=-4,
    ),
)
"""The demo's underlyings (spot is the first close)."""

RATE_TENORS_DAYS = (1, 7, 30, 91, 182, 365, 730, 1095)
"""Tenors of the demo's USD zero curve, calendar days."""

RATES = (0.0430, 0.0429, 0.0425, 0.0418, 0.0405, 0.0385, 0.0370, 0.0365)
"""Demo USD continuously compounded zero rates at the first close, decimal."""

SMILE_Z = (-2.5, -1.5, -1.0, -0.5, 0.0, 0.5, 1.0, 1.5, 2.5)
"""Marked strikes per expiry, in standard deviations of log-moneyness (sigma * sqrt(T))."""


def _nyse_holidays(years: range) -> set[date]:
    import holidays

    return set(holidays.financial_holidays("NYSE", years=list(years)))


def _business_days(start: date, end: date, hol: set[date]) -> list[date]:
    out, d = [], start
    while d <= end:
        if d.weekday() < 5 and d not in hol:
            out.append(d)
        d += timedelta(days=1)
    return out


def _prev_business_day(d: date, hol: set[date]) -> date:
    d -= timedelta(days=1)
    while d.weekday() >= 5 or d in hol:
        d -= timedelta(days=1)
    return d


def _expiry_on(friday: date, hol: set[date]) -> date:
    """A Friday expiry, moved to the business day before when the exchange is shut."""
    d = friday
    while d.weekday() >= 5 or d in hol:
        d -= timedelta(days=1)
    return d


def _third_friday(year: int, month: int) -> date:
    first = date(year, month, 1)
    return first + timedelta(days=(4 - first.weekday()) % 7 + 14)


def demo_expiries(as_of: date, weekly: bool, hol: set[date]) -> list[date]:
    """Expiry dates from about a week to two years after ``as_of``: monthlies and a few weeklies
    (the shipped book), or every Friday (a large synthetic book)."""
    end = as_of + timedelta(days=731)
    start = as_of + timedelta(days=7)
    fridays = []
    d = start + timedelta(days=(4 - start.weekday()) % 7)
    while d <= end:
        fridays.append(d)
        d += timedelta(days=7)
    if weekly:
        return sorted({_expiry_on(f, hol) for f in fridays})
    monthly = [
        (2026, 12),
        (2027, 1),
        (2027, 2),
        (2027, 3),
        (2027, 6),
        (2027, 9),
        (2027, 12),
        (2028, 6),
    ]
    out = {_expiry_on(fridays[0], hol)}
    out |= {_expiry_on(_third_friday(y, m), hol) for y, m in monthly}
    last = _third_friday(end.year, end.month)
    out.add(_expiry_on(last if last <= end else _third_friday(end.year, end.month - 1), hol))
    return sorted(e for e in out if start <= e <= end)


def _atm_vol(base: float | np.ndarray, t_years: np.ndarray) -> np.ndarray:
    """Demo ATM vol term structure: a little higher at the short end, decimal."""
    return base * (0.93 + 0.14 * np.exp(-np.asarray(t_years) / 0.35))


def _smile(base: float | np.ndarray, t_years: np.ndarray, log_moneyness: np.ndarray) -> np.ndarray:
    """Demo smile: ATM vol plus a downward skew and some curvature, both easing with expiry."""
    t = np.maximum(np.asarray(t_years, dtype=np.float64), 1.0 / 12.0)
    k = np.asarray(log_moneyness, dtype=np.float64)
    vol = (
        _atm_vol(base, t_years) - 0.09 / np.sqrt(t) * k * (base / 0.25) + 0.20 / np.sqrt(t) * k * k
    )
    return np.clip(vol, 0.05, 2.0)


def _rate(t_years: np.ndarray, shift: float = 0.0) -> np.ndarray:
    return np.interp(np.asarray(t_years) * 365.0, RATE_TENORS_DAYS, RATES) + shift


def _round_to(x: np.ndarray, step: float) -> np.ndarray:
    return np.maximum(np.round(np.asarray(x) / step) * step, step)


def _local(d: date, t: time) -> datetime:
    return datetime.combine(d, t, tzinfo=DEMO_TZ).astimezone(UTC)


def _remove_abandoned_builds(out: Path) -> None:
    """Remove the half-built files of earlier builds of ``out`` whose process is gone (killed
    mid-build), so they do not pile up beside the book."""
    for tmp in out.parent.glob(f".{out.name}.*.building"):
        pid_text = tmp.name[len(out.name) + 2 : -len(".building")]
        if not pid_text.isdigit():
            continue
        try:
            os.kill(int(pid_text), 0)
        except ProcessLookupError:
            remove_book_files(tmp)
        except PermissionError:
            pass  # another user's live build


DEMO_STEPS = ("drawing the book", "pricing the trades", "writing the book", "finishing the file")
"""The steps of a demo build, as its ``progress`` callback names them."""

StepProgress = Callable[[float, str | None], None]
"""Told (steps done, the step now running) as a build goes."""


def build_demo(
    path: str | os.PathLike[str],
    positions: int | None = None,
    seed: int = DEMO_SEED,
    force: bool = False,
    american_share: float | None = None,
    progress: StepProgress | None = None,
) -> Path:
    """Write the invented demo book to ``path`` and return it; ``positions`` option positions
    (``DEMO_POSITIONS`` when None; a larger number builds a synthetic book of the same kind).
    ``american_share`` (0 to 1) makes that share of the options American, drawn at random,
    instead of each underlying's own style (the index European, the rest American).
    ``progress`` is told each of ``DEMO_STEPS`` as it starts.

    The book is built in a temporary file beside ``path`` and renamed into place, so ``path`` is
    never half-written. An existing ``path`` is refused unless ``force``, and even then unless it
    is a demo book (``_not_demo``); a book in use (its ``-wal`` file holds data) is always
    refused.
    """
    if pg.is_url(str(path)):
        raise StoreError(
            "the demo is written to a file; move it into a database with "
            f"`blotter copy demo.db {pg.shown(str(path))}`"
        )
    out = Path(path)
    n_options = DEMO_POSITIONS if positions is None else int(positions)
    if n_options < 0:
        raise StoreError("--positions must not be negative")
    if _exists(out) and not force:
        raise StoreError(f"{out} already exists; pass --force to replace it")
    _refuse_unless_demo(out)
    wal = Path(f"{out}-wal")
    if wal.exists() and wal.stat().st_size > 0:
        raise StoreError(
            f"{out} is in use or was not closed cleanly ({wal} holds data); close "
            "every program using it before replacing it"
        )
    _remove_abandoned_builds(out)
    tmp = out.with_name(f".{out.name}.{os.getpid()}.building")
    remove_book_files(tmp)
    store = create_store(tmp, desk_tz=DEMO_TZ)
    try:
        fill_demo(store, n_options, seed, american_share, progress)
        if progress is not None:
            progress(3, DEMO_STEPS[3])
        store.checkpoint()
    except BaseException:
        store.close()
        remove_book_files(tmp)
        raise
    store.close()
    try:
        _refuse_unless_demo(out)  # again: a book may have been written there while this built
    except BaseException:
        remove_book_files(tmp)
        raise
    os.replace(tmp, out)
    for side in (tmp, out):  # empty side files left by readers of the old file
        for suffix in ("-wal", "-shm"):
            remove_book_files(Path(f"{side}{suffix}"))
    return out


def _exists(path: Path) -> bool:
    """Whether anything is at ``path``; a path this user cannot look at is refused in words."""
    try:
        os.lstat(path)
    except FileNotFoundError:
        return False
    except OSError as exc:  # e.g. a folder on the path that this user cannot search
        raise StoreError(f"cannot write {path}: {exc.strerror}") from None
    return True


def _refuse_unless_demo(path: Path) -> None:
    """Refuse to replace ``path`` unless nothing is there or it is a book ``demo`` wrote.

    A demo book holds only rows entered as ``DEMO_WHO`` from the demo's own sources, the demo's
    underlyings and books, and no import; anything else is someone's data, which ``--force``
    must not destroy."""
    if not _exists(path):
        return
    why = _not_demo(path)
    if why is not None:
        raise StoreError(
            f"{path} is not a demo book ({why}); --force replaces only a book that `blotter "
            "demo` wrote. Nothing was written: choose another --out, or move the file away "
            "yourself"
        )


_NOT_DEMO_ROWS = {
    "trades": ("trade", "who <> ? OR source <> 'demo'"),
    "cancels": ("trade_cancel", "who <> ?"),
    "mark sets": ("mark_set", "who <> ? OR source <> 'demo'"),
    "notes": ("desk_note", "who <> ?"),
}
"""Rows no demo build writes, by what they are: (table, condition on ``DEMO_WHO``)."""


def _not_demo(path: Path) -> str | None:
    """Why the file at ``path`` is not a demo book, in words, or None when it is one."""
    if not path.is_file() or path.is_symlink():
        return "it is not a regular file"
    # With no -wal beside it no connection has the book open (a blotter book is always in WAL
    # mode), so it is read as immutable: a read-only open would leave -wal and -shm behind.
    idle = not os.path.lexists(f"{path}-wal")
    try:
        conn = sqlite3.connect(db.uri(path, db.IMMUTABLE if idle else "ro"), uri=True)
    except sqlite3.Error as exc:
        return f"SQLite cannot open it: {exc}"
    try:
        if db.scalar(conn, "PRAGMA application_id") != db.APPLICATION_ID:
            return "it is not a blotter book"
        tables = db.utils_db(conn)
        found = [
            f"{n} {what}"
            for what, (table, where) in _NOT_DEMO_ROWS.items()
            if (n := tables.table(table).count_where(where, [DEMO_WHO]))
        ]
        if "import_file" in tables.table_names() and tables.table("import_file").count:
            found.append("imported files")
        symbols = {symbol for (symbol,) in conn.execute("SELECT symbol FROM underlying")}
        if extra := sorted(symbols - {u.symbol for u in UNDERLYINGS}):
            found.append(f"underlyings {', '.join(extra)}")
        books = {name for (name,) in conn.execute("SELECT name FROM book")}
        if extra := sorted(books - {u.book for u in UNDERLYINGS}):
            found.append(f"books {', '.join(extra)}")
    except (sqlite3.Error, UnicodeDecodeError) as exc:
        return f"it cannot be read as a blotter book: {exc}"
    finally:
        conn.close()
    if found:
        return "it holds " + "; ".join(found) + " not written by `blotter demo`"
    return None


def _spot_paths(rng: np.random.Generator, n_days: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Each underlying's daily spot path ending at its first close (n_und, n_days), its second
    close one more day on, and the second close's vol shift per underlying."""
    paths = np.empty((len(UNDERLYINGS), n_days))
    spot2 = np.empty(len(UNDERLYINGS))
    for i, u in enumerate(UNDERLYINGS):
        steps = rng.normal(0.0, u.base_vol / math.sqrt(252.0), n_days)
        back = np.concatenate([np.cumsum(steps[::-1])[::-1][1:], [0.0]])
        paths[i] = u.spot * np.exp(-back)
        spot2[i] = round(u.spot * math.exp(rng.normal(0.0, u.base_vol / math.sqrt(252.0))), 2)
    return paths, spot2, rng.normal(0.0, 0.006, len(UNDERLYINGS))


def _listed(
    u: _Und, expiries: list[date], cut: dict[date, datetime], t_close1: datetime
) -> Iterator[tuple[date, float]]:
    """The expiries ``u`` lists (none after its last), each with the standard deviation of its
    log spot from the first close to that expiry's cut-off (vol x sqrt(T))."""
    for e in expiries:
        if u.last_expiry is not None and e > u.last_expiry:
            continue
        t_years = (cut[e] - t_close1).total_seconds() / (365.0 * 86400.0)
        yield e, u.base_vol * math.sqrt(t_years)


def _draw_contracts(
    rng: np.random.Generator,
    seed: int,
    n_options: int,
    expiries: list[date],
    cut: dict[date, datetime],
    t_close1: datetime,
    american_share: float | None,
) -> tuple[list[NewContract], list[int]]:
    """The contracts of the book: ``n_options`` options drawn from a listed universe (near the
    money more often, out of the money three times as often), then a hedge per underlying that
    holds one; and the index in ``UNDERLYINGS`` of each contract's underlying."""
    weekly = n_options > DEMO_POSITIONS * 4
    universe: list[tuple[int, date, float, bool]] = []
    n_strikes = max(15, math.ceil(1.6 * n_options / max(1, 2 * len(expiries) * len(UNDERLYINGS))))
    z_grid = np.linspace(-2.5, 2.5, n_strikes)
    weights: list[float] = []
    for i, u in enumerate(UNDERLYINGS):
        for e, sd in _listed(u, expiries, cut, t_close1):
            step = u.strike_step * (0.02 if weekly else 1.0)
            ks = np.unique(_round_to(u.spot * np.exp(z_grid * sd), step))
            for k in ks:
                z = math.log(k / u.spot) / sd
                for is_call in (True, False):
                    otm = (k >= u.spot) == is_call
                    universe.append((i, e, float(k), is_call))
                    weights.append(math.exp(-0.5 * z * z) * (3.0 if otm else 1.0))
    if n_options > len(universe):
        raise StoreError(
            f"cannot draw {n_options} distinct positions from {len(universe)} contracts"
        )
    w = np.asarray(weights)
    keys = np.log(rng.random(len(universe))) / w  # weighted sampling without replacement
    chosen = np.sort(np.argsort(-keys, kind="stable")[:n_options])

    contracts: list[NewContract] = []
    und_index: list[int] = []
    # Its own generator, so the shipped demo's draws are the same with or without a share.
    styles = np.random.default_rng(seed + 1).random(len(chosen))
    for idx, style in zip(chosen, styles, strict=True):
        i, e, k, is_call = universe[int(idx)]
        u = UNDERLYINGS[i]
        american = u.american if american_share is None else bool(style < american_share)
        contracts.append(
            NewContract(u.symbol, e.isoformat(), k, is_call, american, u.multiplier, u.cash_settled)
        )
        und_index.append(i)
    for i, u in enumerate(UNDERLYINGS):
        if u.hedge:
            units = 1.0 if u.kind == "stock" else u.multiplier
            contracts.append(NewContract(u.symbol, None, None, None, u.american, units, False))
            und_index.append(i)
    return contracts, und_index


_Trade = tuple[int, int, float, datetime]
"""A drawn trade: (contract row, quantity, day index in the history, trade time)."""


def _draw_trades(
    rng: np.random.Generator,
    is_opt: np.ndarray,
    und_of: np.ndarray,
    history: list[date],
    close2: date,
) -> list[_Trade]:
    """An opening trade per position, some adds and reductions, and a handful of trades on the
    second day; sorted by time (then contract row)."""
    n_c, n_days = len(is_opt), len(history)
    size = np.where([UNDERLYINGS[j].kind in ("index", "future") for j in und_of], 8, 40)
    target = np.maximum(1, np.round(rng.lognormal(0.0, 0.8, n_c) * size / 4)).astype(np.int64)
    target = np.where(rng.random(n_c) < 0.45, -target, target)
    for j in range(n_c):
        if not is_opt[j]:
            target[j] = UNDERLYINGS[und_of[j]].hedge
    trades: list[_Trade] = []
    day2_open = _local(close2, time(9, 45))

    def minutes() -> timedelta:
        return timedelta(minutes=int(rng.integers(0, 360)))

    for j in range(n_c):
        if is_opt[j] and rng.random() < 0.06:
            trades.append((j, int(target[j]), float(n_days), day2_open + minutes()))
            continue
        day = int(rng.integers(0, max(1, n_days - 1)))
        when = _local(history[day], time(9, 45)) + minutes()
        if is_opt[j] and abs(target[j]) >= 4 and rng.random() < 0.3:
            first = int(round(target[j] * 1.5))
            later = int(rng.integers(day, n_days))
            then = max(
                when + timedelta(minutes=30), _local(history[later], time(9, 45)) + minutes()
            )
            trades.append((j, first, float(day), when))
            trades.append((j, int(target[j]) - first, float(later), then))
        else:
            trades.append((j, int(target[j]), float(day), when))
    trades.sort(key=lambda x: (x[3], x[0]))
    return trades


def _trade_prices(
    rng: np.random.Generator,
    price: Callable[..., Any],
    contracts: list[NewContract],
    is_opt: np.ndarray,
    und_of: np.ndarray,
    trades: list[_Trade],
    paths: np.ndarray,
    spot2: np.ndarray,
    cut: dict[date, datetime],
) -> np.ndarray:
    """Each trade's price, rounded to a cent: the engine's on the day-1 smile at the trade's
    spot for an option, the spot itself for a hedge."""
    n_days = paths.shape[1]
    rows = np.array([t[0] for t in trades], dtype=np.int64)
    day_idx = np.array([t[2] for t in trades])
    trade_times = [t[3] for t in trades]
    u_idx = und_of[rows] if len(rows) else np.zeros(0, dtype=np.int64)
    spot_now = np.where(
        day_idx >= n_days,
        spot2[u_idx] if len(rows) else 0.0,
        paths[u_idx, np.minimum(day_idx, n_days - 1).astype(np.int64)] if len(rows) else 0.0,
    )
    prices = np.round(spot_now, 2)
    opt_rows = is_opt[rows] if len(rows) else np.zeros(0, dtype=bool)
    if opt_rows.any():
        sel = np.flatnonzero(opt_rows)
        chosen = [contracts[rows[s]] for s in sel]
        strikes = np.array([c.strike for c in chosen], dtype=np.float64)
        calls = np.array([c.is_call for c in chosen])
        years = np.array(
            [
                (cut[date.fromisoformat(str(c.expiry))] - trade_times[s]).total_seconds()
                / (365.0 * 86400.0)
                for c, s in zip(chosen, sel, strict=True)
            ]
        )
        us = u_idx[sel]
        base = np.array([UNDERLYINGS[j].base_vol for j in us])
        s0 = spot_now[sel]
        r = _rate(years)
        q = np.array([UNDERLYINGS[j].div_yield for j in us])
        fut = np.array([UNDERLYINGS[j].kind == "future" for j in us])
        carry = np.where(fut, 0.0, r - q)
        fwd = s0 * np.exp(carry * years)
        vol = _smile(base, years, np.log(strikes / fwd)) + rng.normal(0.0, 0.003, len(sel))
        american = np.array([bool(c.american) for c in chosen])
        px = np.asarray(price(calls, s0, strikes, years, r, carry, vol, american=american))
        prices[sel] = np.maximum(np.round(px, 2), 0.01)
    return prices


def _close_points(
    day: int,
    t_close: datetime,
    spots: np.ndarray,
    shift: np.ndarray,
    expiries: list[date],
    cut: dict[date, datetime],
    t_close1: datetime,
) -> list[MarkPoint]:
    """Close ``day``'s marks (0 the first close, 1 the second): spots, a smile per expiry, the
    USD curve and the stocks' dividend yields."""
    points = [MarkPoint("spot", float(spots[i]), u.symbol) for i, u in enumerate(UNDERLYINGS)]
    for i, u in enumerate(UNDERLYINGS):
        for e, sd in _listed(u, expiries, cut, t_close1):
            ks = np.unique(_round_to(u.spot * np.exp(np.array(SMILE_Z) * sd), u.strike_step))
            te = (cut[e] - t_close).total_seconds() / (365.0 * 86400.0)
            carry_e = 0.0 if u.kind == "future" else float(_rate(np.array(te))) - u.div_yield
            fwd = spots[i] * math.exp(carry_e * te)
            vols = _smile(u.base_vol, np.full(len(ks), te), np.log(ks / fwd)) + shift[i]
            points += [
                MarkPoint(
                    "vol", round(float(v), 4), u.symbol, expiry=e.isoformat(), strike=float(k)
                )
                for k, v in zip(ks, vols, strict=True)
            ]
    points += [
        MarkPoint("rate", round(rate0 + 0.0005 * day, 6), currency="USD", tenor_days=tenor)
        for tenor, rate0 in zip(RATE_TENORS_DAYS, RATES, strict=True)
    ]
    for u in UNDERLYINGS:
        if u.kind == "stock":
            q_day = u.div_yield + (0.001 if day == 1 and u.symbol == "DEMOB" else 0.0)
            points.append(MarkPoint("div_yield", round(q_day, 6), u.symbol))
    return points


class _Cancel(NamedTuple):
    """A cancel the demo writes: of ``trade_id``, why, and when."""

    trade_id: int
    reason: str
    at: datetime


class _MarkSet(NamedTuple):
    """A mark set the demo writes: its kind, points, note and time."""

    kind: str
    points: list[MarkPoint]
    note: str
    at: datetime


_Write = NewTrade | _Cancel | _MarkSet


def _tickets(
    trades: list[_Trade],
    contract_ids: list[int],
    und_of: np.ndarray,
    prices: np.ndarray,
    picks: list[int],
    n_cancel: int,
) -> list[tuple[datetime, int, int, _Write]]:
    """The trade history as (time, rank, id, write): every drawn trade as a ticket numbered in
    time order, and a few mistakes with their corrections, as they happen on a desk: tickets
    booked twice at ten times the size (then cancelled) and tickets booked at a wrong price
    (then amended). At one instant a trade comes first (rank 0), then a cancel, then an amend's
    replacing trade."""
    booked = [t + timedelta(minutes=2) for _j, _q, _d, t in trades]
    tickets = [
        NewTrade(
            UNDERLYINGS[und_of[j]].book,
            contract_ids[j],
            qty,
            float(prices[n]),
            t,
            booked[n],
            DEMO_WHO,
            "demo",
            "",
            trade_id=n + 1,
        )
        for n, (j, qty, _d, t) in enumerate(trades)
    ]
    amends = {int(p): round(tickets[int(p)].price * 1.1 + 0.05, 2) for p in picks[n_cancel:]}
    for p, wrong_px in amends.items():
        tickets[p] = tickets[p]._replace(price=wrong_px, note="price typo")
    out: list[tuple[datetime, int, int, _Write]] = [
        (booked[n], 0, n + 1, ticket) for n, ticket in enumerate(tickets)
    ]
    next_tid = len(tickets) + 1
    for p in picks[:n_cancel]:
        again = booked[p] + timedelta(minutes=1)
        dup = tickets[p]._replace(
            quantity=tickets[p].quantity * 10, booked_at=again, trade_id=next_tid
        )
        out.append((again, 0, next_tid, dup))
        gone = booked[p] + timedelta(minutes=9)
        why = "ticket booked twice at ten times the size"
        out.append((gone, 1, next_tid, _Cancel(next_tid, why, gone)))
        next_tid += 1
    for p, wrong_px in amends.items():
        right_px = float(prices[p])
        fix = booked[p] + timedelta(minutes=15)
        why = f"amended: price {wrong_px} should be {right_px}"
        out.append((fix, 1, p + 1, _Cancel(p + 1, why, fix)))
        fixed = tickets[p]._replace(
            price=right_px,
            booked_at=fix,
            note="price corrected",
            replaces=p + 1,
            trade_id=next_tid,
        )
        out.append((fix, 2, next_tid, fixed))
        next_tid += 1
    return out


def _write_history(store: Store, writes: list[tuple[datetime, int, int, _Write]]) -> None:
    """Every history row in the order of its time (then rank and id), so the store's own order
    of history tells the same story as the clocks; runs of trades go in together."""
    batch: list[NewTrade] = []
    for *_, write in sorted(writes, key=lambda w: w[:3]):
        if isinstance(write, NewTrade):
            batch.append(write)
            continue
        if batch:
            store.add_trades(batch)
            batch = []
        if isinstance(write, _Cancel):
            store.cancel_trade(write.trade_id, write.reason, cancelled_at=write.at, who=DEMO_WHO)
        else:
            store.add_mark_set(
                write.kind,
                write.points,
                note=write.note,
                source="demo",
                marked_at=write.at,
                who=DEMO_WHO,
            )
    if batch:
        store.add_trades(batch)


def fill_demo(
    store: Store,
    positions: int = DEMO_POSITIONS,
    seed: int = DEMO_SEED,
    american_share: float | None = None,
    progress: StepProgress | None = None,
) -> None:
    """Write the invented desk into the new, empty book ``store``: its note and underlyings, then
    its contracts, books, trade history and marks in one transaction (``Store.atomic``).

    ``positions``, ``seed`` and ``american_share`` as for ``build_demo``; every row is entered
    through the store's public methods, as ``DEMO_WHO``; ``progress`` is told each of the
    first three ``DEMO_STEPS`` as it starts.
    """
    from blotter.engine import price

    if progress is not None:
        progress(0, DEMO_STEPS[0])
    rng = np.random.default_rng(seed)
    hol = _nyse_holidays(range(DEMO_AS_OF.year - 1, DEMO_AS_OF.year + 4))
    close2 = DEMO_AS_OF
    close1 = _prev_business_day(close2, hol)
    t_close1, t_close2 = _local(close1, DEMO_CLOSE_TIME), _local(close2, DEMO_CLOSE_TIME)
    expiries = demo_expiries(close2, positions > DEMO_POSITIONS * 4, hol)
    history = _business_days(close1 - timedelta(days=HISTORY_DAYS), close1, hol)

    store.add_note(
        FICTITIOUS_NOTE, written_at=t_close1 - timedelta(days=HISTORY_DAYS + 1), who=DEMO_WHO
    )
    for u in UNDERLYINGS:
        store.add_underlying(
            u.symbol,
            u.kind,
            "USD",
            u.multiplier,
            description=u.description,
            american=u.american,
            cash_settled=u.cash_settled,
            div_yield=u.div_yield,
            beta=u.beta,
            is_reference=u.is_reference,
            calendar="NYSE",
            time_zone="America/New_York",
            cutoff_time="16:00",
        )

    paths, spot2, vol_shift2 = _spot_paths(rng, len(history))
    cut = {e: _local(e, time(16, 0)) for e in expiries}
    contracts, und_index = _draw_contracts(
        rng, seed, positions, expiries, cut, t_close1, american_share
    )
    und_of = np.array(und_index)
    is_opt = np.array([c.expiry is not None for c in contracts])
    trades = _draw_trades(rng, is_opt, und_of, history, close2)
    n_cancel = min(3, len(trades) // 20)
    n_amend = min(2, len(trades) // 20)
    picks: list[int] = (
        [int(x) for x in rng.choice(len(trades), size=n_cancel + n_amend, replace=False)]
        if trades
        else []
    )
    if progress is not None:
        progress(1, DEMO_STEPS[1])
    prices = _trade_prices(rng, price, contracts, is_opt, und_of, trades, paths, spot2, cut)

    marks: list[tuple[datetime, int, int, _Write]] = []
    for i in (1, 3):  # two intraday spot checks during the second day
        at = t_close2 - timedelta(hours=4 - i)
        seen = float(round(spot2[i] * 0.998, 2))
        check = [MarkPoint("spot", seen, UNDERLYINGS[i].symbol)]
        marks.append((at, 3, i, _MarkSet("intraday", check, "desk spot check", at)))
    first_spots = np.array([u.spot for u in UNDERLYINGS])
    for day, (closes, t_close, spots, shift) in enumerate(
        (
            (close1, t_close1, first_spots, np.zeros(len(UNDERLYINGS))),
            (close2, t_close2, spot2, vol_shift2),
        )
    ):
        points = _close_points(day, t_close, spots, shift, expiries, cut, t_close1)
        marks.append((t_close, 3, 0, _MarkSet("close", points, f"close {closes}", t_close)))

    if progress is not None:
        progress(2, DEMO_STEPS[2])
    with store.atomic():
        contract_ids = store.add_contracts(contracts)
        for name in sorted({u.book for u in UNDERLYINGS}):
            store.add_book(name, "fictitious demo desk account")
        _write_history(
            store, _tickets(trades, contract_ids, und_of, prices, picks, n_cancel) + marks
        )


def describe(path: str | os.PathLike[str]) -> dict[str, int]:
    """Counts of what a book holds (positions, trades, cancels, mark sets, marks, underlyings)."""
    with open_store(path) as s:  # read-write, so closing leaves no -wal/-shm behind
        book = s.load_book()
        rows = s.counts()
    return {
        "positions": len(book),
        "option_positions": int(book.is_option.sum()),
        "trades": rows["trade"],
        "cancels": rows["trade_cancel"],
        "mark_sets": rows["mark_set"],
        "marks": rows["mark"],
        "underlyings": len(book.underlyings),
    }


def demo_close_times(hol: Sequence[date] | None = None) -> tuple[datetime, datetime]:
    """UTC instants of the demo's two close sets (first, second)."""
    h = (
        set(hol)
        if hol is not None
        else _nyse_holidays(range(DEMO_AS_OF.year - 1, DEMO_AS_OF.year + 1))
    )
    return (
        _local(_prev_business_day(DEMO_AS_OF, h), DEMO_CLOSE_TIME),
        _local(DEMO_AS_OF, DEMO_CLOSE_TIME),
    )
