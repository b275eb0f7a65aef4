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
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from datetime import UTC, date, datetime, time, timedelta
from pathlib import Path
from typing import Any
from zoneinfo import ZoneInfo

import numpy as np

from blotter.store import Store, StoreError, _from_ts, _remove_book_files, _ts, create_store

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
            _remove_book_files(tmp)
        except PermissionError:
            pass  # another user's live build


def build_demo(
    path: str | os.PathLike[str],
    positions: int | None = None,
    seed: int = DEMO_SEED,
    force: bool = False,
    american_share: float | None = None,
) -> Path:
    """Write the invented demo book to ``path`` and return it; ``positions`` option positions
    (``DEMO_POSITIONS`` when None; a larger number builds a synthetic book of the same kind).
    ``american_share`` (0 to 1) makes that share of the options American, drawn at random,
    instead of each underlying's own style (the index European, the rest American).

    The book is built in a temporary file beside ``path`` and renamed into place, so ``path`` is
    never half-written. An existing ``path`` is refused unless ``force``, and even then unless it
    is a demo book (``_not_demo``); a book in use (its ``-wal`` file holds data) is always
    refused.
    """
    from blotter.engine import price

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
    _remove_book_files(tmp)
    store = create_store(tmp)
    try:
        _fill(store, n_options, seed, price, american_share)
        store.connection.execute("PRAGMA wal_checkpoint(TRUNCATE)")
    except BaseException:
        store.close()
        _remove_book_files(tmp)
        raise
    store.close()
    try:
        _refuse_unless_demo(out)  # again: a book may have been written there while this built
    except BaseException:
        _remove_book_files(tmp)
        raise
    os.replace(tmp, out)
    for side in (tmp, out):  # empty side files left by readers of the old file
        for suffix in ("-wal", "-shm"):
            _remove_book_files(Path(f"{side}{suffix}"))
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


def _not_demo(path: Path) -> str | None:
    """Why the file at ``path`` is not a demo book, in words, or None when it is one."""
    import sqlite3
    from urllib.parse import quote

    from blotter.store import APPLICATION_ID

    if not path.is_file() or path.is_symlink():
        return "it is not a regular file"
    # With no -wal beside it no connection has the book open (a blotter book is always in WAL
    # mode), so it is read as immutable: a read-only open would leave -wal and -shm behind.
    idle = not os.path.lexists(f"{path}-wal")
    mode = "ro&immutable=1" if idle else "ro"
    try:
        conn = sqlite3.connect(f"file:{quote(str(path.absolute()))}?mode={mode}", uri=True)
    except sqlite3.Error as exc:
        return f"SQLite cannot open it: {exc}"
    try:
        if conn.execute("PRAGMA application_id").fetchone()[0] != APPLICATION_ID:
            return "it is not a blotter book"
        tables = {r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
        demo = (DEMO_WHO,)
        counts = {
            "trades": "SELECT count(*) FROM trade WHERE who <> ? OR source <> 'demo'",
            "cancels": "SELECT count(*) FROM trade_cancel WHERE who <> ?",
            "mark sets": "SELECT count(*) FROM mark_set WHERE who <> ? OR source <> 'demo'",
            "notes": "SELECT count(*) FROM desk_note WHERE who <> ?",
        }
        found = [
            f"{n} {what}"
            for what, sql in counts.items()
            if (n := conn.execute(sql, demo).fetchone()[0])
        ]
        if (
            "import_file" in tables
            and conn.execute("SELECT count(*) FROM import_file").fetchone()[0]
        ):
            found.append("imported files")
        symbols = {r[0] for r in conn.execute("SELECT symbol FROM underlying")}
        if extra := sorted(symbols - {u.symbol for u in UNDERLYINGS}):
            found.append(f"underlyings {', '.join(extra)}")
        books = {r[0] for r in conn.execute("SELECT name FROM book")}
        if extra := sorted(books - {u.book for u in UNDERLYINGS}):
            found.append(f"books {', '.join(extra)}")
    except (sqlite3.Error, UnicodeDecodeError) as exc:
        return f"it cannot be read as a blotter book: {exc}"
    finally:
        conn.close()
    if found:
        return "it holds " + "; ".join(found) + " not written by `blotter demo`"
    return None


def _fill(
    store: Store,
    n_options: int,
    seed: int,
    price: Callable[..., Any],
    american_share: float | None = None,
) -> None:
    rng = np.random.default_rng(seed)
    hol = _nyse_holidays(range(DEMO_AS_OF.year - 1, DEMO_AS_OF.year + 4))
    close2 = DEMO_AS_OF
    close1 = _prev_business_day(close2, hol)
    t_close1, t_close2 = _local(close1, DEMO_CLOSE_TIME), _local(close2, DEMO_CLOSE_TIME)
    weekly = n_options > DEMO_POSITIONS * 4
    expiries = demo_expiries(close2, weekly, hol)
    history = _business_days(close1 - timedelta(days=HISTORY_DAYS), close1, hol)

    store.add_note(
        FICTITIOUS_NOTE, written_at=t_close1 - timedelta(days=HISTORY_DAYS + 1), who=DEMO_WHO
    )
    uids = [
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
        for u in UNDERLYINGS
    ]

    # Daily spot paths ending at the first close; the second close moves one more day.
    n_days = len(history)
    paths = np.empty((len(UNDERLYINGS), n_days))
    spot2 = np.empty(len(UNDERLYINGS))
    for i, u in enumerate(UNDERLYINGS):
        steps = rng.normal(0.0, u.base_vol / math.sqrt(252.0), n_days)
        back = np.concatenate([np.cumsum(steps[::-1])[::-1][1:], [0.0]])
        paths[i] = u.spot * np.exp(-back)
        spot2[i] = round(u.spot * math.exp(rng.normal(0.0, u.base_vol / math.sqrt(252.0))), 2)
    vol_shift2 = rng.normal(0.0, 0.006, len(UNDERLYINGS))

    # The universe of listed options, then the positions drawn from it.
    cut = {e: _local(e, time(16, 0)) for e in expiries}
    universe: list[tuple[int, date, float, bool]] = []
    n_strikes = max(15, math.ceil(1.6 * n_options / max(1, 2 * len(expiries) * len(UNDERLYINGS))))
    z_grid = np.linspace(-2.5, 2.5, n_strikes)
    weights: list[float] = []
    for i, u in enumerate(UNDERLYINGS):
        for e in expiries:
            if u.last_expiry is not None and e > u.last_expiry:
                continue
            t_years = (cut[e] - t_close1).total_seconds() / (365.0 * 86400.0)
            sd = u.base_vol * math.sqrt(t_years)
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

    contracts: list[tuple[int, str, float | None, str | None, str | None, int, float, int]] = []
    # Its own generator, so the shipped demo's draws are the same with or without a share.
    styles = np.random.default_rng(seed + 1).random(len(chosen))
    for idx, style in zip(chosen, styles, strict=True):
        i, e, k, is_call = universe[int(idx)]
        u = UNDERLYINGS[i]
        contracts.append(
            (
                uids[i],
                "C" if is_call else "P",
                k,
                e.isoformat(),
                "16:00",
                int(u.american if american_share is None else style < american_share),
                u.multiplier,
                int(u.cash_settled),
            )
        )
    for i, u in enumerate(UNDERLYINGS):
        if u.hedge:
            contracts.append(
                (
                    uids[i],
                    "U",
                    None,
                    None,
                    None,
                    int(u.american),
                    1.0 if u.kind == "stock" else u.multiplier,
                    0,
                )
            )

    # Trades: an opening trade per position, some adds and reductions, a few cancels and amends,
    # and a handful of trades on the second day.
    n_c = len(contracts)
    und_of = np.array([uids.index(c[0]) for c in contracts])
    is_opt = np.array([c[1] != "U" for c in contracts])
    size = np.where([UNDERLYINGS[j].kind in ("index", "future") for j in und_of], 8, 40)
    target = np.maximum(1, np.round(rng.lognormal(0.0, 0.8, n_c) * size / 4)).astype(np.int64)
    target = np.where(rng.random(n_c) < 0.45, -target, target)
    for j, con in enumerate(contracts):
        if con[1] == "U":
            target[j] = UNDERLYINGS[und_of[j]].hedge
    trades: list[tuple[int, int, float, datetime]] = []  # (contract row, qty, day index, time)
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
    n_cancel = min(3, len(trades) // 20)
    n_amend = min(2, len(trades) // 20)
    picks: list[int] = (
        [int(x) for x in rng.choice(len(trades), size=n_cancel + n_amend, replace=False)]
        if trades
        else []
    )

    # Prices from the engine on the day-1 smile at the trade's spot.
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
        strikes = np.array([contracts[rows[s]][2] for s in sel], dtype=np.float64)
        calls = np.array([contracts[rows[s]][1] == "C" for s in sel])
        years = np.array(
            [
                (
                    cut[date.fromisoformat(str(contracts[rows[s]][3]))] - trade_times[s]
                ).total_seconds()
                / (365.0 * 86400.0)
                for s in sel
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
        american = np.array([bool(contracts[rows[s]][5]) for s in sel])
        px = np.asarray(price(calls, s0, strikes, years, r, carry, vol, american=american))
        prices[sel] = np.maximum(np.round(px, 2), 0.01)

    with store._write() as conn:
        conn.executemany(
            "INSERT INTO contract (underlying_id, option_type, strike, expiry, cutoff_time, "
            "american, multiplier, cash_settled) VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
            contracts,
        )
        first_cid = conn.execute("SELECT min(contract_id) FROM contract").fetchone()[0]
        for name in sorted({u.book for u in UNDERLYINGS}):
            conn.execute(
                "INSERT INTO book (name, description) VALUES (?, ?)",
                (name, "fictitious demo desk account"),
            )
        book_ids = dict(conn.execute("SELECT name, book_id FROM book").fetchall())
        trade_rows = []
        for n, (j, qty, _d, t) in enumerate(trades):
            b = book_ids[UNDERLYINGS[und_of[j]].book]
            trade_rows.append(
                [
                    b,
                    first_cid + j,
                    qty,
                    float(prices[n]),
                    _ts(t),
                    _ts(t + timedelta(minutes=2)),
                    DEMO_WHO,
                    "demo",
                    "",
                ]
            )
        # A few mistakes and their corrections, as they happen on a desk: tickets booked twice
        # (then cancelled) and tickets booked at a wrong price (then amended).
        amends = {int(p): round(trade_rows[int(p)][3] * 1.1 + 0.05, 2) for p in picks[n_cancel:]}
        for p, wrong_px in amends.items():
            trade_rows[p][3], trade_rows[p][8] = wrong_px, "price typo"
        # Every history row is written in the order of its time (at one instant: a trade, a
        # cancel, an amend's replacing trade, a mark set), so the store's own order of history
        # tells the same story as the clocks; trade ids are given, numbering the tickets. A row
        # is (sql, parameters), run in batches of the same sql; a mark set is a function.
        events: list[tuple[str, int, int, tuple[str, Sequence[Any]] | Callable[[], None]]] = []

        trade_sql = (
            "INSERT INTO trade (trade_id, book_id, contract_id, quantity, price, trade_time, "
            "booked_at, who, source, note, replaces) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)"
        )
        cancel = (
            "INSERT INTO trade_cancel (trade_id, reason, cancelled_at, who) VALUES (?, ?, ?, ?)"
        )
        for n, ticket in enumerate(trade_rows):
            events.append((ticket[5], 0, n + 1, (trade_sql, [n + 1, *ticket, None])))
        first_tid, next_tid = 1, len(trade_rows) + 1
        for p in picks[:n_cancel]:
            b, cid, qty, px, tt, booked, *_ = trade_rows[int(p)]
            at = _from_ts(booked)
            dup = (b, cid, qty * 10, px, tt, _ts(at + timedelta(minutes=1)), DEMO_WHO, "demo", "")
            events.append((dup[5], 0, next_tid, (trade_sql, [next_tid, *dup, None])))
            why = "ticket booked twice at ten times the size"
            gone = _ts(at + timedelta(minutes=9))
            events.append((gone, 1, next_tid, (cancel, (next_tid, why, gone, DEMO_WHO))))
            next_tid += 1
        for p, wrong_px in amends.items():
            b, cid, qty, _px, tt, booked, *_ = trade_rows[p]
            right_px = float(prices[p])
            fix = _ts(_from_ts(booked) + timedelta(minutes=15))
            why = f"amended: price {wrong_px} should be {right_px}"
            undo = (cancel, (first_tid + p, why, fix, DEMO_WHO))
            events.append((fix, 1, first_tid + p, undo))
            fixed = (b, cid, qty, right_px, tt, fix, DEMO_WHO, "demo", "price corrected")
            events.append((fix, 2, next_tid, (trade_sql, [next_tid, *fixed, first_tid + p])))
            next_tid += 1

        def mark_set(
            kind: str,
            points: Sequence[tuple[Any, ...]],
            note: str,
            at: datetime,
            day: date | None,
        ) -> Callable[[], None]:
            def run() -> None:
                sid = store._new_mark_set(
                    conn,
                    kind,
                    len(points),
                    note=note,
                    source="demo",
                    marked_at=at,
                    who=DEMO_WHO,
                    day=day,
                )
                conn.executemany(
                    "INSERT INTO mark (mark_set_id, seq, kind, underlying_id, currency, expiry, "
                    "strike, tenor_days, value) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)",
                    [(sid, n + 1, *p) for n, p in enumerate(points)],
                )

            return run

        # Close marks: spot, a smile per expiry, the rate curve and dividend yields, two days.
        for day, (t_close, spots, shift) in enumerate(
            (
                (t_close1, np.array([u.spot for u in UNDERLYINGS]), np.zeros(len(UNDERLYINGS))),
                (t_close2, spot2, vol_shift2),
            )
        ):
            if day == 1:
                for i in (1, 3):  # two intraday spot checks during the second day
                    at = t_close2 - timedelta(hours=4 - i)
                    seen = float(round(spots[i] * 0.998, 2))
                    check = [("spot", uids[i], None, None, None, None, seen)]
                    events.append(
                        (_ts(at), 3, i, mark_set("intraday", check, "desk spot check", at, None))
                    )
            points: list[
                tuple[str, int | None, str | None, str | None, float | None, int | None, float]
            ] = []
            for i in range(len(UNDERLYINGS)):
                points.append(("spot", uids[i], None, None, None, None, float(spots[i])))
            for i, u in enumerate(UNDERLYINGS):
                for e in expiries:
                    if u.last_expiry is not None and e > u.last_expiry:
                        continue
                    t_years = (cut[e] - t_close1).total_seconds() / (365.0 * 86400.0)
                    sd = u.base_vol * math.sqrt(t_years)
                    ks = np.unique(
                        _round_to(u.spot * np.exp(np.array(SMILE_Z) * sd), u.strike_step)
                    )
                    te = (cut[e] - t_close).total_seconds() / (365.0 * 86400.0)
                    carry_e = (
                        0.0 if u.kind == "future" else float(_rate(np.array(te))) - u.div_yield
                    )
                    fwd = spots[i] * math.exp(carry_e * te)
                    vols = _smile(u.base_vol, np.full(len(ks), te), np.log(ks / fwd)) + shift[i]
                    for k, v in zip(ks, vols, strict=False):
                        points.append(
                            (
                                "vol",
                                uids[i],
                                None,
                                e.isoformat(),
                                float(k),
                                None,
                                round(float(v), 4),
                            )
                        )
            for tenor, rate0 in zip(RATE_TENORS_DAYS, RATES, strict=True):
                points.append(
                    ("rate", None, "USD", None, None, tenor, round(rate0 + 0.0005 * day, 6))
                )
            for i, u in enumerate(UNDERLYINGS):
                if u.kind == "stock":
                    q_day = u.div_yield + (0.001 if day == 1 and u.symbol == "DEMOB" else 0.0)
                    points.append(("div_yield", uids[i], None, None, None, None, round(q_day, 6)))
            closes = (close1, close2)[day]
            events.append(
                (_ts(t_close), 3, 0, mark_set("close", points, f"close {closes}", t_close, closes))
            )
        batch: list[Sequence[Any]] = []
        batch_sql = ""
        for *_, event in sorted(events, key=lambda e: e[:3]):
            if batch and (callable(event) or event[0] != batch_sql):
                conn.executemany(batch_sql, batch)
                batch = []
            if callable(event):
                event()
            else:
                batch_sql = event[0]
                batch.append(event[1])
        if batch:
            conn.executemany(batch_sql, batch)


def describe(path: str | os.PathLike[str]) -> dict[str, int]:
    """Counts of what a book holds (positions, trades, cancels, mark sets, marks, underlyings)."""
    from blotter.store import open_store

    with open_store(path) as s:  # read-write, so closing leaves no -wal/-shm behind
        conn = s.connection
        book = s.load_book()
        return {
            "positions": len(book),
            "option_positions": int(book.is_option.sum()),
            "trades": conn.execute("SELECT count(*) FROM trade").fetchone()[0],
            "cancels": conn.execute("SELECT count(*) FROM trade_cancel").fetchone()[0],
            "mark_sets": conn.execute("SELECT count(*) FROM mark_set").fetchone()[0],
            "marks": conn.execute("SELECT count(*) FROM mark").fetchone()[0],
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
