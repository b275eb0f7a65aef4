"""``blotter.printable``: text shown on a terminal carries no control character, and text that
had none is unchanged (control characters by Unicode category Cc, ECMA-48's C0 and C1 sets;
bidirectional controls from Unicode UAX #9)."""

from __future__ import annotations

import unicodedata

from hypothesis import given
from hypothesis import strategies as st

from blotter.printable import BIDI_CONTROLS, printable


def _drives_the_terminal(ch: str) -> bool:
    return unicodedata.category(ch) in ("Cc", "Zl", "Zp") or ch in BIDI_CONTROLS


@given(st.text())
def test_no_control_character_survives(text: str) -> None:
    assert not any(_drives_the_terminal(c) for c in printable(text))


@given(st.text().filter(lambda t: not any(_drives_the_terminal(c) for c in t)))
def test_text_without_controls_is_unchanged(text: str) -> None:
    assert printable(text) == text


def test_escapes_read_as_python_writes_them() -> None:
    assert printable("a\x1b]2;T\x07b") == "a\\x1b]2;T\\x07b"
    assert printable("\x9b2J\x7f") == "\\x9b2J\\x7f"
    assert printable("x\ny\tz\r") == "x\\ny\\tz\\r"
    assert printable("\u202eabc\u2066") == "\\u202eabc\\u2066"
    assert printable("Zürich 日本 [bold]") == "Zürich 日本 [bold]"
