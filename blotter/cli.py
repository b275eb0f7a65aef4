"""The ``blotter`` command: a click group of thin commands over the package's functions.

With no sub-command it opens the terminal app. Textual is imported only inside that path, so
report commands stay quick to start and usable where no terminal exists.
"""

from __future__ import annotations

import click

from blotter.commands import register
from blotter.commands.common import AppContext, start_log


@click.group(invoke_without_command=True, context_settings={"help_option_names": ["-h", "--help"]})
@click.option("--db", "db_path", type=click.Path(dir_okay=False), envvar="BLOTTER_DB",
              help="Book: an SQLite file or a postgresql:// URL. Default: $BLOTTER_DB, else your "
                   "own copy of the demo book.")
@click.option("--read-only", is_flag=True, help="Open the book read-only: nothing can be written.")
@click.option("--no-mouse", is_flag=True,
              help="App: leave the mouse to the terminal (text selection).")
@click.option("--log-file", type=click.Path(dir_okay=False),
              help="Append warnings and errors of imports and the store, each with its UTC time, "
              "to this file. Default: the log_file setting, else no log.")
@click.version_option(package_name="blotter")
@click.pass_context
def main(
    ctx: click.Context, db_path: str | None, read_only: bool, no_mouse: bool,
    log_file: str | None,
) -> None:
    """Options position blotter: book greeks in desk units and a live what-if.

    Run with no command to open the app (in a terminal only). Model estimates, not advice:
    check every figure against the firm's official risk and P&L.
    """
    ctx.obj = AppContext(db_path=db_path, read_only=read_only, no_mouse=no_mouse)
    start_log(ctx, log_file)
    if ctx.invoked_subcommand is None:
        from blotter.commands.app import open_app

        open_app(ctx.obj)


register(main)
