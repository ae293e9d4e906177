"""The one exception type users see: anything that makes holotype unable to judge (exit 2)."""

from __future__ import annotations

from pathlib import Path


def one_line(text: str) -> str:
    """`text` with control characters (newlines from user input, say) shown escaped, so it stays one line."""
    return "".join(repr(c)[1:-1] if (ord(c) < 32 or ord(c) == 127) else c for c in text)


class HolotypeError(Exception):
    """A problem with the user's input that stops a command; printed as one line, exit code 2."""

    def __init__(self, message: str, path: Path | str | None = None) -> None:
        self.path = one_line(str(path)) if path is not None else None
        message = one_line(message)
        super().__init__(f"{self.path}: {message}" if self.path else message)


class ConfigError(HolotypeError):
    """holotype.toml or [tool.holotype] is unreadable or invalid."""


class LockfileError(HolotypeError):
    """holotype.lock is unreadable, truncated, invalid or from a newer holotype."""


class InputError(HolotypeError):
    """A file given to a command cannot be read or parsed."""
