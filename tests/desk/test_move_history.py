"""The what-if history on disk: what is saved is loaded back, bounded to ``HISTORY_SIZE``, written
whole or not at all, and a damaged file is ignored with a note (kept aside), never an error."""

from __future__ import annotations

import json
import os
from pathlib import Path

import pytest

from blotter.desk import move_history
from blotter.desk.move_history import HISTORY_SIZE, load_history, remember, save_history


def test_saved_moves_load_back_in_order(tmp_path: Path) -> None:
    path = tmp_path / "blotter" / "whatif-history.json"
    assert load_history(path) == ([], "")
    save_history(path, ["spot -3%", "vol +2", "DEMOA spot -5%"])
    assert load_history(path) == (["spot -3%", "vol +2", "DEMOA spot -5%"], "")
    assert [p.name for p in path.parent.iterdir()] == [path.name]  # no temporary file left


def test_the_history_is_bounded_and_skips_repeats(tmp_path: Path) -> None:
    history: list[str] = []
    for k in range(HISTORY_SIZE + 7):
        history = remember(history, f"spot -{k}%")
        history = remember(history, f" spot -{k}% ")
    assert len(history) == HISTORY_SIZE and history[-1] == f"spot -{HISTORY_SIZE + 6}%"
    assert history[0] == "spot -7%"
    path = tmp_path / "h.json"
    save_history(path, [f"vol +{k}" for k in range(HISTORY_SIZE * 2)])
    loaded, _ = load_history(path)
    assert loaded == [f"vol +{k}" for k in range(HISTORY_SIZE, HISTORY_SIZE * 2)]


def test_the_path_is_in_the_users_data_folder(
    monkeypatch: pytest.MonkeyPatch, tmp_path: Path
) -> None:
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path))
    assert move_history.history_path() == tmp_path / "blotter" / "whatif-history.json"


def test_a_failed_write_leaves_the_old_history(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    path = tmp_path / "h.json"
    save_history(path, ["spot -1%"])

    def no_room(fd: int) -> None:
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(os, "fsync", no_room)
    with pytest.raises(OSError, match="No space"):
        save_history(path, ["spot -1%", "spot -2%"])
    assert load_history(path) == (["spot -1%"], "")
    assert [p.name for p in tmp_path.iterdir()] == ["h.json"]


@pytest.mark.parametrize(
    "content",
    [
        b'{"format": 1, "moves": ["spot -3%", ',  # cut short
        b"\xff\xfe not text",
        b'["spot -3%"]',
        b'{"format": 99, "moves": ["spot -3%"]}',
        b'{"format": 1, "moves": ["spot -3%", 4]}',
        b'{"format": 1, "moves": ["spot\\n-3%"]}',
        b"",
    ],
)
def test_a_damaged_file_is_ignored_with_a_note_and_kept_aside(
    tmp_path: Path, content: bytes
) -> None:
    path = tmp_path / "h.json"
    path.write_bytes(content)
    history, note = load_history(path)
    assert history == []
    assert "damaged" in note and str(path) in note
    assert (tmp_path / "h.json.damaged").read_bytes() == content and not path.exists()
    save_history(path, ["spot -1%"])
    assert json.loads(path.read_text(encoding="utf-8"))["moves"] == ["spot -1%"]


def test_an_unreadable_file_is_noted(tmp_path: Path) -> None:
    path = tmp_path / "h.json"
    path.mkdir()  # a folder where the file should be
    history, note = load_history(path)
    assert history == [] and "cannot be read" in note
