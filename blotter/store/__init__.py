"""The SQLite book: trades and marks in one file that loses nothing, read as ``Book``/``Market``.

``schema.sql`` is the only definition of the database. Every write runs in ``Store.atomic()``:
``BEGIN IMMEDIATE`` ... ``COMMIT``, rolled back on any error, so no call leaves a transaction
open; a caller may widen it to group several writes into one. Read-only stores open the file by
URI ``mode=ro`` with ``query_only`` on and ATTACH disabled. Each thread that uses a ``Store``
gets its own connection.

A read-only viewer writes nothing and creates no file, with one exception SQLite imposes: a WAL
reader needs the ``-shm`` index, so when the book's ``-wal``/``-shm`` files are absent and the
directory is writable, SQLite creates them (empty of data; the book file's bytes are unchanged).

Durability: ``synchronous=FULL`` on every write, so a committed trade or close mark survives a
power cut as well as a crash (WAL with NORMAL may lose the last commits on power loss). Writes
are human-paced and an import is one transaction, so the extra sync per commit (a fraction of a
millisecond on the project's machines) costs nothing a user can see.

Units: prices are per unit of underlying as quoted (a trade's cash is quantity x multiplier x
price); vols, rates and dividend yields are decimals (0.25 = 25%); rates are continuously
compounded zero rates by tenor in calendar days; instants are UTC.

The modules, each one concern, in the order they import each other: ``errors``, ``times``
(instants and the clock), ``checks`` (value checks), ``records``, ``files``, ``dialect`` (the
store's SQL on a PostgreSQL connection), ``db`` (connections, schema, migrations, open checks),
``pg`` (a book in a PostgreSQL database), ``core`` (transactions), ``reference``
(underlyings, books, notes), ``contracts``, ``trades``, ``marks``, ``csv_io``, ``imports``,
``api`` (``Store``, ``open_store``, ``create_store``) and ``demo`` (the invented demo book).
Everything a caller needs is importable from ``blotter.store`` itself.
"""

from __future__ import annotations

from blotter.store.api import Store, create_store, open_store
from blotter.store.checks import MARK_KINDS, check_mark_point
from blotter.store.contracts import hedge_multiplier, preview_contract
from blotter.store.core import who_am_i
from blotter.store.csv_io import (
    MARK_COLUMNS,
    MARK_INFO_COLUMNS,
    MARK_REQUIRED,
    TRADE_COLUMNS,
    TRADE_INFO_COLUMNS,
    TRADE_REQUIRED,
    mark_csv_row,
    trade_csv_row,
)
from blotter.store.db import (
    APPLICATION_ID,
    BUSY_TIMEOUT_MS,
    SCHEMA_VERSION,
    integrity_problems,
    schema_path,
    schema_sections,
)
from blotter.store.errors import (
    MAX_PROBLEMS,
    BusyError,
    CsvImportError,
    NotWritableError,
    ReadOnlyError,
    SchemaUpgradeNeeded,
    StoreError,
)
from blotter.store.files import FILE_MODE, shipped_demo_path, user_data_dir, user_demo_copy
from blotter.store.imports import PROGRESS_EVERY
from blotter.store.marks import InForceMarks
from blotter.store.records import (
    ContractRecord,
    ImportReport,
    MarkPoint,
    MarkRecord,
    MarkSetInfo,
    NewContract,
    NewTrade,
    TradeRecord,
    contract_label,
)
from blotter.store.reference import DEFAULT_BOOK
from blotter.store.times import (
    Clock,
    business_date,
    parse_date,
    parse_time,
    system_clock,
    timestamp_text,
    use_clock,
)

__all__ = [
    "check_mark_point",
    "APPLICATION_ID",
    "BUSY_TIMEOUT_MS",
    "DEFAULT_BOOK",
    "FILE_MODE",
    "MARK_COLUMNS",
    "MARK_INFO_COLUMNS",
    "MARK_KINDS",
    "MARK_REQUIRED",
    "MAX_PROBLEMS",
    "PROGRESS_EVERY",
    "SCHEMA_VERSION",
    "TRADE_COLUMNS",
    "TRADE_INFO_COLUMNS",
    "TRADE_REQUIRED",
    "BusyError",
    "Clock",
    "ContractRecord",
    "CsvImportError",
    "ImportReport",
    "InForceMarks",
    "MarkPoint",
    "MarkRecord",
    "MarkSetInfo",
    "NewContract",
    "NewTrade",
    "NotWritableError",
    "ReadOnlyError",
    "SchemaUpgradeNeeded",
    "Store",
    "StoreError",
    "TradeRecord",
    "business_date",
    "contract_label",
    "create_store",
    "hedge_multiplier",
    "integrity_problems",
    "mark_csv_row",
    "open_store",
    "parse_date",
    "parse_time",
    "preview_contract",
    "schema_path",
    "schema_sections",
    "shipped_demo_path",
    "system_clock",
    "timestamp_text",
    "trade_csv_row",
    "use_clock",
    "user_data_dir",
    "user_demo_copy",
    "who_am_i",
]
