"""Helpers shared by the command tests: run ``blotter`` in-process and check its exit code."""

from __future__ import annotations

from click.testing import CliRunner, Result

from blotter.cli import main


def run(*args: str, code: int = 0) -> Result:
    """``blotter ARGS`` through click's runner; asserts the exit code (output in the message)."""
    result = CliRunner().invoke(main, list(args), catch_exceptions=False)
    assert result.exit_code == code, (args, result.output, result.stderr)
    return result
