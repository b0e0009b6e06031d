"""Text bound for a terminal with its control characters made visible.

A header or cell can hold ESC sequences, NUL or other control characters; printed raw
they recolour, move or clear the user's terminal (or hide text). Every line plumbrule
prints shows them as Python escapes instead (ESC as ``\\x1b``). Line breaks of the
report's own layout stay; the workbook keeps the text as it is.
"""

from __future__ import annotations

import re

# C0 controls except the line break, DEL, and the C1 controls (U+0080-U+009F: U+009B is
# a one-character CSI to some terminals); also the bidirectional overrides, which reorder
# what is shown (a header can look like another).
_CONTROL = re.compile("[\x00-\x09\x0b-\x1f\x7f-\x9f\u202a-\u202e\u2066-\u2069]")


def _escape(m: re.Match) -> str:
    ch = m.group(0)
    code = ord(ch)
    return f"\\x{code:02x}" if code < 0x100 else f"\\u{code:04x}"


def visible(text: str) -> str:
    """``text`` with every control character except the line break shown as an escape
    (``'\\x1b'``, ``'\\x00'``, ``'\\u202e'``); unchanged when it has none."""
    return _CONTROL.sub(_escape, text)
