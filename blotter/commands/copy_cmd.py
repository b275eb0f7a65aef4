"""``blotter copy SRC DST``: a whole book moved between an SQLite file and a PostgreSQL
database (``blotter.store.copy``)."""

from __future__ import annotations

import click

from blotter.commands.store_cmds import _emit

BOOK_WORDS = "a book file, or a postgresql:// URL of a database"


@click.command("copy")
@click.argument("source")
@click.argument("dest")
@click.option("--json", "as_json", is_flag=True, help="Print the rows copied per table as JSON.")
def copy_command(source: str, dest: str, as_json: bool) -> None:
    """Copy the book SOURCE to a new book DEST, row for row (ids, times, who, cancels,
    corrections, closes), whole or not at all.

    Each is a book file or a postgresql://user@host/database URL. DEST must be new: a file that
    does not exist, or an empty database (whose tables are then made). PostgreSQL needs
    pip install 'blotter[postgres]'.
    """
    from blotter.store import StoreError
    from blotter.store.copy import copy_book
    from blotter.store.pg import shown

    try:
        report = copy_book(source, dest)
    except StoreError as exc:
        raise click.ClickException(str(exc)) from None
    total = sum(report.rows.values())
    _emit(
        as_json,
        {"source": shown(source), "dest": shown(dest), "rows": report.rows},
        f"copied {total} rows from {shown(source)} to {shown(dest)} "
        f"({report.rows['trade']} trades, {report.rows['mark_set']} mark sets, "
        f"{report.rows['mark']} marks)",
    )


COMMANDS = [copy_command]
