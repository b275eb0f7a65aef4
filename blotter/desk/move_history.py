"""The what-if bar's history on disk: the last moves that parsed, kept across restarts.

One small JSON file in the user's data folder (``$XDG_DATA_HOME/blotter``), written whole to a
temporary file and renamed over the old one, so a crash leaves the old history or the new, never
half of one. A file that cannot be read as a history is moved aside and ignored with a note.
"""

from __future__ import annotations

import json
import os
from collections.abc import Sequence
from pathlib import Path

from blotter.store import user_data_dir

HISTORY_SIZE = 50
"""Moves kept for up/down recall, in a session and on disk."""

HISTORY_FILE = "whatif-history.json"
"""The history's file name in the user's data folder."""

FORMAT = 1
"""The file's format version: ``{"format": 1, "moves": ["spot -3%", ...]}``, oldest first."""


def history_path() -> Path:
    """Where the history is kept: ``$XDG_DATA_HOME/blotter/whatif-history.json``."""
    return user_data_dir() / HISTORY_FILE


def remember(history: Sequence[str], text: str) -> list[str]:
    """``history`` with ``text`` at the end (no repeat back to back), the last ``HISTORY_SIZE``."""
    out = list(history)
    text = text.strip()
    if text and (not out or out[-1] != text):
        out.append(text)
    return out[-HISTORY_SIZE:]


def load_history(path: Path) -> tuple[list[str], str]:
    """The moves kept at ``path``, oldest first, and a note ("" when all is well).

    No file is an empty history; a damaged one (not JSON, not this format) is renamed to
    ``<name>.damaged`` so nothing is lost, and the note says so.
    """
    try:
        raw = path.read_bytes()
    except FileNotFoundError:
        return [], ""
    except OSError as exc:
        return [], f"the what-if history {path} cannot be read ({exc.strerror}); starting empty"
    try:
        data = json.loads(raw.decode("utf-8"))
        moves = data["moves"]
        if data.get("format") != FORMAT or not isinstance(moves, list):
            raise ValueError("not a what-if history")
        if not all(isinstance(m, str) and m.strip() and m.isprintable() for m in moves):
            raise ValueError("a move that is not one line of text")
    except (UnicodeDecodeError, ValueError, TypeError, KeyError, AttributeError):
        aside = path.with_name(path.name + ".damaged")
        try:
            path.replace(aside)
        except OSError:
            return [], f"the what-if history {path} is damaged and was ignored"
        return [], f"the what-if history {path} is damaged: ignored, and kept as {aside}"
    history: list[str] = []
    for m in moves:
        history = remember(history, m)
    return history, ""


def save_history(path: Path, history: Sequence[str]) -> None:
    """Write the last ``HISTORY_SIZE`` moves to ``path`` atomically (temporary file, fsync,
    rename); OSError when the folder cannot be written."""
    path.parent.mkdir(parents=True, exist_ok=True, mode=0o700)
    tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    data = json.dumps({"format": FORMAT, "moves": list(history)[-HISTORY_SIZE:]}, indent=0)
    try:
        with open(tmp, "w", encoding="utf-8") as f:
            f.write(data + "\n")
            f.flush()
            os.fsync(f.fileno())
        tmp.replace(path)
    finally:
        tmp.unlink(missing_ok=True)
