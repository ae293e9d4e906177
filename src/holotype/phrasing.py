"""How holotype words things it prints: one-line values and shortened lists. No other holotype imports."""

from __future__ import annotations

import re
from collections.abc import Iterable

# C0 and C1 controls, DEL, and the Unicode bidirectional controls that can reorder what a reader sees
_CONTROLS = re.compile("[\x00-\x1f\x7f-\x9f\u061c\u200e\u200f\u202a-\u202e\u2066-\u2069]")


def _escape(match: re.Match[str]) -> str:
    c = match.group(0)
    return {"\n": "\\n", "\r": "\\r", "\t": "\\t"}.get(c, f"\\x{ord(c):02x}" if ord(c) < 256 else f"\\u{ord(c):04x}")


_CONTROLS_BUT_LINES = re.compile("[\x00-\x08\x0b-\x1f\x7f-\x9f\u061c\u200e\u200f\u202a-\u202e\u2066-\u2069]")


def visible(text: str) -> str:
    """Like one_line, but newlines and tabs stay (renderers lay them out: <br> in Markdown, escaped in XML)."""
    return _CONTROLS_BUT_LINES.sub(_escape, text)


def one_line(text: str) -> str:
    """`text` with control characters (newlines, terminal escapes, C1 controls, bidi overrides) shown
    escaped, so it stays one line and cannot steer a terminal or reorder what a reader sees."""
    return _CONTROLS.sub(_escape, text)


def listed(items: Iterable[object], limit: int = 5, *, sep: str = ", ") -> str:
    """The first `limit` items joined, then 'and N more' for the rest."""
    values = [str(x) for x in items]
    head = sep.join(values[:limit])
    return head + (f" and {len(values) - limit} more" if len(values) > limit else "")


SHOWN_CHARS = 200  # the longest value holotype prints or writes into a finding


def clip(value: object, limit: int = SHOWN_CHARS) -> object:
    """A string longer than `limit` cut to it, saying how long it was; anything else as it is."""
    if isinstance(value, (str, bytes)) and len(value) > limit + 64:  # (+64: a clipped value is never clipped again)
        head = value[:limit]
        shown = head if isinstance(head, str) else head.decode("utf-8", "replace")
        return f"{shown}… ({len(value):,} characters in all)"
    return value
