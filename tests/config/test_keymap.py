"""The keymap check the settings run: unknown binding ids and keys that do not arrive, refused."""

from __future__ import annotations

from blotter.keymap import check_keymap


def test_keymap_check_refuses_unknown_ids_and_bad_keys() -> None:
    assert check_keymap({"help": "h,f1"}) == []
    assert "unknown binding id" in check_keymap({"nope": "x"})[0]
    assert "does not arrive reliably" in check_keymap({"quit": "ctrl+q"})[0]
    assert "does not arrive reliably" in check_keymap({"quit": "alt+x"})[0]
    assert "does not arrive reliably" in check_keymap({"help": "escape"})[0]
    assert "has no keys" in check_keymap({"help": " , "})[0]
