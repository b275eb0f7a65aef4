"""CSV imports: a trade file or a mark file, each one transaction, all rows or none.

Every row is checked before anything is written, and problems name the line and column; a file
whose content was imported before is refused, so a killed import can simply be run again.
"""

from __future__ import annotations

import functools
import os
from collections.abc import Callable
from datetime import datetime
from pathlib import Path
from typing import Any, TypeVar, cast

from blotter.logs import IMPORTS, logger
from blotter.store import db
from blotter.store.contracts import resolve_contracts
from blotter.store.csv_io import (
    MARK_COLUMNS,
    MARK_INFO_COLUMNS,
    MARK_REQUIRED,
    TRADE_COLUMNS,
    TRADE_INFO_COLUMNS,
    TRADE_REQUIRED,
    TradeLine,
    cell,
    parse_mark_row,
    parse_trade_row,
    read_csv,
    trade_id_problems,
)
from blotter.store.errors import Problem, StoreError, raise_if
from blotter.store.marks import Marks, write_mark_set
from blotter.store.records import ImportReport, NewTrade, StoredPoint
from blotter.store.reference import book_names_in, known_book_id, underlying_rows
from blotter.store.times import timestamp_text
from blotter.store.trades import Trades

PROGRESS_EVERY = 1000
"""An import calls its ``progress`` callback after this many rows are written."""

NEW_BOOKS_HINT = "import with --new-books to start new books"
"""How to let an import start books, said when a row names one the file does not have."""

log = logger(IMPORTS)

ImportMethod = TypeVar("ImportMethod", bound=Callable[..., ImportReport])


def _logged(kind: str, ids: str) -> Callable[[ImportMethod], ImportMethod]:
    """Log each import of ``kind`` (trade or mark): refused as a warning with the store's words
    (every problem it names), imported as info with the ``ids`` (what they number) it wrote."""

    def wrap(method: ImportMethod) -> ImportMethod:
        @functools.wraps(method)
        def logged(self: Any, path: str | os.PathLike[str], *args: Any, **kwargs: Any) -> Any:
            try:
                rep = method(self, path, *args, **kwargs)
            except StoreError as exc:
                log.warning("%s import of %s refused: %s", kind, Path(path).name, exc)
                raise
            log.info(
                "%s import %d of %s: %d rows written (%s %d-%d)",
                kind, rep.import_id, rep.path.name, rep.rows, ids, rep.first_id, rep.last_id,
            )
            return rep

        return cast(ImportMethod, logged)

    return wrap


def _known_trade_problems(conn: db.Conn, first_line: dict[int, int]) -> list[Problem]:
    """A row naming a trade already in this book is that trade again (an export of it), and
    importing it would double the position: one problem per such row."""
    problems: list[Problem] = []
    ids = sorted(first_line)
    for start in range(0, len(ids), 500):
        chunk = ids[start : start + 500]
        found = conn.execute(
            f"SELECT trade_id FROM trade WHERE trade_id IN ({','.join('?' * len(chunk))})", chunk
        )
        for (tid,) in found:
            problems.append(
                Problem(
                    first_line[tid],
                    "trade_id",
                    f"trade {tid} is already in this book (the row is an export of it; "
                    "importing it again would double the position). To book the rows as "
                    "new trades, leave the trade_id column out",
                )
            )
    return problems


def _trade_id_problems(
    conn: db.Conn, rows: list[tuple[int, dict[str, str]]]
) -> list[Problem]:
    """Problems of the ``trade_id`` cells, from the file and from the book, in line order."""
    problems, first_line = trade_id_problems(rows)
    problems += _known_trade_problems(conn, first_line)
    return sorted(problems, key=lambda q: q.line)


def _check_not_imported(conn: db.Conn, kind: str, digest: str, p: Path) -> None:
    """Refuse a file whose content (``digest``) was imported as ``kind`` before."""
    row = db.one(
        conn,
        "SELECT import_id, file_name, imported_at, who FROM import_file "
        "WHERE kind = ? AND sha256 = ?",
        (kind, digest),
    )
    if row:
        raise StoreError(
            f"{p.name}: nothing imported; the same content was already imported "
            f"as import {row['import_id']} ({row['file_name']}, at {row['imported_at']} by "
            f"{row['who']})"
        )


class Imports(Trades, Marks):
    """Trade and mark CSV files imported whole."""

    @_logged("trade", "trades")
    def import_trades_csv(
        self,
        path: str | os.PathLike[str],
        progress: Callable[[int], None] | None = None,
        *,
        new_books: bool = False,
    ) -> ImportReport:
        """Import a trade CSV (``TRADE_COLUMNS``) as one transaction: all rows or none.

        Every row is checked before anything is written; problems name the line and column
        (up to ``MAX_PROBLEMS`` at once). A file already imported (same content) is refused.
        A row's book must exist unless ``new_books`` (then the file may start new books).
        ``progress(rows_written)`` is called every ``PROGRESS_EVERY`` rows.
        """
        p, digest, rows = read_csv(path, TRADE_COLUMNS + TRADE_INFO_COLUMNS, TRADE_REQUIRED)
        with self._read() as conn:
            unders = {r["symbol"]: r for r in underlying_rows(conn)}
            _check_not_imported(conn, "trades", digest, p)  # the clearer message first
            problems = _trade_id_problems(conn, rows)
            books = book_names_in(conn)
        if not new_books:
            known = set(books)
            for line, rec in rows:
                name = cell(rec, "book")
                if name and name not in known:
                    problems.append(
                        Problem(
                            line,
                            "book",
                            f"no book named {name!r} (books: "
                            f"{', '.join(books) if books else 'none yet'}); {NEW_BOOKS_HINT}",
                        )
                    )
        parsed: list[TradeLine] = []
        now = self.now()
        for line, rec in rows:
            item = parse_trade_row(line, rec, unders, now, problems)
            if item is not None:
                parsed.append(item)
        problems.sort(key=lambda q: q.line)
        raise_if(p, problems)
        if not parsed:
            raise StoreError(f"{p.name}: nothing imported; the file has no trade rows")
        with self._write() as conn:
            _check_not_imported(conn, "trades", digest, p)
            raise_if(p, _trade_id_problems(conn, rows))  # again, under the write lock
            ids = self._write_trade_lines(conn, parsed, now, f"file:{p.name}", new_books, progress)
            import_id = self._record_import(conn, "trades", p, digest, len(ids), ids[0], ids[-1])
        return ImportReport(
            path=p,
            kind="trades",
            rows=len(ids),
            import_id=import_id,
            first_id=ids[0],
            last_id=ids[-1],
        )

    def _write_trade_lines(
        self,
        conn: db.Conn,
        parsed: list[TradeLine],
        booked: datetime,
        source: str,
        new_books: bool,
        progress: Callable[[int], None] | None,
    ) -> list[int]:
        """Book checked rows (their books started first when ``new_books``) in chunks of
        ``PROGRESS_EVERY``, calling ``progress`` after each whole chunk."""
        cids = resolve_contracts(conn, [t.contract for t in parsed])
        for name in dict.fromkeys(t.book for t in parsed):
            known_book_id(conn, name, new_books, NEW_BOOKS_HINT)
        ids: list[int] = []
        for start in range(0, len(parsed), PROGRESS_EVERY):
            chunk = [
                NewTrade(
                    t.book,
                    cid,
                    t.quantity,
                    t.price,
                    t.trade_time,
                    booked,
                    source=source,
                    note=t.note,
                )
                for t, cid in zip(
                    parsed[start : start + PROGRESS_EVERY],
                    cids[start : start + PROGRESS_EVERY],
                    strict=True,
                )
            ]
            ids += self.add_trades(chunk)
            if progress is not None and len(ids) % PROGRESS_EVERY == 0:
                progress(len(ids))
        return ids

    @_logged("mark", "mark set")
    def import_marks_csv(
        self, path: str | os.PathLike[str], progress: Callable[[int], None] | None = None
    ) -> ImportReport:
        """Import a mark CSV (``MARK_COLUMNS``) as one intraday mark set: all points or none."""
        p, digest, rows = read_csv(path, MARK_COLUMNS + MARK_INFO_COLUMNS, MARK_REQUIRED)
        with self._read() as conn:
            unders = {r["symbol"]: r["underlying_id"] for r in underlying_rows(conn)}
        problems: list[Problem] = []
        points: list[StoredPoint] = []
        seen: dict[tuple[Any, ...], int] = {}
        for line, rec in rows:
            point = parse_mark_row(line, rec, unders, problems)
            if point is None:
                continue
            key = point[:6]
            if key in seen:
                problems.append(Problem(line, "", f"the same point as line {seen[key]}"))
                continue
            seen[key] = line
            points.append(point)
        raise_if(p, problems)
        if not points:
            raise StoreError(f"{p.name}: nothing imported; the file has no mark rows")
        with self._write() as conn:
            _check_not_imported(conn, "marks", digest, p)
            set_id, _ = write_mark_set(
                conn,
                "intraday",
                points,
                marked_at=self.now(),
                who=self.who,
                note=f"import of {p.name}",
                source=f"file:{p.name}",
                progress=progress,
            )
            import_id = self._record_import(conn, "marks", p, digest, len(points), set_id, set_id)
        return ImportReport(
            path=p,
            kind="marks",
            rows=len(points),
            import_id=import_id,
            first_id=set_id,
            last_id=set_id,
        )

    def _record_import(
        self,
        conn: db.Conn,
        kind: str,
        p: Path,
        digest: str,
        rows: int,
        first: int,
        last: int,
    ) -> int:
        """Record the import of ``p`` (its rows and first and last id written); returns its id."""
        cur = conn.execute(
            "INSERT INTO import_file (kind, file_name, sha256, rows, imported_at, who, first_id, "
            "last_id) VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
            (kind, p.name, digest, rows, timestamp_text(self.now()), self.who, first, last),
        )
        return int(cur.lastrowid or 0)
