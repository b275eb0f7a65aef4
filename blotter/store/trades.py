"""Trades: booking, cancelling and amending them, and the positions they net into.

Trades are never updated or deleted: a cancel is its own row naming the trade, an amend is a
cancel plus a new trade naming the one it replaces. Every trade and cancel takes its place in
the store's own order of history (``history.seq``) as it is written.
"""

from __future__ import annotations

from collections.abc import Iterator, Sequence
from datetime import date, datetime
from typing import Any

import numpy as np

from blotter.book import Book
from blotter.store import db
from blotter.store.checks import (
    after_cutoff,
    check_id,
    check_price,
    check_quantity,
    check_reason,
    check_source,
)
from blotter.store.contracts import (
    Contracts,
    check_not_expired,
    existing_contract,
    resolve_contracts,
)
from blotter.store.core import guard_damage
from blotter.store.errors import StoreError
from blotter.store.records import NewContract, NewTrade, TradeRecord, contract_label
from blotter.store.reference import (
    book_id,
    book_names_in,
    known_book_id,
    underlying_rows,
    underlyings_of,
)
from blotter.store.times import cutoff_utc, from_timestamp, parse_time, timestamp_text

TRADE_ROW_COLUMNS = (
    "trade_id",
    "book_id",
    "contract_id",
    "quantity",
    "price",
    "trade_time",
    "booked_at",
    "who",
    "source",
    "note",
    "replaces",
)
"""Columns of a trade's row, as ``Store.add_trades`` writes them."""

NEW_BOOK_HINT = "start a new book on purpose (command line: --new-book)"
"""How to start a book, said when a trade names one the file does not have."""

_IN_CHUNKS = 500
"""Ids per ``IN (...)`` list of one query."""


def _chunks(ids: Sequence[int]) -> Iterator[Sequence[int]]:
    """``ids`` in slices short enough for one ``IN (...)`` list."""
    for start in range(0, len(ids), _IN_CHUNKS):
        yield ids[start : start + _IN_CHUNKS]


def _cutoffs(conn: db.Conn, ids: Sequence[int]) -> dict[int, tuple[Any, ...] | None]:
    """For each contract id of the book among ``ids``: its (expiry, cut-off time, time zone,
    cut-off instant), or None for the underlying itself; ids the book lacks are left out."""
    out: dict[int, tuple[Any, ...] | None] = {}
    instants: dict[tuple[str, str, str], datetime] = {}
    for chunk in _chunks(ids):
        for r in db.rows(
            conn,
            "SELECT c.contract_id, c.expiry, c.cutoff_time, u.time_zone FROM contract c "
            "JOIN underlying u USING (underlying_id) "
            f"WHERE c.contract_id IN ({','.join('?' * len(chunk))})",
            chunk,
        ):
            if r["expiry"] is None:
                out[r["contract_id"]] = None
                continue
            key = (r["expiry"], r["cutoff_time"], r["time_zone"])
            if key not in instants:
                instants[key] = cutoff_utc(*key)
            out[r["contract_id"]] = (*key, instants[key])
    return out


class Trades(Contracts):
    """The trades of a book and the positions they net into."""

    def add_trade(
        self,
        book: str,
        symbol: str,
        quantity: int,
        price: float,
        expiry: date | str | None = None,
        strike: float | None = None,
        is_call: bool | None = None,
        *,
        trade_time: datetime | str | None = None,
        note: str = "",
        source: str = "typed",
        american: bool | None = None,
        multiplier: float | None = None,
        cash_settled: bool | None = None,
        contract_id: int | None = None,
        create_book: bool = False,
    ) -> int:
        """Book a trade and return its id. ``quantity`` signed contracts (shares for a hedge).

        The contract is ``contract_id`` when given, else found or created from ``symbol``,
        ``expiry``, ``strike``, ``is_call`` (all three None for the underlying itself).
        ``price`` per unit of underlying; ``trade_time`` defaults to now and may not be later.
        ``book`` must exist unless ``create_book`` (so a mistyped name never starts a book).
        """
        qty = check_quantity(quantity)
        px = check_price(price)
        booked = self.now()
        t = booked if trade_time is None else parse_time(trade_time)
        if t > booked:
            raise StoreError(f"trade time {t.isoformat()} is in the future")
        check_source(source)
        with self._write() as conn:
            known_book_id(conn, book, create_book, NEW_BOOK_HINT)
            if contract_id is None:
                terms = NewContract(
                    symbol, expiry, strike, is_call, american, multiplier, cash_settled
                )
                cid = resolve_contracts(conn, [terms])[0]
            else:
                cid = existing_contract(conn, contract_id)
            check_not_expired(conn, cid, t)
            trade = NewTrade(book, cid, qty, px, t, booked, source=source, note=note)
            return self.add_trades([trade])[0]

    def add_trades(self, trades: Sequence[NewTrade]) -> list[int]:
        """Book ``trades`` (see ``NewTrade``) in one transaction, all or none, and return their
        ids in order; each is checked as ``add_trade`` checks one, and its book must exist.

        For many rows at once (a file, a generated book): the rows go in with bulk inserts
        inside the transaction, which ``atomic()`` can widen to hold other writes too.
        """
        now: datetime | None = None
        values: list[tuple[Any, ...]] = []
        for n in trades:
            qty, px = check_quantity(n.quantity), check_price(n.price)
            if n.booked_at is not None:
                booked = parse_time(n.booked_at)
            else:
                booked = now = now or self.now()
            t = booked if n.trade_time is None else parse_time(n.trade_time)
            if t > booked:
                raise StoreError(
                    f"trade time {t.isoformat()} is after the trade was booked "
                    f"({booked.isoformat()})"
                )
            check_source(n.source)
            tid = None if n.trade_id is None else check_id(n.trade_id, "trade id")
            replaces = None if n.replaces is None else check_id(n.replaces, "trade id replaced")
            values.append(
                (
                    tid,
                    n.book,
                    check_id(n.contract_id, "contract id"),
                    qty,
                    px,
                    t,
                    booked,
                    n.who or self.who,
                    n.source,
                    n.note,
                    replaces,
                )
            )
        with self._write() as conn:
            books: dict[str, int] = {}
            cutoffs = _cutoffs(conn, sorted({v[2] for v in values}))
            next_id = int(db.scalar(conn, "SELECT coalesce(max(trade_id), 0) FROM trade")) + 1
            rows: list[tuple[Any, ...]] = []
            for tid, name, cid, qty, px, t, booked, who, source, note, replaces in values:
                if name not in books:
                    books[name] = known_book_id(conn, name, False, NEW_BOOK_HINT)
                if cid not in cutoffs:
                    raise StoreError(f"no contract {cid}")
                cut = cutoffs[cid]
                if cut is not None and t > cut[3]:
                    raise StoreError(after_cutoff(t, *cut[:3]) or "")
                if tid is None:
                    tid = next_id
                next_id = max(next_id, tid + 1)
                rows.append(
                    (
                        tid,
                        books[name],
                        cid,
                        qty,
                        px,
                        timestamp_text(t),
                        timestamp_text(booked),
                        who,
                        source,
                        note,
                        replaces,
                    )
                )
            db.insert_rows(conn, "trade", TRADE_ROW_COLUMNS, rows)
        return [r[0] for r in rows]

    def cancel_trade(
        self,
        trade_id: int,
        reason: str,
        *,
        cancelled_at: datetime | None = None,
        who: str | None = None,
    ) -> int:
        """Cancel a live trade (a new row naming it and why); returns the cancel's id.

        ``cancelled_at`` and ``who`` default to now and the OS user (a generated book sets them).
        """
        trade_id = check_id(trade_id, "trade id")
        why = check_reason(reason, "a cancel")
        with self._write() as conn:
            self._cancellable(conn, trade_id)
            return self._write_cancel(conn, trade_id, why, cancelled_at or self.now(), who)

    def _write_cancel(
        self, conn: db.Conn, trade_id: int, reason: str, at: datetime, who: str | None
    ) -> int:
        """Write the cancel of ``trade_id`` (checked already); returns its id."""
        cur = conn.execute(
            "INSERT INTO trade_cancel (trade_id, reason, cancelled_at, who) VALUES (?, ?, ?, ?)",
            (trade_id, reason, timestamp_text(at), who or self.who),
        )
        return int(cur.lastrowid or 0)

    @staticmethod
    def _cancellable(conn: db.Conn, trade_id: int) -> db.Row:
        """The trade ``trade_id`` (with its book's name), refused unless it is live."""
        row = db.one(
            conn,
            "SELECT t.trade_id, b.name AS book, t.contract_id, t.quantity, t.price, "
            "t.trade_time, t.note FROM trade t JOIN book b USING (book_id) WHERE t.trade_id = ?",
            (trade_id,),
        )
        if row is None:
            raise StoreError(f"no trade {trade_id}")
        done = db.one(
            conn, "SELECT cancelled_at, who FROM trade_cancel WHERE trade_id = ?", (trade_id,)
        )
        if done:
            raise StoreError(
                f"trade {trade_id} was already cancelled at {done['cancelled_at']} by {done['who']}"
            )
        return row

    def amend_trade(
        self,
        trade_id: int,
        *,
        reason: str,
        quantity: int | None = None,
        price: float | None = None,
        trade_time: datetime | str | None = None,
        note: str | None = None,
        book: str | None = None,
        contract_id: int | None = None,
    ) -> int:
        """Cancel ``trade_id`` and book its replacement with the changed fields; returns the new id.

        Fields left None keep the original's value (including its trade time).
        """
        trade_id = check_id(trade_id, "trade id")
        why = check_reason(reason, "an amend")
        now = self.now()
        with self._write() as conn:
            old = self._cancellable(conn, trade_id)
            qty = check_quantity(old["quantity"] if quantity is None else quantity)
            px = check_price(old["price"] if price is None else price)
            t = from_timestamp(old["trade_time"]) if trade_time is None else parse_time(trade_time)
            if t > now and trade_time is None:
                # the kept time came from another terminal's clock; the new row is booked by
                # this one, and a trade cannot be dealt after it was booked
                raise StoreError(
                    f"trade {trade_id} was dealt at {old['trade_time']} by the clock of the "
                    f"terminal that booked it, later than this terminal's clock "
                    f"({timestamp_text(now)}): one of the two clocks is wrong. Give the true "
                    "deal time with the amend (--time)"
                )
            if t > now:
                raise StoreError(f"trade time {t.isoformat()} is in the future")
            cid = (
                old["contract_id"] if contract_id is None else existing_contract(conn, contract_id)
            )
            check_not_expired(conn, cid, t)
            name = old["book"] if book is None else book
            known_book_id(conn, name, False, "an amend moves a trade only to a book that exists")
            new_note = old["note"] if note is None else note
            same_book = book is None or book == old["book"]
            if same_book and (qty, px, timestamp_text(t), cid, new_note) == (
                old["quantity"],
                old["price"],
                old["trade_time"],
                old["contract_id"],
                old["note"],
            ):
                raise StoreError(
                    f"nothing to amend: the new terms of trade {trade_id} are the same as the "
                    "old ones (give --qty, --price, --time, --note or --book)"
                )
            self._write_cancel(conn, trade_id, f"amended: {why}", now, None)
            replacement = NewTrade(name, cid, qty, px, t, now, note=new_note, replaces=trade_id)
            return self.add_trades([replacement])[0]

    def _book_of(
        self,
        conn: db.Conn,
        name: str,
        contract_ids: np.ndarray,
        quantities: np.ndarray,
        sort: bool,
    ) -> Book:
        """A ``Book`` of the given contracts and quantities, grouped by underlying, then hedges
        first, expiry, strike and type when ``sort``; in the given order otherwise."""
        urows = underlying_rows(conn)
        reference = next((r["symbol"] for r in urows if r["is_reference"]), None)
        table = self._contract_table(conn)
        at = np.searchsorted(table.ids, contract_ids)
        if len(at) and (at.max() >= len(table.ids) or (table.ids[at] != contract_ids).any()):
            raise StoreError(
                "a trade names a contract the book does not hold; restore it from a backup"
            )
        uids = [r["underlying_id"] for r in urows]
        index_of = np.full(max(uids, default=0) + 1, -1, dtype=np.int64)
        index_of[uids] = np.arange(len(urows))
        uidx = index_of[table.underlying_ids[at]]
        types = table.types[at]
        strikes = table.strikes[at]
        expiries = table.expiries[at]
        if sort and len(at):
            order = np.lexsort(
                (
                    contract_ids,
                    types,
                    np.nan_to_num(strikes, nan=0.0),
                    expiries.astype(np.int64),
                    types != "U",
                    uidx,
                )
            )
        else:
            order = np.arange(len(at))
        at, uidx, types = at[order], uidx[order], types[order]
        return Book(
            name=name,
            underlyings=underlyings_of(urows),
            reference_index=reference,
            contract_ids=contract_ids[order],
            labels=tuple(table.labels[at].tolist()),
            underlying_idx=uidx,
            is_option=types != "U",
            is_call=types == "C",
            american=table.american[at],
            strikes=strikes[order],
            expiries=expiries[order],
            multipliers=table.multipliers[at],
            quantities=quantities[order],
            cash_settled=table.cash_settled[at],
            expiry_dates=table.expiry_dates[at],
        )

    @guard_damage
    def load_book(
        self, book: str | None = None, as_of: datetime | None = None, before_seq: int | None = None
    ) -> Book:
        """Net positions of live trades (all books when ``book`` is None) as at ``as_of``, or as
        the store held them just before its history row ``before_seq`` (a close's ``seq``).

        With ``as_of`` (a clock instant someone gives) a trade counts once it was both dealt and
        booked at or before it, and a cancel from the instant it was entered. With
        ``before_seq`` the store's own order decides, whatever the clocks said: the trades and
        cancels written before that row. Neither means now. Contracts whose trades net to zero
        are left out. Rows are grouped by underlying, then hedges, expiry, strike and type.
        """
        if as_of is not None and before_seq is not None:
            raise ValueError("give as_of or before_seq, not both")
        cancel_at = ""
        params: list[Any] = []
        where = []
        if as_of is not None:
            t = timestamp_text(parse_time(as_of))
            cancel_at = " AND x.cancelled_at <= ?"
            where.append("t.booked_at <= ? AND t.trade_time <= ?")
            params += [t, t, t]
        elif before_seq is not None:
            seq_of = "(SELECT seq FROM history WHERE kind = '{}' AND row_id = {}) < ?"
            cancel_at = " AND " + seq_of.format("cancel", "x.cancel_id")
            where.append(seq_of.format("trade", "t.trade_id"))
            params += [int(before_seq), int(before_seq)]
        where.insert(
            0, f"NOT EXISTS (SELECT 1 FROM trade_cancel x WHERE x.trade_id = t.trade_id{cancel_at})"
        )
        if book is not None:
            where.append("t.book_id = ?")
        with self._read() as conn:
            if book is not None:
                found = book_id(conn, book, create=False)
                if found is None:
                    raise StoreError(
                        f"no book named {book!r} (books: {', '.join(book_names_in(conn))})"
                    )
                params.append(found)
            cols = db.columns(
                conn,
                f"SELECT contract_id, quantity FROM trade t WHERE {' AND '.join(where)}",
                params,
            )
            ids, inverse = np.unique(
                np.array(cols["contract_id"], dtype=np.int64), return_inverse=True
            )
            quantities = np.array(cols["quantity"], dtype=np.int64)
            net = np.bincount(inverse.ravel(), weights=quantities, minlength=len(ids))
            keep = net != 0
            return self._book_of(conn, book or "all books", ids[keep], net[keep], sort=True)

    def last_seq(self) -> int:
        """The newest place in the store's own order of history (0 for an empty book)."""
        with self._read() as conn:
            return int(db.scalar(conn, "SELECT coalesce(max(seq), 0) FROM history"))

    def positions_seq(self) -> tuple[int, int]:
        """(the newest place in history of a trade or cancel, of a close set): while both stay,
        the positions and the close they are measured from stay (intraday marks move neither)."""
        with self._read() as conn:
            trades = db.scalar(
                conn, "SELECT coalesce(max(seq), 0) FROM history WHERE kind IN ('trade', 'cancel')"
            )
            # from the closes (the partial index of dated sets: only closes have a business
            # date), not from every mark set's history row, which a feed adds every second
            closes = db.scalar(
                conn,
                "SELECT coalesce(max((SELECT h.seq FROM history h WHERE h.kind = 'mark_set' "
                "AND h.row_id = s.mark_set_id)), 0) FROM mark_set s "
                "WHERE s.business_date IS NOT NULL AND s.kind = 'close'",
            )
        return int(trades or 0), int(closes or 0)

    def book_version(self) -> tuple[int, ...]:
        """The newest row of each table ``load_book`` reads a book from (trades, cancels,
        contracts, books, underlyings and their corrections). None of them is ever updated or
        deleted (the schema's triggers), so while this stays ``load_book`` reads the same book;
        marks move none of it."""
        with self._read() as conn:
            row = conn.execute(
                "SELECT (SELECT max(trade_id) FROM trade), "
                "(SELECT max(cancel_id) FROM trade_cancel), "
                "(SELECT max(contract_id) FROM contract), (SELECT max(book_id) FROM book), "
                "(SELECT max(underlying_id) FROM underlying), "
                "(SELECT max(correction_id) FROM underlying_correction)"
            ).fetchone()
        return tuple(int(x or 0) for x in row)

    @guard_damage
    def new_trades(
        self, after_seq: int, before_seq: int | None = None, book: str | None = None
    ) -> tuple[Book, np.ndarray]:
        """One ``Book`` row per trade written between the history rows ``after_seq`` and
        ``before_seq`` (None: up to now) and not cancelled before ``before_seq``.

        These are exactly the trades in ``load_book(before_seq=before_seq)`` that are not in
        ``load_book(before_seq=after_seq)``. Returns the rows in the store's order (quantity =
        the trade's) and each trade's price per unit of underlying, float64 (n,).
        """
        hi = 2**63 - 1 if before_seq is None else int(before_seq)
        params: list[Any] = [int(after_seq), hi, hi]
        book_filter = ""
        if book is not None:
            book_filter = "AND b.name = ?"
            params.append(book)
        with self._read() as conn:
            cols = db.columns(
                conn,
                "SELECT t.contract_id, t.quantity, t.price FROM trade t "
                "JOIN book b ON b.book_id = t.book_id "
                "JOIN history h ON h.kind = 'trade' AND h.row_id = t.trade_id "
                "WHERE h.seq > ? AND h.seq < ? AND NOT EXISTS ("
                "SELECT 1 FROM trade_cancel x JOIN history hx ON hx.kind = 'cancel' "
                "AND hx.row_id = x.cancel_id WHERE x.trade_id = t.trade_id AND hx.seq < ?) "
                f"{book_filter} ORDER BY h.seq",
                params,
            )
            result = self._book_of(
                conn,
                book or "all books",
                np.array(cols["contract_id"], dtype=np.int64),
                np.array(cols["quantity"], dtype=np.float64),
                sort=False,
            )
        return result, np.array(cols["price"], dtype=np.float64)

    @guard_damage
    def trades(
        self,
        book: str | None = None,
        since: datetime | None = None,
        until: datetime | None = None,
        live_only: bool = False,
    ) -> list[TradeRecord]:
        """Trades dealt in (``since``, ``until``] (all when None) with state, in order of deal
        time (the trade's own time, as given or the booking terminal's clock), then of the
        store's own order."""
        where = ["TRUE"]
        params: list[Any] = []
        if book is not None:
            where.append("b.name = ?")
            params.append(book)
        if since is not None:
            where.append("t.trade_time > ?")
            params.append(timestamp_text(parse_time(since)))
        if until is not None:
            where.append("t.trade_time <= ?")
            params.append(timestamp_text(parse_time(until)))
        if live_only:
            where.append("x.trade_id IS NULL")
        with self._read() as conn:
            rows = db.rows(
                conn,
                "SELECT t.trade_id, b.name AS book, t.contract_id, u.symbol, c.option_type, "
                "c.expiry, c.strike, c.american, c.multiplier, c.cash_settled, t.quantity, "
                "t.price, t.trade_time, t.booked_at, t.who, t.source, t.note, t.replaces, "
                "r.trade_id AS replaced_by, x.reason AS cancel_reason, x.cancelled_at, "
                "x.who AS cancelled_by, h.seq, hx.seq AS cancel_seq FROM trade t "
                "JOIN book b ON b.book_id = t.book_id "
                "JOIN contract c ON c.contract_id = t.contract_id "
                "JOIN underlying u ON u.underlying_id = c.underlying_id "
                "JOIN history h ON h.kind = 'trade' AND h.row_id = t.trade_id "
                "LEFT JOIN trade_cancel x ON x.trade_id = t.trade_id "
                "LEFT JOIN history hx ON hx.kind = 'cancel' AND hx.row_id = x.cancel_id "
                "LEFT JOIN trade r ON r.replaces = t.trade_id "
                f"WHERE {' AND '.join(where)} ORDER BY t.trade_time, h.seq",
                params,
            )
        return [self._trade_record(r) for r in rows]

    @staticmethod
    def _trade_record(r: db.Row) -> TradeRecord:
        """The record of a row of ``trades()``'s query, its state read off its cancel."""
        if r["cancelled_at"] is None:
            state = "live"
        else:
            state = "amended" if r["replaced_by"] is not None else "cancelled"
        return TradeRecord(
            trade_id=r["trade_id"],
            book=r["book"],
            contract_id=r["contract_id"],
            contract=contract_label(r["symbol"], r["option_type"], r["expiry"], r["strike"]),
            symbol=r["symbol"],
            option_type=r["option_type"],
            expiry=date.fromisoformat(r["expiry"]) if r["expiry"] else None,
            strike=r["strike"],
            american=bool(r["american"]),
            multiplier=r["multiplier"],
            cash_settled=bool(r["cash_settled"]),
            quantity=r["quantity"],
            price=r["price"],
            trade_time=from_timestamp(r["trade_time"]),
            booked_at=from_timestamp(r["booked_at"]),
            who=r["who"],
            source=r["source"],
            note=r["note"],
            state=state,
            replaces=r["replaces"],
            replaced_by=r["replaced_by"],
            cancel_reason=r["cancel_reason"],
            cancelled_at=from_timestamp(r["cancelled_at"]) if r["cancelled_at"] else None,
            cancelled_by=r["cancelled_by"],
            seq=r["seq"],
            cancel_seq=r["cancel_seq"],
        )
