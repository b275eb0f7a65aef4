"""Marks: points logged one by one or in sets, the close sets a desk writes once a business date
(and their corrections), and the market they make.

A mark set is written whole in one transaction (``mark_count`` and a trigger keep it whole). The
marks in force are the latest value of each point across every set but corrections; a close set
copies the marks in force when it is written, so any earlier close can be recalled exactly. Each
point keeps when it was observed: a logged or imported point when its set was marked, a close's
copy the time the point it copies was last marked, so a close never re-dates a carried mark.
"""

from __future__ import annotations

import os
import threading
from collections.abc import Callable, Sequence
from datetime import date, datetime
from pathlib import Path

import numpy as np

from blotter.arrays import read_only
from blotter.market import Market, RateCurve, VolSurface
from blotter.store import db
from blotter.store.checks import check_id, check_mark_point
from blotter.store.core import guard_damage
from blotter.store.errors import StoreError
from blotter.store.records import MarkPoint, MarkRecord, MarkSetInfo, StoredPoint
from blotter.store.reference import ReferenceData, underlying_ids, underlying_terms
from blotter.store.times import (
    EPOCH,
    business_date,
    from_timestamp,
    is_iso_date,
    parse_date,
    parse_time,
    timestamp_text,
)

POINT_COLUMNS = ("kind", "underlying_id", "currency", "expiry", "strike", "tenor_days", "value")
"""Columns of a mark point as stored (the underlying by its id)."""

MARK_ROW_COLUMNS = ("mark_set_id", "seq", *POINT_COLUMNS, "observed_at")
"""Columns of a mark's row, as the store writes them (ids are SQLite's)."""

INSERT_CHUNK = 1000
"""Points written between two calls of a mark set's ``progress`` callback."""

_ROW_COLUMNS = """m.mark_id, m.mark_set_id, m.kind, m.underlying_id, m.currency, m.expiry,
    m.strike, m.tenor_days, m.value, m.observed_at, ms.kind AS set_kind,
    ms.marked_at AS set_marked_at, ms.who AS set_who"""
"""A mark's columns as the readers take them, with its set's kind, time and writer (``ms``)."""

_IN_FORCE_SQL = f"""
    SELECT {_ROW_COLUMNS}
    FROM mark m JOIN (
        SELECT max(m2.mark_id) AS mark_id FROM mark m2
        JOIN mark_set s ON s.mark_set_id = m2.mark_set_id
        {{where}}
        GROUP BY m2.kind, m2.underlying_id, m2.currency, m2.expiry, m2.strike, m2.tenor_days
    ) latest ON latest.mark_id = m.mark_id
    JOIN mark_set ms ON ms.mark_set_id = m.mark_set_id
    ORDER BY m.kind, m.underlying_id, m.currency, m.expiry, m.strike, m.tenor_days
"""

_IN_FORCE_WHERE = "WHERE s.corrects IS NULL"
"""Sets that make the marks in force: every set but corrections. A correction holds its close's
points overlaid with points logged since, all of which are in force by their own rows (or,
for an older close, superseded by later marks), so leaving it out changes nothing for the
latest close and keeps a correction of an older day from rolling today's marks back."""

_NEWER_SQL = f"""
    SELECT {_ROW_COLUMNS}
    FROM mark m JOIN mark_set ms ON ms.mark_set_id = m.mark_set_id
    JOIN mark_set s ON s.mark_set_id = m.mark_set_id
    {_IN_FORCE_WHERE} AND m.mark_id > ?
    ORDER BY m.mark_id
"""
"""The marks of the sets that make the marks in force (``_IN_FORCE_WHERE`` on the set ``s``)
written after a mark id, oldest first."""

_MARK_AT_SQL = """
    SELECT m.mark_id, m.mark_set_id, m.kind, m.underlying_id, m.currency, m.expiry, m.strike,
           m.tenor_days, m.value, m.observed_at, ms.marked_at, ms.corrects, h.seq
    FROM mark m JOIN mark_set ms ON ms.mark_set_id = m.mark_set_id
    JOIN history h ON h.kind = 'mark_set' AND h.row_id = ms.mark_set_id
    WHERE m.mark_id = ?
"""
"""One mark with its set's time and place in history: what tells a cached read that the newest
mark it read is still there, the same row."""

_PointKey = tuple[str, int | None, str | None, str | None, float | None, int | None]


def _point_key(row: db.Row) -> _PointKey:
    """The point a mark row marks (the columns the marks in force are grouped by)."""
    return (
        row["kind"],
        row["underlying_id"],
        row["currency"],
        row["expiry"],
        row["strike"],
        row["tenor_days"],
    )


def _sql_order(key: _PointKey) -> tuple[tuple[int, object], ...]:
    """``key`` as SQLite orders it (NULL before any value; text by UTF-8 bytes, which Python's
    code-point order of ``str`` matches)."""
    return tuple((0, 0) if v is None else (1, v) for v in key)


class InForceMarks:
    """The marks in force as last read from one book file, and the newest mark it held then, so
    the next read takes only the marks written since and merges them by point.

    Mark ids follow commit order (one writer at a time, and nothing deletes a mark), so the
    rows after the newest id read are exactly the commits since; the latest id of a point
    wins, as the full read's ``GROUP BY`` has it. It starts again from a full read whenever it
    could be wrong: another file at the path (device, inode), another schema version, or the
    newest mark it read missing or different (the file replaced by a copy, a rolled-back
    write). Thread-safe; one may serve several ``Store`` objects of the same path in turn.
    """

    def __init__(self) -> None:
        self._lock = threading.Lock()
        self._file: tuple[int, int, int] | None = None
        self._newest: tuple[int, tuple[object, ...] | None] | None = None
        self._points: dict[_PointKey, int] = {}  # each point's place in _ordered
        self._ordered: list[db.Row] = []
        self.full_reads = 0
        """Reads that started from nothing (the first and each reset), for tests and bench."""

    def rows(self, conn: db.Conn, path: Path | str) -> list[db.Row]:
        """The marks in force on ``conn`` (a read transaction of the book at ``path`` is open),
        ordered as ``_IN_FORCE_SQL`` orders them; equal to that query's rows. A database book
        (``path`` a URL) is read whole each time: only a file is read on from the last read."""
        file: tuple[int, int, int] | None = None
        if isinstance(path, Path):
            try:
                st = os.stat(path)
                file = (st.st_dev, st.st_ino, int(db.scalar(conn, "PRAGMA user_version")))
            except OSError:
                file = None
        newest = int(db.scalar(conn, "SELECT coalesce(max(mark_id), 0) FROM mark"))
        with self._lock:
            after = self._read_on_from(conn, file, newest)
            if after is None:
                self._ordered = db.rows(conn, _IN_FORCE_SQL.format(where=_IN_FORCE_WHERE))
                self._points = {_point_key(row): i for i, row in enumerate(self._ordered)}
                self.full_reads += 1
            else:
                self._merge(db.rows(conn, _NEWER_SQL, (after,)))
            self._file = file
            self._newest = (newest, _mark_at(conn, newest))
            return list(self._ordered)

    def _merge(self, new: list[db.Row]) -> None:
        """Take ``new`` rows (oldest first) into the marks in force: a point marked before keeps
        its place in the order, a new point sorts the rows again."""
        fresh: dict[_PointKey, db.Row] = {}
        for row in new:
            key = _point_key(row)
            at = self._points.get(key)
            if at is None:
                fresh[key] = row
            else:
                self._ordered[at] = row
        if fresh:
            self._ordered = sorted(
                [*self._ordered, *fresh.values()], key=lambda r: _sql_order(_point_key(r))
            )
            self._points = {_point_key(row): i for i, row in enumerate(self._ordered)}

    def _read_on_from(
        self, conn: db.Conn, file: tuple[int, int, int] | None, newest: int
    ) -> int | None:
        """The mark id to read on from: the newest read last time, while the file is the same
        and that mark is still the same row; else None (read everything again)."""
        if file is None or file != self._file or self._newest is None:
            return None
        last, row = self._newest
        if newest < last or _mark_at(conn, last) != row:
            return None
        return last


def _mark_at(conn: db.Conn, mark_id: int) -> tuple[object, ...] | None:
    """The mark ``mark_id`` with its set's time and place in history (None when absent)."""
    row = db.one(conn, _MARK_AT_SQL, (mark_id,))
    return None if row is None else tuple(row)


def write_mark_set(
    conn: db.Conn,
    kind: str,
    points: Sequence[StoredPoint],
    *,
    marked_at: datetime,
    who: str,
    note: str = "",
    source: str = "typed",
    corrects: int | None = None,
    day: date | None = None,
    progress: Callable[[int], None] | None = None,
    observed: Sequence[str] | None = None,
) -> tuple[int, int]:
    """Write one mark set of ``points`` (checked already) in the transaction ``conn`` has open;
    returns (set id, id of its last mark). ``observed`` is each point's observation instant as
    stored (a close's copies keep theirs); None observes every point at ``marked_at``.
    ``progress(points_written)`` is called between chunks of ``INSERT_CHUNK`` points."""
    at = timestamp_text(marked_at)
    if observed is not None and len(observed) != len(points):
        raise StoreError("a mark set needs one observation time per point")
    cur = conn.execute(
        "INSERT INTO mark_set (kind, marked_at, who, note, source, corrects, mark_count, "
        "business_date) VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
        (
            kind,
            at,
            who,
            note,
            source,
            corrects,
            len(points),
            day.isoformat() if day else None,
        ),
    )
    set_id = int(cur.lastrowid or 0)
    for start in range(0, len(points), INSERT_CHUNK):
        chunk = points[start : start + INSERT_CHUNK]
        rows = [
            (set_id, start + j + 1, *p, at if observed is None else observed[start + j])
            for j, p in enumerate(chunk)
        ]
        db.insert_rows(conn, "mark", MARK_ROW_COLUMNS, rows)
        if progress is not None and start + len(chunk) < len(points):
            progress(start + len(chunk))
    last = db.scalar(conn, "SELECT max(mark_id) FROM mark WHERE mark_set_id = ?", (set_id,))
    return set_id, int(last or 0)


class Marks(ReferenceData):
    """The marks of a book: logged points, mark sets, closes and the market they make."""

    # ---- writing marks

    def add_mark_set(
        self,
        kind: str,
        points: Sequence[MarkPoint],
        *,
        note: str = "",
        source: str = "typed",
        marked_at: datetime | None = None,
        who: str | None = None,
    ) -> int:
        """Write ``points`` as one mark set of ``kind`` ('intraday' or 'close') and return its id.

        Every point is checked first, then written whole or not at all. A close set closes the
        business date of ``marked_at`` (a date closes once; a correction goes through
        ``commit_close``). ``marked_at`` and ``who`` default to now and the OS user (a
        generated book sets them).
        """
        return self._write_points(kind, points, note, source, marked_at, who)[0]

    def _write_points(
        self,
        kind: str,
        points: Sequence[MarkPoint],
        note: str | None,
        source: str,
        marked_at: datetime | None,
        who: str | None,
    ) -> tuple[int, int]:
        """Check ``points``, then write them as one set; returns (set id, its last mark's id)."""
        if kind not in ("close", "intraday"):
            raise StoreError(f"mark set kind must be 'close' or 'intraday', got {kind!r}")
        if not points:
            raise StoreError("a mark set holds at least one point")
        checked = [
            (
                p.kind,
                p.symbol,
                *check_mark_point(
                    p.kind,
                    p.symbol is not None,
                    p.currency,
                    p.expiry,
                    p.strike,
                    p.tenor_days,
                    p.value,
                ),
            )
            for p in points
        ]
        with self._write() as conn:
            when = marked_at or self.now()
            day = business_date(when, self.desk_tz) if kind == "close" else None
            if day is not None:
                self._refuse_second_close(conn, day)
            ids = underlying_ids(conn) if len(checked) > 1 else {}
            stored: list[StoredPoint] = []
            for k, symbol, ccy, expiry, strike, tenor, value in checked:
                uid = None
                if symbol is not None:
                    uid = ids.get(symbol) or int(underlying_terms(conn, symbol)["underlying_id"])
                stored.append((k, uid, ccy, expiry, strike, tenor, value))
            return write_mark_set(
                conn,
                kind,
                stored,
                marked_at=when,
                who=who or self.who,
                note=note or "",
                source=source,
                day=day,
            )

    def log_spot(self, symbol: str, price: float, note: str | None = None) -> int:
        """Log a spot mark (price per unit, within ``limits.LEVEL``) as its own intraday set;
        returns the mark id."""
        return self._log(MarkPoint("spot", price, symbol=symbol), note)

    def log_vol(
        self,
        symbol: str,
        expiry: date | str,
        vol: float,
        strike: float | None = None,
        note: str | None = None,
    ) -> int:
        """Log an implied vol (decimal, 0 < vol <= 10) at an expiry and strike (None = ATM)."""
        return self._log(MarkPoint("vol", vol, symbol=symbol, expiry=expiry, strike=strike), note)

    def log_rate(self, currency: str, tenor_days: int, rate: float, note: str | None = None) -> int:
        """Log a continuously compounded zero rate (decimal) of ``currency`` at ``tenor_days``."""
        return self._log(MarkPoint("rate", rate, currency=currency, tenor_days=tenor_days), note)

    def log_div_yield(self, symbol: str, q: float, note: str | None = None) -> int:
        """Log a dividend yield (decimal; foreign rate for fx), overriding the default."""
        return self._log(MarkPoint("div_yield", q, symbol=symbol), note)

    def _log(self, point: MarkPoint, note: str | None) -> int:
        """One point as its own intraday set; returns its mark id."""
        return self._write_points("intraday", [point], note, "typed", None, None)[1]

    # ---- reading marks

    @property
    def marks_cache(self) -> InForceMarks:
        """The marks in force as this store last read them (``InForceMarks``); a caller that
        opens a store per read of the same book may hand one store's to the next."""
        cache = self.__dict__.get("_marks_cache")
        if cache is None:
            cache = self.__dict__["_marks_cache"] = InForceMarks()
        return cache

    @marks_cache.setter
    def marks_cache(self, cache: InForceMarks) -> None:
        self.__dict__["_marks_cache"] = cache

    def _mark_rows(
        self, conn: db.Conn, mark_set_id: int | None, as_of: datetime | None
    ) -> list[db.Row]:
        """The points of set ``mark_set_id``, or those in force (at ``as_of`` or now): the marks
        in force now through ``marks_cache`` unless a write of this thread is open (its rows
        may yet be rolled back)."""
        if mark_set_id is not None:
            mark_set_id = check_id(mark_set_id, "mark set id")
            if db.one(conn, "SELECT 1 FROM mark_set WHERE mark_set_id = ?", (mark_set_id,)) is None:
                raise StoreError(f"no mark set {mark_set_id}")
            return db.rows(
                conn,
                f"SELECT {_ROW_COLUMNS} FROM mark m JOIN mark_set ms "
                "ON ms.mark_set_id = m.mark_set_id WHERE m.mark_set_id = ? ORDER BY m.seq",
                (mark_set_id,),
            )
        if as_of is None:
            if getattr(self._local, "writing", False):
                return db.rows(conn, _IN_FORCE_SQL.format(where=_IN_FORCE_WHERE))
            return self.marks_cache.rows(conn, self.path)
        return db.rows(
            conn,
            _IN_FORCE_SQL.format(where=_IN_FORCE_WHERE + " AND s.marked_at <= ?"),
            (timestamp_text(parse_time(as_of)),),
        )

    @guard_damage
    def load_market(self, mark_set_id: int | None = None, as_of: datetime | None = None) -> Market:
        """The marks in force (latest value of each point across sets, at ``as_of`` or now), or
        exactly the set ``mark_set_id`` as recorded.

        ``version`` is the newest mark id used (0 when there are none), ``marks_as_of`` the
        newest set's time (1970-01-01 UTC when there are none).
        """
        if mark_set_id is not None and as_of is not None:
            raise ValueError("give mark_set_id or as_of, not both")
        with self._read() as conn:
            rows = self._mark_rows(conn, mark_set_id, as_of)
            symbols = dict(conn.execute("SELECT underlying_id, symbol FROM underlying").fetchall())
        sets = {r["mark_set_id"]: (r["set_kind"], r["set_marked_at"]) for r in rows}
        set_ids = sorted(sets)
        spots: dict[str, float] = {}
        divs: dict[str, float] = {}
        vols: dict[str, list[tuple[str, float, float]]] = {}
        rates: dict[str, list[tuple[int, float]]] = {}
        spot_seen: dict[str, np.datetime64] = {}
        spot_day: set[str] = set()
        for r in rows:
            kind, value = r["kind"], r["value"]
            if kind == "spot":
                spots[symbols[r["underlying_id"]]] = value
                seen = np.datetime64(r["observed_at"].rstrip("Z"), "us")
                spot_seen[symbols[r["underlying_id"]]] = seen
                if r["set_kind"] == "intraday":
                    spot_day.add(symbols[r["underlying_id"]])
            elif kind == "div_yield":
                divs[symbols[r["underlying_id"]]] = value
            elif kind == "vol":
                strike = np.nan if r["strike"] is None else r["strike"]
                vols.setdefault(symbols[r["underlying_id"]], []).append(
                    (r["expiry"], strike, value)
                )
            else:
                rates.setdefault(r["currency"], []).append((r["tenor_days"], value))
        surfaces = {}
        for sym, pts in vols.items():
            pts.sort(key=lambda p: (p[0], -np.inf if np.isnan(p[1]) else p[1]))
            surfaces[sym] = VolSurface(
                expiries=np.array([p[0] for p in pts], dtype="datetime64[D]"),
                strikes=np.array([p[1] for p in pts], dtype=np.float64),
                vols=np.array([p[2] for p in pts], dtype=np.float64),
                atm_strike=spots.get(sym, np.nan),
            )
        curves = {
            ccy: RateCurve(
                tenor_days=np.array([p[0] for p in pts], dtype=np.float64),
                zero_rates=np.array([p[1] for p in pts], dtype=np.float64),
            )
            for ccy, pts in rates.items()
        }
        observed = read_only(
            np.array([r["observed_at"].rstrip("Z") for r in rows], dtype="datetime64[us]")
        )
        version = max((r["mark_id"] for r in rows), default=0)
        newest = max((marked_at for _, marked_at in sets.values()), default=None)
        if mark_set_id is not None:
            set_id = int(mark_set_id)
            kind = sets[set_id][0] if set_ids else "intraday"
        elif len(set_ids) == 1:
            set_id, kind = set_ids[0], sets[set_ids[0]][0]
        else:
            set_id, kind = None, "intraday"
        return Market(
            version=int(version),
            marks_as_of=from_timestamp(newest) if newest else EPOCH,
            spots=spots,
            surfaces=surfaces,
            curves=curves,
            div_yields=divs,
            mark_set_id=set_id,
            mark_kind=kind,
            observed_at=observed,
            spot_observed=spot_seen,
            spot_intraday=frozenset(spot_day),
        )

    @guard_damage
    def marks(
        self, mark_set_id: int | None = None, as_of: datetime | None = None
    ) -> list[MarkRecord]:
        """Mark points: those in force (at ``as_of`` or now), or exactly the set ``mark_set_id``."""
        with self._read() as conn:
            rows = self._mark_rows(conn, mark_set_id, as_of)
            symbols = dict(conn.execute("SELECT underlying_id, symbol FROM underlying").fetchall())
        return [
            MarkRecord(
                mark_id=r["mark_id"],
                mark_set_id=r["mark_set_id"],
                set_kind=r["set_kind"],
                marked_at=from_timestamp(r["set_marked_at"]),
                who=r["set_who"],
                kind=r["kind"],
                symbol=symbols.get(r["underlying_id"]) if r["underlying_id"] is not None else None,
                currency=r["currency"],
                expiry=date.fromisoformat(r["expiry"]) if r["expiry"] else None,
                strike=r["strike"],
                tenor_days=r["tenor_days"],
                value=r["value"],
                observed_at=from_timestamp(r["observed_at"]),
            )
            for r in rows
        ]

    # ---- closes

    def commit_close(
        self,
        note: str | None = None,
        corrects: int | str | date | None = None,
        marked_at: datetime | None = None,
        who: str | None = None,
        source: str = "close",
    ) -> int:
        """Write the marks in force now as one immutable close set; returns its id.

        Each point is copied with the time it was last marked (never the close's time).

        The set closes the business date of ``marked_at`` (``business_date``); a date closes
        once, and a second close for it is refused unless it is a correction. ``corrects`` names
        the close it replaces (it stays on record), by set id or by business date (the close in
        force for that date); the correction closes the same date and holds that set's own points
        overlaid with the intraday points logged since the newest close set (log the fixed
        points, then commit the correction). Corrections are left out of the marks in force, so
        correcting an older day leaves today's marks as they are. ``marked_at`` and ``who``
        default to now and the OS user (the demo sets them). ``commit_close_info`` takes the same
        arguments and returns the set's record.
        """
        return self.commit_close_info(note, corrects, marked_at, who, source).id

    def commit_close_info(
        self,
        note: str | None = None,
        corrects: int | str | date | None = None,
        marked_at: datetime | None = None,
        who: str | None = None,
        source: str = "close",
    ) -> MarkSetInfo:
        """As ``commit_close``, returning the record of the set written (its id, time and mark
        count as committed), read in the same transaction so no later commit can be mistaken
        for it."""
        when = marked_at or self.now()
        with self._write() as conn:
            if corrects is not None:
                corrects, day = self._close_to_correct(conn, corrects)
                # the corrected set's own points, overlaid with the intraday points logged since
                # the newest close (the fixes): never the marks other closes copied
                since = db.scalar(
                    conn, "SELECT max(mark_set_id) FROM mark_set WHERE kind = 'close'"
                )
                rows = db.rows(
                    conn,
                    _IN_FORCE_SQL.format(
                        where="WHERE s.mark_set_id = ? OR (s.kind = 'intraday' "
                        "AND s.mark_set_id > ?)"
                    ),
                    (int(corrects), int(since)),
                )
            else:
                day = business_date(when, self.desk_tz)
                self._refuse_second_close(conn, day)
                rows = db.rows(conn, _IN_FORCE_SQL.format(where=_IN_FORCE_WHERE))
            if not rows:
                raise StoreError("there are no marks to commit as a close")
            points: list[StoredPoint] = [
                (
                    r["kind"],
                    r["underlying_id"],
                    r["currency"],
                    r["expiry"],
                    r["strike"],
                    r["tenor_days"],
                    r["value"],
                )
                for r in rows
            ]
            set_id, _ = write_mark_set(
                conn,
                "close",
                points,
                marked_at=when,
                who=who or self.who,
                note=note or "",
                source=source,
                corrects=corrects,
                day=day,
                observed=[r["observed_at"] for r in rows],
            )
            row = db.one(
                conn,
                "SELECT kind, marked_at, who, note, corrects, source, mark_count, business_date, "
                "(SELECT seq FROM history WHERE kind = 'mark_set' AND row_id = mark_set_id) "
                "AS seq FROM mark_set WHERE mark_set_id = ?",
                (set_id,),
            )
        assert row is not None
        return MarkSetInfo(
            id=set_id,
            kind=row["kind"],
            marked_at=from_timestamp(row["marked_at"]),
            who=row["who"],
            note=row["note"],
            corrects=row["corrects"],
            source=row["source"],
            marks=row["mark_count"],
            business_date=date.fromisoformat(row["business_date"]),
            seq=row["seq"],
        )

    def todays_close(self) -> tuple[date, int | None]:
        """(the business date a close written now closes, the id of the close in force for it
        or None), so a review can say whether a close now is the day's first or a correction."""
        day = business_date(self.now(), self.desk_tz)
        with self._read() as conn:
            found = self._close_in_force(conn, day)
        return day, None if found is None else found["mark_set_id"]

    @staticmethod
    def _close_in_force(conn: db.Conn, day: date) -> db.Row | None:
        """(mark_set_id, marked_at, who) of the close in force for business date ``day``: the
        newest set of that date that no correction replaces; None when the date has no close."""
        return db.one(
            conn,
            "SELECT s.mark_set_id, s.marked_at, s.who FROM mark_set s WHERE s.kind = 'close' "
            "AND s.business_date = ? AND NOT EXISTS (SELECT 1 FROM mark_set c "
            "WHERE c.corrects = s.mark_set_id) ORDER BY s.mark_set_id DESC LIMIT 1",
            (day.isoformat(),),
        )

    def _refuse_second_close(self, conn: db.Conn, day: date) -> None:
        """Refuse a close (not a correction) of ``day`` when the date has one already."""
        taken = self._close_in_force(conn, day)
        if taken is not None:
            set_id = taken["mark_set_id"]
            raise StoreError(
                f"the close of {day} is already written (set {set_id}, {taken['marked_at']} "
                f"by {taken['who']}): a date closes once. To change it, log the fixed "
                f"marks and write a correction (mark close --corrects {set_id})"
            )

    def _close_to_correct(
        self, conn: db.Conn, ref: int | str | date
    ) -> tuple[int, date]:
        """(id, business date) of the close a correction names: a set id, or a business date
        (ISO text or ``date``) meaning the close in force for that date."""
        text = ref.isoformat() if isinstance(ref, date) else str(ref).strip()
        if is_iso_date(text):
            day = parse_date(text)
            found = self._close_in_force(conn, day)
            if found is None:
                raise StoreError(f"no close for {day}: there is nothing to correct")
            return int(found["mark_set_id"]), day
        try:
            set_id = int(text)
        except ValueError:
            raise StoreError(
                f"{ref!r} names no close: give a close set id or a business date like 2026-12-03"
            ) from None
        set_id = check_id(set_id, "the id of the close set corrected")
        row = db.one(
            conn, "SELECT kind, business_date FROM mark_set WHERE mark_set_id = ?", (set_id,)
        )
        if row is None or row["kind"] != "close":
            raise StoreError(f"mark set {set_id} is not a close set")
        done = db.one(conn, "SELECT mark_set_id FROM mark_set WHERE corrects = ?", (set_id,))
        if done:
            raise StoreError(
                f"close set {set_id} was already corrected by set {done['mark_set_id']}: correct "
                f"set {done['mark_set_id']} (or name the date, --corrects {row['business_date']})"
            )
        return set_id, date.fromisoformat(row["business_date"])

    @guard_damage
    def mark_sets(self, kind: str | None = None) -> list[MarkSetInfo]:
        """Mark sets in the store's order (only ``kind`` 'close' or 'intraday' when given)."""
        if kind is not None and kind not in ("close", "intraday"):
            raise StoreError(f"mark set kind must be 'close' or 'intraday', got {kind!r}")
        with self._read() as conn:
            rows = db.rows(
                conn,
                "SELECT s.mark_set_id, s.kind, s.marked_at, s.who, s.note, s.corrects, s.source, "
                "s.mark_count, (SELECT c.mark_set_id FROM mark_set c WHERE c.corrects = "
                "s.mark_set_id) AS superseded_by, s.business_date, h.seq "
                "FROM mark_set s JOIN history h ON h.kind = 'mark_set' AND h.row_id = "
                "s.mark_set_id WHERE ? IS NULL OR s.kind = ? ORDER BY h.seq",
                (kind, kind),
            )
        return [
            MarkSetInfo(
                id=r["mark_set_id"],
                kind=r["kind"],
                marked_at=from_timestamp(r["marked_at"]),
                who=r["who"],
                note=r["note"],
                corrects=r["corrects"],
                source=r["source"],
                marks=r["mark_count"],
                superseded_by=r["superseded_by"],
                business_date=date.fromisoformat(r["business_date"])
                if r["business_date"]
                else None,
                seq=r["seq"],
            )
            for r in rows
        ]
