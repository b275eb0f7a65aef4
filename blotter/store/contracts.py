"""Contracts: the options and underlyings-as-hedges trades are booked on, found or created from
their terms with the underlying's defaults, and every contract held in memory as arrays.

Contracts are never changed or deleted (``schema.sql`` refuses it) and ids only grow, so the
arrays read once stay right and only contracts with a higher id are read later.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from datetime import date, datetime
from typing import Any

import numpy as np

from blotter import limits
from blotter.store import db
from blotter.store.checks import after_cutoff, check_id, contract_terms, within
from blotter.store.core import guard_damage
from blotter.store.errors import StoreError
from blotter.store.records import ContractRecord, NewContract, contract_label
from blotter.store.reference import ReferenceData, underlying_terms
from blotter.store.times import cutoff_utc

CONTRACT_COLUMNS = (
    "contract_id",
    "underlying_id",
    "option_type",
    "strike",
    "expiry",
    "cutoff_time",
    "american",
    "multiplier",
    "cash_settled",
)
"""Columns of a contract's row, as the store writes and caches them."""

_BY_TERMS = (
    "SELECT contract_id FROM contract WHERE underlying_id = ? AND option_type = ? "
    "AND coalesce(expiry, '') = ? AND coalesce(strike, 0) = ? AND american = ? "
    "AND multiplier = ? AND cash_settled = ?"
)
"""The contract with given terms, looked up through the ``contract_terms`` unique index (the
same expressions), so finding one costs the same in a book of any size."""


def hedge_multiplier(kind: str, option_multiplier: float) -> float:
    """Default units per contract of a trade in the underlying itself: a stock, index or FX
    quantity counts units (1), a future's counts contracts (the underlying's multiplier)."""
    return float(option_multiplier) if kind == "future" else 1.0


def preview_contract(
    underlying: dict[str, Any],
    expiry: date | str | None,
    strike: float | None,
    is_call: bool | None,
    contract_id: int,
) -> ContractRecord:
    """The contract ``add_trade`` would create for these terms with the underlying's defaults,
    built without touching the file (for a trial trade on a contract the store does not know).

    ``underlying`` is a row of ``Store.underlying_records``; ``contract_id`` is the caller's own
    (negative for trials, so it never meets a stored id). StoreError for terms ``add_trade``
    would refuse."""
    opt_type, exp_text, k = contract_terms(expiry, strike, is_call)
    cutoff = None if opt_type == "U" else str(underlying["cutoff_time"])
    symbol = str(underlying["symbol"])
    return ContractRecord(
        contract_id=contract_id,
        symbol=symbol,
        option_type=opt_type,
        expiry=date.fromisoformat(exp_text) if exp_text else None,
        strike=k,
        cutoff_time=cutoff,
        american=bool(underlying["american"]),
        multiplier=hedge_multiplier(str(underlying["kind"]), float(underlying["multiplier"]))
        if opt_type == "U"
        else float(underlying["multiplier"]),
        cash_settled=bool(underlying["cash_settled"]),
        label=contract_label(symbol, opt_type, exp_text, k),
        cutoff_utc=cutoff_utc(exp_text, cutoff, str(underlying["time_zone"]))
        if exp_text and cutoff
        else None,
    )


def resolve_contracts(conn: db.Conn, terms: Sequence[NewContract]) -> list[int]:
    """The id of the contract with each of ``terms``, in order: found by its terms, else created
    with the underlying's defaults for what is left None (new ones in one bulk insert).

    A hedge (the underlying itself) left at the default multiplier is refused where the book
    holds that underlying only at other multipliers: it would not net against them.
    """
    unders: dict[str, db.Row] = {}
    known: dict[tuple[Any, ...], int] = {}
    hedges: dict[int, set[float]] = {}  # multipliers of the hedge contracts created here
    created: list[tuple[Any, ...]] = []
    next_id = int(db.scalar(conn, "SELECT coalesce(max(contract_id), 0) FROM contract")) + 1
    ids: list[int] = []
    for t in terms:
        u = unders.get(t.symbol)
        if u is None:
            u = unders[t.symbol] = underlying_terms(conn, t.symbol)
        opt_type, exp_text, k = contract_terms(t.expiry, t.strike, t.is_call)
        uid = int(u["underlying_id"])
        am = int(u["american"] if t.american is None else bool(t.american))
        if opt_type == "U":
            default = hedge_multiplier(u["kind"], u["multiplier"])
        else:
            default = u["multiplier"]
        mult = float(default) if t.multiplier is None else within(limits.MULTIPLIER, t.multiplier)
        cash = int(u["cash_settled"] if t.cash_settled is None else bool(t.cash_settled))
        key = (uid, opt_type, exp_text or "", k or 0, am, mult, cash)
        cid = known.get(key)
        if cid is None:
            found = conn.execute(_BY_TERMS, key).fetchone()
            cid = None if found is None else int(found[0])
        if cid is None:
            if opt_type == "U" and t.multiplier is None:
                _refuse_hedge_at_default(conn, t.symbol, uid, mult, hedges.get(uid, set()))
            cid, next_id = next_id, next_id + 1
            cutoff = None if opt_type == "U" else u["cutoff_time"]
            created.append((cid, uid, opt_type, k, exp_text, cutoff, am, mult, cash))
            if opt_type == "U":
                hedges.setdefault(uid, set()).add(mult)
        known[key] = cid
        ids.append(cid)
    if created:
        db.insert_rows(conn, "contract", CONTRACT_COLUMNS, created)
    return ids


def _refuse_hedge_at_default(
    conn: db.Conn, symbol: str, uid: int, default: float, new: set[float]
) -> None:
    """Refuse a new hedge contract at the ``default`` multiplier when the book holds hedges of
    ``uid`` (stored, or ``new`` here) only at other multipliers: a file booked before hedges
    defaulted to one unit may hold them at the option multiplier."""
    stored = {
        m
        for (m,) in conn.execute(
            "SELECT DISTINCT multiplier FROM contract WHERE underlying_id = ? "
            "AND option_type = 'U'",
            (uid,),
        )
    }
    others = sorted(stored | new)
    if others:
        held = ", ".join(f"{m:g}" for m in others)
        raise StoreError(
            f"{symbol} trades in the underlying are held here at {held} units per "
            f"contract, not the default {default:g}: give the multiplier (--multiplier)"
        )


def existing_contract(conn: db.Conn, contract_id: int) -> int:
    """``contract_id``, checked to name a contract of the book."""
    contract_id = check_id(contract_id, "contract id")
    if db.one(conn, "SELECT 1 FROM contract WHERE contract_id = ?", (contract_id,)):
        return contract_id
    raise StoreError(f"no contract {contract_id}")


def check_not_expired(conn: db.Conn, contract_id: int, t: datetime) -> None:
    """Refuse a trade dealt after the contract's cut-off instant (its expiry date at its cut-off
    time in the exchange's time zone); ``schema.sql`` keeps only a coarse backstop."""
    row = db.one(
        conn,
        "SELECT c.expiry, c.cutoff_time, u.time_zone FROM contract c "
        "JOIN underlying u USING (underlying_id) WHERE c.contract_id = ?",
        (contract_id,),
    )
    if row and row["expiry"]:
        problem = after_cutoff(t, row["expiry"], row["cutoff_time"], row["time_zone"])
        if problem:
            raise StoreError(problem)


@dataclass(frozen=True)
class ContractArrays:
    """Every contract read so far, as arrays sorted by id (the store's cache; contracts never
    change). ``expiries`` are UTC cut-off instants and ``expiry_dates`` the expiry dates as
    traded (the exchange's local date), NaT for the underlying itself."""

    ids: np.ndarray  # int64 (m,), ascending
    underlying_ids: np.ndarray  # int64 (m,), the store's underlying ids
    types: np.ndarray  # '<U1' (m,): 'C', 'P' or 'U'
    strikes: np.ndarray  # float64 (m,), NaN for 'U'
    expiries: np.ndarray  # datetime64[s] (m,)
    american: np.ndarray  # bool (m,)
    multipliers: np.ndarray  # float64 (m,)
    cash_settled: np.ndarray  # bool (m,)
    labels: np.ndarray  # object (m,) of str
    expiry_dates: np.ndarray  # datetime64[D] (m,)

    @property
    def last_id(self) -> int:
        return int(self.ids[-1]) if len(self.ids) else 0

    @classmethod
    def empty(cls) -> ContractArrays:
        z = np.zeros(0)
        return cls(
            z.astype(np.int64),
            z.astype(np.int64),
            z.astype("<U1"),
            z,
            z.astype("datetime64[s]"),
            z.astype(bool),
            z,
            z.astype(bool),
            z.astype(object),
            z.astype("datetime64[D]"),
        )

    def extended(
        self, cols: dict[str, tuple[Any, ...]], underlyings: dict[int, tuple[str, str]]
    ) -> ContractArrays:
        """These arrays followed by the contracts ``cols`` (``CONTRACT_COLUMNS`` by name, ids
        above ``last_id``); ``underlyings`` maps an underlying id to (symbol, time zone)."""
        zones = [underlyings[u][1] for u in cols["underlying_id"]]
        keys = list(zip(cols["expiry"], cols["cutoff_time"], zones, strict=True))
        instants = {
            k: (
                np.datetime64("NaT", "s")
                if k[0] is None
                else np.datetime64(cutoff_utc(*k).replace(tzinfo=None), "s")
            )
            for k in set(keys)
        }
        expiries = np.array([instants[k] for k in keys], dtype="datetime64[s]")
        symbols = [underlyings[u][0] for u in cols["underlying_id"]]
        labels = np.empty(len(keys), dtype=object)
        labels[:] = [
            sym if t == "U" else f"{sym} {e} {k:.10g} {t}"
            for sym, t, e, k in zip(
                symbols, cols["option_type"], cols["expiry"], cols["strike"], strict=True
            )
        ]
        cat = np.concatenate
        return ContractArrays(
            ids=cat([self.ids, np.array(cols["contract_id"], dtype=np.int64)]),
            underlying_ids=cat(
                [self.underlying_ids, np.array(cols["underlying_id"], dtype=np.int64)]
            ),
            types=cat([self.types, np.array(cols["option_type"], dtype="<U1")]),
            strikes=cat([self.strikes, np.array(cols["strike"], dtype=np.float64)]),  # None: NaN
            expiries=cat([self.expiries, expiries]),
            american=cat([self.american, np.array(cols["american"], dtype=bool)]),
            multipliers=cat([self.multipliers, np.array(cols["multiplier"], dtype=np.float64)]),
            cash_settled=cat([self.cash_settled, np.array(cols["cash_settled"], dtype=bool)]),
            labels=cat([self.labels, labels]),
            expiry_dates=cat(
                [
                    self.expiry_dates,
                    np.array([e or "NaT" for e in cols["expiry"]], dtype="datetime64[D]"),
                ]
            ),
        )


class Contracts(ReferenceData):
    """The contracts of a book, found or created from their terms, and cached as arrays."""

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        super().__init__(*args, **kwargs)
        self._contracts = ContractArrays.empty()

    def find_or_create_contract(
        self,
        symbol: str,
        expiry: date | str | None,
        strike: float | None,
        is_call: bool | None,
        american: bool | None = None,
        multiplier: float | None = None,
        cash_settled: bool | None = None,
    ) -> int:
        """The id of the contract with these terms, created when new; defaults from the underlying.

        ``expiry``, ``strike`` and ``is_call`` all None means the underlying itself (a hedge).
        """
        terms = NewContract(symbol, expiry, strike, is_call, american, multiplier, cash_settled)
        return self.add_contracts([terms])[0]

    def add_contracts(self, terms: Sequence[NewContract]) -> list[int]:
        """The id of the contract with each of ``terms``, in order, those that are new created in
        one transaction (all or none; the underlying's defaults fill what is left None)."""
        with self._write() as conn:
            return resolve_contracts(conn, terms)

    @guard_damage
    def contracts(self) -> list[ContractRecord]:
        """Every contract, in id order, with its label and UTC cut-off instant."""
        with self._read() as conn:
            rows = db.rows(
                conn,
                "SELECT c.contract_id, u.symbol, c.option_type, c.expiry, c.strike, "
                "c.cutoff_time, c.american, c.multiplier, c.cash_settled, u.time_zone "
                "FROM contract c JOIN underlying u USING (underlying_id) ORDER BY c.contract_id",
            )
        return [
            ContractRecord(
                contract_id=r["contract_id"],
                symbol=r["symbol"],
                option_type=r["option_type"],
                expiry=date.fromisoformat(r["expiry"]) if r["expiry"] else None,
                strike=r["strike"],
                cutoff_time=r["cutoff_time"],
                american=bool(r["american"]),
                multiplier=r["multiplier"],
                cash_settled=bool(r["cash_settled"]),
                label=contract_label(r["symbol"], r["option_type"], r["expiry"], r["strike"]),
                cutoff_utc=cutoff_utc(r["expiry"], r["cutoff_time"], r["time_zone"])
                if r["expiry"]
                else None,
            )
            for r in rows
        ]

    def _contract_table(self, conn: db.Conn) -> ContractArrays:
        """Every contract as arrays by id, read once and then extended by the new ones only."""
        with self._lock:
            cache = self._contracts
        cols = db.columns(
            conn,
            f"SELECT {', '.join(CONTRACT_COLUMNS)} FROM contract WHERE contract_id > ? "
            "ORDER BY contract_id",
            (cache.last_id,),
        )
        if not cols["contract_id"]:
            return cache
        unders = {
            uid: (symbol, zone)
            for uid, symbol, zone in conn.execute(
                "SELECT underlying_id, symbol, time_zone FROM underlying"
            )
        }
        grown = cache.extended(cols, unders)
        with self._lock:
            if grown.last_id > self._contracts.last_id:
                self._contracts = grown
        return grown
