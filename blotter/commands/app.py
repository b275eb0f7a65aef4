"""Open the terminal app (``blotter`` with no command). Textual is imported only from here."""

from __future__ import annotations

from typing import Any

import click

from blotter.commands.common import AppContext, resolve_db


def open_app(ctx: AppContext) -> None:
    """Resolve the book file and the settings, build the app with ``make_app`` and run it."""
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
    from blotter import store

    try:  # a clear message for a missing or foreign file before the screen is taken over; a
        # read-write open also upgrades an older schema now, before the app's workers read it
        store.open_store(db_path, read_only=settings.read_only, desk_tz=settings.tz).close()
    except store.StoreError as exc:
        raise click.ClickException(str(exc)) from None

    from blotter.ui.app import make_app

    app = make_app(db_path, settings)
    app.run(mouse=not settings.no_mouse)
