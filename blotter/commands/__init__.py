"""Sub-commands of ``blotter``, one module per family; ``register`` adds them to the group."""

from __future__ import annotations

import importlib
from types import ModuleType

import click

COMMAND_MODULES = (
    "bench", "store_cmds", "setup_cmds", "report", "demo_cmd", "feed_cmd", "hedge_cmd",
    "copy_cmd",
)
"""Modules that define ``COMMANDS``: a list of click commands or groups to add to the group."""


def optional_module(qualified: str) -> ModuleType | None:
    """The module ``qualified`` (a dotted name), or None when it does not exist; a module that
    exists but fails to import raises as usual."""
    try:
        return importlib.import_module(qualified)
    except ModuleNotFoundError as exc:
        if exc.name == qualified:
            return None
        raise


def register(group: click.Group) -> None:
    """Add every command of every module in ``COMMAND_MODULES`` that exists yet."""
    for name in COMMAND_MODULES:
        module = optional_module(f"blotter.commands.{name}")
        if module is None:
            continue
        for command in module.COMMANDS:
            group.add_command(command)
