"""A damaged book is refused in words on open, never valued with different numbers (RELIABILITY 13).

Single pages of a copy of the demo book are damaged one at a time, in the ways SQLite's own
malformed-file tests damage files (testing.html §4: pages zeroed, overwritten, or holding another
page's bytes); each copy is opened read-only as every report does and valued. Each must be refused
with a ``StoreError`` or give exactly the original totals. Overwriting one page with another
page's bytes leaves every b-tree well formed, so ``quick_check`` passes it while an index no
longer matches its table (pragma.html: quick_check skips index contents); SQLite also parses no
CHECK constraint on a read-only connection (checked below), so a value outside its CHECK passes a
viewer's own integrity_check.

A flipped bit inside a stored number that stays within its CHECK (0.9033 read as 0.9032999999)
leaves a file every SQLite check passes: SQLite keeps no checksums, so no case here asserts it.
"""

from __future__ import annotations

import random
import shutil
import sqlite3
import struct
from pathlib import Path

import numpy as np
import pytest

from blotter.risk import value_book
from blotter.store import StoreError, integrity_problems, open_store

pytestmark = pytest.mark.file_only("damaged pages of a book file")

PAGE = 4096
AT = np.datetime64("2026-12-01T12:00:00", "s")
FIELDS = ("value", "delta_cash", "vega_pt", "theta_day", "rho_pct", "gamma_1pct")


def _totals(path: Path) -> tuple[float, ...]:
    with open_store(path, read_only=True) as s:
        v = value_book(s.load_book(), s.load_market(), AT)
        return tuple(float(np.nansum(getattr(v, f))) for f in FIELDS)


def _damaged(master: Path, into: Path, page: int, kind: str) -> Path:
    data = bytearray(master.read_bytes())
    n = len(data) // PAGE
    start = (page - 1) * PAGE
    rng = random.Random(page)
    if kind == "zeroed":
        data[start : start + PAGE] = bytes(PAGE)
    elif kind == "random bytes":
        data[start : start + PAGE] = bytes(rng.randrange(256) for _ in range(PAGE))
    else:  # another page's bytes: every b-tree page stays well formed
        other = (page - 1 + rng.randrange(1, n - 1)) % (n - 1) + 2
        data[start : start + PAGE] = data[(other - 1) * PAGE : other * PAGE]
    into.write_bytes(bytes(data))
    return into


@pytest.mark.parametrize("kind", ["zeroed", "random bytes", "another page"])
def test_each_damaged_page_is_refused_or_values_the_same(
    demo_master: Path, tmp_path: Path, kind: str
) -> None:
    original = _totals(demo_master)
    pages = demo_master.stat().st_size // PAGE
    silent, refused = [], 0
    for page in range(2, pages + 1):
        copy = _damaged(demo_master, tmp_path / f"p{page}.db", page, kind)
        try:
            totals = _totals(copy)
        except StoreError as exc:
            assert str(copy) in str(exc)  # the message names the file
            refused += 1
            continue
        if totals != original:
            silent.append(page)
    assert silent == [], f"{kind}: pages valued differently without a word: {silent}"
    assert refused > 0


def _stored_once(path: Path, kind: str) -> float:
    """A value of a ``kind`` mark whose eight bytes occur once in the file."""
    data = path.read_bytes()
    raw = sqlite3.connect(f"file:{path}?mode=ro", uri=True)
    values = [v for (v,) in raw.execute("SELECT value FROM mark WHERE kind = ?", (kind,))]
    raw.close()
    return next(v for v in values if data.count(struct.pack(">d", v)) == 1)


def _replace_double(path: Path, old: float, new: float) -> None:
    """Overwrite, in place, the eight bytes of the stored number ``old`` with ``new``'s."""
    data = path.read_bytes()
    packed = struct.pack(">d", old)
    assert data.count(packed) == 1
    with open(path, "r+b") as f:
        f.seek(data.index(packed))
        f.write(struct.pack(">d", new))


def test_a_value_outside_its_check_is_refused_by_a_read_only_open(
    demo_master: Path, tmp_path: Path
) -> None:
    """A damaged vol mark of 50.0 (the schema allows at most 10) in a file otherwise intact."""
    copy = tmp_path / "book.db"
    shutil.copyfile(demo_master, copy)
    _replace_double(copy, _stored_once(copy, "vol"), 50.0)
    ro = sqlite3.connect(f"file:{copy}?mode=ro", uri=True)
    assert ro.execute("PRAGMA integrity_check").fetchone()[0] == "ok"  # blind to CHECKs
    assert integrity_problems(ro) != ["ok"]
    ro.close()
    with pytest.raises(StoreError, match="damaged.*CHECK constraint failed in mark"):
        _totals(copy)


def test_the_open_check_runs_again_after_the_file_changes(demo_db: Path) -> None:
    """The check is skipped only for a file state it passed in this process: a book damaged
    after one open is refused on the next."""
    _totals(demo_db)
    _replace_double(demo_db, _stored_once(demo_db, "spot"), -1.0)
    with pytest.raises(StoreError, match="damaged"):
        open_store(demo_db, read_only=True)
