"""The package's log: standard ``logging`` under the ``blotter`` logger, to a file only.

Nothing is logged to the screen: the ``blotter`` logger carries a ``NullHandler``, so without a
log file a warning goes nowhere (Python's last-resort handler would write it on stderr, over the
app's screen), and with one (``--log-file`` or the ``log_file`` setting) only a file handler is
added. Each line starts with its UTC time in ISO-8601.
"""

from __future__ import annotations

import logging
import time
from pathlib import Path

ROOT = "blotter"
"""The package's logger; every logger of the package is a child of it."""

STORE = "blotter.store"
"""The store's errors said in words (SQLite refusing a write, a busy book, a damaged file)."""

IMPORTS = "blotter.store.imports"
"""CSV imports: each refused file (warning) and each file imported (info)."""

FEED = "blotter.feed"
"""``blotter feed``: each bad line (warning, with its number), each write refused by the book
(error), and the feed's end with its counts (info)."""

LINE_FORMAT = "%(asctime)s.%(msecs)03dZ %(levelname)s %(name)s: %(message)s"
"""One line per record: UTC time to the millisecond, level, logger, message."""

TIME_FORMAT = "%Y-%m-%dT%H:%M:%S"


class _OneLine(logging.Formatter):
    """A record on one line: a message of several lines (an import's problems) is joined with
    "; " (a line ending in a colon with a space), so each line of the file is one record."""

    def format(self, record: logging.LogRecord) -> str:
        parts = [p.strip() for p in super().format(record).splitlines() if p.strip()]
        out = parts[0] if parts else ""
        for part in parts[1:]:
            out += (" " if out.endswith(":") else "; ") + part
        return out


logging.getLogger(ROOT).addHandler(logging.NullHandler())


def logger(name: str) -> logging.Logger:
    """The logger ``name``, a child of ``ROOT`` (a module passes its ``__name__``)."""
    if name != ROOT and not name.startswith(ROOT + "."):
        raise ValueError(f"{name!r} is not a logger of the package ({ROOT}.*)")
    return logging.getLogger(name)


def start_file_log(path: str | Path) -> logging.Handler:
    """Append the package's records of level INFO and above to ``path``; returns the handler,
    for ``stop_file_log``. ``OSError`` when the file cannot be opened for appending."""
    handler = logging.FileHandler(Path(path).expanduser(), encoding="utf-8", delay=False)
    formatter = _OneLine(LINE_FORMAT, TIME_FORMAT)
    formatter.converter = time.gmtime
    handler.setFormatter(formatter)
    handler.setLevel(logging.INFO)
    root = logging.getLogger(ROOT)
    root.addHandler(handler)
    if root.level == logging.NOTSET or root.level > logging.INFO:
        root.setLevel(logging.INFO)
    return handler


def stop_file_log(handler: logging.Handler) -> None:
    """Detach ``handler`` from the package's logger and close its file."""
    logging.getLogger(ROOT).removeHandler(handler)
    handler.close()
