"""Open the terminal app (``blotter`` with no command). Textual is imported only from here."""

from __future__ import annotations

import sys
from dataclasses import replace
from typing import TYPE_CHECKING, Any

import click

from blotter.commands.common import AppContext, resolve_db

if TYPE_CHECKING:
    from blotter.config import Settings

NO_TERMINAL = (
    "no terminal (standard input, output or error is not one), so the app does not start; "
    "use a command, e.g. blotter risk (blotter --help lists them)"
)
"""Said when ``blotter`` with no command runs in a pipe, a cron job or a script."""


def has_terminal() -> bool:
    """Whether standard input, output and error are all a terminal: the app reads keys from
    stdin and Textual draws on stderr, so a redirected stderr would receive the screen."""
    return all(s is not None and s.isatty() for s in (sys.stdin, sys.stdout, sys.stderr))


def open_app(ctx: AppContext) -> None:
    """Resolve the book file and the settings, build the app with ``make_app`` and run it; with
    no terminal, refuse in one line (``NO_TERMINAL``) before anything else."""
    if not has_terminal():
        raise click.ClickException(NO_TERMINAL)
    from blotter.config import ConfigError, load_settings

    db_path, _explicit = resolve_db(ctx.db_path)
    flags: dict[str, Any] = {}
    if ctx.read_only:
        flags["read_only"] = True
    if ctx.no_mouse:
        flags["no_mouse"] = True
    try:
        settings = load_settings(flags)
    except ConfigError as exc:
        raise click.ClickException(f"settings: {exc}") from None
    settings, notice = check_book(db_path, settings)

    from blotter.ui.app import make_app

    app = make_app(db_path, settings)
    app.startup_notice = notice
    app.run(mouse=not settings.no_mouse)


def check_book(db_path: str, settings: Settings) -> tuple[Settings, str]:
    """Open the book once before the screen is taken over: the settings to run with and a notice.

    A missing, foreign or damaged file is a ``ClickException``; a read-write open also upgrades
    an older schema now, before the app's workers read it. A book this user cannot write opens
    read-only, and the notice says so (the user did not ask for read-only)."""
    from blotter import store

    try:
        store.open_store(db_path, read_only=settings.read_only, desk_tz=settings.tz).close()
    except store.NotWritableError as denied:
        try:
            store.open_store(db_path, read_only=True, desk_tz=settings.tz).close()
        except store.StoreError as exc:
            raise click.ClickException(str(exc)) from None
        return replace(settings, read_only=True), f"{denied.why}; opened read-only"
    except store.StoreError as exc:
        raise click.ClickException(str(exc)) from None
    return settings, ""
