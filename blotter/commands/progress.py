"""Progress of long commands (imports, demo builds, bench): a rich bar on a terminal, else none.

The bar is drawn on stderr, so stdout stays the command's result (``--json``, ``--csv``). When
stderr is not a terminal (piped, redirected to a file, a cron job) or ``TERM=dumb``, nothing is
drawn and nothing is printed. Rich is imported only when a bar is drawn.
"""

from __future__ import annotations

import os
import sys
from collections.abc import Iterator, Mapping
from contextlib import contextmanager
from typing import Any, Protocol, TextIO


class Progress(Protocol):
    """What a command tells its progress: how far it is, and optionally what it does now."""

    def update(self, completed: float, what: str | None = None) -> None:
        """``completed`` of the total done; ``what`` the step now running, when it changes."""


class NoProgress:
    """Progress told to no one: the command runs without a terminal to draw on."""

    def update(self, completed: float, what: str | None = None) -> None:
        """Nothing to draw."""


class BarProgress:
    """Progress drawn as one rich bar (its task ``task``) on a terminal."""

    def __init__(self, bar: Any, task: Any) -> None:
        self._bar = bar
        self._task = task

    def update(self, completed: float, what: str | None = None) -> None:
        """Move the bar to ``completed`` and, when given, show ``what`` beside it."""
        if what is None:
            self._bar.update(self._task, completed=completed)
        else:
            self._bar.update(self._task, completed=completed, description=what)


def draws_progress(stream: TextIO, env: Mapping[str, str] | None = None) -> bool:
    """Whether a bar may be drawn on ``stream``: a terminal whose ``TERM`` is not ``dumb``."""
    term = (os.environ if env is None else env).get("TERM", "")
    try:
        return stream.isatty() and term != "dumb"
    except (AttributeError, ValueError):  # no isatty, or a closed stream
        return False


@contextmanager
def progress(what: str, total: float | None, stream: TextIO | None = None) -> Iterator[Progress]:
    """A ``Progress`` for a task of ``total`` steps (None: unknown), described as ``what``:
    a rich bar on ``stream`` (default stderr) when ``draws_progress``, else ``NoProgress``.
    The bar is removed when the block ends, so only the command's own lines stay."""
    out = sys.stderr if stream is None else stream
    if not draws_progress(out):
        yield NoProgress()
        return
    from rich.console import Console
    from rich.progress import (
        BarColumn,
        MofNCompleteColumn,
        TextColumn,
        TimeElapsedColumn,
    )
    from rich.progress import (
        Progress as RichProgress,
    )

    console = Console(file=out, stderr=stream is None)
    columns = (
        TextColumn("{task.description}"),
        BarColumn(),
        MofNCompleteColumn(),
        TimeElapsedColumn(),
    )
    with RichProgress(*columns, console=console, transient=True) as bar:
        yield BarProgress(bar, bar.add_task(what, total=total))
