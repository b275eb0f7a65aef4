"""Every command has help text and is mentioned in README.md."""

from __future__ import annotations

from pathlib import Path

import click
from click.testing import CliRunner

from blotter.cli import main

README = (Path(__file__).resolve().parents[2] / "README.md").read_text(encoding="utf-8")


def _walk(group: click.Group, prefix: str) -> list[tuple[str, click.Command]]:
    out: list[tuple[str, click.Command]] = []
    for name, cmd in sorted(group.commands.items()):
        full = f"{prefix} {name}"
        out.append((full, cmd))
        if isinstance(cmd, click.Group):
            out.extend(_walk(cmd, full))
    return out


def test_every_command_has_help_and_a_readme_mention() -> None:
    commands = _walk(main, "blotter")
    assert commands, "the group has no commands"
    for full, cmd in commands:
        assert (cmd.help or "").strip(), f"{full} has no help text"
        assert full in README, f"{full} is not mentioned in README.md"
        result = CliRunner().invoke(main, full.split()[1:] + ["--help"], catch_exceptions=False)
        assert result.exit_code == 0, f"{full} --help failed: {result.output}"


def test_group_help_lists_every_command() -> None:
    result = CliRunner().invoke(main, ["--help"], catch_exceptions=False)
    assert result.exit_code == 0
    listed = {line.split()[0] for line in result.output.split("Commands:")[1].splitlines() if line}
    for name, cmd in main.commands.items():
        assert (name in listed) is not cmd.hidden, f"{name}: hidden={cmd.hidden}"
