"""Sub-commands of ``blotter``, one module per family; ``register`` adds them to the group."""

from __future__ import annotations

import importlib

import click

COMMAND_MODULES = ("bench", "store_cmds", "setup_cmds", "report", "demo_cmd", "feed_cmd")
"""Modules that define ``COMMANDS``: a list of click commands or groups to add to the group."""


def register(group: click.Group) -> None:
    """Add every command of every module in ``COMMAND_MODULES`` that exists yet."""
    for name in COMMAND_MODULES:
        try:
            module = importlib.import_module(f"blotter.commands.{name}")
        except ModuleNotFoundError as exc:
            if exc.name == f"blotter.commands.{name}":
                continue
            raise
        for command in module.COMMANDS:
            group.add_command(command)
