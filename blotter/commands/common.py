"""What every command shares: the group's context, ``--db``, and table, JSON and CSV output."""

from __future__ import annotations

import csv
import json
import math
import os
import sys
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass
from typing import Any, TypeVar
from zoneinfo import ZoneInfo

import click

from blotter.config import DESK_TZ_SOURCES
from blotter.printable import printable

F = TypeVar("F", bound=Callable[..., Any])

DESK_ZONE_HELP = f"the desk's time zone: {DESK_TZ_SOURCES}"
"""Where a time without an offset takes its zone from, for help texts."""

XLSX_META = "blotter.xlsx"
"""Where ``--xlsx FILE`` keeps its path on a command's context (``commands.xlsx``)."""

FORMULA_PREFIXES = ("=", "+", "-", "@", "\t", "\r")
"""A CSV cell starting with one of these is run as a formula by spreadsheets unless neutralised."""


@dataclass
class AppContext:
    """Options given to the group itself (``blotter --db X --read-only CMD``)."""

    db_path: str | None = None
    read_only: bool = False
    no_mouse: bool = False


def start_log(ctx: click.Context, log_file: str | None) -> None:
    """Append the package's log to ``log_file``, else to the ``log_file`` setting's file, until
    the command ends; with neither, nothing is logged anywhere (``blotter.logs``)."""
    from blotter import logs
    from blotter.config import ConfigError, load_settings

    if not log_file:
        try:
            log_file = load_settings().log_file
        except ConfigError:
            return  # the commands that read the settings say what is wrong with them
    if not log_file:
        return
    try:
        handler = logs.start_file_log(log_file)
    except OSError as exc:
        raise click.ClickException(
            f"cannot write the log file {log_file}: {exc.strerror}"
        ) from None
    ctx.call_on_close(lambda: logs.stop_file_log(handler))


def desk_zone() -> ZoneInfo:
    """The desk's time zone as the settings resolve it (``config.load_settings``), the one zone
    of naive times, expiry buckets and business-day rolls; ClickException for a bad setting."""
    from blotter.config import ConfigError, load_settings

    try:
        return load_settings().tz
    except ConfigError as exc:
        raise click.ClickException(f"settings: {exc}") from None


def db_option(func: F) -> F:
    """Add ``--db PATH`` to a command; the command's value wins over the group's."""
    return click.option(
        "--db", "db_path", type=click.Path(dir_okay=False), default=None,
        help="Book (an SQLite file or a postgresql:// URL); overrides the group's --db and "
        "$BLOTTER_DB.",
    )(func)


def open_for_reading(path: str) -> Any:
    """``open_store(path, read_only=True)``; a file of an older schema is first upgraded by a
    read-write open (saying so on stderr), unless read-only is on or the user cannot write it."""
    from blotter.store import NotWritableError, SchemaUpgradeNeeded, StoreError, open_store

    zone = desk_zone()
    try:
        return open_store(path, read_only=True, desk_tz=zone)
    except SchemaUpgradeNeeded as exc:
        source = read_only_source()
        if source is not None:
            raise SchemaUpgradeNeeded(
                f"{shown(path)} uses an older schema ({exc.version}), and read-only is on "
                f"({source}), so it was not upgraded; run once without read-only to upgrade it",
                exc.version,
            ) from None
        try:
            open_store(path, desk_tz=zone).close()
        except NotWritableError as denied:
            raise StoreError(
                f"{shown(path)} uses an older schema ({exc.version}), which this blotter "
                f"upgrades on open, but {denied.why}: ask whoever can write it to open it once"
            ) from None
        click.echo(f"blotter: upgraded {shown(path)} from schema {exc.version}", err=True)
        return open_store(path, read_only=True, desk_tz=zone)


def shown(book: str) -> str:
    """``book`` as a message may print it: a database URL's password as ``***``
    (``store.pg.shown``, imported only when called so completion stays light)."""
    from blotter.store.pg import shown as without_password

    return without_password(book)


def resolve_db(db_path: str | None) -> tuple[str, bool]:
    """The book file to use and whether it was given explicitly; by default the user's demo copy.

    Returns (path, explicit). When no path was given anywhere, the per-user copy of the shipped
    demo book is made on first use and its path returned; a note saying which file goes to stderr.
    Under read-only (``read_only_source``) nothing is copied: the existing per-user copy is
    returned, else the shipped demo file itself (which ``open_store`` opens read-only without
    side files).
    """
    ctx = click.get_current_context(silent=True)
    group: AppContext | None = ctx.find_object(AppContext) if ctx else None
    path = db_path or (group.db_path if group else None)
    if path:
        return path, True
    from blotter.store import shipped_demo_path, user_data_dir, user_demo_copy

    if read_only_requested():
        copy = user_data_dir() / "demo.db"
        if copy.exists():
            click.echo(f"blotter: no --db given; opening your demo book {copy} read-only", err=True)
            return str(copy), False
        shipped = shipped_demo_path()
        click.echo(
            f"blotter: no --db given; opening the shipped demo book {shipped} read-only "
            "(no copy made)",
            err=True,
        )
        return str(shipped), False
    demo = user_demo_copy()
    click.echo(f"blotter: no --db given; using your demo book {demo}", err=True)
    return str(demo), False


def read_only_source() -> str | None:
    """Where read-only was asked for, in words, or None: the group's ``--read-only``, else the
    settings (``BLOTTER_READ_ONLY``, then ``read_only`` in the settings file), by the rule the
    app's settings follow, so every command and the app agree. A bad settings file is an error."""
    from blotter.config import ConfigError, config_path, load_settings

    ctx = click.get_current_context(silent=True)
    group: AppContext | None = ctx.find_object(AppContext) if ctx else None
    if group is not None and group.read_only:
        return "--read-only"
    try:
        settings = load_settings()
    except ConfigError as exc:
        raise click.ClickException(f"settings: {exc}") from None
    if not settings.read_only:
        return None
    if "BLOTTER_READ_ONLY" in os.environ:
        return f"BLOTTER_READ_ONLY={os.environ['BLOTTER_READ_ONLY']}"
    return f"read_only in {config_path()}"


def read_only_requested() -> bool:
    """True when read-only is on (see ``read_only_source``)."""
    return read_only_source() is not None


class FiniteRange(click.FloatRange):
    """A float option within [min, max] that is a number: click's own range lets NaN through
    (every comparison with NaN is false), and the core would then fail on it."""

    name = "number"

    def convert(self, value: Any, param: click.Parameter | None, ctx: click.Context | None) -> Any:
        out = super().convert(value, param, ctx)
        if not math.isfinite(out):
            self.fail(f"{value!r} is not a finite number", param, ctx)
        return out


FINITE = FiniteRange()
"""A float option that must be a finite number (NaN and infinities refused in words)."""


def check_option(bound: Any, value: Any, option: str, signed: bool = False) -> float:
    """``value`` of ``option`` inside ``bound`` (a ``blotter.limits.Bound``), as a float.

    Out of range, or not a number, is a usage error naming the option and the range.
    """
    from blotter import limits

    try:
        return float(bound.check(value, option.lstrip("-").replace("-", " "), signed=signed))
    except limits.LimitError as exc:
        raise click.BadParameter(str(exc), param_hint=option) from None


def output_options(func: F) -> F:
    """Add ``--json`` and ``--csv`` (mutually exclusive) to a command that prints rows."""
    func = click.option("--csv", "as_csv", is_flag=True, help="Print CSV for scripts.")(func)
    func = click.option("--json", "as_json", is_flag=True, help="Print JSON for scripts.")(func)
    return func


def check_output_flags(as_json: bool, as_csv: bool) -> None:
    """Refuse ``--json`` together with ``--csv``, or either with a report's ``--xlsx``."""
    ctx = click.get_current_context(silent=True)
    xlsx = ctx is not None and XLSX_META in ctx.meta
    if as_json + as_csv + xlsx > 1:
        raise click.UsageError(
            "choose one of --json, --csv and --xlsx" if xlsx else "choose one of --json and --csv"
        )


def neutralise(cell: Any) -> Any:
    """A CSV cell made safe for spreadsheets: text starting like a formula gets a leading quote.

    Numbers (including negative ones) are left alone, so exported files import back unchanged.
    """
    if isinstance(cell, str) and cell.startswith(FORMULA_PREFIXES):
        try:
            float(cell)
        except ValueError:
            return "'" + cell
    return cell


def _jsonable(value: Any) -> Any:
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if hasattr(value, "item") and callable(value.item):  # NumPy scalar
        return _jsonable(value.item())
    if isinstance(value, dict):
        return {k: _jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_jsonable(v) for v in value]
    return value


def print_json(obj: Any) -> None:
    """Print ``obj`` as JSON (NaN and infinity become null) to stdout."""
    click.echo(json.dumps(_jsonable(obj), indent=2, default=str))


def print_csv(columns: Sequence[str], rows: Iterable[Sequence[Any]]) -> None:
    """Print a header and rows as CSV to stdout, neutralising formula-like text cells."""
    writer = csv.writer(sys.stdout, lineterminator="\n")
    writer.writerow(columns)
    for row in rows:
        writer.writerow([neutralise("" if c is None else c) for c in row])


def print_table(
    columns: Sequence[str],
    rows: Iterable[Sequence[Any]],
    title: str | None = None,
    right: Sequence[bool] | None = None,
) -> None:
    """Print an aligned plain-text table for people; cells are never cut and no column is dropped,
    whatever the terminal width (a wide table runs past the edge rather than losing data).

    ``right`` marks numeric columns to right-align; None cells print empty. Control characters
    in any cell print as escapes (``blotter.printable``), so a note cannot drive the terminal.
    """
    cells = [[printable(str(c)) for c in columns]] + [
        ["" if c is None else printable(str(c)) for c in r] for r in rows
    ]
    widths = [max(len(r[i]) for r in cells) for i in range(len(columns))]
    if title:
        click.echo(printable(title))
    for k, r in enumerate(cells):
        parts = [
            c.rjust(w) if (right and right[i]) else c.ljust(w)
            for i, (c, w) in enumerate(zip(r, widths, strict=True))
        ]
        click.echo("  ".join(parts).rstrip())
        if k == 0:
            click.echo("  ".join("-" * w for w in widths))


COMPILE_NOTE_AFTER_S = 1.0
"""Loading the compiled kernels from numba's cache takes a fraction of a second; a wait longer
than this means they are being compiled, which is worth a line."""


def note_first_compile() -> None:
    """Load the American pricing kernels, saying on stderr when that means compiling them (the
    first run after an install, some seconds), so the pause is not taken for a hang."""
    from blotter import engine

    if engine.kernels_ready():
        return
    worker = engine.warm_up(background=True)
    if worker is None:
        return
    worker.join(COMPILE_NOTE_AFTER_S)
    if worker.is_alive():
        click.echo(
            "blotter: compiling the American pricing kernels (the first run after an install "
            "only; some seconds)",
            err=True,
        )
        worker.join()
