"""How holotype words things it prints: one-line values and shortened lists. No other holotype imports."""

from __future__ import annotations

from collections.abc import Iterable


def one_line(text: str) -> str:
    """`text` with control characters (newlines from user input, say) shown escaped, so it stays one line."""
    return "".join(repr(c)[1:-1] if (ord(c) < 32 or ord(c) == 127) else c for c in text)


def listed(items: Iterable[object], limit: int = 5, *, sep: str = ", ") -> str:
    """The first `limit` items joined, then 'and N more' for the rest."""
    values = [str(x) for x in items]
    head = sep.join(values[:limit])
    return head + (f" and {len(values) - limit} more" if len(values) > limit else "")


SHOWN_CHARS = 200  # the longest value holotype prints or writes into a finding


def clip(value: object, limit: int = SHOWN_CHARS) -> object:
    """A string longer than `limit` cut to it, saying how long it was; anything else as it is."""
    if isinstance(value, (str, bytes)) and len(value) > limit:
        head = value[:limit]
        shown = head if isinstance(head, str) else head.decode("utf-8", "replace")
        return f"{shown}… ({len(value):,} characters in all)"
    return value
