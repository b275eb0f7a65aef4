"""Text from a book made safe to show on a terminal: control characters are printed as escapes.

Notes, book names, who and sources are typed by people or read from files, so they may hold
escape sequences that clear the screen or set the window title (ECMA-48 control functions start
with ESC or a C1 control) or bidirectional controls that reorder what is shown (Unicode UAX #9).
Tables and the app show them escaped, ``\\x1b`` for ESC; CSV and JSON keep the text as stored.
"""

from __future__ import annotations

import unicodedata

BIDI_CONTROLS = "\u061c\u200e\u200f\u202a\u202b\u202c\u202d\u202e\u2066\u2067\u2068\u2069"
"""Characters that change the direction text is laid out in (UAX #9's explicit formatting
characters and marks)."""

_NAMED = {"\n": "\\n", "\r": "\\r", "\t": "\\t"}


def _escape(ch: str) -> str:
    code = ord(ch)
    return _NAMED.get(ch) or (f"\\x{code:02x}" if code <= 0xFF else f"\\u{code:04x}")


_TABLE = {
    ord(ch): _escape(ch)
    for ch in [chr(c) for c in range(0xA0)] + list(BIDI_CONTROLS) + ["\u2028", "\u2029"]
    if unicodedata.category(ch) in ("Cc", "Cf", "Zl", "Zp")
}
"""Every C0 and C1 control, DEL, the bidirectional controls and the line and paragraph
separators, each mapped to its escape."""


def printable(text: str) -> str:
    """``text`` with every control character written as an escape, so it cannot drive the
    terminal; printable text (any script, emoji) is unchanged."""
    return text.translate(_TABLE)
